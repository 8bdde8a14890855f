# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
PYTHON ?= $(shell command -v python3.12 || command -v python3.11 || command -v python3)
VENV := .venv
BIN := $(VENV)/bin
OUT ?= demo-output

.PHONY: demo test venv bench clean fuzz

$(BIN)/corpuskit: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[dask,test]'
	touch $@

venv: $(BIN)/corpuskit

demo: venv
	$(BIN)/corpuskit demo --out $(OUT)

# Debian's unicode-data (UCD test files) and chromium (rendering check) are
# installed when missing and apt is usable; tests that need them skip otherwise.
test: venv
	-@sh tests/system-setup.sh
	$(BIN)/python -m pytest -q -p no:cacheprovider

fuzz: venv
	HYPOTHESIS_PROFILE=long $(BIN)/python -m pytest -q tests/test_fuzz.py

bench: venv
	$(BIN)/python benchmarks/normalise.py
	$(BIN)/python benchmarks/dedup.py
	$(BIN)/python benchmarks/langid.py

clean:
	rm -rf $(VENV) $(OUT) build *.egg-info
