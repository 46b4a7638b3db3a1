"""The Hessian of a conformer by central finite differences of analytic gradients, with a per-conformer
cache folder that survives an interrupted run and refuses to mix geometries; the displacements can be
split over worker processes. Units: positions Å, Hessian eV/Å².

Two sets of displacement directions (`basis`):

- ``"internal"`` (the default): the 3N − 6 (3N − 5 if linear) directions that are not translations or
  rotations, 2(3N − 6) gradient calls.  The frequencies need only the mass-weighted Hessian projected onto
  the complement of the translations and rotations (chairqm.vibrations.frequencies), i.e. Bᵀ H B with B
  the Cartesian images of that complement's basis; each column H b is one central difference along b.
  The six external directions decide nothing and cost 12 gradient calls per Hessian.
- ``"cartesian"``: every atom along x, y and z, 6N gradient calls, the full Cartesian Hessian.
"""

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
_DIRECTIONS_FILE = "directions.npz"

#: Displacement directions of :func:`hessian_run`.
BASES = ("internal", "cartesian")
DEFAULT_BASIS = "internal"



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


def geometry_key(atoms: Atoms, step: float, calc_tag: str = "", basis: str = "cartesian") -> str:
    """SHA-256 of (atomic numbers, positions rounded to KEY_DECIMALS Å, initial charges and magnetic
    moments, step, calculator tag, and the displacement basis unless Cartesian): the identity of a
    Hessian's displacement set."""
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
    if basis != "cartesian":
        payload["basis"] = str(basis)
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


def _disp_name(atom: int, axis: int, sign: int) -> str:
    return f"disp-{atom:04d}-{'xyz'[axis]}{'+' if sign > 0 else '-'}.npz"


def _dir_name(k: int, sign: int) -> str:
    return f"disp-v{k:04d}{'+' if sign > 0 else '-'}.npz"


def external_basis(atoms: Atoms, tol: float = 1e-6) -> np.ndarray:
    """Orthonormal basis (3N, k) of mass-weighted translations and infinitesimal rotations about the
    centre of mass, k = 6 (nonlinear), 5 (linear) or 3 (one atom).

    Translations: √m_i e_α; rotations: √m_i (e_α × (r_i − R_com)), the Eckart frame vectors (Eckart,
    Phys. Rev. 1935, 47, 552; Miller, Handy, Adams, J. Chem. Phys. 1980, 72, 99).  Orthonormalised by SVD;
    vectors with singular value below `tol` relative to the largest (the missing rotation of a linear
    molecule) are dropped.
    """
    m = np.asarray(atoms.get_masses(), dtype=float)
    r = np.asarray(atoms.positions, dtype=float)
    r = r - (m[:, None] * r).sum(0) / m.sum()
    sq = np.sqrt(m)
    vecs = []
    for a in range(3):
        t = np.zeros_like(r)
        t[:, a] = 1.0
        vecs.append((sq[:, None] * t).ravel())
    for a in range(3):
        e = np.zeros(3)
        e[a] = 1.0
        vecs.append((sq[:, None] * np.cross(e, r)).ravel())
    d = np.array(vecs).T
    u, s, _ = np.linalg.svd(d, full_matrices=False)
    keep = s > tol * s.max()
    return u[:, keep]


def internal_basis(atoms: Atoms) -> np.ndarray:
    """Orthonormal basis (3N, 3N − k) of the mass-weighted space orthogonal to :func:`external_basis`."""
    from scipy.linalg import null_space
    return null_space(external_basis(atoms).T)


