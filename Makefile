# Two entry points: `make demo` and `make test`. Each creates .venv when missing
# and installs the project (with its test extra) into it.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

AXE_VERSION := 4.14.1
AXE := build/npm/node_modules/axe-core/axe.min.js
DEMO_RUN := build/demo-run
DEMO_PERIODS := 2026-09-30 2026-10-31
# a throwaway passphrase for the throwaway demo keys (never a real key's)
DEMO_KEY_PASS := demo-only-not-secret
SIGNER := --by "Ruth Okafor" --role "Chair of the investment committee"

.PHONY: demo test lint lock demo-data bad-cases golden bench clean browser pdf-libs

# Installs come from requirements.lock: exact versions with their hashes, build tools
# included, so a fresh machine gets what the tests last passed with. `make lock` refreshes it.
LOCK := requirements.lock
PIP_TOOLS := pip-tools==7.6.2

$(STAMP): pyproject.toml $(LOCK)
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --require-hashes --no-deps -r $(LOCK)
	$(BIN)/python -m pip install --quiet --no-deps --no-build-isolation -e .
	$(BIN)/python -m pip check
	touch $(STAMP)

# Refresh the lock on purpose (newest versions that pyproject.toml allows), then run
# `make test` and commit the lock with the figures it passed with.
lock:
	rm -rf build/lock-venv && $(PYTHON) -m venv build/lock-venv
	build/lock-venv/bin/python -m pip install --quiet $(PIP_TOOLS)
	build/lock-venv/bin/pip-compile --quiet --upgrade --generate-hashes --allow-unsafe \
	  --all-build-deps --extra test --extra cluster --strip-extras --no-emit-index-url \
	  --no-emit-find-links --output-file $(LOCK) pyproject.toml

# The demo pack, then a demo archive of three signed periods (the demo pack re-dated to
# the two month-ends before it) made from scratch in a fresh $(DEMO_RUN) each time (build/
# is scratch: no real archive lives there), and the trustees' site built from it into site/.
demo: $(STAMP) pdf-libs
	$(BIN)/reporter build inputs/demo --out build/demo
	$(BIN)/reporter build inputs/demo-fund --out build/demo-fund
	rm -rf $(DEMO_RUN) && mkdir -p $(DEMO_RUN)
	for p in $(DEMO_PERIODS); do \
	  $(BIN)/python -m reporter.demo_redate inputs/demo $(DEMO_RUN)/inputs-$$p $$p && \
	  $(BIN)/reporter build $(DEMO_RUN)/inputs-$$p --out $(DEMO_RUN)/build-$$p --quiet && \
	  $(BIN)/reporter sign-off $(DEMO_RUN)/build-$$p --archive $(DEMO_RUN)/archive \
	    $(SIGNER) --minute-ref IC-$$p --quiet || exit 1; \
	done
	REPORTER_DEMO_KEY_PASS=$(DEMO_KEY_PASS) $(BIN)/python -m reporter.archive.keys \
	  $(DEMO_RUN)/DEMO-ONLY-signer.p12 "DEMO ONLY Ruth Okafor, chair"
	REPORTER_DEMO_KEY_PASS=$(DEMO_KEY_PASS) $(BIN)/python -m reporter.archive.keys \
	  $(DEMO_RUN)/DEMO-ONLY-secretary.p12 "DEMO ONLY Tomas Lindqvist, secretary"
	REPORTER_DEMO_KEY_PASS=$(DEMO_KEY_PASS) $(BIN)/reporter sign-off build/demo \
	  --archive $(DEMO_RUN)/archive $(SIGNER) --minute-ref IC-2026-11-30 --quiet \
	  --key $(DEMO_RUN)/DEMO-ONLY-signer.p12 --key-pass-env REPORTER_DEMO_KEY_PASS
	REPORTER_DEMO_KEY_PASS=$(DEMO_KEY_PASS) $(BIN)/reporter countersign \
	  $(DEMO_RUN)/archive/2026-11-30/tarnbrook-valley-2026-11-30.pdf --archive $(DEMO_RUN)/archive \
	  --by "Tomas Lindqvist" --role "Secretary to the committee" --minute-ref IC-2026-11-30 \
	  --key $(DEMO_RUN)/DEMO-ONLY-secretary.p12 --key-pass-env REPORTER_DEMO_KEY_PASS
	cat $(DEMO_RUN)/DEMO-ONLY-signer.pem $(DEMO_RUN)/DEMO-ONLY-secretary.pem \
	  > $(DEMO_RUN)/DEMO-ONLY-roots.pem
	$(BIN)/reporter verify $(DEMO_RUN)/archive/2026-11-30/tarnbrook-valley-2026-11-30-r2.pdf \
	  --archive $(DEMO_RUN)/archive --trust $(DEMO_RUN)/DEMO-ONLY-roots.pem
	$(BIN)/reporter site --archive $(DEMO_RUN)/archive --out site
	@echo
	@echo "Done. Open these in a browser or PDF viewer:"
	@echo "  build/demo/pack.html        the demo pack (build/demo/pack.pdf for print)"
	@echo "  build/demo/results/         the figures as CSV, JSON and pack.xlsx"
	@echo "  build/demo-fund/pack.html   a fund of four mandates"
	@echo "  site/index.html             the trustees' site of the signed demo packs"
	@echo "Run the tool as $(BIN)/reporter, or first 'source $(BIN)/activate' and then"
	@echo "  reporter init my-scheme     a starter pack folder to fill in"
	@echo "  reporter check my-scheme    validate it;  reporter build my-scheme --out build/my-scheme"

# Browser tests need Debian's chromium; PDF checks need poppler-utils (CI runs as root on a
# fresh Debian machine). Playwright drives /usr/bin/chromium: its own browser download is
# never used.
browser:
	@command -v chromium >/dev/null && command -v pdftoppm >/dev/null || \
	  (apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y chromium poppler-utils)

# WeasyPrint subsets the fonts it embeds with HarfBuzz's subsetter when the system has it
# (Debian's libharfbuzz-subset0), and otherwise falls back to fontTools in Python, with a
# DeprecationWarning: the demo's full PDF took 6.1-6.7 s of CPU that way, 4.9-5.4 s with it
# (three renders each), and the fallback's PDFs differed by a few bytes from run to run.
# A fresh Debian machine may lack it; installed as root with apt-get, as above. Without root
# the build still works, more slowly, and this says so.
pdf-libs:
	@{ ldconfig -p 2>/dev/null || /sbin/ldconfig -p; } | grep -q 'libharfbuzz-subset\.so' || \
	  (apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y libharfbuzz-subset0) || \
	  echo "note: libharfbuzz-subset0 is missing (installing it needs root): PDFs are slower"

# axe-core (accessibility checks run inside the page) from the npm registry, into build/.
$(AXE):
	command -v npm >/dev/null || (apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y npm)
	mkdir -p build/npm
	npm install --prefix build/npm --no-save --no-audit --no-fund --loglevel=error \
	  axe-core@$(AXE_VERSION)

test: $(STAMP) pdf-libs browser $(AXE)
	$(BIN)/ruff check reporter tests
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check reporter tests

# Regenerate the invented demo schemes (seeded, so the files come out identical).
demo-data: $(STAMP)
	$(BIN)/python -m reporter.demo_data inputs/demo
	$(BIN)/python -m reporter.demo_fund inputs/demo-fund

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
