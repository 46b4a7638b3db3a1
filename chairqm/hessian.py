"""The Cartesian Hessian of a conformer by central finite differences of analytic gradients, 6N gradient
calls, with a per-conformer cache folder that survives an interrupted run and refuses to mix geometries;
the displacements can be split over worker processes. Units: positions Å, Hessian eV/Å²."""

from __future__ import annotations

import hashlib
import json
import logging
import math
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from ase import Atoms

from chairqm import fileio
from chairqm.errors import ChairqmError

log = logging.getLogger(__name__)

#: Finite-difference step in Å.  Central differences have a truncation error ∝ step² (the anharmonic
#: third-derivative term) and a noise error ∝ (gradient noise)/step.  Measured with GFN2-xTB (tblite,
#: default accuracy 1.0) on chair cyclohexane and equatorial methylcyclohexane: steps of 0.0025, 0.005 and
#: 0.01 Å give the same frequencies to ≤ 0.6 cm⁻¹ (lowest modes 232 and 149 cm⁻¹) and ≤ 1.5 cm⁻¹ near
#: 3000 cm⁻¹, while the Hessian's asymmetry before symmetrisation (a noise measure) grows as the step
#: shrinks: 2.2e-2, 6.7e-3, 5.6e-3 eV/Å² for cyclohexane.  0.005 Å is in that flat region, clear of the
#: noise; it is ≈ 0.01 bohr, a common choice for numerical Hessians (common practice).
DEFAULT_STEP = 0.005

#: Positions are rounded to this many decimals (Å) before hashing the cache key; 1e-5 Å is far below any
#: chemically meaningful change but above float noise from a write/read round trip of a geometry.
KEY_DECIMALS = 5

_CACHE_FORMAT = 1
_KEY_FILE = "key.json"
_RUN_FILE = "run.json"



# ------------------------------------------------------------------------------------------- the cache
def calculator_tag(calc) -> str:
    """A stable text describing a calculator's settings (class and parameters, without 'verbosity').

    Part of the Hessian cache key, so forces from another method, solvent or charge are never reused.
    """
    cls = type(calc)
    inner = getattr(calc, "inner", None)  # chairqm.engine.CountingCalculator wraps the engine's calculator
    if inner is not None:
        calc, cls = inner, type(inner)
    params = dict(getattr(calc, "parameters", {}) or {})
    params.pop("verbosity", None)
    return f"{cls.__module__}.{cls.__qualname__}:" + json.dumps(params, sort_keys=True, default=repr)


def geometry_key(atoms: Atoms, step: float, calc_tag: str = "") -> str:
    """SHA-256 of (atomic numbers, positions rounded to KEY_DECIMALS Å, initial charges and magnetic
    moments, step, calculator tag): the identity of a Hessian's displacement set."""
    pos = np.round(np.asarray(atoms.positions, dtype=float), KEY_DECIMALS) + 0.0  # +0.0 turns -0.0 into 0.0
    payload = {
        "format": _CACHE_FORMAT,
        "numbers": [int(z) for z in atoms.numbers],
        "positions": [f"{x:.{KEY_DECIMALS}f}" for x in pos.ravel()],
        "charge": round(float(np.sum(atoms.get_initial_charges())), 6),
        "magmom": round(float(np.sum(atoms.get_initial_magnetic_moments())), 6),
        "step": f"{float(step):.6g}",
        "calc": calc_tag,
    }
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


def _disp_name(atom: int, axis: int, sign: int) -> str:
    return f"disp-{atom:04d}-{'xyz'[axis]}{'+' if sign > 0 else '-'}.npz"


def _atomic_write_npz(path: Path, **arrays) -> None:
    """Atomic, without fsync: a damaged file after a power cut fails to load in :func:`_load_forces`,
    which treats it as missing, and the displacement is recomputed."""
    import io
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    fileio.write_bytes(path, buf.getvalue(), fsync=False)


def _atomic_write_json(path: Path, obj) -> None:
    fileio.write_json(path, obj, fsync=False)


def _clear_displacements(folder: Path) -> int:
    """Delete this module's displacement files (and stale temporaries) in `folder`; nothing else."""
    n = 0
    for p in folder.glob("disp-*.npz"):
        p.unlink()
        n += 1
    for p in folder.glob(".disp-*.part"):
        p.unlink()
    return n


def _prepare_cache(folder: Path, key: str, natoms: int, step: float, tag: str) -> int:
    """Make `folder` hold displacements for `key` only.  Returns the number of foreign files cleared."""
    folder.mkdir(parents=True, exist_ok=True)
    key_file = folder / _KEY_FILE
    cleared = 0
    old = None
    if key_file.exists():
        try:
            old = json.loads(key_file.read_text(encoding="utf-8")).get("key")
        except (OSError, ValueError):
            old = None
    if old != key:
        cleared = _clear_displacements(folder)
        if cleared:
            log.warning("Hessian cache %s held %d displacement(s) of another geometry or setting; cleared",
                        folder, cleared)
        _atomic_write_json(key_file, {"key": key, "natoms": natoms, "step": step, "calc": tag,
                                      "format": _CACHE_FORMAT})
    return cleared


