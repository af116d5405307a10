# Two commands do all set-up: `make demo` and `make test`. Both create .venv when it is
# missing and reinstall only when pyproject.toml changed (the stamp file records that).
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed
SEED   ?= 0

.PHONY: demo test test-fast bench samples clean

$(PY):
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(PY)
	$(PY) -m pip install --quiet -e '.[files,test]'
	touch $(STAMP)

demo: $(STAMP)
	$(PY) -m advisor assess sample_logs/moulding_warpage.csv --objective warpage_mm \
	    --campaign lot --order run --out reports --seed $(SEED) --quick --propose 5
	$(PY) -m advisor assess sample_logs/fermentation_yield.csv --objective yield_g_per_l --maximize \
	    --campaign batch_series --order run --status outcome --success ok --out reports --seed $(SEED) --quick --propose 5
	$(PY) -m advisor assess sample_logs/forecast_tuning.csv --objective val_mape \
	    --campaign search_round --order trial --space sample_logs/forecast_tuning.space.toml --out reports --seed $(SEED) --quick --propose 5

# The whole suite, slow tests included (about 13 minutes on 2 cores); `make test-fast`
# skips the tests marked slow for a quick loop while editing.
test: $(STAMP)
	$(PY) -m pytest -q -p no:cacheprovider

test-fast: $(STAMP)
	$(PY) -m pytest -q -m "not slow"

bench: $(STAMP)
	$(PY) benchmarks/run.py

samples: $(STAMP)
	$(PY) scripts/make_sample_logs.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
