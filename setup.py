"""Package layout that pyproject.toml alone cannot state.

The demo files live once, in the top-level ``demo_runs/`` and ``standards/`` folders of the
repository (the project layout; ``demo_runs/regenerate.sh`` writes there).  The wheel carries
them as package data under ``compquant/demo/demo_runs`` and ``compquant/demo/standards`` (same
relative layout, so ``../standards/...`` in a scenario file still resolves), which is where
``compquant demo`` finds them after ``pip install``.  Everything else is in pyproject.toml.
"""

from setuptools import find_namespace_packages, setup

DEMO = {"compquant.demo.demo_runs": "demo_runs", "compquant.demo.standards": "standards"}

setup(
    # namespace discovery, as pyproject's packages.find did: compquant.maps has no __init__.py
    packages=find_namespace_packages(include=["compquant", "compquant.*"]) + list(DEMO),
    package_dir=DEMO,
    package_data={
        "compquant": ["data/*", "data/**/*"],
        "compquant.web": ["templates/*", "static/*", "static/**/*"],  # the review page (compquant review)
        "compquant.demo.demo_runs": ["*.h5", "*.toml", "*.csv", "*.md", "*.sh"],
        "compquant.demo.standards": ["*.csv"],
    },
)