def _load_directions(folder: Path, key: str, n3: int):
    try:
        with np.load(folder / _DIRECTIONS_FILE, allow_pickle=False) as data:
            if str(data["key"]) != key:
                return None
            b = np.array(data["basis"], dtype=float)
    except (OSError, ValueError, KeyError, EOFError):
        return None
    if b.ndim != 2 or b.shape[0] != n3 or not np.all(np.isfinite(b)):
        return None
    return b


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
    (folder / _DIRECTIONS_FILE).unlink(missing_ok=True)
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
    basis: str = "cartesian"     # displacement directions: "internal" or "cartesian"

    def to_record(self) -> dict:
        return {"step_angstrom": self.step, "gradient_calls": self.gradient_calls, "reused": self.reused,
                "engine_seconds": round(self.engine_seconds, 4), "wall_seconds": round(self.wall_seconds, 4),
                "cache_dir": self.cache_dir, "key": self.key, "cleared": self.cleared,
                "asymmetry_ev_per_a2": self.asymmetry, "basis": self.basis}


def _displaced_forces(work: Atoms, calc, base, key, folder: Path, name: str, shift):
    """Forces (N, 3) at `base` + `shift` (N, 3), written to the cache as `name` at once;
    (forces, engine seconds)."""
    path = folder / name
    work.positions = base + shift
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
    factory, numbers, charges, magmoms, base, key, folder, chunk = job
    work = Atoms(numbers, positions=np.array(base, dtype=float))
    work.set_initial_charges(charges)
    work.set_initial_magnetic_moments(magmoms)
    out, engine = [], 0.0
    for name, shift in chunk:
        f, sec = _displaced_forces(work, factory(), np.asarray(base), key, Path(folder), name, shift)
        out.append((name, f))
        engine += sec
    return out, engine


def _parallel_forces(executor, factory, work: Atoms, base, key, folder: Path, missing):
    """Displacement forces split over `executor`'s worker processes and this one: the displacements go out
    in small chunks; this process takes back any chunk no worker has started yet (so a worker still
    starting up never holds the others back). Returns ({name: forces}, engine seconds summed over
    processes)."""
    workers = max(1, int(getattr(executor, "_max_workers", 1)))
    size = max(1, min(8, math.ceil(len(missing) / (6 * (workers + 1)))))
    chunks = [missing[k:k + size] for k in range(0, len(missing), size)]
    args = [(factory, work.numbers.copy(), work.get_initial_charges(), work.get_initial_magnetic_moments(),
             base, key, str(folder), ch) for ch in chunks]
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


def _displacements(atoms: Atoms, basis: str, step: float, folder: Path, key: str):
    """The displacement set: (list of ((file name +, file name −), +shift (N, 3)), the internal directions U
    or None for "cartesian").

    "cartesian": atom i along axis a, ±step.  "internal": along each column b̂_k of B = M^-½ U / ‖·‖ (U the
    mass-weighted basis of :func:`internal_basis`), ±step; U is kept in the cache folder with the key, so a
    resumed Hessian uses exactly the directions its finished displacements were made along."""
    natoms = len(atoms)
    if basis == "cartesian":
        out = []
        for i in range(natoms):
            for a in range(3):
                shift = np.zeros((natoms, 3))
                shift[i, a] = step
                out.append(((_disp_name(i, a, +1), _disp_name(i, a, -1)), shift))
        return out, None
    u = _load_directions(folder, key, 3 * natoms)
    if u is None:
        if any(folder.glob("disp-*.npz")):
            _clear_displacements(folder)       # displacements whose directions are not on record
        u = internal_basis(atoms)
        _atomic_write_npz(folder / _DIRECTIONS_FILE, basis=u, key=np.array(key))
    inv_sq = 1.0 / np.sqrt(np.repeat(np.asarray(atoms.get_masses(), dtype=float), 3))
    b = inv_sq[:, None] * u
    b_hat = b / np.linalg.norm(b, axis=0)[None, :]
    out = [((_dir_name(k, +1), _dir_name(k, -1)), step * b_hat[:, k].reshape(natoms, 3))
           for k in range(b_hat.shape[1])]
    return out, u


