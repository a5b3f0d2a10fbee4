# Set-up and everyday commands. Every target creates the virtual environment first if needed.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: setup demo test test-plain test-slow test-all lint clean

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	# The CPU build of torch must come first: an unpinned torch pulls a multi-GB GPU build.
	$(BIN)/pip install --quiet torch==2.13.0
	$(BIN)/pip install --quiet -e ".[all,dev]"
	touch $(STAMP)

setup: $(STAMP)

# The main job on the built-in defaults: the quick comparison, then its report.
demo: $(STAMP)
	$(BIN)/loopzoo sweep suite=quick out=runs/quick
	$(BIN)/loopzoo report runs/quick

test: $(STAMP)
	$(BIN)/python -m pytest -q

# The topologies and the production path again on the plain PyTorch loops (no numba kernels).
test-plain: $(STAMP)
	LOOPZOO_KERNELS=torch $(BIN)/python -m pytest -q tests/topologies tests/production

test-slow: $(STAMP)
	$(BIN)/python -m pytest -q -m slow

test-all: test test-plain test-slow

lint: $(STAMP)
	$(BIN)/ruff check src tests benchmarks examples conf

clean:
	rm -rf $(VENV) build dist src/*.egg-info .cache
