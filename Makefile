# balloonpath: the two commands of the quick start, plus a few helpers.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-test

.PHONY: demo test lint bench clean docs-plan

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/balloonpath demo --out outputs/demo

test: $(STAMP)
	$(BIN)/python -m pytest -q -n 2 --dist loadfile tests

lint: $(STAMP)
	$(BIN)/ruff check balloonpath tests benchmarks

bench: $(STAMP)
	for f in benchmarks/*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) outputs

docs-plan: $(STAMP)
	$(BIN)/python -c "from balloonpath.plan import schema_markdown; open('docs/plan.md', 'w').write(schema_markdown())"
