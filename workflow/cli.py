"""The ``bodysweep`` command line."""
from __future__ import annotations

import argparse
import sys


def _versions() -> str:
    from importlib.metadata import version

    import numpy

    from . import __version__
    parts = [f"bodysweep {__version__}"]
    try:
        from .solver.engine import engine_versions
        parts += [f"{k} {v}" for k, v in engine_versions().items()]
    except Exception as exc:  # the engine may be missing on a machine without set-up
        parts.append(f"openEMS unavailable ({exc})")
    parts.append(f"snakemake {version('snakemake')}")
    parts.append(f"numpy {numpy.__version__}")
    return "\n".join(parts)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="bodysweep", description=__doc__)
    parser.add_argument("--version", action="store_true", help="print bodysweep, openEMS, CSXCAD, snakemake and numpy versions")
    args = parser.parse_args(argv)
    if args.version:
        print(_versions())
        return 0
    parser.print_help()
    return 0


if __name__ == "__main__":
    sys.exit(main())
