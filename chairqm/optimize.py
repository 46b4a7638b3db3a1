"""Geometry optimisation of one conformer to a minimum, with an SCF fallback and after-the-fact checks.

Criterion: the largest atomic force norm ``fmax`` (eV/Å, ASE's definition) at or below 0.005 eV/Å by
default (= 9.7e-5 Eh/bohr), re-evaluated by the engine on the final geometry whatever optimiser ran.
Step bound: ``maxstep`` Å, the largest displacement of any atom in one step (ASE's ``maxstep``; for
geomeTRIC its maximum trust radius applied to the largest atomic displacement, ``usedmax``).

Choice of the default optimiser, by measurement (benchmarks/optimizers.py, docs/benchmarks.md part c;
this machine, 2 cores shared, load average 11; tblite GFN2-xTB, gas phase, fmax 0.005 eV/Å, maxstep
0.2 Å) from the 60 kept seeds (MMFF94 geometries) of methyl-, isopropyl-, methoxy- and
tert-butylcyclohexane, cis-1,3-dimethylcyclohexane and 2-methoxytetrahydropyran, in one run:

    optimizer         gradient calls: median, 90th percentile, max, total   engine s   wall s
    bfgs-model (default)          11,  53,  73,  1053                        23.2       58.0
    precon-lbfgs                  47,  68, 124,  2969                        58.3       93.4
    geometric                     76, 108, 195,  4856                        99.0      122.0

All converged. ``bfgs-model`` is ASE's BFGS started from a model Hessian (chairqm.model_hessian:
stretches, bends and torsions with the distance-decaying force constants of Lindh et al., Chem. Phys.
Lett. 1995, 241, 423) instead of a multiple of the unit matrix: the soft torsions and bends are right in
the first step, which is what internal-coordinate optimisers gain, with none of their per-step coordinate
work. It needs a third of the gradients of PreconLBFGS [ASE's Exp preconditioner, Packwood et al.,
J. Chem. Phys. 2016, 144, 164109] and 0.62 of its wall time; it is the default (``'auto'``) since
2026-12-05 (DEFAULT_OPTIMIZER says what was mended first). On 56 of
the 60 seeds all three reached the same minimum (|ΔE| ≤ 0.01 kcal/mol); on four eclipsed-methoxy seeds of
2-methoxytetrahydropyran the other two stopped 3.1–5.9 kcal/mol higher (at saddle points, which the
thermo stage would have had to follow downhill) and bfgs-model went on to the lower minimum.
geomeTRIC's translation-rotation internal coordinates [Wang, Song, J. Chem. Phys. 2016, 144, 214108]
needed more gradients than either here and costs ≈ 0.08 s of Python per step; pick it by name if a
gradient is very expensive. Earlier measurements (nine conformers): PreconLBFGS needed a third fewer
gradients than L-BFGS/BFGS, which take identical paths (L-BFGS with full memory reproduces BFGS).
If an optimiser itself raises (not the engine), the run is repeated once with L-BFGS and that is
recorded in ``fallback``. If any optimiser but PreconLBFGS reaches max_steps short of fmax, PreconLBFGS
continues from the geometry reached for up to max_steps more (``fallback`` says so): a model-Hessian
BFGS that stalls (seen once, on SF5-cyclohexane) still ends at a minimum.  No constraints are added.

SCF fallback: if the engine fails (SCF not converged, or any error from the calculator) at the
requested electronic temperature, the conformer is pre-optimised from its start geometry at each
temperature in ``fallback_temperatures`` in turn (Fermi smearing stabilises the SCF) to a looser
``max(10 fmax, 0.05 eV/Å)``, and then re-converged at the requested temperature from there.  The first
that succeeds is kept and named in ``OptResult.fallback``; if none does, status is ``'failed'`` with the
engine's messages in ``reason``.  The energy always refers to the requested temperature.

Checks after optimisation: :func:`bond_graph` / :func:`check_bonds` (covalent-radius connectivity) and
:func:`check_stereo` (tetrahedral centres and double bonds from 3D against the input).
"""

