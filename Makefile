# Set-up is part of every target: a fresh machine needs only Python 3.11+
# (and Mosquitto for the broker tests).
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench clean

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e '.[demo,test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/offwatch demo

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python -m tools.bench.current
	$(BIN)/python -m tools.bench.demo_edge
	$(BIN)/python -m tools.bench.fronts_pressure
	$(BIN)/python -m tools.bench.recording
	$(BIN)/python -m tools.bench.replay
	$(BIN)/python -m tools.bench.faults
	$(BIN)/python -m tools.bench.watch
	$(BIN)/python -m tools.bench.handoffs
	$(BIN)/python -m tools.bench.live

clean:
	rm -rf $(VENV) demo-out
