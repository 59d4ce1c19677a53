"""Packaging for wheel_dr: a pip-installable Python package and an ament_python ROS 2 package."""
from glob import glob

from setuptools import find_packages, setup

PACKAGE = "wheel_dr"

setup(
    name=PACKAGE,
    version="0.1.0",
    packages=find_packages(exclude=["test", "test.*"]),
    package_data={PACKAGE: ["py.typed", "data/*"]},
    data_files=[
        ("share/ament_index/resource_index/packages", [f"resource/{PACKAGE}"]),
        (f"share/{PACKAGE}", ["package.xml"]),
        (f"share/{PACKAGE}/launch", glob("launch/*")),
        (f"share/{PACKAGE}/config", glob("config/*.yaml")),
    ],
    install_requires=["setuptools", "numpy", "scipy", "matplotlib", "rosbags", "PyYAML"],
    zip_safe=False,
    maintainer="wheel_dr developers",
    maintainer_email="wheel-dr-dev@example.org",
    description="Wheel odometry with honest covariance, slip flags and offline bag analysis for ROS 2.",
    license="Apache-2.0",
    python_requires=">=3.10",
    entry_points={
        "console_scripts": [
            "wheel_dr_node = wheel_dr.ros.node:main",
            "wheel-dr = wheel_dr.cli:main",
        ],
    },
)
