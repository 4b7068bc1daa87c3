"""bodysweep: parametric openEMS FDTD studies of radio links to implanted devices.

For analysis scripts (README, "Results in Python")::

    import bodysweep
    tables = bodysweep.load_tables("studies/my_study.yaml")               # summary, sparams, sar, uncertainty
    vol = bodysweep.load_sar_volume("studies/my_study.yaml", 0, mass_g=10)
    study = bodysweep.open_study("results/my_study")                     # both, and the case list

Subpackages: :mod:`bodysweep.geometry` (solver-neutral builders) and :mod:`bodysweep.workflow` (study
files, solver, post-processing, pipeline, command line). Importing this package loads neither's modules;
the functions above load :mod:`bodysweep.workflow.analysis` on first use.
"""
from .workflow import __version__

#: names served from bodysweep.workflow.analysis (PEP 562 module __getattr__: loaded on first use)
_ANALYSIS = ("open_study", "load_tables", "load_sar_volume", "StudyResults", "SarVolume")
__all__ = ["__version__", *_ANALYSIS]


def __getattr__(name: str):
    if name in _ANALYSIS:
        from .workflow import analysis

        return getattr(analysis, name)
    raise AttributeError(f"module 'bodysweep' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_ANALYSIS))
