# ringgauge: `make demo` and `make test` do all set-up on a fresh machine.
SHELL := /bin/bash
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed-stamp
SYSSTAMP := $(VENV)/.system-stamp
export QT_QPA_PLATFORM ?= offscreen

.PHONY: demo test bench venv system clean-venv

$(SYSSTAMP):
	@bash scripts/system-deps.sh
	@mkdir -p $(VENV) && touch $@

$(STAMP): pyproject.toml | $(SYSSTAMP)
	@test -x $(PY) || python3 -m venv $(VENV)
	@echo "ringgauge: installing Python packages into $(VENV) ..."
	@$(PY) -m pip install --quiet --upgrade pip
	@$(PY) -m pip install --quiet -e '.[test]'
	@touch $@

venv: $(STAMP)

system: $(SYSSTAMP)

demo: $(STAMP)
	@bash scripts/demo.sh

test: $(STAMP)
	@$(VENV)/bin/lint-imports --no-cache
	@$(PY) -m pytest -q -n auto --dist loadfile

bench: $(STAMP)
	@$(PY) scripts/bench.py

clean-venv:
	rm -rf $(VENV)