def _load_forces(path: Path, key: str, natoms: int):
    """Forces from a displacement file, or None if it is missing, unreadable or of another key."""
    try:
        with np.load(path, allow_pickle=False) as data:
            if str(data["key"]) != key:
                return None
            f = np.array(data["forces"], dtype=float)
    except (OSError, ValueError, KeyError, EOFError):
        return None
    if f.shape != (natoms, 3) or not np.all(np.isfinite(f)):
        return None
    return f


# ------------------------------------------------------------------------------------------- the Hessian
@dataclass
class HessianRun:
    """A Hessian and how it was made."""

    hessian: np.ndarray          # (3N, 3N) eV/Å², symmetrised
    step: float                  # Å
    gradient_calls: int          # gradients computed in this call (0 if all came from the cache)
    reused: int                  # displacements read from the cache
    engine_seconds: float        # wall time inside the calculator in this call
    wall_seconds: float
    cache_dir: str
    key: str
    cleared: int = 0             # foreign displacement files removed from the cache folder
    asymmetry: float = 0.0       # max |H - Hᵀ| / 2 before symmetrisation, eV/Å² (a noise measure)

    def to_record(self) -> dict:
        return {"step_angstrom": self.step, "gradient_calls": self.gradient_calls, "reused": self.reused,
                "engine_seconds": round(self.engine_seconds, 4), "wall_seconds": round(self.wall_seconds, 4),
                "cache_dir": self.cache_dir, "key": self.key, "cleared": self.cleared,
                "asymmetry_ev_per_a2": self.asymmetry}


def _displaced_forces(work: Atoms, calc, base, step, key, folder: Path, i: int, a: int, sign: int):
    """Forces (N, 3) at `base` with atom i moved by sign·step along axis a, written to the cache at once;
    (forces, engine seconds)."""
    path = folder / _disp_name(i, a, sign)
    pos = base.copy()
    pos[i, a] += sign * step
    work.positions = pos
    work.calc = calc
    s = time.perf_counter()
    f = np.array(work.get_forces(), dtype=float)
    sec = time.perf_counter() - s
    if f.shape != (len(work), 3) or not np.all(np.isfinite(f)):
        raise RuntimeError(f"engine returned non-finite forces at displacement {path.name}")
    _atomic_write_npz(path, forces=f, key=np.array(key))
    return f, sec


def _forces_chunk(job):
    """Worker side of :func:`_parallel_forces`: a fresh calculator from the factory for every displacement
    (as in the serial path), so which process computes a displacement never changes its forces."""
    factory, numbers, charges, magmoms, base, step, key, folder, chunk = job
    work = Atoms(numbers, positions=np.array(base, dtype=float))
    work.set_initial_charges(charges)
    work.set_initial_magnetic_moments(magmoms)
    out, engine = [], 0.0
    for i, a, sign in chunk:
        f, sec = _displaced_forces(work, factory(), np.asarray(base), step, key, Path(folder), i, a, sign)
        out.append(((i, a, sign), f))
        engine += sec
    return out, engine


def _parallel_forces(executor, factory, work: Atoms, base, step, key, folder: Path, missing):
    """Displacement forces split over `executor`'s worker processes and this one: the displacements go out
    in small chunks; this process takes back any chunk no worker has started yet (so a worker still
    starting up never holds the others back). Returns ({(i, a, sign): forces}, engine seconds summed over
    processes)."""
    workers = max(1, int(getattr(executor, "_max_workers", 1)))
    size = max(1, min(8, math.ceil(len(missing) / (6 * (workers + 1)))))
    chunks = [missing[k:k + size] for k in range(0, len(missing), size)]
    args = [(factory, work.numbers.copy(), work.get_initial_charges(), work.get_initial_magnetic_moments(),
             base, step, key, str(folder), ch) for ch in chunks]
    futures = [executor.submit(_forces_chunk, x) for x in args]
    results = []
    for fut, x in zip(reversed(futures), reversed(args)):
        if fut.cancel():
            results.append(_forces_chunk(x))
    results.extend(f.result() for f in futures if not f.cancelled())
    forces, engine = {}, 0.0
    for out, sec in results:
        forces.update(out)
        engine += sec
    return forces, engine


