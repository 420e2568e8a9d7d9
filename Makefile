# Two commands on a fresh machine: `make demo` and `make test`. Both create .venv/ if it
# is missing and install the package with its test extras first.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.wirestate-installed

.PHONY: demo test lint format bench bench-compare bench-baseline regress regress-update clean fuzz \
	readme

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

demo: $(STAMP)
	@mkdir -p out
	$(BIN)/wirestate inspect models/tuning/drive_bus.toml
	$(BIN)/wirestate tune models/tuning/drive_bus_damping.toml --series E24 \
	    --json out/tune-report.json --plot out/tune.png

lint: $(STAMP)
	$(BIN)/ruff check src tests benchmarks
	$(BIN)/ruff format --check src tests benchmarks

format: $(STAMP)
	$(BIN)/ruff format src tests benchmarks
	$(BIN)/ruff check --fix src tests benchmarks

test: $(STAMP) lint
	$(BIN)/python -m pytest
	$(BIN)/wirestate regress

# the long fuzz run (issue 10): >= 10,000 generated circuit, system and tuning files each;
# the normal suite runs the same tests with a small sample
fuzz: $(STAMP)
	WIRESTATE_FUZZ_EXAMPLES=10000 $(BIN)/python -m pytest tests/robustness/test_fuzz.py -q

# every README example in full, the minute-long ones (yield, sweep, regress of every file,
# compiled FMU exports) included; the normal suite runs the short ones
readme: $(STAMP)
	WIRESTATE_README_FULL=1 $(BIN)/python -m pytest tests/test_readme.py -q

regress: $(STAMP)
	$(BIN)/wirestate regress --junit build/regress-junit.xml

regress-update: $(STAMP)
	$(BIN)/wirestate regress --update

bench: $(STAMP)
	$(BIN)/python benchmarks/run_all.py --out benchmarks/results/latest.json

bench-compare: bench
	$(BIN)/wirestate bench-compare benchmarks/baseline.json benchmarks/results/latest.json

bench-baseline: $(STAMP)
	$(BIN)/python benchmarks/run_all.py --out benchmarks/baseline.json

clean:
	rm -rf $(VENV) build src/*.egg-info .pytest_cache
