# oddsmith — the two commands a newcomer needs are `make demo` and `make test`.
SHELL := /bin/bash
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
CORES ?= 2
DEMO_CONFIG := config/demo.yaml

.PHONY: demo test setup check-system lint lock clean

## demo: set up, then build the whole demo analysis (ends in results/lease_demo/card/model_card.pdf)
demo: setup
	$(BIN)/oddsmith build $(DEMO_CONFIG) --cores $(CORES) -- --rerun-incomplete
	@echo "Model card: results/lease_demo/card/model_card.pdf"

## test: set up, then run the test suite
test: setup
	$(BIN)/pytest -q

## setup: project-local virtual environment installed from the hashed lock file
setup: check-system $(VENV)/.installed

check-system:
	@$(PYTHON) oddsmith/system.py --install

$(VENV)/.installed: requirements.lock pyproject.toml
	@echo "oddsmith setup: creating $(VENV) and installing the pinned packages of requirements.lock (2-3 minutes on a fresh machine)"
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --progress-bar off --require-hashes --no-deps -r requirements.lock \
	  | grep --line-buffered -E '^(Collecting|Successfully)' | sed -u 's/^/  /' ; test $${PIPESTATUS[0]} -eq 0
	$(BIN)/python -m pip install --quiet --no-deps --no-build-isolation -e .
	@echo "oddsmith setup: done"
	@touch $@

## lint: Snakemake's linter and snakefmt
lint: setup
	$(BIN)/snakemake --lint --configfile $(DEMO_CONFIG)
	$(BIN)/snakefmt --check Snakefile rules/

## lock: re-resolve requirements.in into requirements.lock (needs network)
lock:
	$(PYTHON) -m venv /tmp/oddsmith-lock && /tmp/oddsmith-lock/bin/pip install --quiet uv==0.13.8
	/tmp/oddsmith-lock/bin/uv pip compile --generate-hashes --python-version 3.11 \
	  --python-platform x86_64-manylinux_2_28 requirements.in -o requirements.lock

clean:
	rm -rf results work logs benchmarks .snakemake
