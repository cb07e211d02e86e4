# Every target creates .venv when it is missing; nothing else is needed but Python 3.11+ and make.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
HOST    ?= 127.0.0.1
PORT    ?= 8000
WORKERS ?= 2

.PHONY: serve test fuzz loadtest spreadsheet-test browser-test bench demo clean

$(VENV)/.installed-base: pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e .
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed-base
	$(PY) -m pip install -q -e '.[test]'
	touch $@

$(VENV)/.installed-browser: $(VENV)/.installed-test
	$(PY) -m pip install -q -e '.[browser]'
	touch $@

$(VENV)/.installed-fuzz: $(VENV)/.installed-base
	$(PY) -m pip install -q -e '.[fuzz]'
	touch $@

serve: $(VENV)/.installed-base
	HOST=$(HOST) PORT=$(PORT) WORKERS=$(WORKERS) $(VENV)/bin/gunicorn -c gunicorn.conf.py 'service:create_app()'

test: $(VENV)/.installed-test
	$(VENV)/bin/ruff check .
	$(PY) -m pytest

# Requests generated from openapi.yaml, then hostile requests (deep nesting, extreme magnitudes,
# reserves at the support's ends, filled caps, the GET doors), against gunicorn on a free loopback
# port (fuzz/run.py; FUZZ_SEED, FUZZ_MAX_EXAMPLES, FUZZ_HOSTILE_EXAMPLES, FUZZ_PARTS, FUZZ_OUT override).
fuzz: $(VENV)/.installed-fuzz
	$(PY) fuzz/run.py

# Load and fault tests (loadtest/): throughput, a killed worker, failover behind nginx, caps,
# two heavy clients beside /healthz and ordinary requests.
# Everything runs on 127.0.0.1; wrk and nginx are installed with apt-get when missing.
loadtest: $(VENV)/.installed-test
	PATH="$$PATH:/usr/sbin" sh -c 'command -v wrk && command -v nginx' >/dev/null || \
	  { apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y -q wrk nginx; }
	$(PY) -m pytest loadtest -s

# The GET doors in a real spreadsheet: headless LibreOffice Calc, driven through UNO by Debian's
# /usr/bin/python3, against gunicorn on a free loopback port (spreadsheet/run.py). LibreOffice Calc
# and python3-uno are installed with apt-get when missing; where they cannot be, the run skips.
spreadsheet-test: $(VENV)/.installed-test
	{ command -v soffice && /usr/bin/python3 -c 'import uno'; } >/dev/null 2>&1 || \
	  { apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends libreoffice-calc python3-uno; } || \
	  echo "spreadsheet-test: apt-get could not install libreoffice-calc and python3-uno"
	$(PY) spreadsheet/run.py

# The explorer page in a real browser: Debian's chromium, driven by Playwright for Python, against
# gunicorn on a free loopback port with an API key required (browser/run.py). chromium is installed
# with apt-get when missing; where it cannot be, the run skips. Screenshots go to browser/out/<run>/.
browser-test: $(VENV)/.installed-browser
	{ command -v chromium || command -v chromium-browser; } >/dev/null 2>&1 || \
	  { apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends chromium; } || \
	  echo "browser-test: apt-get could not install chromium"
	$(PY) browser/run.py

bench: $(VENV)/.installed-test
	OPENBLAS_NUM_THREADS=1 $(PY) bench/run.py  # one BLAS thread, as each gunicorn worker runs (gunicorn.conf.py)

demo: $(VENV)/.installed-base
	HOST=$(HOST) PORT=$(PORT) WORKERS=$(WORKERS) $(PY) demo/run.py

clean:
	rm -rf $(VENV) build *.egg-info
