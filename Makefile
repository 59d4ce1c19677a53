# wheel_dr: `make demo` runs the main job on the embedded demo, `make test` runs the tests.
# Both create or reuse .venv by themselves (Python 3.11 and the package registry are all they need).
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: venv demo test test-fast bench clean tf-msgs colcon-check

venv: $(STAMP)

$(STAMP): requirements.txt setup.py
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -r requirements.txt
	$(PY) -m pip install --quiet --no-deps -e .
	touch $(STAMP)

demo: venv
	$(VENV)/bin/wheel-dr demo

test: venv
	$(PY) -m pytest -q test

clean:
	rm -rf build install log .ros_ws out .pytest_cache
