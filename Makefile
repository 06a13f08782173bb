# almanac: build, generate, test. Every tool runs through `go run` at a pinned version, so a new
# machine needs only Go; `make controlplane` builds the Kubernetes binaries the tests use.

SHELL := /usr/bin/env bash
.SHELLFLAGS := -eu -o pipefail -c

K8S_VERSION      ?= v1.37.2
CONTROLLER_GEN   ?= go run sigs.k8s.io/controller-tools/cmd/controller-gen@v0.23.0
KUBEBUILDER_ASSETS ?= $(CURDIR)/bin/k8s/$(K8S_VERSION)
export KUBEBUILDER_ASSETS

VERSION ?= $(shell git describe --tags --always --dirty 2>/dev/null || echo dev)
COMMIT  ?= $(shell git rev-parse --short HEAD 2>/dev/null || echo unknown)
# The same flags the Dockerfile uses (test/packaging checks they agree).
GO_BUILD_FLAGS ?= -trimpath -ldflags "-s -w -X main.version=$(VERSION) -X main.commit=$(COMMIT)"

# Fuzz targets run briefly as part of `make test` (each for FUZZTIME). A count ("Nx"), not a
# duration: with a duration, Go 1.26's fuzz coordinator can report "context deadline exceeded"
# as a failure when the time runs out while a worker is busy (golang/go#75804, fixed in Go 1.27);
# a count has no deadline to race, and it also gives every machine the same amount of fuzzing.
FUZZTIME ?= 2000x

.PHONY: all
all: build

##@ Build

.PHONY: build
build: ## Build the controller and the trainer into bin/.
	CGO_ENABLED=0 go build $(GO_BUILD_FLAGS) -o bin/almanac-controller .
	CGO_ENABLED=0 go build $(GO_BUILD_FLAGS) -o bin/almanac-trainer ./trainer/cmd/almanac-trainer

# org.opencontainers.image.source of both images.
IMAGE_SOURCE ?= https://almanac.dev/almanac

.PHONY: images
images: build debian-tools ## Build both images without a daemon (buildah) into bin/almanac-controller.oci.tar and bin/almanac-trainer.oci.tar.
	VERSION=$(VERSION) COMMIT=$(COMMIT) SOURCE=$(IMAGE_SOURCE) bash images/build.sh bin

# Debian packages `make images` and the monitoring rule tests use: command:package.
DEBIAN_TOOLS ?= buildah:buildah promtool:prometheus

.PHONY: debian-tools
debian-tools: ## Install with apt-get what images and the monitoring rule tests (promtool) need and this machine lacks.
	@missing=""; \
	for p in $(DEBIAN_TOOLS); do command -v "$${p%%:*}" >/dev/null || missing="$$missing $${p#*:}"; done; \
	[ -e /etc/ssl/certs/ca-certificates.crt ] || missing="$$missing ca-certificates"; \
	[ -e /usr/share/zoneinfo/UTC ] || missing="$$missing tzdata"; \
	if [ -n "$$missing" ]; then echo "debian-tools: installing$$missing"; \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends $$missing >/dev/null; fi

.PHONY: generate
generate: ## Generate deepcopy code for the API types.
	$(CONTROLLER_GEN) object paths=./api/...

