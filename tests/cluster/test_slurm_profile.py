"""The cluster profile shipped in workflow/profiles/slurm and the site options of `bodysweep run`."""
from __future__ import annotations

import argparse
from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.cluster import profile2default_resources, site_resource_args
from bodysweep.workflow.pipeline import PROFILES_DIR, resolve_profile

PROFILE = PROFILES_DIR / "slurm"


def test_profile_resolves_by_name():
    assert resolve_profile("slurm") == PROFILE
    assert (PROFILE / "config.yaml").is_file()


def test_every_profile_entry_has_a_comment():
    # the issue asks for every entry commented: each top-level key follows a comment line
    lines = (PROFILE / "config.yaml").read_text().splitlines()
    keys = [i for i, ln in enumerate(lines) if ln and not ln[0].isspace() and not ln.startswith("#")]
    assert keys
    for i in keys:
        assert lines[i - 1].lstrip().startswith("#"), f"profile entry without comment: {lines[i]!r}"


def test_profile_options_are_snakemake_options():
    # every key must be an option of Snakemake's own argument parser (with the SLURM plugin's options)
    from snakemake.cli import get_argument_parser

    parser = get_argument_parser()
    dests = {a.dest for a in parser._actions}
    conf = yaml.safe_load((PROFILE / "config.yaml").read_text())
    for key in conf:
        assert key.replace("-", "_") in dests, f"{key} is not a snakemake option"
    assert conf["executor"] == "slurm"


def test_default_resources_read_from_profile():
    assert profile2default_resources(PROFILE) == ["mem_mb=2000", "runtime=30"]
    assert profile2default_resources(None) == []


def test_site_args_keep_profile_defaults_and_add_partition():
    args = site_resource_args(PROFILE, partition="bulk", account="proj-1")
    assert args == ["--default-resources", "mem_mb=2000", "runtime=30", "slurm_partition='bulk'",
                    "slurm_account='proj-1'"]
    assert site_resource_args(PROFILE) == []


def test_site_args_reject_shell_characters():
    with pytest.raises(ValueError, match="partition"):
        site_resource_args(PROFILE, partition="a;rm -rf")


def test_run_command_has_site_options():
    from bodysweep.workflow.cli import build_parser

    a = build_parser().parse_args(["run", "x.yaml", "--profile", "slurm", "--partition", "bulk", "--account", "p"])
    assert (a.profile, a.partition, a.account) == ("slurm", "bulk", "p")
