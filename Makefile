# Everything runs from .venv, created here on first use; nothing needs installing by hand.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench schema clean browser

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/assignplan solve examples/institute-week.json

# The report's browser test renders the HTML in headless Chromium (Debian packages chromium and
# chromium-driver). Installed only when missing and only as root; elsewhere the test says why.
CHROMIUM := /usr/bin/chromium
CHROMEDRIVER := /usr/bin/chromedriver

browser:
	@if [ -x $(CHROMIUM) ] && [ -x $(CHROMEDRIVER) ]; then :; \
	elif [ "$$(id -u)" = 0 ]; then \
		apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium chromium-driver; \
	else \
		echo "browser: $(CHROMIUM) or $(CHROMEDRIVER) missing and not root: install chromium and chromium-driver to run the browser test" >&2; \
	fi

# Two workers, each taking whole test files (module fixtures such as the published bin-packing
# runs are computed once): about half the serial wall time on two cores.
test: $(STAMP) browser
	$(BIN)/python -m pytest -q -n 2 --dist loadfile

# Benchmarks report measured figures into benchmarks/RESULTS.md (about 20 minutes in all).
bench: $(STAMP)
	$(BIN)/python benchmarks/bench_builder.py --repeats 7 --pop 64 --seed 0
	$(BIN)/python benchmarks/bench_real_weeks.py --weeks 2,13,20,34,45 --ga-seconds 20
	$(BIN)/python benchmarks/bench_reference.py
	$(BIN)/python benchmarks/bench_ga.py --seed 0
	$(BIN)/python benchmarks/bench_replan.py --seeds 1,2,3 --old-seconds 30 --seconds 25

schema: $(STAMP)
	$(BIN)/assignplan schema --out schemas/

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
