# curvewatch — common tasks. `make help` lists them.
.PHONY: help build test vet fmt bench fuzz references ci

help: ## list the targets
	@grep -E '^[a-z]+:.*## ' $(MAKEFILE_LIST) | awk -F':.*## ' '{printf "  %-11s %s\n", $$1, $$2}'

build: ## build the curvewatch binary into ./bin
	go build -o bin/curvewatch ./cmd/curvewatch

test: ## run every test (the README's test command)
	go test -p 1 ./...

vet: ## go vet and a gofmt check
	go vet ./...
	@test -z "$$(gofmt -l $$(git ls-files '*.go'))" || (gofmt -l $$(git ls-files '*.go'); exit 1)

fmt: ## format the Go code
	gofmt -w $$(git ls-files '*.go')

bench: ## speed and memory against numpy on this machine (needs python3-numpy)
	bench/run.sh

fuzz: ## run each parser's fuzzer for 30 s
	go test ./fit/ -run '^$$' -fuzz FuzzParseSpec -fuzztime 30s
	go test ./fit/csvsource/ -run '^$$' -fuzz FuzzScan -fuzztime 30s
	go test ./daemon/config/ -run '^$$' -fuzz FuzzParseConfig -fuzztime 30s
	go test ./alerts/webhook/ -run '^$$' -fuzz FuzzVerify -fuzztime 30s
	go test ./alerts/webhook/ -run '^$$' -fuzz FuzzParseSignature -fuzztime 30s

references: ## regenerate the outside reference values (needs python3-scipy, python3-statsmodels)
	/usr/bin/python3 testdata/reference/smoothing_spline/smoothing_spline.py
	/usr/bin/python3 testdata/reference/glm/glm.py
	/usr/bin/python3 testdata/reference/dobson/dobson.py
	/usr/bin/python3 testdata/reference/longley/longley.py
	/usr/bin/python3 testdata/reference/nested/nested.py
	/usr/bin/python3 testdata/reference/fdr/make_bh.py

ci: ## what CI runs
	.ci/run
