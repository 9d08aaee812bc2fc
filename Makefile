# midsag build and test entry points. `make demo` and `make test` are the
# two commands the README opens with; .ci/run calls `make test`.

GO       ?= go
BIN      := bin/midsag
ORT_LIB  := third_party/onnxruntime/linux-$(shell uname -m | sed -e 's/x86_64/x64/' -e 's/aarch64/arm64/')/libonnxruntime.so.1

# The JPEG 2000 and JPEG-LS decoders are cgo bindings to OpenJPEG and
# CharLS (Debian libopenjp2-7-dev, libcharls-dev). Each build tag is set
# when pkg-config finds its library; without them the binary still builds
# and refuses those transfer syntaxes, naming the package to install.
# GOFLAGS carries the tags to every go command, the bench scripts' too.
comma := ,
CODEC_TAGS := $(strip $(shell pkg-config --exists libopenjp2 2>/dev/null && echo openjpeg) \
                      $(shell pkg-config --exists charls 2>/dev/null && echo charls))
ifneq ($(CODEC_TAGS),)
export GOFLAGS := $(strip $(GOFLAGS) -tags=$(subst $(eval) ,$(comma),$(CODEC_TAGS)))
endif

.PHONY: all build ort demo test test-long race lint tools bench vet fmt clean gen-api

all: build

# ort fetches ONNX Runtime 1.24.1 from the npm registry once (sha256-checked).
ort: $(ORT_LIB)

$(ORT_LIB): scripts/get-onnxruntime.sh
	bash scripts/get-onnxruntime.sh

# The library is copied next to the binary, where midsag looks for it, so
# bin/midsag runs from any working directory.
build: ort
	$(GO) build -o $(BIN) ./cmd/midsag
	cp -f $(ORT_LIB) bin/libonnxruntime.so.1

demo: build
	./$(BIN) demo --out demo-out

# test runs the default suite (well under 15 minutes on 2 cores), then the
# codec and syntax tests once more without the codec tags, as a machine
# without the libraries builds them. Tests
# that compare against DCMTK, dicom3tools or pydicom skip when those are
# missing unless MIDSAG_REQUIRE_TOOLS=1 (set by .ci/run).
test: ort
	$(GO) vet ./...
	$(GO) test -count=1 -timeout 20m ./...
	GOFLAGS= MIDSAG_REQUIRE_CODECS= $(GO) test -count=1 \
	  -run 'TestCodecSyntaxListsMatchBuild|TestCodecRefusesOrDecodesWithoutLibrary|TestUnsupportedSyntaxNamesUID|TestCorruptCodestreams' \
	  ./preprocess/ ./preprocess/codec/

# race runs the race detector over the packages with concurrency. The
# explain fidelity runs and the longest scenarios are skipped (-short):
# under the detector they take many minutes and share no code path the
# shorter tests miss.
RACE_PKGS := ./server/... ./cohort/ ./explain/ ./models/ ./cmd/midsag/
race: ort
	$(GO) test -race -short -count=1 -timeout 30m $(RACE_PKGS)

# lint: gofmt, go vet, staticcheck and gocyclo (no function above
# cyclomatic complexity 25), the linters at pinned versions, installed
# into bin/tools by `make tools`. Generated code under api/ is left out
# of gocyclo.
TOOLS := $(CURDIR)/bin/tools
tools:
	GOBIN=$(TOOLS) GOFLAGS= $(GO) install honnef.co/go/tools/cmd/staticcheck@v0.8.2
	GOBIN=$(TOOLS) GOFLAGS= $(GO) install github.com/fzipp/gocyclo/cmd/gocyclo@v0.6.0

lint: tools
	@out=$$(gofmt -l $$(git ls-files '*.go')); if [ -n "$$out" ]; then echo "gofmt needed:"; echo "$$out"; exit 1; fi
	$(GO) vet ./...
	$(TOOLS)/staticcheck ./...
	$(TOOLS)/gocyclo -over 25 -ignore '^api/' .

# test-long adds the soak and scale runs kept out of the default suite.
test-long: ort
	MIDSAG_LONG=1 $(GO) test -count=1 -timeout 60m ./...

# bench runs the benchmark scripts, each of which prints a ratio against a
# baseline measured in the same run.
bench: ort
	bash bench/study.sh
	bash bench/storescu.sh
	bash bench/storescu-service.sh
	$(GO) test -run '^$$' -bench 'RESTScore|PipelineBaseline' -benchtime 20x ./server/

# gen-api regenerates api/midsag/v1 (Go, gateway, OpenAPI) from the .proto
# and its HTTP rules with pinned protoc plugins; the output is committed.
gen-api:
	bash scripts/gen-api.sh

clean:
	rm -rf bin demo-out