from __future__ import annotations

import contextlib
import logging
import math
import tempfile
from dataclasses import dataclass, field

import numpy as np
from ase import Atoms
from ase.data import covalent_radii

from chairqm import chem
from chairqm.engine import CountingCalculator
from chairqm.errors import ChairqmError
from chairqm.units import BOHR_A, HARTREE_EV

OPTIMIZERS = ("bfgs-model", "geometric", "bfgs-linesearch", "precon-lbfgs", "lbfgs", "bfgs")
# The default is bfgs-model since 2026-12-05: a third of PreconLBFGS's gradients (table above), and on the
# 27-group reference set (gas phase, with the growing Hessian window) 23 071 gradient calls against 34 218.
# Two things had to be mended first, both found by the full test suite on an earlier try:
# - SF5-cyclohexane: the model Hessian's bends through 0° or 180° (an octahedral centre's trans ligands)
#   made ASE raise; they are left out, and an optimiser left short at max_steps is continued by
#   SECOND_OPTIMIZER.
# - cis-1-tert-butyl-4-methylcyclohexane's interaction (+0.61 kcal/mol on bfgs-model minima): a near-zero
#   mode's quasi-RRHO free-rotor entropy followed its noise; modes softer than 15 cm-1 now count at 15 cm-1
#   (chairqm.thermo, noise floor), and the interaction is -0.03.
# The shipped unrefined calibrations are fitted on bfgs-model minima (they record it beside their key); the
# PreconLBFGS refit of the same day is kept in docs/calibration-precon-lbfgs.json (docs/accuracy.md). With
# the noise floor the two optimisers' gas-phase A-values of the 26 fitted groups agree to 0.09 kcal/mol
# (acetoxy). The refined (DFT) calibration still rests on PreconLBFGS geometries (its note says so).
DEFAULT_OPTIMIZER = "bfgs-model"
FALLBACK_TEMPERATURES = (1000.0, 3000.0)
SECOND_OPTIMIZER = "precon-lbfgs"   # continues an optimisation another optimiser left short of fmax
BOND_SCALE = 1.2  # bonded if d < 1.2 × (r_i + r_j), Cordero radii: common practice for organic molecules


@dataclass
class OptResult:
    """Outcome of :func:`optimize`.  Units: hartree, eV/Å (fmax), Eh/bohr (gradient_norm), K, s."""

    atoms: Atoms                  # optimised copy (last geometry reached, also when not converged)
    energy_hartree: float         # at the requested electronic temperature; nan if failed
    fmax_final: float             # largest atomic force norm, eV/Å, on the final geometry
    gradient_norm: float          # RMS of the 3N Cartesian gradient components, Eh/bohr
    steps: int                    # optimiser iterations, summed over all attempts
    gradient_calls: int           # engine single points (each energy + gradient), summed over attempts
    converged: bool               # fmax_final <= fmax_criterion
    status: str                   # 'ok' | 'not-converged' | 'failed'
    reason: str                   # '' when ok; otherwise what happened (engine messages for 'failed')
    optimizer: str
    fallback: str                 # '' or what fallback produced the result
    engine_seconds: float         # wall time inside the engine
    fmax_criterion: float = 0.005
    electronic_temperature: float = 300.0
    attempts: list = field(default_factory=list)   # one line per attempt, for the record

    def record(self) -> dict:
        """The JSON-able fields (everything but the structure); nan becomes None."""
        def clean(v):
            return None if isinstance(v, float) and math.isnan(v) else v

        return {k: clean(getattr(self, k)) for k in (
            "energy_hartree", "fmax_final", "gradient_norm", "steps", "gradient_calls", "converged",
            "status", "reason", "optimizer", "fallback", "engine_seconds", "fmax_criterion",
            "electronic_temperature", "attempts")}


class _EngineFailure(Exception):
    pass


