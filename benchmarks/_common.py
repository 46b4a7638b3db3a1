"""Shared helpers of the benchmark scripts: machine description, table printing, molecules, engine set-up."""

from __future__ import annotations

import json
import os
import platform
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")      # before tblite/xtb are imported
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

ROOT = Path(__file__).resolve().parent.parent
CHAIRQM = str(Path(sys.executable).parent / "chairqm")


def machine() -> dict:
    """Date, cores and CPU model (from /proc/cpuinfo) of this machine."""
    model = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    try:
        load = os.getloadavg()
    except OSError:
        load = (float("nan"),) * 3
    return {"date": time.strftime("%Y-%m-%d %H:%M:%S %z"), "cores": os.cpu_count(), "cpu": model or platform.processor(),
            "python": platform.python_version(), "load_average_1_5_15": [round(x, 2) for x in load]}


def print_machine(info: dict | None = None) -> None:
    m = info or machine()
    print(f"# {m['date']}; {m['cores']} cores; {m['cpu']}; Python {m['python']}; "
          f"load average {m['load_average_1_5_15']}")


def table(rows: list[dict], columns: list[str] | None = None, floatfmt: str = ".3g") -> str:
    """A plain fixed-width text table of `rows` (dicts), columns in the given order."""
    if not rows:
        return "(no rows)"
    cols = columns or list(rows[0])

    def fmt(v):
        if isinstance(v, float):
            return format(v, floatfmt)
        return "" if v is None else str(v)

    cells = [[fmt(r.get(c)) for c in cols] for r in rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(cols)]
    out = ["  ".join(c.ljust(w) for c, w in zip(cols, widths)).rstrip(),
           "  ".join("-" * w for w in widths)]
    out += ["  ".join(v.ljust(w) for v, w in zip(row, widths)).rstrip() for row in cells]
    return "\n".join(out)


def save_json(path, obj) -> None:
    if path:
        Path(path).parent.mkdir(parents=True, exist_ok=True)
        Path(path).write_text(json.dumps(obj, indent=1, default=str) + "\n")


def perceive(name: str, smiles: str):
    """The perceived molecule (chairqm.molecule.Perceived) of one SMILES, as the intake stage makes it."""
    from chairqm.molecule import perceive as _perceive
    return _perceive({"name": name, "smiles": smiles})[0]


def default_settings() -> dict:
    """The configuration schema's default settings block (what a run with no settings uses)."""
    from chairqm import config as cq_config
    return cq_config.validate({"molecules": [{"name": "x", "smiles": "C1CCCCC1"}]})["settings"]


def calc_factory(p, settings: dict | None = None):
    """The engine factory the minima stage uses for molecule `p` (chairqm.stages.records.CalcFactory)."""
    from chairqm.stages.records import CalcFactory, engine_settings
    return CalcFactory(engine_settings(settings or default_settings(), p))


def optimise_and_check(p, positions, optimizer: str = "auto", settings: dict | None = None) -> dict:
    """Optimise one structure of molecule `p` as the minima stage does; verify bonds and stereo; measure the ring.

    Returns {status, energy_hartree, gradient_calls, engine_seconds, positions, ring_form, orientation}.
    """
    import numpy as np
    from ase import Atoms

    from chairqm import optimize as cq_opt
    from chairqm import ring as cq_ring

    s = settings or default_settings()
    mol = p.mol
    atoms = Atoms([a.GetSymbol() for a in mol.GetAtoms()], positions=np.asarray(positions, dtype=float))
    opt = s["optimize"]
    res = cq_opt.optimize(atoms, calc_factory(p, s), fmax=opt["fmax_ev_per_a"], max_steps=opt["max_steps"],
                          optimizer=optimizer, electronic_temperature=s["electronic_temperature_k"])
    out = {"status": res.status, "energy_hartree": res.energy_hartree, "gradient_calls": res.gradient_calls,
           "engine_seconds": res.engine_seconds, "steps": res.steps, "positions": res.atoms.positions.copy(),
           "ring_form": "", "orientation": "", "reason": res.reason}
    if res.status == "failed":
        return out
    ok_b, why_b, ok_s, why_s = cq_opt.check_structure(mol, res.atoms)
    if not ok_b:
        out["status"], out["reason"] = "failed", f"bonds changed: {why_b}"
    elif not ok_s:
        out["status"], out["reason"] = "failed", f"stereo changed: {why_s}"
    m = cq_ring.measure(res.atoms.positions, p.ring, p.substituents)
    out["ring_form"], out["orientation"] = m["ring_form"], m["orientation"]
    return out


def quantile(values, q: float) -> float:
    import numpy as np
    v = np.asarray(list(values), dtype=float)
    return float(np.quantile(v, q)) if v.size else float("nan")
