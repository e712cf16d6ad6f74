# Two entry points for users: `make demo` and `make test`. `make check` adds lint and types.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test check lint typecheck browser clean bench pyc

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	PIP_DISABLE_PIP_VERSION_CHECK=1 $(BIN)/python -m pip install -qq --upgrade pip
	PIP_DISABLE_PIP_VERSION_CHECK=1 $(BIN)/python -m pip install -qq -e '.[test,dev]' --config-settings editable_mode=compat
	touch $(STAMP)

# Byte-compile our modules: with PYTHONDONTWRITEBYTECODE set, every run would compile them again.
pyc: $(STAMP)
	@$(BIN)/python -m compileall -q sitegen >/dev/null

demo: $(STAMP) pyc
	$(BIN)/sitegen build example_project -o _site
	@echo "Open _site/index.html in a browser."

browser: $(STAMP)
	bash scripts/ensure-browser.sh

test: $(STAMP) pyc browser
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check sitegen tests bench example_project
	$(BIN)/ruff format --check sitegen tests bench example_project

typecheck: $(STAMP)
	$(BIN)/mypy

check: lint typecheck test

bench: $(STAMP) pyc
	$(BIN)/python bench/run.py

clean:
	rm -rf $(VENV) _site build *.egg-info .pytest_cache .mypy_cache .ruff_cache