# -------------------------------------------------------------------------------------------- optimisers
@contextlib.contextmanager
def _quiet(*names):
    """Raise these loggers to ERROR for the duration (geomeTRIC and ASE's line search log at INFO)."""
    loggers = [logging.getLogger(n) for n in names]
    saved = [lg.level for lg in loggers]
    for lg in loggers:
        lg.setLevel(logging.ERROR)
    try:
        yield
    finally:
        for lg, level in zip(loggers, saved):
            lg.setLevel(level)


def _run_geometric(atoms: Atoms, fmax: float, max_steps: int, maxstep: float) -> int:
    """geomeTRIC in TRIC coordinates [Wang, Song, J. Chem. Phys. 2016, 144, 214108]; returns steps."""
    from geometric.engine import Engine
    from geometric.errors import GeomOptNotConvergedError
    from geometric.internal import DelocalizedInternalCoordinates
    from geometric.molecule import Molecule
    from geometric.optimize import Optimizer
    from geometric.params import OptParams

    class _ASEEngine(Engine):
        def calc_new(self, coords, dirname):
            atoms.positions = coords.reshape(-1, 3) * BOHR_A
            forces = atoms.get_forces()
            energy = atoms.get_potential_energy()
            if not (np.isfinite(energy) and np.all(np.isfinite(forces))):
                raise _EngineFailure("engine returned a non-finite energy or gradient")
            return {"energy": energy / HARTREE_EV, "gradient": -forces.ravel() * BOHR_A / HARTREE_EV}

    mol = Molecule()
    mol.elem = list(atoms.get_chemical_symbols())
    mol.xyzs = [atoms.positions.copy()]
    mol.build_topology()
    gmax = fmax * BOHR_A / HARTREE_EV
    # only the gradient criterion decides (energy and displacement criteria set out of the way); the
    # final fmax is re-evaluated by the caller anyway
    params = OptParams(maxiter=int(max_steps), convergence_gmax=gmax, convergence_grms=gmax,
                       convergence_energy=1.0, convergence_drms=1.0, convergence_dmax=1.0,
                       trust=min(0.1, maxstep), tmax=float(maxstep), tmin=min(1e-4, 0.1 * maxstep),
                       usedmax=True)
    with _quiet("geometric", "geometric.nifty"), tempfile.TemporaryDirectory(prefix="chairqm-geometric-") as tmp:
        ic = DelocalizedInternalCoordinates(mol, build=True, connect=False, addcart=False)
        engine = _ASEEngine(mol)
        opt = Optimizer(atoms.positions.ravel() / BOHR_A, mol, ic, engine, tmp, params, print_info=False)
        try:
            progress = opt.optimizeGeometry()
            atoms.positions = progress.xyzs[-1]
        except GeomOptNotConvergedError:
            atoms.positions = opt.X.reshape(-1, 3) * BOHR_A
        return int(opt.Iteration)


def _run_ase(name: str, atoms: Atoms, fmax: float, max_steps: int, maxstep: float) -> int:
    if name == "bfgs-model":
        from ase.optimize import BFGS

        from chairqm.model_hessian import model_hessian
        opt = BFGS(atoms, logfile=None, maxstep=maxstep)
        opt.H0 = model_hessian(atoms)           # instead of 70 eV/Å² × unit matrix (chairqm.model_hessian)
        opt.run(fmax=fmax, steps=max_steps)
        return int(opt.nsteps)
    if name == "bfgs":
        from ase.optimize import BFGS as cls
    elif name == "lbfgs":
        from ase.optimize import LBFGS as cls
    elif name == "bfgs-linesearch":
        from ase.optimize import BFGSLineSearch as cls
    elif name == "precon-lbfgs":
        from ase.optimize.precon import PreconLBFGS

        # Exp preconditioner with ASE's defaults.  It estimates the nearest-neighbour distance with a
        # neighbour list that needs a cell, so a vacuum box (8 Å each side, pbc off) is set for the run
        # and removed afterwards; the positions are not moved and the engine stays molecular.
        extent = atoms.positions.max(axis=0) - atoms.positions.min(axis=0)
        atoms.set_cell(extent + 16.0)
        atoms.pbc = False
        try:
            with _quiet("ase.utils.linesearcharmijo", "ase.optimize.precon"):
                opt = PreconLBFGS(atoms, precon="Exp", use_armijo=True, logfile=None, maxstep=maxstep)
                opt.run(fmax=fmax, steps=max_steps)
        finally:
            atoms.set_cell(np.zeros(3))
        return int(opt.nsteps)
    else:  # pragma: no cover - guarded by optimize()
        raise ValueError(name)
    opt = cls(atoms, logfile=None, maxstep=maxstep)
    opt.run(fmax=fmax, steps=max_steps)
    return int(opt.nsteps)


