"""The Snakemake profiles shipped in chairqm/workflow/profiles/: they parse, use only real Snakemake options, and
give a valid plan (dry run) for the demo configuration — no cluster and no SLURM plugin needed.

The SLURM profile names `executor: slurm`, which Snakemake accepts only with the optional plugin
(`pip install -e .[slurm]`). Without it, the dry run is made with the profile and `--executor local`
on the command line (command-line options override a profile's): everything else in the profile —
resources, threads, groups — is then checked against the real workflow. With the plugin installed,
a dry run with the profile as written is checked too.
"""

from __future__ import annotations

import importlib.util
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from chairqm import config as cq_config
from chairqm.plan import make_plan

ROOT = Path(__file__).resolve().parent.parent
PROFILES = ROOT / "chairqm" / "workflow" / "profiles"
DEMO = ROOT / "configs" / "demo.yaml"
STAGE_RULES = ["intake", "seeds", "minima", "thermo", "refine", "ensemble", "report"]


def profile(name) -> dict:
    return yaml.safe_load((PROFILES / name / "config.yaml").read_text())


@pytest.fixture(scope="module")
def snakemake_options() -> set[str]:
    """Every long option `snakemake --help` lists (this installation, plugins included)."""
    text = subprocess.run([sys.executable, "-m", "snakemake", "--help"], capture_output=True, text=True,
                          check=True).stdout
    return set(re.findall(r"(?<![\w-])--([a-z][a-z0-9-]+)", text))


def _env():
    env = {k: v for k, v in os.environ.items() if k not in ("SNAKEMAKE_PROFILE", "CHAIRQM_FAULTS")}
    env.update(OMP_NUM_THREADS="1", CHAIRQM_VERBOSE="1")      # verbose: the dry run prints every job
    return env


def dry_run(tmp_path, *snakemake_args, cores=2):
    cmd = [sys.executable, "-m", "chairqm.cli", "run", str(DEMO), "--out", str(tmp_path / "out"),
           "--cores", str(cores), "--", "--dry-run", *snakemake_args]
    proc = subprocess.run(cmd, capture_output=True, text=True, env=_env(), timeout=300)
    return proc, proc.stdout + proc.stderr


def job_counts(text) -> dict[str, int]:
    block = text.split("Job stats:", 1)[1].split("total", 1)[0]
    return {r: int(n) for r, n in re.findall(r"^(\w+)\s+(\d+)\s*$", block, re.M)}


def jobs_of(text, rule) -> list[str]:
    """The printed blocks of one rule's jobs (`rule NAME:` up to the next blank line)."""
    return re.findall(rf"^\s*rule {rule}:\n(.*?)(?:\n\s*\n|\Z)", text, re.M | re.S)


def expected_counts():
    """One job per molecule of the demo plan (user molecules and automatic reference rings) and stage."""
    n = len(make_plan(cq_config.load(DEMO)).molecules)
    # the demo has no settings.refine, so no refine jobs
    return {**{r: n for r in STAGE_RULES if r not in ("report", "refine")}, "report": 1, "all": 1}


@pytest.mark.parametrize("name", ["laptop", "slurm"])
def test_profile_parses_and_uses_only_snakemake_options(name, snakemake_options):
    prof = profile(name)
    assert isinstance(prof, dict) and prof
    unknown = sorted(k for k in prof if k not in snakemake_options)
    assert not unknown, f"{name}: not Snakemake options: {unknown}"
    for key in ("set-resources", "set-threads"):
        for rule in prof.get(key, {}):
            assert rule in STAGE_RULES, f"{name}: {key} names unknown rule {rule!r}"
    for rule in prof.get("groups", {}):
        assert rule in STAGE_RULES, f"{name}: groups names unknown rule {rule!r}"
    assert set(prof.get("group-components", {})) <= set(prof.get("groups", {}).values())


def test_slurm_profile_asks_for_what_the_stages_use():
    prof = profile("slurm")
    assert prof["executor"] == "slurm"
    for rule in ("minima", "thermo"):
        res = prof["set-resources"][rule]
        assert {"runtime", "mem_mb"} <= set(res)
        # the stage runs one worker process per thread: the executor asks SLURM for --cpus-per-task =
        # threads; a fixed cpus_per_task would disagree once Snakemake scales threads down to --cores
        # (on a 2-CPU node the job then stayed pending for ever, tests/test_slurm.py)
        assert "cpus_per_task" not in res and rule in prof["set-threads"]
    assert "cpus_per_task" not in prof["default-resources"]
    assert {"runtime", "mem_mb"} <= set(prof["default-resources"])
    assert {"intake", "seeds", "ensemble"} <= set(prof["groups"])


@pytest.mark.slow
def test_laptop_profile_dry_run_plans_the_demo(tmp_path):
    proc, text = dry_run(tmp_path, "--profile", str(PROFILES / "laptop"))
    assert proc.returncode == 0, text[-3000:]
    assert job_counts(text) == expected_counts()
    minima = jobs_of(text, "minima")
    assert len(minima) == expected_counts()["minima"] and all("mem_mb=1500" in j for j in minima), "the profile's resources were not applied"
    assert not (tmp_path / "out" / "summary.csv").exists()


@pytest.mark.slow
def test_slurm_profile_dry_run_plans_the_demo_with_groups_and_resources(tmp_path):
    prof = profile("slurm")
    proc, text = dry_run(tmp_path, "--profile", str(PROFILES / "slurm"), "--executor", "local", cores=64)
    assert proc.returncode == 0, text[-3000:]
    assert job_counts(text) == expected_counts()
    for rule in ("minima", "thermo"):
        jobs = jobs_of(text, rule)
        want = prof["set-resources"][rule]
        assert len(jobs) == expected_counts()[rule]
        for j in jobs:
            assert f"threads: {prof['set-threads'][rule]}" in j
            for k, v in want.items():
                assert f"{k}={v}" in j, f"{rule}: {k}={v} not in {j}"
    for group in prof["groups"].values():
        assert f"Group job {group}" in text, f"group {group} not formed"
    assert not (tmp_path / "out" / "summary.csv").exists()


@pytest.mark.slow
@pytest.mark.skipif(importlib.util.find_spec("snakemake_executor_plugin_slurm") is None,
                    reason="optional extra not installed: pip install -e .[slurm]")
def test_slurm_profile_dry_run_with_the_plugin(tmp_path):
    proc, text = dry_run(tmp_path, "--profile", str(PROFILES / "slurm"), cores=64)
    assert proc.returncode == 0, text[-3000:]
    assert job_counts(text) == expected_counts()
