# Every target creates .venv when it is missing; nothing else is needed but Python 3.11+ and make.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
HOST    ?= 127.0.0.1
PORT    ?= 8000
WORKERS ?= 2

.PHONY: serve test bench demo clean

$(VENV)/.installed-base: pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e .
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed-base
	$(PY) -m pip install -q -e '.[test]'
	touch $@

serve: $(VENV)/.installed-base
	HOST=$(HOST) PORT=$(PORT) WORKERS=$(WORKERS) $(VENV)/bin/gunicorn -c gunicorn.conf.py 'service:create_app()'

test: $(VENV)/.installed-test
	$(PY) -m pytest

bench: $(VENV)/.installed-test
	$(PY) bench/run.py

demo: $(VENV)/.installed-base
	HOST=$(HOST) PORT=$(PORT) WORKERS=$(WORKERS) $(PY) demo/run.py

clean:
	rm -rf $(VENV) build *.egg-info
