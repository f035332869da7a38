# assort: the two set-up commands are `make demo` and `make test`; both
# install PostgreSQL's server from Debian's packages first when it is missing.
GO ?= go
export PATH := $(PATH):/usr/local/go/bin
FUZZTIME ?= 5s

.PHONY: setup demo test vet fmt unit fused fuzz bench build

build:
	$(GO) build -o bin/assort ./cmd/assort

setup:
	@bash scripts/require-postgres.sh

demo: setup build
	./bin/assort demo

test: setup vet fmt unit fused fuzz

vet:
	$(GO) vet ./...

fmt:
	@out=$$(gofmt -l $$(git ls-files '*.go' 2>/dev/null || find . -name '*.go')); \
	if [ -n "$$out" ]; then echo "gofmt would change:"; echo "$$out"; exit 1; fi

unit:
	$(GO) test -count=1 ./...

# Package fit and the SQL functions' tests again, compiled for x86-64-v3,
# where Go may fuse multiply-adds: kernels, scoring and SQL functions must
# still agree bit for bit. Skipped (and said so) on a processor without
# AVX2 and FMA.
fused:
	@if [ "$$($(GO) env GOARCH)" = amd64 ] && grep -qw avx2 /proc/cpuinfo && grep -qw fma /proc/cpuinfo; then \
		echo "GOAMD64=v3 go test ./fit/ and the SQL functions' tests"; \
		GOAMD64=v3 $(GO) test -count=1 ./fit/ && \
		GOAMD64=v3 $(GO) test -count=1 -run 'Function' ./cmd/assort/; \
	else echo "fused: not an x86-64-v3 processor; the fused-arithmetic check is skipped"; fi

fuzz:
	$(GO) test -run '^$$' -fuzz '^FuzzDecoder$$' -fuzztime $(FUZZTIME) ./dbio/
	$(GO) test -run '^$$' -fuzz '^FuzzParseKRange$$' -fuzztime $(FUZZTIME) ./fit/
	$(GO) test -run '^$$' -fuzz '^FuzzValidateModelName$$' -fuzztime $(FUZZTIME) ./schema/
	$(GO) test -run '^$$' -fuzz '^FuzzParseSize$$' -fuzztime $(FUZZTIME) ./dbio/

bench: setup
	bash scripts/bench.sh
