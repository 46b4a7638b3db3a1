"""Per-conformer records: reuse by key, worker pools, engine factories and XYZ files for the stages.

A record is a JSON file a worker writes last (after its geometry), so its presence marks a finished
conformer. It carries the key of everything it was made from; a rerun reuses a record whose key matches
and whose status says it finished, and recomputes the rest.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

from .. import fileio
from .. import provenance
from ..molecule import Perceived


def key_of(*parts) -> str:
    """A short, stable hash of JSON-able parts: the cache key of a per-conformer record."""
    text = json.dumps(parts, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:20]


def record_key(stage: str, settings: dict, p: Perceived, *inputs) -> str:
    """The key of one per-conformer record of `stage`: its inputs (e.g. the geometry's text), the settings
    provenance.RESULT_SETTINGS lists for the stage's records, the molecule's charge and spin, the version."""
    from .. import __version__
    return key_of(*inputs, provenance.record_settings(stage, settings), p.charge, p.multiplicity, __version__)


def reusable(path: Path, key: str, needs=()) -> dict | None:
    """The record at `path` if it was made with `key`, did not fail (a failed record is always retried)
    and the files in `needs` exist; otherwise None (the conformer is computed again)."""
    path = Path(path)
    if not path.is_file():
        return None
    try:
        old = fileio.read_json(path)
    except (OSError, ValueError):
        return None                    # damaged record: recompute
    if old.get("key") != key or old.get("status") == "failed":
        return None
    if not all(Path(f).is_file() for f in needs):
        return None
    return old


def load_molecule(name: str) -> Perceived:
    """The intake stage's record of molecule `name` (its molecule.json in the run folder)."""
    return Perceived.from_json(Path(name, "molecule.json").read_text())


def engine_settings(settings: dict, p: Perceived) -> dict:
    """The engine's settings for molecule `p`, in the shape chairqm.engine.make_calculator takes."""
    s = settings
    return {"engine": s["engine"], "method": s["method"], "solvent": s.get("solvent"),
            "accuracy": s["accuracy"], "electronic_temperature": s["electronic_temperature_k"],
            "charge": p.charge, "multiplicity": p.multiplicity}


class CalcFactory:
    """Picklable calculator factory: factory(electronic_temperature=None) -> a fresh engine calculator."""

    def __init__(self, es: dict):
        self.es = dict(es)

    def __call__(self, electronic_temperature=None):
        from .. import engine
        es = self.es
        t = es["electronic_temperature"] if electronic_temperature is None else electronic_temperature
        return engine.make_calculator(es["engine"], es["method"], es["charge"], es["multiplicity"],
                                      es["solvent"], es["accuracy"], t)


def worker_context():
    """How worker processes start: forked from a warm-started stage job (chairqm.stages.warm; it is one
    thread with the libraries loaded and the engines single-threaded, so a fork is safe and saves each
    worker an interpreter and its imports), spawned otherwise (a cold job's libraries are not worth
    inheriting, and spawning inherits no engine state)."""
    import multiprocessing as mp

    from . import warm
    return mp.get_context("fork" if warm.IN_CHILD else "spawn")


def pool_map(fn, items, threads):
    """Run fn over items, in `threads` worker processes when more than one (`worker_context`); results in
    input order."""
    items = list(items)
    if threads <= 1 or len(items) <= 1:
        return [fn(x) for x in items]
    from concurrent.futures import ProcessPoolExecutor
    with ProcessPoolExecutor(max_workers=min(threads, len(items)), mp_context=worker_context()) as ex:
        return list(ex.map(fn, items))


def budgeted_map(fn, items, threads, budget, cost, spent=0):
    """Like :func:`pool_map` while the running total of cost(result) (plus `spent`) stays below `budget`
    (0 or None: no limit): no item is started once the budget is spent. Returns results in input order,
    None for the items never started. Which items run when the budget is hit can depend on `threads`."""
    items = list(items)
    if not budget:
        return pool_map(fn, items, threads)
    out = [None] * len(items)
    if threads <= 1 or len(items) <= 1:
        for i, x in enumerate(items):
            if spent >= budget:
                break
            out[i] = fn(x)
            spent += cost(out[i])
        return out
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    with ProcessPoolExecutor(max_workers=min(threads, len(items)), mp_context=worker_context()) as ex:
        nxt, running = 0, {}
        while nxt < len(items) or running:
            while nxt < len(items) and len(running) < threads and spent < budget:
                running[ex.submit(fn, items[nxt])] = nxt
                nxt += 1
            if not running:
                break
            done, _ = wait(running, return_when=FIRST_COMPLETED)
            for f in done:
                i = running.pop(f)
                out[i] = f.result()
                spent += cost(out[i])
    return out


def read_xyz(path):
    from ase.io import read
    return read(str(path), format="extxyz")


def write_xyz(path, atoms, comment_info=None):
    import io

    from ase.io import write
    a = atoms.copy()
    a.calc = None
    a.info = dict(comment_info or {})
    buf = io.StringIO()
    write(buf, a, format="extxyz")
    fileio.write_text(path, buf.getvalue())


def write_vibrations(path, atoms, hessian) -> None:
    """Store a conformer's Hessian (eV/Å², 3N×3N) with its geometry as an ASE VibrationsData JSON file,
    atomically: `ase.vibrations.VibrationsData.read(path)` opens it (modes, frequencies, thermochemistry)."""
    import io

    import numpy as np
    from ase import Atoms
    from ase.io.jsonio import write_json
    from ase.vibrations import VibrationsData
    a = Atoms(atoms.numbers, positions=np.array(atoms.positions, dtype=float))
    data = VibrationsData.from_2d(a, np.asarray(hessian, dtype=float))
    buf = io.StringIO()
    write_json(buf, data)
    fileio.write_text(path, buf.getvalue())


def read_vibrations(path):
    """(atoms, Hessian 3N×3N in eV/Å²) of a VibrationsData file written by :func:`write_vibrations`.

    Decoded with ase.io.jsonio's own object hook but without building the VibrationsData object: importing
    ase.vibrations pulls in matplotlib (through ase.spectrum), about a second per stage process here, for
    nothing the later stages use. A file with a partial atom selection goes through VibrationsData."""
    import json

    import numpy as np
    from ase.io.jsonio import object_hook

    def hook(d):
        if d.get("__ase_objtype__") == "vibrationsdata":
            return {k: v for k, v in d.items() if k != "__ase_objtype__"}
        return object_hook(d)

    d = json.loads(Path(path).read_text(encoding="utf-8"), object_hook=hook)
    atoms, indices = d["atoms"], d.get("indices")
    if indices is not None and len(indices) != len(atoms):
        from ase.vibrations import VibrationsData
        data = VibrationsData.read(str(path))
        return data.get_atoms(), data.get_hessian_2d()
    n3 = 3 * len(atoms)
    return atoms, np.asarray(d["hessian"], dtype=float).reshape(n3, n3)
