# The two commands of the README: `make demo` and `make test`. Both create .venv/ on first use.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test bench bench-quick proto clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e '.[test,bench]'
	touch $(STAMP)

demo: $(STAMP)
	$(PY) scripts/demo.py

test: $(STAMP)
	$(PY) -m pytest -q

bench: $(STAMP)
	$(PY) bench/run.py

bench-quick: $(STAMP)
	$(PY) bench/run.py --quick

proto: $(STAMP)
	$(PY) scripts/gen_proto.py

clean:
	rm -rf $(VENV) demo-data bench/out
