"""Packaging glue that pyproject.toml cannot say: ship models/ and scenarios/ inside the package.

The fixed repository layout keeps the bundled robot and scenarios at the top
level; an installed (non-editable) bench finds them under ``bench/_data/``.
"""

from setuptools import find_packages, setup

setup(
    packages=find_packages(include=["bench", "bench.*"]) + ["bench._data.models", "bench._data.scenarios"],
    package_dir={"bench._data.models": "models", "bench._data.scenarios": "scenarios"},
    package_data={"bench._data.models": ["**/*.xml", "**/*.yaml", "**/*.png", "**/*.stl"],
                  "bench._data.scenarios": ["**/*.yaml"]},
)
