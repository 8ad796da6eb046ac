# pacewire: `make demo`, `make test` (lint, typecheck, pytest), `make bench`; each creates .venv if missing.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: test lint typecheck bench demo venv clean schema

venv: $(STAMP)

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

test: lint typecheck
	$(PY) -m pytest $(PYTEST_ARGS)

lint: $(STAMP)
	$(PY) -m ruff check service replay tests

# mypy cannot follow setuptools' package-dir (pacewire is service/, pacewire.replay is replay/), so it
# checks a tree of links with the installed layout, made anew each run; messages name pacewire/... files
TYPECHECK := build/typecheck
typecheck: $(STAMP)
	@rm -rf $(TYPECHECK)/pacewire && mkdir -p $(TYPECHECK)/pacewire
	@ln -s $(addprefix $(CURDIR)/,$(wildcard service/*)) $(TYPECHECK)/pacewire/
	@ln -s $(CURDIR)/replay $(TYPECHECK)/pacewire/replay
	cd $(TYPECHECK) && $(CURDIR)/$(PY) -m mypy --config-file $(CURDIR)/pyproject.toml -p pacewire

bench: $(STAMP)
	$(PY) -m tests.bench.run $(if $(QUICK),--quick,)

demo: $(STAMP)
	$(PY) -m pacewire demo

schema: $(STAMP)
	$(PY) -m pacewire.wire.schema --out docs/schema

clean:
	rm -rf $(VENV) bench-results.json $(TYPECHECK)