def resolve_optimizer(name: str) -> str:
    """The optimiser a setting names: 'auto' (or 'default', empty) is DEFAULT_OPTIMIZER, aliases are
    resolved; an unknown name raises ChairqmError."""
    key = str(name).lower().replace("_", "-")
    if key in ("auto", "default", ""):
        return DEFAULT_OPTIMIZER
    aliases = {"tric": "geometric", "geometric-tric": "geometric", "bfgslinesearch": "bfgs-linesearch",
               "preconlbfgs": "precon-lbfgs"}
    key = aliases.get(key, key)
    if key not in OPTIMIZERS:
        raise ChairqmError(f"unknown optimizer {name!r}: choose auto or one of {', '.join(OPTIMIZERS)}")
    return key


def _forces_ok(atoms: Atoms) -> None:
    energy = atoms.get_potential_energy()
    forces = atoms.get_forces()
    if not (np.isfinite(energy) and np.all(np.isfinite(forces))):
        raise _EngineFailure("engine returned a non-finite energy or gradient")


class _OptimizerFailure(Exception):
    pass


def _describe(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {str(exc).strip() or '(no message)'}"


def _attempt(start: Atoms, calc: CountingCalculator, optimizer: str, fmax: float, max_steps: int,
             maxstep: float):
    """One optimisation run.  Raises _EngineFailure (engine's message) if the calculator raised or gave
    non-finite numbers, _OptimizerFailure if the optimiser itself raised."""
    atoms = start.copy()
    atoms.calc = calc
    try:
        _forces_ok(atoms)
        if optimizer == "geometric":
            steps = _run_geometric(atoms, fmax, max_steps, maxstep)
        else:
            steps = _run_ase(optimizer, atoms, fmax, max_steps, maxstep)
        _forces_ok(atoms)
    except (ChairqmError, _EngineFailure):
        raise
    except Exception as exc:
        engine_exc = calc.last_error
        chain, cur = [], exc
        while cur is not None and len(chain) < 20:
            chain.append(cur)
            cur = cur.__cause__ or cur.__context__
        if engine_exc is not None and any(e is engine_exc for e in chain):
            raise _EngineFailure(_describe(engine_exc)) from exc
        raise _OptimizerFailure(f"{optimizer} raised {_describe(exc)}") from exc
    return atoms, steps


def optimize(atoms: Atoms, calc_factory, fmax: float = 0.005, max_steps: int = 500, maxstep: float = 0.2,
             optimizer: str = "auto", electronic_temperature: float = 300.0,
             fallback_temperatures=FALLBACK_TEMPERATURES) -> OptResult:
    """Optimise a copy of `atoms` to fmax ≤ `fmax` eV/Å; never raises for an engine failure.

    calc_factory(electronic_temperature_K) -> a new ASE calculator (e.g. a partial of
    chairqm.engine.make_calculator).  optimizer: 'auto' (= DEFAULT_OPTIMIZER) or one of OPTIMIZERS.
    Returns an OptResult; status 'ok' (converged), 'not-converged' (max_steps reached; the geometry
    reached is returned), or 'failed' (engine failed at every temperature tried; the start geometry is
    returned, energy nan).
    """
    optimizer = resolve_optimizer(optimizer)
    if not fmax > 0:
        raise ChairqmError(f"fmax must be positive, got {fmax}")
    t_req = float(electronic_temperature)
    counters: list[CountingCalculator] = []
    attempts: list[str] = []
    steps = 0

    def calc_at(temperature):
        calc = CountingCalculator(calc_factory(temperature))
        counters.append(calc)
        return calc

    notes: list[str] = []

    def run(start, temperature, crit, method=None):
        nonlocal steps
        method = method or optimizer
        try:
            result, n = _attempt(start, calc_at(temperature), method, crit, max_steps, maxstep)
        except _OptimizerFailure as exc:
            if method == "lbfgs":
                raise _EngineFailure(str(exc)) from exc
            notes.append(f"{exc}; repeated with lbfgs")
            try:
                result, n = _attempt(start, calc_at(temperature), "lbfgs", crit, max_steps, maxstep)
            except _OptimizerFailure as exc2:
                raise _EngineFailure(str(exc2)) from exc2
        steps += n
        return result

    final, fallback = None, ""
    try:
        final = run(atoms, t_req, fmax)
        attempts.append(f"Tel={t_req:g} K: ok")
    except _EngineFailure as exc:
        attempts.append(f"Tel={t_req:g} K: {exc}")
        for t_high in fallback_temperatures:
            try:
                pre = run(atoms, float(t_high), max(10.0 * fmax, 0.05))
            except _EngineFailure as exc2:
                attempts.append(f"Tel={t_high:g} K: {exc2}")
                continue
            try:
                final = run(pre, t_req, fmax)
            except _EngineFailure as exc3:
                attempts.append(f"Tel={t_req:g} K after pre-optimisation at {t_high:g} K: {exc3}")
                continue
            fallback = f"pre-optimised at Tel={t_high:g} K, re-converged at Tel={t_req:g} K"
            attempts.append(f"Tel={t_high:g} K then {t_req:g} K: ok")
            break

    if final is not None and optimizer != SECOND_OPTIMIZER and _fmax_of(final) > fmax:
        # stopped short at max_steps: a second optimiser continues from the geometry reached
        start = Atoms(final.numbers, positions=final.positions.copy())
        start.set_initial_charges(atoms.get_initial_charges())
        start.set_initial_magnetic_moments(atoms.get_initial_magnetic_moments())
        try:
            final = run(start, t_req, fmax, SECOND_OPTIMIZER)
            notes.append(f"{optimizer} stopped short of fmax after max_steps; continued with {SECOND_OPTIMIZER}")
        except _EngineFailure as exc:
            attempts.append(f"continued with {SECOND_OPTIMIZER}: {exc}")
    if notes:
        attempts.extend(notes)
        fallback = "; ".join(([fallback] if fallback else []) + notes)
    calls = sum(c.calls for c in counters)
    seconds = sum(c.seconds for c in counters)
    if final is None:
        out = atoms.copy()
        return OptResult(atoms=out, energy_hartree=math.nan, fmax_final=math.nan, gradient_norm=math.nan,
                         steps=steps, gradient_calls=calls, converged=False, status="failed",
                         reason="failed: " + " | ".join(attempts), optimizer=optimizer,
                         fallback="", engine_seconds=seconds, fmax_criterion=fmax,
                         electronic_temperature=t_req, attempts=attempts)

    forces = final.get_forces()
    energy = final.get_potential_energy() / HARTREE_EV
    fmax_final = _fmax_of(final)
    gradient = forces * BOHR_A / HARTREE_EV
    grad_rms = float(np.sqrt(np.mean(gradient ** 2)))
    converged = fmax_final <= fmax
    out = Atoms(final.numbers, positions=final.positions.copy(), info=dict(atoms.info))
    reason = "" if converged else (f"fmax {fmax_final:.2e} eV/Å above {fmax:g} eV/Å after {steps} steps "
                                   f"(max_steps {max_steps})")
    return OptResult(atoms=out, energy_hartree=float(energy), fmax_final=fmax_final, gradient_norm=grad_rms,
                     steps=steps, gradient_calls=calls, converged=bool(converged),
                     status="ok" if converged else "not-converged", reason=reason, optimizer=optimizer,
                     fallback=fallback, engine_seconds=seconds, fmax_criterion=fmax,
                     electronic_temperature=t_req, attempts=attempts)


def _fmax_of(atoms) -> float:
    """Largest atomic force norm on `atoms` (eV/Å)."""
    return float(np.sqrt((atoms.get_forces() ** 2).sum(axis=1)).max())


# ------------------------------------------------------------------------------------------------- bonds
def bond_graph(atoms: Atoms, scale: float = BOND_SCALE) -> set:
    """Bonded pairs (i, j), i < j, with distance < scale × (r_i + r_j).

    Radii: ase.data.covalent_radii [Cordero et al., Dalton Trans. 2008, 2832]; plain distances, no
    neighbour-list skin.  scale 1.2 is common practice: C–C 1.54 Å < 1.82 Å, C–H 1.09 Å < 1.28 Å,
    while 1,3 C···C (≈ 2.5 Å) and H···H contacts (≥ 1.7 Å vs 0.74 Å) stay unbonded.
    """
    pos = np.asarray(atoms.positions, dtype=float)
    radii = covalent_radii[np.asarray(atoms.numbers)]
    diff = pos[:, None, :] - pos[None, :, :]
    dist = np.sqrt((diff ** 2).sum(-1))
    limit = scale * (radii[:, None] + radii[None, :])
    i, j = np.nonzero(np.triu(dist < limit, k=1))
    return {(int(a), int(b)) for a, b in zip(i, j)}


def check_bonds(ref_pairs, atoms: Atoms, scale: float = BOND_SCALE) -> tuple[bool, str]:
    """Compare the bond graph of `atoms` with `ref_pairs` (from :func:`bond_graph` of the seed).

    Returns (ok, reason); reason names each broken and new bond as element+index (0-based, the atom order
    of the structure), with its distance, e.g. 'broken C0–C1 (2.31 Å); new H7–H9 (0.70 Å)'.
    """
    ref = {tuple(sorted((int(a), int(b)))) for a, b in ref_pairs}
    new = bond_graph(atoms, scale)
    sym = atoms.get_chemical_symbols()
    parts = []

    def label(pair):
        a, b = pair
        return f"{sym[a]}{a}–{sym[b]}{b} ({atoms.get_distance(a, b):.2f} Å)"

    broken = sorted(ref - new)
    made = sorted(new - ref)
    if broken:
        parts.append("broken " + ", ".join(label(p) for p in broken))
    if made:
        parts.append("new " + ", ".join(label(p) for p in made))
    return (not parts), "; ".join(parts)


# ------------------------------------------------------------------------------------------------ stereo
def stereo_reference(mol, positions):
    """A copy of `mol` whose stereo is assigned from these 3D positions (e.g. the seed's), for checking
    centres the input left unspecified."""
    return chem.stereo_from_3d(mol, positions)


def _double_bond_references(mol) -> dict:
    """{bond index: (a, i, j, b, trans)} for each stereo double bond: a on i, b on j, trans or cis."""
    from rdkit import Chem

    BS = Chem.BondStereo
    ref = Chem.Mol(mol)
    Chem.AssignStereochemistry(ref, cleanIt=True, force=True)
    out = {}
    for bond in ref.GetBonds():
        st = bond.GetStereo()
        if st in (BS.STEREONONE, BS.STEREOANY):
            continue
        i, j = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        if st in (BS.STEREOCIS, BS.STEREOTRANS):
            a, b = bond.GetStereoAtoms()
            if ref.GetBondBetweenAtoms(a, i) is None:
                a, b = b, a
            out[bond.GetIdx()] = (a, i, j, b, st == BS.STEREOTRANS)
        elif st in (BS.STEREOE, BS.STEREOZ):
            # E/Z refers to the CIP-highest neighbour at each end (CIP priority rules, IUPAC 2013 recommendations)
            def top(center, other):
                nbrs = [n.GetIdx() for n in ref.GetAtomWithIdx(center).GetNeighbors() if n.GetIdx() != other]
                return max(nbrs, key=lambda k: int(ref.GetAtomWithIdx(k).GetProp("_CIPRank")))
            out[bond.GetIdx()] = (top(i, j), i, j, top(j, i), st == BS.STEREOE)
    return out


def check_stereo(mol, positions) -> tuple[bool, str]:
    """Compare the stereo of `mol` (RDKit Mol with Hs; its chiral tags and double-bond stereo are the
    reference) with stereo assigned from the 3D `positions` (same atom order).

    Tetrahedral centres: RDKit's AssignStereochemistryFrom3D on a copy gives each centre's chiral tag
    relative to the same neighbour order, so tags compare atom by atom (this covers ring centres such as
    cis/trans-1,4-disubstituted cyclohexanes, which have no R/S).  The verdict is the canonical isomeric
    SMILES (with Hs) of the 3D copy against the reference's, restricted to the centres and bonds the
    reference specifies, so a relabelling of equivalent atoms is not reported.  Double bonds: the
    reference cis/trans relation of two substituents is compared with their dihedral in 3D
    (|φ| > 90° = trans).  Returns (ok, reason); reason names changed atoms (element+index, 0-based),
    e.g. 'C1 inverted; double bond C1=C2 changed from trans to cis (dihedral 3°)'.
    """
    from rdkit import Chem

    CT = Chem.ChiralType
    BS = Chem.BondStereo
    tetra = (CT.CHI_TETRAHEDRAL_CW, CT.CHI_TETRAHEDRAL_CCW)
    tagged = {a.GetIdx(): a.GetChiralTag() for a in mol.GetAtoms() if a.GetChiralTag() in tetra}
    stereo_bonds = {b.GetIdx() for b in mol.GetBonds() if b.GetStereo() not in (BS.STEREONONE, BS.STEREOANY)}
    pos = np.asarray(positions, dtype=float)
    copy = chem.stereo_from_3d(mol, pos)
    problems = []
    for idx, tag in sorted(tagged.items()):
        new = copy.GetAtomWithIdx(idx).GetChiralTag()
        sym = mol.GetAtomWithIdx(idx).GetSymbol()
        if new not in tetra:
            problems.append(f"{sym}{idx} lost its configuration")
        elif new != tag:
            problems.append(f"{sym}{idx} inverted")
    db_problems = []
    for bidx, (a, i, j, b, trans) in sorted(_double_bond_references(mol).items()):
        phi = chem.dihedral(pos[a], pos[i], pos[j], pos[b])
        now_trans = abs(phi) > 90.0
        if now_trans != trans:
            si, sj = mol.GetAtomWithIdx(i).GetSymbol(), mol.GetAtomWithIdx(j).GetSymbol()
            db_problems.append(f"double bond {si}{i}={sj}{j} changed from {'trans' if trans else 'cis'} "
                               f"to {'trans' if now_trans else 'cis'} (dihedral {phi:.0f}°)")
    # verdict for the tetrahedral part: same stereoisomer, up to equivalent atoms
    for atom in copy.GetAtoms():
        if atom.GetIdx() not in tagged:
            atom.SetChiralTag(CT.CHI_UNSPECIFIED)
    for bond in copy.GetBonds():
        if bond.GetIdx() not in stereo_bonds:
            bond.SetStereo(BS.STEREONONE)
    ref = Chem.Mol(mol)
    ref.RemoveAllConformers()
    copy.RemoveAllConformers()
    same = Chem.MolToSmiles(ref) == Chem.MolToSmiles(copy)
    if same and not db_problems:
        return True, ""
    if same:
        problems = []
    elif not problems and not db_problems:
        problems = ["isomeric SMILES from 3D differs from the input's"]
    return False, "; ".join(problems + db_problems)


def check_structure(mol, atoms) -> tuple[bool, str, bool, str]:
    """(bonds kept, why not, stereo kept, why not) of geometry `atoms` against molecule `mol`: the two
    checks every optimised or re-optimised conformer must pass (:func:`check_bonds`, :func:`check_stereo`)."""
    ref_pairs = {tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()}
    ok_b, why_b = check_bonds(ref_pairs, atoms)
    ok_s, why_s = check_stereo(mol, atoms.positions)
    return ok_b, why_b, ok_s, why_s
