# Set-up and the two contract commands: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test venv clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(BIN)/regimes run configs/demo.toml --overwrite
	@echo "Demo results are in out/demo/ (labels.nc, composites.nc, statistics.nc, eofs.nc, model.nc, figures, report.html)."

test: $(STAMP)
	$(BIN)/python -m pytest -n 2 -q

clean:
	rm -rf $(VENV) out