def assemble_hessian(atoms: Atoms, cols: np.ndarray, u: np.ndarray | None = None) -> tuple[np.ndarray, float]:
    """(symmetrised Hessian (3N, 3N) eV/Å², asymmetry eV/Å²) from finite-difference columns.

    `u` None: `cols` (3N, 3N) are the Cartesian rows H[3i+a]. Otherwise `cols` (n, 3N) are H b̂_k along the
    unit directions of the mass-weighted internal basis `u` (3N, n), as :func:`hessian_run` describes."""
    cols = np.asarray(cols, dtype=float)
    if u is None:
        asym = float(np.max(np.abs(cols - cols.T)) / 2.0)
        return 0.5 * (cols + cols.T), asym
    sq = np.sqrt(np.repeat(np.asarray(atoms.get_masses(), dtype=float), 3))
    n3 = len(sq)
    if u.shape[1] == 0:
        return np.zeros((n3, n3)), 0.0
    b = u / sq[:, None]
    norms = np.linalg.norm(b, axis=0)
    a_hat = (b / norms[None, :]).T @ cols.T                                   # B̂ᵀ H B̂, eV/Å²
    asym = float(np.max(np.abs(a_hat - a_hat.T)) / 2.0)
    f_int = norms[:, None] * (0.5 * (a_hat + a_hat.T)) * norms[None, :]        # Bᵀ H B = Uᵀ M^-½ H M^-½ U
    hess = sq[:, None] * (u @ f_int @ u.T) * sq[None, :]
    return 0.5 * (hess + hess.T), asym


def cached_displacements(atoms: Atoms, folder, key: str, step: float):
    """For a finished cache folder of :func:`hessian_run` (key `key`): (pairs, u), pairs a list of
    ((+forces, −forces), +shift (N, 3)) in the order :func:`assemble_hessian` expects, u the internal
    directions (None for a Cartesian set); None if a displacement or the directions are missing.
    For benchmarks that rebuild Hessians from a run's cache."""
    folder = Path(folder)
    natoms = len(atoms)
    basis = "internal" if (folder / _DIRECTIONS_FILE).exists() else "cartesian"
    if basis == "internal" and _load_directions(folder, key, 3 * natoms) is None:
        return None
    disps, u = _displacements(atoms, basis, step, folder, key)
    pairs = []
    for (p, m), shift in disps:
        fp, fm = _load_forces(folder / p, key, natoms), _load_forces(folder / m, key, natoms)
        if fp is None or fm is None:
            return None
        pairs.append(((fp, fm), shift))
    return pairs, u


