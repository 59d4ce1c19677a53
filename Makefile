# wheel_dr: `make demo` runs the main job on the embedded demo, `make test` runs the tests.
# Both create or reuse .venv by themselves (Python 3.11 and the package registry are all they need).
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: venv demo test test-fast bench clean tf-msgs colcon-check fuzz soak

venv: $(STAMP)

$(STAMP): requirements.txt setup.py
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -r requirements.txt
	$(PY) -m pip install --quiet --no-deps -e .
	touch $(STAMP)

# Tests run with the local ROS workspace on the paths (tools/ros_env.sh): LD_LIBRARY_PATH has to be
# set before Python starts for the built tf2_msgs libraries; test/conftest.py picks the DDS domain.
ROS_ENV := WHEEL_DR_ROOT="$(CURDIR)"; export WHEEL_DR_ROOT; . tools/ros_env.sh

# tf2_msgs is not on the package registry: build it from tools/tf_msgs into .ros_ws/ (no-op when built).
tf-msgs: venv
	bash tools/build_tf_msgs.sh

# Build wheel_dr itself with colcon in a throw-away workspace and check its install tree.
colcon-check: venv tf-msgs
	$(ROS_ENV) && $(PY) -m pytest -q test/test_workspace_build.py -k colcon

demo: venv
	$(VENV)/bin/wheel-dr demo
	$(PY) -m wheel_dr.fleet.demo --out out/demo/fleet

test: venv tf-msgs
	$(ROS_ENV) && $(PY) -m pytest -q test

# The property-based and CDR fuzz suites run long (WHEEL_DR_FUZZ_EXAMPLES examples per test, default 20000).
fuzz: venv tf-msgs
	$(ROS_ENV) && WHEEL_DR_FUZZ=1 $(PY) -m pytest -q test/test_core_properties.py test/test_node_cdr_fuzz.py

# The node at 1 kHz for 10 minutes with 5 % adversarial messages (tools/soak_node.py prints the figures).
soak: venv tf-msgs
	$(ROS_ENV) && $(PY) tools/soak_node.py

clean:
	rm -rf build install log .ros_ws out .pytest_cache
