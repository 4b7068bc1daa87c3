"""bodysweep workflow: study files, solver adapter, post-processing, collectors and the command line."""

__version__ = "0.1.0"
