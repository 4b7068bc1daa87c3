"""bodysweep workflow: study files, solver adapter, post-processing, collectors and the command line."""

from bodysweep import __version__  # noqa: F401  (one version, set in api/__init__.py)
