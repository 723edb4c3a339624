# loadwake build, test and demo targets. Everything CI needs is installed from
# here or from .ci/run; nothing has to be on the machine but Go.
GO      ?= go
STORE   ?= demo-out/loadwake.db
OUT     ?= demo-out
COUNT   ?= 5

.PHONY: all build test validate vet fmt demo demo-plan docs-chart bench fuzz browser-test clean

all: build

build:
	$(GO) build -o bin/loadwake ./cmd/loadwake

fmt:
	gofmt -l -w .

vet:
	$(GO) vet ./...

# TESTLDFLAGS links the test binaries without symbol tables and DWARF: test
# binaries are run once and never debugged, and linking them is a
# third of the CPU time of make test; panics still print full stack traces.
TESTLDFLAGS ?= -s -w

# test is the everyday check: vet, format and every package's tests in their
# quick versions (under 90 s on 2 cores with a warm build cache).
test: vet
	@test -z "$$(gofmt -l .)" || (echo "gofmt needed on:"; gofmt -l .; exit 1)
	$(GO) test -ldflags='$(TESTLDFLAGS)' -timeout 10m ./...

# validate runs the long studies as well: coverage and size over hundreds of
# simulated worlds and panels, the default-size worlds (build tag validate).
validate:
	$(GO) test -ldflags='$(TESTLDFLAGS)' -tags validate -timeout 60m ./...

# demo runs the whole job end to end on an invented region with an embedded store.
demo: build
	./bin/loadwake demo --out $(OUT) --force

# demo-plan plans the demo's invented proposal as a randomized rollout over
# zoom-17 tiles (the store and proposal of make demo): plan, wave files, power
# charts and pre-registration in demo-out/plan.
demo-plan: demo
	./bin/loadwake plan $(OUT)/proposal.geojson --store $(STORE) --units tiles:17 --waves 3 --months-between 3 --seed 2026 --out $(OUT)/plan

# docs-chart regenerates the chart the README shows from the demo's report.
docs-chart: demo
	cp $(OUT)/report/charts/event-study-attribute.svg docs/event-study-attribute.svg

# bench runs every benchmark COUNT times; compare medians (benchstat works well).
bench:
	$(GO) test -run '^$$' -bench . -benchmem -count $(COUNT) ./...

FUZZTIME ?= 30s
fuzz:
	$(GO) test -run '^$$' -fuzz '^FuzzXMLReader$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./ingest
	$(GO) test -run '^$$' -fuzz '^FuzzOsmChangeReader$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./ingest
	$(GO) test -run '^$$' -fuzz '^FuzzChangesetReader$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./ingest
	$(GO) test -run '^$$' -fuzz '^FuzzPBFReader$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./ingest
	$(GO) test -run '^$$' -fuzz '^FuzzParse$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./rules
	$(GO) test -run '^$$' -fuzz '^FuzzReadCSV$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./audit/panel
	$(GO) test -run '^$$' -fuzz '^FuzzFromGeoJSON$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./audit/spatial
	$(GO) test -run '^$$' -fuzz '^FuzzReadGeoJSONProposal$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./audit/proposal
	$(GO) test -run '^$$' -fuzz '^FuzzReadOSMProposal$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./audit/proposal
	$(GO) test -run '^$$' -fuzz '^FuzzReadAssignment$$' -fuzztime $(FUZZTIME) -fuzzminimizetime 1x ./audit/study

browser-test:
	bash .ci/browser-test

clean:
	rm -rf bin demo-out
