# penduel — every target sets up .venv first when it is missing or out of date.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
CONFIG ?= configs/demo.yaml
PORT   ?= 5000
LAST   ?= 5

.PHONY: run test test-all test-browser bench ui report compare validate clean

$(STAMP): pyproject.toml
	@echo "setting up $(VENV) (the first time takes a few minutes; log in $(VENV)/install.log)"
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	@$(BIN)/python -m pip install --upgrade pip > $(VENV)/install.log 2>&1 || { cat $(VENV)/install.log; exit 1; }
	@$(BIN)/python -m pip install -e '.[dev]' >> $(VENV)/install.log 2>&1 || { cat $(VENV)/install.log; exit 1; }
	@touch $(STAMP)

run: $(STAMP)  ## run the demo experiment (or CONFIG=...)
	$(BIN)/penduel run $(CONFIG)

test: $(STAMP)  ## the test suite (slow checks excluded; prints the 10 slowest)
	$(BIN)/python -m pytest -q --durations=10

test-all: $(STAMP)  ## every test, slow ones included
	$(BIN)/python -m pytest -q -m "" --durations=10

test-browser: $(STAMP)  ## the demo report loaded in headless Chromium (about a minute)
	$(BIN)/python -m pytest -q -m slow tests/test_browser.py

bench: $(STAMP)  ## side-by-side benchmarks; writes reports/bench/results.json
	$(BIN)/python -m benchmarks.run

validate: $(STAMP)
	$(BIN)/penduel validate $(CONFIG)

report: $(STAMP)  ## write a report again from the tracking store: RUN=<run id>, else the latest execution
	$(BIN)/penduel report $(if $(RUN),$(RUN),--latest) --config $(CONFIG)

compare: $(STAMP)  ## compare executions from the store: RUNS="id1 id2", else the newest LAST=5 (EXPERIMENT=... to narrow)
	$(BIN)/penduel compare $(if $(RUNS),--runs $(RUNS),--last $(LAST)) $(if $(EXPERIMENT),--experiment $(EXPERIMENT)) --config $(CONFIG)

ui: $(STAMP)  ## tracking UI on http://127.0.0.1:$(PORT)
	$(BIN)/penduel ui --config $(CONFIG) --port $(PORT)

clean:
	rm -rf $(VENV) *.egg-info .pytest_cache .hypothesis mlflow.db mlruns mlartifacts .penduel-cache
	find reports -mindepth 1 ! -name README.md -exec rm -rf {} +
