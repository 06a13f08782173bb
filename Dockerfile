# Images for almanac. Two targets share one build stage:
#
#   docker build --target controller --build-arg VERSION=v0.1.0 --build-arg COMMIT=$(git rev-parse --short HEAD) -t almanac-controller:v0.1.0 .
#   docker build --target trainer    --build-arg VERSION=v0.1.0 --build-arg COMMIT=$(git rev-parse --short HEAD) -t almanac-trainer:v0.1.0 .
#
# Both final images are FROM scratch: one static binary, CA certificates (the trainer talks to
# s3/gs/azblob over TLS), the zoneinfo database (the controller resolves schedule time zones), a
# passwd/group entry for the non-root user 65532, and an empty /tmp to mount an emptyDir on. They
# need nothing writable, so they run with readOnlyRootFilesystem: true.
#
# The go build flags below must stay identical to GO_BUILD_FLAGS in the Makefile;
# test/packaging checks that they agree.

ARG GO_VERSION=1.26

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
RUN go build -trimpath -ldflags "-s -w -X main.version=${VERSION} -X main.commit=${COMMIT}" -o /out/almanac-controller . \
 && go build -trimpath -ldflags "-s -w -X main.version=${VERSION} -X main.commit=${COMMIT}" -o /out/almanac-trainer ./trainer/cmd/almanac-trainer
RUN mkdir -p /rootfs/etc /rootfs/tmp \
 && chmod 1777 /rootfs/tmp \
 && echo 'nonroot:x:65532:65532:nonroot:/nonexistent:/sbin/nologin' > /rootfs/etc/passwd \
 && echo 'nonroot:x:65532:' > /rootfs/etc/group

FROM scratch AS base
ARG VERSION=dev
ARG COMMIT=unknown
COPY --from=build /rootfs/ /
COPY --from=build /etc/ssl/certs/ca-certificates.crt /etc/ssl/certs/ca-certificates.crt
COPY --from=build /usr/share/zoneinfo /usr/share/zoneinfo
LABEL org.opencontainers.image.version="${VERSION}" \
      org.opencontainers.image.revision="${COMMIT}"
USER 65532:65532

FROM base AS trainer
COPY --from=build /out/almanac-trainer /almanac-trainer
USER 65532:65532
ENTRYPOINT ["/almanac-trainer"]

FROM base AS controller
COPY --from=build /out/almanac-controller /almanac-controller
USER 65532:65532
ENTRYPOINT ["/almanac-controller"]
