# Two entry points for a newcomer: `make demo` and `make test`. Both set up .venv first.
VENV   := .venv
PYTHON := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: setup demo demo-grades test typecheck test-fast bench lock clean

setup: $(STAMP)

$(STAMP): pyproject.toml requirements.lock
	python3 -m pip install --quiet --disable-pip-version-check uv
	test -x $(PYTHON) || python3 -m uv venv --quiet -p python3.11 $(VENV)
	python3 -m uv pip install --quiet --compile-bytecode --python $(PYTHON) -r requirements.lock
	python3 -m uv pip install --quiet --python $(PYTHON) --no-deps -e .
	$(PYTHON) -m compileall -q plugin
	touch $(STAMP)

demo: setup
	$(VENV)/bin/truthsieve demo --out out/demo

demo-grades: setup
	$(VENV)/bin/truthsieve demo --scenario grades --out out/grades

test: setup typecheck
	$(PYTHON) -m pytest -q

typecheck: setup
	$(VENV)/bin/mypy

test-fast: setup
	$(PYTHON) -m pytest -q -m "not airflow and not browser and not slow"

bench: setup
	$(PYTHON) bench/run.py

lock:
	python3 -m uv pip compile pyproject.toml --extra airflow --extra celery --extra test -p 3.11 -o requirements.lock

clean:
	rm -rf $(VENV) out .pytest_cache .hypothesis .mypy_cache