def hessian_run(atoms: Atoms, calc, cache_dir, step: float = DEFAULT_STEP, calc_tag: str | None = None,
                executor=None, basis: str = DEFAULT_BASIS) -> HessianRun:
    """Hessian by central differences of analytic gradients, with a resumable cache.

    ``basis="cartesian"``: H[3i+a, :] = -(F(x + h e_ia) - F(x - h e_ia)) / (2h) for each atom i and axis
    a (6N gradient calls; the central-difference formula, e.g. Wilson, Decius, Cross, *Molecular
    Vibrations*, 1955, and any numerical-analysis text), then H ← (H + Hᵀ)/2.

    ``basis="internal"`` (default): the same central difference along each unit direction b̂_k = b_k/‖b_k‖,
    b_k = M^-½ u_k, u_k the orthonormal mass-weighted basis of the complement of translations and
    rotations (:func:`internal_basis`), 2(3N − 6) gradient calls, gives the columns H b̂_k; the projected
    mass-weighted Hessian is F_int = Uᵀ M^-½ H M^-½ U = Bᵀ H B, symmetrised, and the Hessian returned is
    M^½ U F_int Uᵀ M^½, the Cartesian Hessian with translations and rotations projected out (in the
    Eckart sense; Miller, Handy, Adams, J. Chem. Phys. 1980, 72, 99).  chairqm.vibrations.frequencies
    projects the same way, so it returns the frequencies of F_int: those of the full Cartesian Hessian up
    to the finite-difference error, which is of the same order (measured in docs/benchmarks.md, part f).
    `asymmetry` is then max |A − Aᵀ|/2 of A = B̂ᵀ H B̂ (eV/Å²).

    h = `step` Å (see DEFAULT_STEP for its choice).

    The cache folder `cache_dir` belongs to one geometry: ``key.json`` holds the hash of the geometry
    (positions rounded to 1e-5 Å, atomic numbers, charge, spin), the step, the basis and the calculator's
    settings; each displacement's forces are written atomically (temporary file, then os.replace) to
    ``disp-IIII-{x,y,z}{+,-}.npz`` (Cartesian) or ``disp-vKKKK{+,-}.npz`` (internal, with the directions
    in ``directions.npz``) as soon as they are computed, each file also carrying the key.  A rerun reuses
    the finished displacements; a folder holding another key's files is cleared first (a warning is
    logged) and a file with a foreign key is never read, so forces of two geometries never mix.

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
    if basis not in BASES:
        raise ChairqmError(f"Hessian basis must be one of {', '.join(BASES)}, got {basis!r}")
    natoms = len(atoms)
    if natoms == 0:
        raise ChairqmError("cannot compute a Hessian for an empty structure")
    factory = calc if (callable(calc) and not hasattr(calc, "get_forces")) else None
    if factory is not None:
        calc = factory()
    tag = calculator_tag(calc) if calc_tag is None else str(calc_tag)
    key = geometry_key(atoms, step, tag, basis=basis)
    folder = Path(cache_dir)
    cleared = _prepare_cache(folder, key, natoms, step, tag)

    base = np.array(atoms.positions, dtype=float)
    work = Atoms(atoms.numbers, positions=base.copy())
    work.set_initial_charges(atoms.get_initial_charges())
    work.set_initial_magnetic_moments(atoms.get_initial_magnetic_moments())

    disps, u = _displacements(atoms, basis, step, folder, key)
    forces, calls, reused, engine = {}, 0, 0, 0.0
    missing = []
    for names, shift in disps:
        for name, sh in zip(names, (shift, -shift)):
            f = _load_forces(folder / name, key, natoms)
            if f is None:
                missing.append((name, sh))
            else:
                forces[name] = f
                reused += 1
    if missing and executor is not None and factory is not None and len(missing) > 1:
        got, engine = _parallel_forces(executor, factory, work, base, key, folder, missing)
        forces.update(got)
        calls = len(missing)
    else:
        for name, sh in missing:
            if factory is not None and calls > 0:
                calc = factory()
            elif factory is None:
                calc.reset()
            f, sec = _displaced_forces(work, calc, base, key, folder, name, sh)
            forces[name] = f
            engine += sec
            calls += 1
    cols = np.array([-(forces[p] - forces[m]).ravel() / (2.0 * step) for (p, m), _ in disps])  # (n, 3N)
    hess, asym = assemble_hessian(atoms, cols, u)
    run = HessianRun(hessian=hess, step=step, gradient_calls=calls, reused=reused, engine_seconds=engine,
                     wall_seconds=time.perf_counter() - t0, cache_dir=str(folder), key=key, cleared=cleared,
                     asymmetry=asym, basis=basis)
    _atomic_write_json(folder / _RUN_FILE, run.to_record())
    return run


def hessian(atoms: Atoms, calc, cache_dir, step: float = DEFAULT_STEP, calc_tag: str | None = None,
            basis: str = DEFAULT_BASIS) -> np.ndarray:
    """The symmetrised Cartesian Hessian (3N, 3N) in eV/Å²; see :func:`hessian_run` (which also returns
    gradient_calls and engine seconds; both are recorded in ``cache_dir/run.json``)."""
    return hessian_run(atoms, calc, cache_dir, step=step, calc_tag=calc_tag, basis=basis).hessian


# ------------------------------------------------------------------------------------------ frequencies
