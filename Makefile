# Set-up and everyday commands. Only Python 3.10+ and make are needed; everything else goes
# into .venv.
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

# What the tests need from the system: headless Chromium renders the HTML reports, and
# napari's viewer draws under Xvfb with Mesa's software OpenGL (Debian packages).
TEST_PACKAGES := chromium xvfb xauth libgl1-mesa-dri libglx-mesa0 libegl1 libdbus-1-3 \
	libfontconfig1 libxkbcommon-x11-0 libxcb-icccm4 libxcb-image0 libxcb-keysyms1 \
	libxcb-randr0 libxcb-render-util0 libxcb-xinerama0 libxcb-xkb1 libxcb-shape0 libxcb-cursor0

.PHONY: demo test install benchmark samples clean test-system-packages

$(STAMP): pyproject.toml plugins/voxtopo-napari/pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e ".[test]"
	$(PY) -m pip install --quiet -e "plugins/voxtopo-napari[test]"
	@echo "Compiling voxtopo's kernels once (a few minutes; later runs start at once) ..."
	$(PY) -m voxtopo.engine.warm_up
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

# As root (CI, a fresh container) the packages are installed; otherwise make says which
# ones are missing and stops, so that no test is skipped for want of them.
test-system-packages:
	@if dpkg -s $(TEST_PACKAGES) >/dev/null 2>&1; then :; \
	elif [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null; then \
		echo "Installing what the tests need: $(TEST_PACKAGES)"; \
		apt-get update -qq && DEBIAN_FRONTEND=noninteractive \
			apt-get install -y -qq $(TEST_PACKAGES) >/dev/null; \
	else \
		echo "make test needs these Debian packages: $(TEST_PACKAGES)"; \
		echo "Install them with: sudo apt-get install $(TEST_PACKAGES)"; \
		exit 2; \
	fi

test: $(STAMP) test-system-packages
	QT_QPA_PLATFORM=xcb xvfb-run -a $(PY) -m pytest -q

benchmark: $(STAMP)
	$(PY) benchmarks/bench_engine.py

samples: $(STAMP)
	$(PY) sample_volumes/make_samples.py

clean:
	rm -rf $(VENV) results .pytest_cache
