# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
# The first interpreter that really runs and is 3.11 or 3.12 (fastText has no newer wheel).
PYTHON ?= $(shell for p in python3.11 python3.12 python3; do \
	$$p -c 'import sys; sys.exit(not (3, 11) <= sys.version_info[:2] <= (3, 12))' >/dev/null 2>&1 && { command -v $$p; break; }; done)
VENV := .venv
BIN := $(VENV)/bin
OUT ?= demo-output

.PHONY: demo test venv bench bench-scale clean fuzz

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
	HYPOTHESIS_PROFILE=long $(BIN)/python -m pytest -q -p no:cacheprovider

bench: venv
	$(BIN)/python benchmarks/pipeline.py --mb 10 --pairs 2
	$(BIN)/python benchmarks/normalise.py
	$(BIN)/python benchmarks/dedup.py
	$(BIN)/python benchmarks/langid.py

# Whole runs on generated 20 MB and 200 MB corpora (about an hour on 2 cores; needs ~3 GB of disk).
bench-scale: venv
	$(BIN)/python benchmarks/scale.py

clean:
	rm -rf $(VENV) $(OUT) build *.egg-info
