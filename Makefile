# Two commands do all the set-up on a fresh machine (Python, pip, gcc, make):
#   make demo   create .venv, generate the sample scenario, run the whole pipeline into demo/store
#   make test   create .venv and run the test suite (ruff + pytest)
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	@echo ">>> installing lakefeed and its dependencies into $(VENV) (a few minutes on the first run; pip's progress follows)"
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --progress-bar on --upgrade pip
	$(PY) -m pip install --progress-bar on -e ".[test,grib,s3]"
	touch $(STAMP)
	@echo ">>> $(VENV) is ready"

demo: $(STAMP)
	@echo ">>> running the demo: sample scenario, every pipeline stage, store and report into ./demo"
	$(VENV)/bin/lakefeed demo demo

test: $(STAMP)
	@echo ">>> linting with ruff, then running the test suite with pytest on 2 processes (about 6 minutes on 2 cores)"
	$(VENV)/bin/ruff check src tests flows benchmarks
	$(PY) -m pytest -q -n 2 --dist loadfile

lint: $(STAMP)
	$(VENV)/bin/ruff check src tests flows benchmarks
	$(VENV)/bin/ruff format --check src tests flows benchmarks

bench: $(STAMP)
	$(PY) -m pip install --quiet -e ".[test,grib,s3,bench]"
	$(PY) benchmarks/zonal.py
	$(PY) benchmarks/scenes.py
	$(PY) benchmarks/features.py
	$(PY) benchmarks/refresh.py

clean:
	rm -rf demo .pytest_cache
