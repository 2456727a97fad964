"""Package discovery only (metadata lives in pyproject.toml).

The demo data stays at the top of the repository in ``data_demo/`` and is
installed as the package ``perierr.data_demo`` so that ``perierr demo`` works
from an installed copy.
"""

from setuptools import find_packages, setup

setup(
    packages=find_packages(include=["perierr", "perierr.*"]) + ["perierr.data_demo"],
    package_dir={"perierr.data_demo": "data_demo"},
    package_data={"perierr.data_demo": ["*.toml", "*.ecsv", "*.md"]},
)
