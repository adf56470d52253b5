PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test test-slow lint bench clean circuits fuzz

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/dnpqc run --out results/demo

test: $(STAMP)
	$(BIN)/python -m pytest -q -m "not slow"

# the end-to-end and robustness runs (demo, kill, fuzz, committed programs); CI runs both
test-slow: $(STAMP)
	$(BIN)/python -m pytest -q -m slow

DEMO_SCENARIO := src/dnpqc/scenarios/demo.toml
CIRCUIT_PROCESSORS := transmon-grid-9 transmon-heavy-hex-3 ion-chain-12

circuits: $(STAMP)
	@for p in $(CIRCUIT_PROCESSORS); do \
	  $(BIN)/dnpqc compile $(DEMO_SCENARIO) --processor $$p -o circuits/demo-$$p.qasm || exit 1; \
	done

fuzz: $(STAMP)
	DNPQC_FUZZ_EXAMPLES=$${DNPQC_FUZZ_EXAMPLES:-2000} $(BIN)/python -m pytest -q -p no:cacheprovider \
	  tests/test_fuzz.py --hypothesis-show-statistics

bench: $(STAMP)
	$(BIN)/python benchmarks/run.py

lint: $(STAMP)
	$(BIN)/ruff check src tests benchmarks
	$(BIN)/ruff format --check src tests benchmarks

clean:
	rm -rf results .pytest_cache
