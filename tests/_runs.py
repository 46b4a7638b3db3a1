"""Whole `chairqm run`s for the end-to-end tests: a configuration mapping written beside the output folder,
the command run in a subprocess as a user runs it, and summary.csv read back.

(test_reliability.py and test_failures_local.py keep their own runner: they control the environment,
the exact command line and the configuration file's path.)
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd
import yaml


def config_path(out: Path) -> Path:
    """Where `run_config` writes the configuration of the run into `out`: OUT.yaml beside the folder."""
    return out.with_name(out.name + ".yaml")


def run_config(config: dict, out: Path, *, cores: int = 2, timeout: float | None = 3000,
               env: dict | None = None) -> subprocess.CompletedProcess:
    """Write `config` to `config_path(out)` and run `chairqm run CONFIG --out OUT --cores N` on it; the
    command's output is captured (`timeout` None waits for as long as it takes)."""
    cfg = config_path(out)
    cfg.write_text(yaml.safe_dump(config))
    return subprocess.run([sys.executable, "-m", "chairqm.cli", "run", str(cfg), "--out", str(out),
                           "--cores", str(cores)], capture_output=True, text=True, timeout=timeout, env=env)


def read_summary(out: Path, index: str | None = None) -> pd.DataFrame:
    """The run's summary.csv as text cells (empty cells stay ''), indexed by the column `index` if given."""
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    return summary.set_index(index) if index else summary


def run_summary(config: dict, out: Path, *, index: str | None = None, **run) -> pd.DataFrame:
    """`run_config`, then `read_summary`; a run that writes no summary.csv fails the test with the end of
    its stderr. The exit code is not checked: a run whose molecules fail still writes the summary."""
    proc = run_config(config, out, **run)
    assert (out / "summary.csv").is_file(), proc.stderr[-3000:]
    return read_summary(out, index)
