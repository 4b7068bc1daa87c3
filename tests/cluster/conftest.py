"""A single-node SLURM on localhost for the ``slurm``-marked tests.

The session fixture ``slurm_cluster`` runs ``start_slurm.sh start`` (installing the Debian packages when
run as root on a fresh machine), yields the state folder, and stops the daemons it started by their
recorded PIDs. Policy: a missing SLURM is a FAILURE, never a skip -- CI must prove the cluster path.

Several developers may run the suite on one machine at once; SLURM's ports and /etc/slurm/slurm.conf
are machine-wide, so the fixture holds an exclusive file lock for its whole lifetime.
"""
from __future__ import annotations

import fcntl
import os
import subprocess
import time
from dataclasses import dataclass
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
SCRIPT = HERE / "start_slurm.sh"
LOCK_PATH = Path("/tmp/bodysweep-slurm-test.lock")
LOCK_WAIT_S = 900.0


@dataclass(frozen=True)
class LocalSlurm:
    """What the fixture started: the state folder and the job-completion log of the node."""

    state_dir: Path

    @property
    def jobcomp_path(self) -> Path:
        return self.state_dir / "log" / "jobcomp.txt"

    def completed_jobs(self) -> dict[str, dict[str, str]]:
        """Job-completion records (``jobcomp/filetxt``) keyed by job id, each ``key=value`` field as a dict."""
        out: dict[str, dict[str, str]] = {}
        if not self.jobcomp_path.exists():
            return out
        for line in self.jobcomp_path.read_text().splitlines():
            fields = dict(item.split("=", 1) for item in line.split() if "=" in item)
            if "JobId" in fields:
                out[fields["JobId"]] = fields
        return out


def _acquire_lock():
    fh = open(LOCK_PATH, "a+")
    t0 = time.monotonic()
    while True:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return fh
        except BlockingIOError:
            if time.monotonic() - t0 > LOCK_WAIT_S:
                fh.close()
                pytest.fail(f"another test session holds {LOCK_PATH} for more than {LOCK_WAIT_S:.0f} s")
            time.sleep(1.0)


@pytest.fixture(scope="session")
def slurm_cluster(tmp_path_factory):
    lock = _acquire_lock()
    state = tmp_path_factory.mktemp("slurm")
    try:
        proc = subprocess.run(["bash", str(SCRIPT), "start", str(state)], capture_output=True, text=True, timeout=900)
        if proc.returncode != 0:
            subprocess.run(["bash", str(SCRIPT), "stop", str(state)], capture_output=True, text=True, timeout=120)
            hint = {
                3: "SLURM packages are missing and this session is not root; run the apt-get command above as root",
                4: "/etc/slurm/slurm.conf is a real file (site configuration); run the cluster tests on a clean machine",
            }.get(proc.returncode, f"see the logs under {state}/log")
            pytest.fail(
                f"local SLURM did not start (exit {proc.returncode}): {hint}\n{proc.stderr}", pytrace=False
            )
        yield LocalSlurm(state_dir=Path(state))
    finally:
        subprocess.run(["bash", str(SCRIPT), "stop", str(state)], capture_output=True, text=True, timeout=120)
        fcntl.flock(lock, fcntl.LOCK_UN)
        lock.close()


@pytest.fixture
def slurm_env() -> dict[str, str]:
    """The environment for submitting from a test: the caller's, without any SLURM_* leftovers."""
    return {k: v for k, v in os.environ.items() if not k.startswith("SLURM_")}
