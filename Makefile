# Set-up and everyday commands.  Everything runs inside .venv, created on demand.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: demo test test-all bench grids export install clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

install: $(STAMP)

## make demo: install, then run the demo pipeline and print what each stage does
demo: $(STAMP)
	$(BIN)/tovforge demo --out demo-output

## make test: install with test extras and run the test suite (slow tests excluded)
test: $(STAMP)
	$(BIN)/python -m pytest -q

## make test-all: every test, the slow ones included
test-all: $(STAMP)
	$(BIN)/python -m pytest -q -m "slow or not slow"

## make bench: speed and accuracy benchmarks on this machine
bench: $(STAMP)
	$(BIN)/tovforge bench

## make grids: regenerate the demo grids grids/*.h5 from grids/*.toml (if interrupted, run it again to resume)
GRIDS := demo-train demo-holdout
grids: $(STAMP)
	rm -f $(GRIDS:%=grids/%.h5)
	for g in $(GRIDS); do $(BIN)/tovforge grid run grids/$$g.toml --out grids/$$g.h5 --overwrite || exit $$?; done

## make export: the demo evaluators exported/demo_{gp,spline}.py: train on grids/demo-train.h5 when the
## model in build/models is missing or older than the grid, check on grids/demo-holdout.h5, export
MODELS := build/models
EXPORTED := exported/demo_gp.py exported/demo_spline.py
export: $(EXPORTED)
	@ls -l $(EXPORTED)

# keep the trained models and reports between runs (make deletes intermediate files otherwise)
.PRECIOUS: $(MODELS)/%/model.json $(MODELS)/%/check/report.json

$(MODELS)/%/model.json: grids/demo-train.h5 | $(STAMP)
	$(BIN)/tovforge train grids/demo-train.h5 --kind $* --out $(MODELS)/$*

$(MODELS)/%/check/report.json: $(MODELS)/%/model.json grids/demo-holdout.h5
	$(BIN)/tovforge check $(MODELS)/$* --holdout grids/demo-holdout.h5 --report $(MODELS)/$*/check

exported/demo_%.py: $(MODELS)/%/model.json $(MODELS)/%/check/report.json src/tovforge/surrogate/_runtime.py \
		src/tovforge/surrogate/_contract.py src/tovforge/export/_evaluator.py src/tovforge/export/_render.py
	$(BIN)/tovforge export $(MODELS)/$* --out $@ --report $(MODELS)/$*/check/report.json

clean:
	rm -rf $(VENV) build src/*.egg-info .pytest_cache .hypothesis
