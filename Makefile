# assort: the two set-up commands are `make demo` and `make test`; both
# install PostgreSQL's server from Debian's packages first when it is missing.
GO ?= go
export PATH := $(PATH):/usr/local/go/bin
FUZZTIME ?= 5s

.PHONY: setup demo test vet fmt unit fuzz bench build

build:
	$(GO) build -o bin/assort ./cmd/assort

setup:
	@bash scripts/require-postgres.sh

demo: setup build
	./bin/assort demo

test: setup vet fmt unit fuzz

vet:
	$(GO) vet ./...

fmt:
	@out=$$(gofmt -l $$(git ls-files '*.go' 2>/dev/null || find . -name '*.go')); \
	if [ -n "$$out" ]; then echo "gofmt would change:"; echo "$$out"; exit 1; fi

unit:
	$(GO) test -count=1 ./...

fuzz:
	$(GO) test -run '^$$' -fuzz '^FuzzDecoder$$' -fuzztime $(FUZZTIME) ./dbio/
	$(GO) test -run '^$$' -fuzz '^FuzzParseKRange$$' -fuzztime $(FUZZTIME) ./fit/
	$(GO) test -run '^$$' -fuzz '^FuzzValidateModelName$$' -fuzztime $(FUZZTIME) ./schema/
	$(GO) test -run '^$$' -fuzz '^FuzzParseSize$$' -fuzztime $(FUZZTIME) ./dbio/

bench: setup
	bash scripts/bench.sh