.PHONY: manifests
manifests: ## Generate CRDs and RBAC from the markers, and copy the CRDs into the Helm chart.
	$(CONTROLLER_GEN) crd paths=./api/... output:crd:artifacts:config=config/crd/bases
	@if grep -rqs 'kubebuilder:rbac' controllers; then \
	  $(CONTROLLER_GEN) rbac:roleName=manager paths=./controllers/... output:rbac:artifacts:config=config/rbac; fi
	@if [ -d charts/almanac/crds ]; then cp config/crd/bases/*.yaml charts/almanac/crds/; fi

.PHONY: monitoring-crds
monitoring-crds: ## Regenerate the ServiceMonitor and PrometheusRule CRDs test/packaging installs (from the operator's Go types).
	bash test/packaging/testdata/monitoring-crds/generate.sh

.PHONY: controlplane
controlplane: ## Build etcd, kube-apiserver, kube-controller-manager, kubectl into bin/k8s/<version>/ (skips what exists).
	bash test/tools/controlplane/build.sh

.PHONY: s3server
s3server: ## Build the S3-compatible test server into bin/.
	@if [ -f test/tools/s3server/go.mod ]; then cd test/tools/s3server && go build -o ../../../bin/s3server . ; fi

##@ Check

.PHONY: lint
lint: ## gofmt and go vet.
	@out=$$(gofmt -l $$(git ls-files '*.go')); if [ -n "$$out" ]; then echo "gofmt needed:"; echo "$$out"; exit 1; fi
	go vet ./...

.PHONY: check-generated
check-generated: generate manifests ## Fail if generated files are stale.
	@git diff --exit-code -- api config charts || { echo "generated files are stale: run make generate manifests"; exit 1; }

.PHONY: test
test: controlplane s3server images lint test-unit test-fuzz test-e2e ## Everything CI runs.
# make test builds the images first, so its e2e run takes the trainer out of them (a stale archive
# would run an old trainer against a new run configuration).
test: ALMANAC_IMAGES = $(CURDIR)/bin

.PHONY: test-unit
test-unit: ## Unit, reference and envtest suites against the self-built control plane (test-e2e runs test/e2e).
	ALMANAC_S3_SERVER=$(CURDIR)/bin/s3server ALMANAC_IMAGES=$(CURDIR)/bin go test -count=1 -timeout 30m $$(go list ./... | grep -v '/test/e2e')

.PHONY: test-fuzz
test-fuzz: ## Run every fuzz target briefly.
	@for f in $$(grep -rlE '^func Fuzz' --include='*_test.go' api controllers trainer test 2>/dev/null | sort); do \
	  for t in $$(grep -oE '^func Fuzz[A-Za-z0-9_]+' $$f | sed 's/^func //'); do \
	    echo "fuzz ./$$(dirname $$f) $$t ($(FUZZTIME))"; \
	    go test -run '^$$' -fuzz "^$$t$$" -fuzztime $(FUZZTIME) ./$$(dirname $$f) || exit 1; done; done

.PHONY: test-crash
test-crash: s3server ## The long crash proofs: 60 SIGKILLs per store (file://, S3 test server) over plan, train, publish and republish, and every crash point (test/crash; about 6.5 minutes on 2 cores).
	ALMANAC_S3_SERVER=$(CURDIR)/bin/s3server ALMANAC_CRASH_KILLS=60 go test -count=1 -timeout 60m -v -run 'TestKillAndRerun|TestCrashPoints' ./test/crash/

.PHONY: test-race
test-race: controlplane ## The race detector over the trainer (-short) and the controllers' envtest suite (about 12 minutes on 2 cores; not in make test).
	go test -race -short -count=1 -timeout 30m ./trainer/...
	go test -race -count=1 -timeout 30m ./controllers/...

.PHONY: test-e2e
test-e2e: ## End-to-end tests with the real Job controller; under make test (or with ALMANAC_IMAGES set) the trainer binary comes from the image archive make images wrote.
	@if [ -d test/e2e ]; then ALMANAC_IMAGES=$(ALMANAC_IMAGES) go test -count=1 -timeout 30m ./test/e2e/...; else echo "test/e2e: not present yet"; fi

.PHONY: bench
bench: bench-engine bench-controller bench-scale bench-m3 bench-m4-hourly-dev bench-features ## All benchmarks behind README's figures (long: about an hour on 2 cores).

.PHONY: bench-engine
bench-engine: ## Model fits, learners, feature rows, selection, input readers (ns/op, allocs/op).
	go test -run '^$$' -bench . -benchmem ./trainer/models/ ./trainer/learn/... ./trainer/features/ ./trainer/selection/ ./trainer/ingest/

.PHONY: bench-controller
bench-controller: controlplane ## 1000 portfolios and one run of 10000 shards against envtest.
	ALMANAC_BENCH_PORTFOLIOS=1000 ALMANAC_BENCH_SHARDS=10000 \
	  go test -run '^$$' -bench BenchmarkPortfoliosAndRun -benchtime 1x -timeout 60m ./controllers/

.PHONY: bench-scale
bench-scale: ## almanac-trainer local on 100k generated daily series (peak RSS, series/s; 10k as reference).
	go test -run '^$$' -bench BenchmarkLocalScale -benchtime 1x -timeout 60m ./trainer/cmd/almanac-trainer

.PHONY: bench-m3
bench-m3: build ## M3 accuracy, 95% interval MSIS and CPU per series, side by side with R forecast when Rscript is present.
	@if [ -d ../shared/datasets/m3 ]; then bin/almanac-trainer bench --m3 --workers 1 --score-published --quantiles 2.5,97.5 --reference-r; \
	else echo "bench-m3: ../shared/datasets/m3 not present, skipped"; fi
	go test -run '^$$' -bench BenchmarkARIMASelectionVsR -benchtime 1x -timeout 60m ./test/reference/

M4_HOURLY_DEV ?= ../shared/datasets/m4-hourly-dev

.PHONY: bench-m4-hourly-dev
bench-m4-hourly-dev: build ## M4 hourly dev half (207 series, long layout): sMAPE, MASE, OWA against the bench's Naive2, side by side with R forecast's ets, thetaf and snaive when Rscript is present; the 95% interval's MSIS too.
	@if [ -d $(M4_HOURLY_DEV) ]; then bin/almanac-trainer bench --data $(M4_HOURLY_DEV) --frequency Hourly --workers 1 --quantiles 2.5,97.5 --reference-r; \
	else echo "bench-m4-hourly-dev: $(M4_HOURLY_DEV) not present, skipped"; fi

.PHONY: bench-features
bench-features: ## Promotion scenario: accuracy with and without features, CPU ms per series.
	go test -run '^$$' -bench BenchmarkPromotionFeatures -benchtime 1x -v ./trainer/pipeline/

.PHONY: demo
demo: controlplane build ## Local control plane, the promotion sample portfolio on generated Fenwick Lane data, two runs, a report in demo-output/.
	go run ./test/e2e/demo

.PHONY: clean
clean:
	rm -rf bin/almanac-* bin/image-context demo-output

.PHONY: help
help:
	@awk 'BEGIN {FS = ":.*##"} /^[a-zA-Z0-9_-]+:.*?##/ { printf "  %-17s %s\n", $$1, $$2 }' $(MAKEFILE_LIST)

.PHONY: fixtures
fixtures: ## Regenerate the reference fixtures (Debian's r-cran-forecast 8.20 and python3-statsmodels; CI does not run them).
	Rscript test/reference/r/simple.R | gofmt > test/reference/simple_fixtures_test.go
	Rscript test/reference/r/ets.R | gofmt > test/reference/ets_fixtures_test.go
	Rscript test/reference/arima.R > test/reference/testdata/arima_r.json
	Rscript test/reference/r/stl.R > test/reference/testdata/stl_r.json
	Rscript test/reference/r/mstl.R > test/reference/testdata/mstl_r.json
	Rscript test/reference/r/fourier_arima.R > test/reference/testdata/fourier_arima_r.json
	Rscript test/reference/r/weekly.R > test/reference/testdata/weekly_r.json
	Rscript test/reference/r/seasonstrength.R > test/reference/testdata/seasonstrength_r.json
	@if [ -f "$${ALMANAC_M3_DIR:-../shared/datasets/m3}/train.csv" ]; then \
	  Rscript test/reference/r/ets_m3.R > test/reference/testdata/ets_m3_r.csv; \
	else echo "fixtures: M3 data not found (ALMANAC_M3_DIR); ets_m3_r.csv kept"; fi
	@if /usr/bin/python3 -c 'import sklearn' 2>/dev/null; then \
	  /usr/bin/python3 test/reference/sklearn/linear.py > test/reference/sklearn/linear.json; \
	else echo "fixtures: Debian's python3-sklearn not importable; sklearn/linear.json kept"; fi
	@if /usr/bin/python3 -c 'import statsmodels' 2>/dev/null; then \
	  /usr/bin/python3 test/reference/arima_statsmodels.py > test/reference/testdata/arima_statsmodels.json; \
	else echo "fixtures: Debian's python3-statsmodels not importable; arima_statsmodels.json kept"; fi
	@if /usr/bin/python3 -c 'import statsmodels' 2>/dev/null; then \
	  /usr/bin/python3 test/reference/stl_statsmodels.py > test/reference/testdata/stl_statsmodels.json; \
	else echo "fixtures: Debian's python3-statsmodels not importable; stl_statsmodels.json kept"; fi
