"""Warm starts of stage jobs (chairqm.stages.warm): a job handed to the starter behaves as the same job
started cold in its own interpreter — same files, same log, same exit status, same death by a signal."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest
import yaml

from chairqm.stages import warm

PY = sys.executable


@pytest.fixture(scope="module")
def starter():
    folder = tempfile.mkdtemp(prefix="cq-warm-test-")
    path = os.path.join(folder, "s")
    proc = subprocess.Popen([PY, "-m", "chairqm.stages.warm", path], stdin=subprocess.DEVNULL)
    t0 = time.time()
    while not os.path.exists(path) and time.time() - t0 < 30:
        time.sleep(0.02)
    assert os.path.exists(path), "the starter did not bind its socket"
    yield path
    proc.terminate()
    proc.wait(timeout=10)


def _config(folder: Path) -> Path:
    cfg = folder / "c.yaml"
    cfg.write_text(yaml.safe_dump({"project": "warm start test",
                                   "molecules": [{"name": "fcy", "smiles": "FC1CCCCC1"}],
                                   "settings": {"seeds": {"twist_boats": False}}}))
    return cfg


def _job(folder: Path, args, socket_path=None, faults=None, config=None):
    env = {k: v for k, v in os.environ.items() if k not in (warm.SOCKET_ENV, "CHAIRQM_FAULTS")}
    env.update(CHAIRQM_CONFIG=str(config or _config(folder)), OMP_NUM_THREADS="1")
    if socket_path:
        env[warm.SOCKET_ENV] = socket_path
    if faults:
        env["CHAIRQM_FAULTS"] = faults
    log = folder / "job.log"
    with open(log, "w") as fh:
        return subprocess.Popen([PY, "-m", "chairqm.stages", *args], cwd=folder, env=env, stderr=fh), log


def test_a_warm_job_writes_what_a_cold_one_writes(starter, tmp_path):
    cold, warm_ = tmp_path / "cold", tmp_path / "warm"
    for folder, sock in ((cold, None), (warm_, starter)):
        folder.mkdir()
        for stage in ("intake", "seeds"):
            p, log = _job(folder, [stage, "--molecule=fcy"], sock)
            assert p.wait(timeout=300) == 0, log.read_text()
    for name in ("fcy/molecule.json", "fcy/substituents.csv", "fcy/seeds.csv"):
        assert (cold / name).read_bytes() == (warm_ / name).read_bytes(), name


def test_an_input_error_reaches_the_jobs_log_and_exit_status(starter, tmp_path):
    missing = tmp_path / "no-such-config.yaml"
    for sock in (None, starter):          # the same status and message, cold and warm
        p, log = _job(tmp_path, ["seeds", "--molecule=fcy"], sock, config=missing)
        assert p.wait(timeout=120) == 2
        text = log.read_text()
        assert text.startswith("chairqm:") and "no-such-config.yaml" in text and "Traceback" not in text


def test_sigterm_to_the_job_ends_the_forked_child_and_the_job_dies_of_it(starter, tmp_path):
    # the intake job is held 3 s by the "pause" fault; the signal arrives meanwhile
    p, log = _job(tmp_path, ["intake", "--molecule=fcy"], starter, faults='{"pause": ["fcy/intake"]}')
    time.sleep(1.5)
    p.send_signal(signal.SIGTERM)
    assert p.wait(timeout=30) == -signal.SIGTERM
    time.sleep(0.3)
    assert not (tmp_path / "fcy" / "molecule.json").exists(), "the forked job went on after the signal"


def test_without_a_starter_the_job_runs_cold(tmp_path):
    p, log = _job(tmp_path, ["intake", "--molecule=fcy"], str(tmp_path / "no-such-socket"))
    assert p.wait(timeout=120) == 0, log.read_text()
    assert (tmp_path / "fcy" / "molecule.json").is_file()
