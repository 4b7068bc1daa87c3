"""Atomic file output: write to a temporary name in the same folder, then rename into place.

A job killed half-way never leaves a half-written file under the final name, because
:func:`os.replace` within one file system is atomic (POSIX ``rename(2)``). Every writer in
bodysweep goes through these helpers.
"""
from __future__ import annotations

import contextlib
import json
import os
import tempfile
from pathlib import Path
from typing import Any, Iterator


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it to ``path``, on error remove it.

    Parameters
    ----------
    path : path-like
        Final file name. Its folder is created if missing.
    suffix : str, optional
        Suffix of the temporary name (default: the final name's suffix, so that writers that pick a
        format from the suffix -- matplotlib, h5py, pandas -- see the right one).

    Examples
    --------
    >>> with atomic_path("out/table.parquet") as tmp:   # doctest: +SKIP
    ...     frame.to_parquet(tmp)
    """
    final = Path(path)
    final.parent.mkdir(parents=True, exist_ok=True)
    # hidden temporary name ending in the real suffix: ".<name>.<random>.part<suffix>"
    fd, tmp_name = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".part" + (final.suffix if suffix is None else suffix),
                                    dir=final.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    # mkstemp gives mode 0600; give the usual umask-based mode
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        yield tmp
        os.replace(tmp, final)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically."""
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)


def write_text(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    write_bytes(path, text.encode("utf-8"))


def json_text(obj: Any) -> str:
    """Canonical JSON text used for every JSON file bodysweep writes (sorted keys, 1-space indent)."""
    return json.dumps(obj, indent=1, sort_keys=True, allow_nan=True) + "\n"


def write_json(path: str | os.PathLike, obj: Any) -> None:
    """Write ``obj`` as canonical JSON to ``path`` atomically."""
    write_text(path, json_text(obj))


def write_if_changed(path: str | os.PathLike, data: bytes | str) -> bool:
    """Write ``data`` atomically only when the file is missing or its content differs.

    Keeping an unchanged file untouched keeps its modification time, so Snakemake (run with
    ``--rerun-triggers mtime``) sees nothing new and schedules nothing downstream.

    Returns
    -------
    bool
        True if the file was (re)written, False if it already held exactly ``data``.
    """
    raw = data.encode("utf-8") if isinstance(data, str) else data
    p = Path(path)
    try:
        if p.stat().st_size == len(raw) and p.read_bytes() == raw:
            return False
    except FileNotFoundError:
        pass
    write_bytes(p, raw)
    return True
