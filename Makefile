# Set-up and everyday commands. Only Python 3.10+ and make are needed; everything else goes
# into .venv.
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: demo test install benchmark samples clean

$(STAMP): pyproject.toml plugins/voxtopo-napari/pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e ".[test]"
	$(PY) -m pip install --quiet -e "plugins/voxtopo-napari[test]"
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/voxtopo analyse sample_volumes/beads.tif --out results/beads --force
	@echo "Results are in results/beads (open results/beads/report.html)."

test: $(STAMP)
	$(PY) -m pytest -q

benchmark: $(STAMP)
	$(PY) benchmarks/bench_engine.py

samples: $(STAMP)
	$(PY) sample_volumes/make_samples.py

clean:
	rm -rf $(VENV) results .pytest_cache
