# Two commands a fresh machine needs: `make demo` and `make test`.
# Each creates or reuses .venv and installs what it needs.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench clean

# The editable install in compat mode puts the project folder on sys.path with a .pth file and no
# import hook: the hook cost 0.009 s of every command's start-up.
$(STAMP): pyproject.toml Makefile
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip uninstall --quiet --yes modeldiff 2>/dev/null || true  # this project under its old name
	rm -rf modeldiff.egg-info
	$(BIN)/python -m pip install --quiet -e '.[test]' --config-settings editable_mode=compat
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python -m modeldiff.demo

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python benchmarks/run.py
	$(BIN)/python benchmarks/history.py
	$(BIN)/python benchmarks/engine_shapes.py

clean:
	rm -rf $(VENV) build *.egg-info
