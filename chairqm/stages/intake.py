"""Intake stage: the configuration's entry of one molecule -> molecule.json (the perceived molecule) and
substituents.csv. An input problem here is the user's to fix, so it stops the run (not isolated)."""

from __future__ import annotations

from pathlib import Path

from .. import fileio
from ..molecule import substituents_table


def run(cfg, plan, name, threads=1):
    p = plan.get(name)
    folder = Path(name)
    fileio.write_text(folder / "molecule.json", p.to_json() + "\n")
    fileio.write_csv(folder / "substituents.csv", substituents_table(p))


def write_empty(name, settings, message):
    raise RuntimeError("the intake stage is not isolated: its errors stop the run")
