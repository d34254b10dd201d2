# The two commands of README.md: `make run` and `make test`.
VENV ?= .venv
PYTHON ?= python3
TEST_POSTGRES_URL ?= postgresql+psycopg://postgres@127.0.0.1:5432/test
export TEST_POSTGRES_URL

.PHONY: run test lock system-deps benchmarks clean

# The venv holds exactly the locked versions (requirements.lock), then the project itself, editable.
$(VENV)/.installed: pyproject.toml requirements.lock
	$(PYTHON) -m venv $(VENV)
	$(VENV)/bin/pip install -q --upgrade pip
	$(VENV)/bin/pip install -q -r requirements.lock
	$(VENV)/bin/pip install -q --no-deps -e .
	touch $@

## lock: re-resolve requirements.lock (run and test dependencies) from pyproject.toml; keeps the pins already there where the bounds allow
lock:
	$(PYTHON) -m venv $(VENV)
	$(VENV)/bin/pip install -q "uv>=0.5"
	$(VENV)/bin/uv pip compile pyproject.toml --extra test --universal --python-version 3.11 \
	  --custom-compile-command "make lock" --quiet --output-file requirements.lock

## run: venv, install, migrate, load the demo network if empty, print an admin token if none exists, serve on
## 127.0.0.1:$ULLAGE_PORT (default 8000) with SQLite
run: $(VENV)/.installed
	$(VENV)/bin/ullage db upgrade
	$(VENV)/bin/ullage demo --if-empty
	@$(VENV)/bin/ullage token create "make-run-$$(date +%Y%m%d%H%M%S)" --role admin --if-none | tail -n 1 | sed 's/^/ADMIN TOKEN (shown once): /'
	$(VENV)/bin/ullage serve

## test: venv, install, system packages the tests need, the whole suite on SQLite and PostgreSQL
test: $(VENV)/.installed system-deps
	$(VENV)/bin/lint-imports
	$(VENV)/bin/ruff check service tests benchmarks
	$(VENV)/bin/mypy
	$(VENV)/bin/python -m pytest --cov --cov-report=term:skip-covered

system-deps:
	@bash .ci/system-deps

benchmarks: $(VENV)/.installed
	$(VENV)/bin/python benchmarks/planning.py

clean:
	rm -rf $(VENV) var tests/artifacts .pytest_cache
