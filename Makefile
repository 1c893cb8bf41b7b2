# Two commands for users (make demo, make test) and one for developers (make bench).
# Each bootstraps what is missing: Debian's libngspice0 and Python venv module, and a
# .venv with the package.

PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench bootstrap system clean

demo: bootstrap
	$(BIN)/augment demo

test: bootstrap
	$(BIN)/python -m pytest

bench: bootstrap
	$(BIN)/python bench/run.py

bootstrap: system $(STAMP)

system:
	@sh tools/ensure-system.sh $(PYTHON)

# Reinstalls only when the package metadata changed.
$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis
