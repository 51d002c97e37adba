# Two entry points: `make demo` (the main job on the bundled demo clips) and `make test`.
# Both create or reuse a local virtual environment in .venv and install the project with its
# test extra into it.
PYTHON ?= python3
VENV ?= .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test fuzz lint bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

# The main job on the bundled demo clips: GOP runs and comparisons, report in ./synth-demo/
demo: $(STAMP)
	$(VENV)/bin/synth demo

# Lint and format check first (ruff, configured in pyproject.toml), then the tests.
test: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .
	$(PY) -m pytest -q -n 2

# The readers' property tests in their long mode: 5000 mutated or generated inputs per reader
# (`make test` runs a few hundred); the counts per reader go to $(FUZZ_REPORT).
FUZZ_REPORT ?= .pytest_cache/fuzz-report.json
fuzz: $(STAMP)
	mkdir -p $(dir $(FUZZ_REPORT)) && rm -f $(FUZZ_REPORT)
	SYNTH_FUZZ=long SYNTH_FUZZ_REPORT=$(FUZZ_REPORT) $(PY) -m pytest -q -p no:xdist tests/test_fuzz_readers.py

lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .

bench: $(STAMP)
	$(PY) tests/benchmarks/run_all.py

clean:
	rm -rf $(VENV) synth-demo .pytest_cache
