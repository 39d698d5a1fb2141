# Set-up and everyday commands.  Everything runs inside .venv, created on demand, with the exact
# versions of constraints.txt (the bit-for-bit claims hold with those).
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: demo test test-all bench grids export install constraints docs clean FORCE

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# the test extra brings what the tests need: the cluster, plots and demo extras, pytest, hypothesis
$(STAMP): $(BIN)/python pyproject.toml constraints.txt
	$(BIN)/python -m pip install --quiet -c constraints.txt -e ".[test]"
	touch $(STAMP)

install: $(STAMP)

## make demo: install, then run the demo pipeline and print what each stage does (into demo-output/, replacing
## the outputs of an earlier run)
demo: $(STAMP)
	$(BIN)/tovforge demo --out demo-output --overwrite

## make test: install with test extras and run the test suite (slow tests excluded); CI runs this
test: $(STAMP)
	$(BIN)/python -m pytest -q

## make test-all: every test, the slow ones included
test-all: $(STAMP)
	$(BIN)/python -m pytest -q -m "slow or not slow"

## make docs: regenerate docs/reference/cli.md (the commands' --help) and docs/reference/python-api.md (the
## public names and docstrings); a test compares both with the code
docs: $(STAMP)
	$(BIN)/python -m tovforge.cli._reference cli > docs/reference/cli.md
	$(BIN)/python -m tovforge.cli._reference api > docs/reference/python-api.md

## make bench: speed and accuracy benchmarks on this machine
bench: $(STAMP)
	$(BIN)/tovforge bench

## make constraints: pin constraints.txt again from a fresh install of every extra (after changing dependencies)
constraints:
	rm -rf build/constraints-venv
	$(PYTHON) -m venv build/constraints-venv
	build/constraints-venv/bin/python -m pip install --quiet --upgrade pip
	build/constraints-venv/bin/python -m pip install --quiet -e ".[all]"
	{ sed -n '/^#/p' constraints.txt; build/constraints-venv/bin/python -m pip freeze --exclude-editable; } > build/constraints.txt
	mv build/constraints.txt constraints.txt
	rm -rf build/constraints-venv

## make grids: rebuild the demo grids from grids/*.toml into build/grids/ and replace grids/*.h5 only when
## their content (content_sha256, spec_sha256) changed, so that an unchanged rebuild leaves git clean.
## If interrupted, run it again to resume.
GRIDS := demo-train demo-holdout
grids: $(STAMP)
	mkdir -p build/grids
	for g in $(GRIDS); do \
		rm -f build/grids/$$g.h5; \
		$(BIN)/tovforge grid run grids/$$g.toml --out build/grids/$$g.h5 --overwrite || exit $$?; \
		$(BIN)/python -m tovforge._artifacts build/grids/$$g.h5 grids/$$g.h5 || exit $$?; \
	done

## make export: the demo evaluators exported/demo_{gp,spline}.py: train on grids/demo-train.h5 when the
## model in build/models is missing or older than the grid, check on grids/demo-holdout.h5, export into
## build/exported/ and replace exported/*.py only when their content (not the date or commit) changed.
## Edits of the runtime or exporter sources do not re-export by themselves: when users should get such a
## change (a fix or a new query), run `make export REFRESH=1` (see DEVELOPERS.md, "When to regenerate").
MODELS := build/models
EXPORTED := exported/demo_gp.py exported/demo_spline.py
export: $(EXPORTED)
	@ls -l $(EXPORTED)

# keep the trained models and reports between runs (make deletes intermediate files otherwise)
.PRECIOUS: $(MODELS)/%/model.json $(MODELS)/%/check/report.json

$(MODELS)/%/model.json: grids/demo-train.h5 | $(STAMP)
	mkdir -p $(MODELS)
	$(BIN)/tovforge train grids/demo-train.h5 --kind $* --out $(MODELS)/$* --overwrite

$(MODELS)/%/check/report.json: $(MODELS)/%/model.json grids/demo-holdout.h5
	$(BIN)/tovforge check $(MODELS)/$* --holdout grids/demo-holdout.h5 --report $(MODELS)/$*/check --overwrite

exported/demo_%.py: $(MODELS)/%/model.json $(MODELS)/%/check/report.json $(if $(REFRESH),FORCE)
	mkdir -p build/exported
	$(BIN)/tovforge export $(MODELS)/$* --out build/exported/demo_$*.py --report $(MODELS)/$*/check/report.json \
		--overwrite
	$(BIN)/python -m tovforge._artifacts build/exported/demo_$*.py $@

FORCE:

clean:
	rm -rf $(VENV) build src/*.egg-info .pytest_cache .hypothesis
