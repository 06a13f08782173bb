# Images for almanac: two targets, controller and trainer, each FROM scratch with one static
# binary and the file tree images/root.sh writes: CA certificates (the trainer talks to
# s3/gs/azblob over TLS), the zoneinfo database (the controller resolves schedule time zones), a
# passwd/group entry for the non-root user 65532, and an empty /tmp to mount an emptyDir on. They
# need nothing writable, so they run with readOnlyRootFilesystem: true.
#
# FILES says where the binaries and that tree come from:
#
#   FILES=build (default): compiled in the Go image; needs registry access.
#     docker build --target trainer --build-arg VERSION=v0.1.0 --build-arg COMMIT=$(git rev-parse --short HEAD) -t almanac-trainer:v0.1.0 .
#
#   FILES=context: taken from the build context that `make images` prepares (bin/image-context:
#     the binaries of `make build`, and root.sh run on the build machine); needs no base image
#     at all, so buildah builds it without a daemon or a registry (`make images`).
#
# Both feed the same base and final stages, so the images differ only in where the files came
# from (test/packaging/image_test.go). The go build flags below must stay identical to
# GO_BUILD_FLAGS in the Makefile; test/packaging checks that they agree.

ARG GO_VERSION=1.26
ARG FILES=build

FROM golang:${GO_VERSION}-bookworm AS build
RUN apt-get update \
 && apt-get install -y --no-install-recommends ca-certificates tzdata \
 && rm -rf /var/lib/apt/lists/*
WORKDIR /src
COPY go.mod go.sum ./
RUN go mod download
COPY . .
ARG VERSION=dev
ARG COMMIT=unknown
ENV CGO_ENABLED=0 GOFLAGS=-buildvcs=false
RUN go build -trimpath -ldflags "-s -w -X main.version=${VERSION} -X main.commit=${COMMIT}" -o /files/almanac-controller . \
 && go build -trimpath -ldflags "-s -w -X main.version=${VERSION} -X main.commit=${COMMIT}" -o /files/almanac-trainer ./trainer/cmd/almanac-trainer
RUN sh images/root.sh /files/root

FROM scratch AS context
COPY files/ /files/

FROM ${FILES} AS files

FROM scratch AS base
ARG VERSION=dev
ARG COMMIT=unknown
ARG SOURCE=https://almanac.dev/almanac
COPY --from=files /files/root/ /
LABEL org.opencontainers.image.source="${SOURCE}" \
      org.opencontainers.image.version="${VERSION}" \
      org.opencontainers.image.revision="${COMMIT}"
USER 65532:65532

FROM base AS trainer
COPY --from=files /files/almanac-trainer /almanac-trainer
LABEL org.opencontainers.image.title="almanac-trainer"
USER 65532:65532
ENTRYPOINT ["/almanac-trainer"]

FROM base AS controller
COPY --from=files /files/almanac-controller /almanac-controller
LABEL org.opencontainers.image.title="almanac-controller"
USER 65532:65532
ENTRYPOINT ["/almanac-controller"]
