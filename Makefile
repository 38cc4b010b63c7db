# Two entry points for a new machine: `make demo` and `make test`. Each builds or refreshes .venv itself.
PY ?= python3.11
VENV := .venv
STAMP := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	@test -x $(VENV)/bin/python || $(PY) -m venv $(VENV) || python3 -m venv $(VENV)
	$(VENV)/bin/python -m pip install --quiet --upgrade pip
	$(VENV)/bin/python -m pip install --quiet -e '.[dev]'
	@touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/python -m linerig.tui.demo

test: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/python -m pytest -q

lint: $(STAMP)
	$(VENV)/bin/ruff check .

bench: $(STAMP)
	for b in bench/*_bench.py; do $(VENV)/bin/python $$b || exit 1; done

clean:
	rm -rf $(VENV) .pytest_cache
