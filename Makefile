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

# The demo: the bright glass of the sintered-bead sample swept from bright to dark, lightly
# smoothed (2.5 um), keeping the features that are significant against the scan's own noise
# (family-wise, alpha 0.05; the default --min-persistence auto).
demo: $(STAMP)
	mkdir -p results
	$(VENV)/bin/voxtopo analyse sample_volumes/beads.tif --out results/beads --force \
		--superlevel --smooth 2.5
	@echo "Results are in $(CURDIR)/results/beads: open report.html there, or pairs.csv and summary.json."

test: $(STAMP)
	$(PY) -m pytest -q

benchmark: $(STAMP)
	$(PY) benchmarks/bench_engine.py

samples: $(STAMP)
	$(PY) sample_volumes/make_samples.py

clean:
	rm -rf $(VENV) results .pytest_cache
