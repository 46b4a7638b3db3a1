"""A full disk: a run into a small filesystem stops with a message that names the folder and the space
needed, leaves no half-written or failed record that a rerun would trust, and resumes to the
uninterrupted result once space is freed. The whole-run test mounts a size-limited tmpfs (root only, where
the machine allows mounting); the parts are tested without one."""

from __future__ import annotations

import errno
import json
import os
import subprocess
from pathlib import Path

import pytest

from chairqm import fileio

# ------------------------------------------------------------------------------------- the parts


def test_a_write_into_a_full_disk_raises_disk_full_and_leaves_no_temporary(tmp_path, monkeypatch):
    real = os.replace

    def full(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device", str(dst))
    monkeypatch.setattr(os, "replace", full)
    with pytest.raises(fileio.DiskFull) as e:
        fileio.write_json(tmp_path / "rec.json", {"a": 1})
    assert "rec.json" in str(e.value)
    monkeypatch.setattr(os, "replace", real)
    assert list(tmp_path.iterdir()) == []
    # not an Exception: the catch-alls that make an engine error one conformer's failure let it through
    assert not issubclass(fileio.DiskFull, Exception)


def test_a_full_disk_inside_an_isolated_stage_is_not_recorded_as_the_molecules_failure(tmp_path, monkeypatch):
    """The stage job stops (exit 28) instead of writing failed.json and empty outputs, which a finished
    job would keep."""
    import yaml

    from chairqm.stages import __main__ as runner
    from chairqm.stages import seeds
    cfg = tmp_path / "c.yaml"
    cfg.write_text(yaml.safe_dump({"molecules": [{"name": "mch", "smiles": "CC1CCCCC1"}]}))
    monkeypatch.chdir(tmp_path)
    assert runner.main(["intake", "--config", str(cfg), "--molecule", "mch"]) == 0

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device", "mch/seeds.csv")
    monkeypatch.setattr(seeds, "run", no_space)
    assert runner.main(["seeds", "--config", str(cfg), "--molecule", "mch"]) == runner.DISK_FULL_EXIT
    assert not (tmp_path / "mch" / "failed.json").exists()
    assert not (tmp_path / "mch" / "seeds.csv").exists()


def test_disk_estimate_covers_a_measured_run():
    """Methylcyclohexane without twist-boats took 1.9 MB on disk (docs/reliability.md); the estimate
    must not promise less."""
    from chairqm import api, config, plan
    cfg = config.validate({"molecules": [{"name": "mch", "smiles": "CC1CCCCC1"}]})
    assert api.disk_estimate(plan.make_plan(cfg)) >= 1.9e6


# ------------------------------------------------------------------------------ a whole run, slow

@pytest.fixture
def small_disk(tmp_path):
    """A 1.2 MB tmpfs (methylcyclohexane needs about 1.9 MB); yields (folder, grow) where grow() frees
    space by remounting it at 50 MB."""
    mnt = tmp_path / "small"
    mnt.mkdir()
    if os.geteuid() != 0:
        pytest.skip("mounting a size-limited tmpfs needs root")
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1200k", "tmpfs", str(mnt)], capture_output=True,
                          text=True)
    if done.returncode != 0:
        pytest.skip(f"this machine does not allow mounting a tmpfs: {done.stderr.strip()}")

    def grow():
        subprocess.run(["mount", "-o", "remount,size=50m", str(mnt)], check=True)
    try:
        yield mnt, grow
    finally:
        subprocess.run(["umount", "-l", str(mnt)], check=False)


@pytest.mark.slow
def test_full_disk_stops_with_the_space_needed_and_resumes_when_freed(small_disk, tmp_path):
    from test_reliability import (MCH, NO_TWIST_BOATS, _check_readable, _temporaries, assert_same_results,
                                  chairqm_run, observe, tail, write_config)
    mnt, grow = small_disk
    cfg = write_config(tmp_path / "mch.yaml", [MCH], NO_TWIST_BOATS)
    reference = tmp_path / "reference"
    ref = chairqm_run(cfg, reference)
    assert ref.returncode == 0, tail(ref.stderr)
    out = mnt / "out"
    first = chairqm_run(cfg, out)
    assert first.returncode != 0
    assert "Traceback" not in first.stderr, tail(first.stderr)
    msg = [l for l in first.stderr.splitlines() if "no space left" in l]
    assert msg, tail(first.stderr)
    assert str(out) in msg[0] and "needs about" in msg[0] and "MB" in msg[0] and "rerun the same command" in msg[0]
    assert not _temporaries(out), _temporaries(out)
    n_files = _check_readable(out)                   # every record present parses completely
    assert not list(out.rglob("failed.json")), "the full disk was recorded as a molecule's failure"
    assert not (out / "summary.csv").exists()
    grow()
    second = chairqm_run(cfg, out)
    assert second.returncode == 0, tail(second.stderr)
    assert not _temporaries(out)
    n = assert_same_results(reference, out, ["mch"], resumed=True)
    observe("disk_full", {"message": msg[0], "files_checked_after_stop": n_files, "files_compared": n})
