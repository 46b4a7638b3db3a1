"""Seeds stage: molecule.json -> seeds.csv and seeds/SEED.xyz (both chairs, the twist-boats and the
rotamers, each labelled by measurement)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import fileio
from . import tables
from .records import load_molecule


def run(cfg, plan, name, threads=1):
    from .. import seeds as cq_seeds
    p = load_molecule(name)
    folder = Path(name)
    (folder / "seeds").mkdir(parents=True, exist_ok=True)
    found = cq_seeds.build_seeds(p.mol, p.ring, p.substituents, cfg["settings"]["seeds"], p.other_rings)
    fileio.write_csv(folder / "seeds.csv", write_seeds(found, folder / "seeds", p.mol))


def seeds_table(seeds):
    """The seeds table (pandas DataFrame) with the columns of tables.seeds(), one row per seed including non-kept ones."""
    import pandas as pd

    def r(x, nd):
        return None if x is None else round(float(x), nd)

    rows = [{"seed": s.name, "ring_form": s.ring_form, "q": r(s.q, 4), "theta": r(s.theta, 2),
             "phi": None if s.phi is None else r(s.phi, 2) % 360.0, "orientation": s.orientation,
             "ff_energy_kcal": r(s.ff_energy_kcal, 4),
             "status": s.status, "template": s.template, "reason": s.reason, "other_rings": s.other_rings}
            for s in seeds]
    return pd.DataFrame(rows, columns=tables.seeds())


def xyz_text(seed, mol) -> str:
    """Extended-XYZ text of one seed (ASE reads the comment line's key=value pairs)."""
    syms = [a.GetSymbol() for a in mol.GetAtoms()]
    X = np.asarray(seed.positions, dtype=float)
    if X.shape != (len(syms), 3):
        raise ValueError(f"seed {seed.name}: positions do not match the molecule's {len(syms)} atoms")
    e = "nan" if seed.ff_energy_kcal is None else f"{seed.ff_energy_kcal:.6f}"
    comment = (f'Properties=species:S:1:pos:R:3 seed={seed.name} template={seed.template} '
               f'ring_form={seed.ring_form} q={seed.q:.4f} theta={seed.theta:.2f} phi={seed.phi:.2f} '
               f'orientation="{seed.orientation}" ff_energy_kcal={e} forcefield={seed.forcefield or "none"} '
               f'pbc="F F F"')
    lines = [str(len(syms)), comment]
    for s, (x, y, z) in zip(syms, X):
        # +0.0 turns -0.0 into 0.0 so the text never depends on the sign of a zero
        lines.append(f"{s:<2s} {x + 0.0:15.8f} {y + 0.0:15.8f} {z + 0.0:15.8f}")
    return "\n".join(lines) + "\n"


def write_seeds(seeds, folder, mol):
    """Write `<name>.xyz` (extended XYZ) for every kept seed into `folder`; return the seeds table."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for s in seeds:
        if s.status == "ok" and s.positions is not None:
            fileio.write_text(folder / f"{s.name}.xyz", xyz_text(s, mol))
    return seeds_table(seeds)


def write_empty(name, settings, message):
    folder = Path(name)
    (folder / "seeds").mkdir(parents=True, exist_ok=True)
    fileio.write_csv(folder / "seeds.csv", tables.frame([], tables.seeds(settings)))
