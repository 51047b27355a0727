# Set-up and everyday commands. `make run` and `make test` work on a fresh machine:
# they create .venv, install regbench with its test extras, then do the job.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp
SAMPLE := sample_projects/greenhouse.regbench

.PHONY: run test test-minimums test-newest install samples snapshots bench bench-quick clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

install: $(STAMP)

# The main job: the desktop window on the greenhouse sample project. With no
# screen (no DISPLAY / WAYLAND_DISPLAY) it renders the same project headless.
run: $(STAMP)
	@if [ -n "$$DISPLAY$$WAYLAND_DISPLAY" ]; then \
		$(BIN)/regbench open $(SAMPLE); \
	else \
		echo "No screen found: rendering the sample project headless instead."; \
		mkdir -p out; \
		$(BIN)/regbench fit sample_projects/greenhouse.csv --target yield_kg_m2 --weights plants_per_bed --groups glasshouse \
			--predictors variety,day_temp_c,night_temp_c,mean_temp_c,day_temp_f,light_hours,light_sum_mol_m2,humidity_pct,vpd_kpa,co2_ppm,irrigation_l_m2,ec_ms_cm; \
		$(BIN)/regbench report $(SAMPLE) -o out/greenhouse-report.html && \
		QT_QPA_PLATFORM=offscreen $(BIN)/regbench snapshot $(SAMPLE) --out out/snapshots && \
		echo "Report: out/greenhouse-report.html  Panel pictures: out/snapshots/"; \
	fi

# pytest exits 5 when it collects nothing: that is a failure here, not a pass.
test: $(STAMP)
	@QT_QPA_PLATFORM=offscreen $(BIN)/python -m pytest -q; rc=$$?; \
	if [ $$rc -eq 5 ]; then echo "pytest collected no tests"; exit 1; fi; exit $$rc

# The declared lowest versions (pyproject.toml's >= bounds, the test extra's too) on the lowest declared
# Python, in a throwaway venv; the tests that need no window. Not part of `make test` (DEVELOPERS.md says why).
MIN_PYTHON ?= python3.11
test-minimums:
	$(PYTHON) scripts/check_versions.py --python $(MIN_PYTHON) --resolution lowest

# The newest versions the registry offers, on the newest Python regbench is checked on.
NEW_PYTHON ?= python3.13
test-newest:
	$(PYTHON) scripts/check_versions.py --python $(NEW_PYTHON) --resolution newest

samples: $(STAMP)
	$(BIN)/python scripts/make_samples.py

snapshots: $(STAMP)
	QT_QPA_PLATFORM=offscreen $(BIN)/regbench snapshot $(SAMPLE) --out assets/snapshots
	QT_QPA_PLATFORM=offscreen $(BIN)/regbench snapshot sample_projects/grading.regbench --out assets/snapshots/grading
	QT_QPA_PLATFORM=offscreen $(BIN)/python scripts/tour_pictures.py assets/tour

bench: $(STAMP)
	$(BIN)/regbench bench

bench-quick: $(STAMP)
	$(BIN)/regbench bench --quick

clean:
	rm -rf $(VENV) out .pytest_cache
