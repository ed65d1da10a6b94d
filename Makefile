# Two entry points: `make demo` and `make test`. Each creates .venv when missing
# and installs the project (with its test extra) into it.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lint demo-data bad-cases golden bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/reporter build inputs/demo --out build/demo

test: $(STAMP)
	$(BIN)/ruff check reporter tests
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check reporter tests

# Regenerate the invented demo scheme (seeded, so the files come out identical).
demo-data: $(STAMP)
	$(BIN)/python -m reporter.demo_data inputs/demo

# Regenerate the small bad-input packs under tests/data/bad/ (one folder per case).
bad-cases: $(STAMP)
	$(BIN)/python -m tests.data.make_bad_cases

# Regenerate the golden results files after an intended change in the figures.
golden: $(STAMP)
	SOURCE_DATE_EPOCH=1795996800 $(BIN)/reporter build inputs/demo --out build/golden
	cp build/golden/results/securities.csv build/golden/results/portfolio.json tests/golden/

# Time every stage against its floor (Small, Large, Batch) and write BENCHMARKS.md (long).
bench: $(STAMP)
	$(BIN)/python benchmarks/bench_pack.py

clean:
	rm -rf build