def hessian_run(atoms: Atoms, calc, cache_dir, step: float = DEFAULT_STEP, calc_tag: str | None = None,
                executor=None) -> HessianRun:
    """Cartesian Hessian by central differences of analytic gradients, with a resumable cache.

    H[3i+a, :] = -(F(x + h e_ia) - F(x - h e_ia)) / (2h) for each atom i and axis a (6N gradient calls;
    the central-difference formula, e.g. Wilson, Decius, Cross, *Molecular Vibrations*, 1955, and any
    numerical-analysis text), then H ← (H + Hᵀ)/2.  h = `step` Å (see DEFAULT_STEP for its choice).

    The cache folder `cache_dir` belongs to one geometry: ``key.json`` holds the hash of the geometry
    (positions rounded to 1e-5 Å, atomic numbers, charge, spin), the step and the calculator's settings;
    each displacement's forces are written atomically (temporary file, then os.replace) to
    ``disp-IIII-{x,y,z}{+,-}.npz`` as soon as they are computed, each file also carrying the key.  A
    rerun reuses the finished displacements; a folder holding another key's files is cleared first (a
    warning is logged) and a file with a foreign key is never read, so forces of two geometries never mix.

    `calc` is an ASE calculator or a zero-argument factory returning a new one.  With a factory every
    displacement gets a new calculator, so its SCF starts from the engine's own guess whatever was
    computed before: a resumed Hessian is then bitwise identical to an uninterrupted one.  With a
    calculator instance, ``calc.reset()`` is called before each displacement, but engines that keep the
    last wavefunction as the next guess across a reset (tblite with its default cache_api=True) make each
    displacement depend on the previous one within the SCF convergence (measured: ≤ 0.015 eV/Å² in H,
    < 0.1 cm⁻¹ in ν for cyclohexane at tblite's default accuracy).  Creating a tblite calculator costs
    nothing measurable against its SCF (9.5 vs 9.3 ms per cyclohexane gradient), so prefer a factory.
    `calc_tag` overrides the calculator description in the key (default :func:`calculator_tag`).

    `executor` (a ``concurrent.futures.ProcessPoolExecutor``, used only with a picklable factory): the
    missing displacements are split between its workers and the calling process, so one conformer's
    Hessian uses every core a job has. Every displacement still gets a fresh calculator, so the Hessian
    is bitwise the serial one. engine_seconds then sums the time spent in the engine by all processes.
    """
    t0 = time.perf_counter()
    step = float(step)
    if not step > 0:
        raise ChairqmError(f"finite-difference step must be positive, got {step} Å")
    natoms = len(atoms)
    if natoms == 0:
        raise ChairqmError("cannot compute a Hessian for an empty structure")
    factory = calc if (callable(calc) and not hasattr(calc, "get_forces")) else None
    if factory is not None:
        calc = factory()
    tag = calculator_tag(calc) if calc_tag is None else str(calc_tag)
    key = geometry_key(atoms, step, tag)
    folder = Path(cache_dir)
    cleared = _prepare_cache(folder, key, natoms, step, tag)

    base = np.array(atoms.positions, dtype=float)
    work = Atoms(atoms.numbers, positions=base.copy())
    work.set_initial_charges(atoms.get_initial_charges())
    work.set_initial_magnetic_moments(atoms.get_initial_magnetic_moments())

    hess = np.zeros((3 * natoms, 3 * natoms))
    forces, calls, reused, engine = {}, 0, 0, 0.0
    missing = []
    for i in range(natoms):
        for a in range(3):
            for sign in (+1, -1):
                f = _load_forces(folder / _disp_name(i, a, sign), key, natoms)
                if f is None:
                    missing.append((i, a, sign))
                else:
                    forces[(i, a, sign)] = f
                    reused += 1
    if missing and executor is not None and factory is not None and len(missing) > 1:
        got, engine = _parallel_forces(executor, factory, work, base, step, key, folder, missing)
        forces.update(got)
        calls = len(missing)
    else:
        for i, a, sign in missing:
            if factory is not None and calls > 0:
                calc = factory()
            elif factory is None:
                calc.reset()
            f, sec = _displaced_forces(work, calc, base, step, key, folder, i, a, sign)
            forces[(i, a, sign)] = f
            engine += sec
            calls += 1
    for i in range(natoms):
        for a in range(3):
            hess[3 * i + a] = -(forces[(i, a, +1)] - forces[(i, a, -1)]).ravel() / (2.0 * step)
    asym = float(np.max(np.abs(hess - hess.T)) / 2.0)
    hess = 0.5 * (hess + hess.T)
    run = HessianRun(hessian=hess, step=step, gradient_calls=calls, reused=reused, engine_seconds=engine,
                     wall_seconds=time.perf_counter() - t0, cache_dir=str(folder), key=key, cleared=cleared,
                     asymmetry=asym)
    _atomic_write_json(folder / _RUN_FILE, run.to_record())
    return run


def hessian(atoms: Atoms, calc, cache_dir, step: float = DEFAULT_STEP, calc_tag: str | None = None) -> np.ndarray:
    """The symmetrised Cartesian Hessian (3N, 3N) in eV/Å²; see :func:`hessian_run` (which also returns
    gradient_calls and engine seconds; both are recorded in ``cache_dir/run.json``)."""
    return hessian_run(atoms, calc, cache_dir, step=step, calc_tag=calc_tag).hessian


# ------------------------------------------------------------------------------------------ frequencies
