"""Seeds stage: molecule.json -> seeds.csv and seeds/SEED.xyz (both chairs, the twist-boats and the
rotamers, each labelled by measurement)."""

from __future__ import annotations

from pathlib import Path

from .. import fileio
from . import tables
from .records import load_molecule


def run(cfg, plan, name, threads=1):
    from .. import seeds as cq_seeds
    p = load_molecule(name)
    folder = Path(name)
    (folder / "seeds").mkdir(parents=True, exist_ok=True)
    found = cq_seeds.build_seeds(p.mol, p.ring, p.substituents, cfg["settings"]["seeds"])
    table = cq_seeds.write_seeds(found, folder / "seeds", p.mol)
    fileio.write_csv(folder / "seeds.csv", table[tables.seeds(cfg["settings"])])


def write_empty(name, settings, message):
    folder = Path(name)
    (folder / "seeds").mkdir(parents=True, exist_ok=True)
    fileio.write_csv(folder / "seeds.csv", tables.frame([], tables.seeds(settings)))
