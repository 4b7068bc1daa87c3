"""Package layout of bodysweep: three source folders become one import package.

``api/`` is the top-level package ``bodysweep`` (the analysis-script API), ``geometry/`` is
``bodysweep.geometry`` and ``workflow/`` is ``bodysweep.workflow``. Every subpackage below them (a folder
with an ``__init__.py``) is found here, so a new one is installed without touching this file. The
package data (schemas, tissue tables, rule files, profiles, the Snakefile) is listed in pyproject.toml.
"""
from setuptools import find_packages, setup

FOLDERS = {"bodysweep": "api", "bodysweep.geometry": "geometry", "bodysweep.workflow": "workflow"}

packages = []
for name, folder in FOLDERS.items():
    packages += [name] + [f"{name}.{sub}" for sub in find_packages(folder)]

setup(packages=packages, package_dir=FOLDERS)
