"""Seeds: build both chairs, the twist-boats and the rotamers of a ring on purpose; label each by measuring it.

How a seed is made
------------------
1. Ring templates (`TEMPLATES`): two chairs (Cremer–Pople theta = 0 and 180 deg) and the six twist-boats
   of the pseudorotation cycle (theta = 90 deg, phi = 30 + k*60 deg), built by `ring.ring_from_pucker`
   with bond lengths from RDKit's covalent radii. The amplitudes (CHAIR_Q, TWIST_Q) are those of
   MMFF94-relaxed cyclohexane measured on this machine (0.553 and 0.717 Å), rounded.
2. Skeleton: each ring atom's exocyclic neighbours are put on the template's two tetrahedral slots
   (`ring.exocyclic_slots`), one "up" and one "down" (relative to the mean-plane normal). Which neighbour
   goes up is fixed by the input's chirality tag where the ring atom is a stereocentre (checked with
   RDKit's chirality-from-structure perception on the skeleton), arbitrary where the two neighbours are
   graph-equivalent (two H), and enumerated where it is free (e.g. C1 of methylcyclohexane, a ring N
   with an exocyclic H or alkyl: nitrogen inverts). One skeleton = one template x one choice vector.
3. Skeletons related by a symmetry of the molecule (a stereo-preserving graph automorphism that maps
   the ring onto itself, combined with a proper rotation, or an improper one when the automorphism maps
   the molecule onto its mirror image) are merged before any rotamer work; the merge is recorded.
4. Build: RDKit EmbedMolecule with the skeleton atoms fixed (coordMap, fixed random seed), then a
   force-field relaxation (MMFF94, UFF where MMFF94 lacks parameters) with flat-bottomed restraints
   that keep every ring torsion within RING_TORSION_TOL of the template, so the ring form survives.
5. Rotamers (chairqm.rotamers): every rotatable bond of the substituents gets a grid of start torsions,
   the product is enumerated (at most `max_rotamer_starts` starts, an evenly spaced subset beyond
   that), each start relaxed as in 4. Starts that reach the same structure, or one equivalent by
   symmetry, are merged; of the rest, those more than `ff_window_kcal` above the lowest rotamer of the
   same ring-level form, and those beyond `max_rotamers_per_form` (by energy), are screened. The window
   and the cap act within one ring-level form, never across forms: an axial or twist-boat form is
   never dropped for being high in energy.
6. Every seed is re-measured (ring form, Q, theta, phi, orientations) and its stereo is checked against
   the input from its 3D structure (RDKit AssignStereochemistryFrom3D); a mismatch marks it failed.

Steps 1 and 2, and the fused-ring checks of 4 (a trans fusion that cannot be spanned is screened as
locked; a fused six-membered ring is restrained to the chair the fusion allows), live in chairqm.skeletons;
their names stay importable from here.

The result is deterministic: fixed random seeds, fixed enumeration order, no threads, and coordinates
rounded where they pass from numpy to RDKit and back (DECIMALS_*), because numpy's last bits may differ
between processes.
"""

from __future__ import annotations

import functools
import itertools
from dataclasses import dataclass, field

import numpy as np
from rdkit import Chem, RDLogger
from rdkit.Chem import AllChem
from rdkit.Geometry import Point3D

from . import chem, coordination, other_rings, rotamers, symmetry
from . import ring as ringgeo
from .errors import ChairqmError
from .cages import cage_fixed_centres
# steps 1 and 2 (templates, skeletons, stereo choices) and the fused-ring checks, importable from here as before
from .skeletons import (CHAIR_Q, DECIMALS_TEMPLATE, FUSION_MAX_TORSION, N_ARYL_TILT, TEMPLATES,  # noqa: F401
                        TWIST_Q, Template, _bond_length, _choices, _fix_stereo, _fused_chairs, _fusion_pairs,
                        _ring_tags, _skeleton, _template_ring, _unspannable_fusion)

RDLogger.DisableLog("rdApp.*")

# ---- settings ---------------------------------------------------------------------------------------
DEFAULTS = {
    "twist_boats": True,            # build the six twist-boat templates as well as the two chairs
    "max_rotamers_per_form": 12,    # keep at most this many rotamers per ring-level form (lowest FF energy)
    "ff_window_kcal": 6.0,          # drop rotamers more than this above the best rotamer of the same form
    "random_seed": 61453,           # RDKit embedding seed (fixed: same input, same seeds)
    "max_rotamer_starts": 216,      # at most this many torsion-grid starts per ring-level form
}
SETTINGS_HELP = {
    "twist_boats": "build the six twist-boats of the pseudorotation cycle (symmetry-equivalent ones merged)",
    "max_rotamers_per_form": "cap on kept rotamers per ring-level form (chair or twist-boat with one "
                             "orientation pattern), lowest force-field energy first",
    "ff_window_kcal": "force-field energy window (kcal/mol) above the lowest rotamer of the same ring-level "
                      "form; rotamers above it are screened",
    "random_seed": "random seed of the RDKit embedding",
    "max_rotamer_starts": "cap on torsion-grid starting points per ring-level form; beyond it an evenly "
                          "spaced subset of the grid is used",
}

# ---- construction constants -------------------------------------------------------------------------
RING_TORSION_TOL = 10.0     # deg, flat-bottom half-width of the ring-torsion restraints
RING_TORSION_K = 1.0e3      # force constant of those restraints (RDKit units, kcal/mol per rad^2)
MAX_OTHER_RING_SETS = 16    # combinations of the other rings' states seeded per ring form (4^2: two rings)
SKELETON_TOL = 0.02         # Å, max deviation for two skeletons to be symmetry-equivalent
# numpy's results can differ in the last bits between processes (memory alignment picks different SIMD
# paths); coordinates are rounded at each hand-over so that the same input gives the same bytes.
DECIMALS_START = 5          # Å, embedded structures and rotamer starts handed to the force field
DECIMALS_OUT = 6            # Å, final seed positions

STATUSES = ("ok", "merged", "screened", "failed")


@dataclass
class Seed:
    """One starting structure (or a record of why there is none). Labels are measured on `positions`."""
    name: str
    template: str
    ring_form: str | None = None
    q: float | None = None
    theta: float | None = None
    phi: float | None = None
    orientation: str = ""
    ff_energy_kcal: float | None = None
    status: str = "ok"
    reason: str = ""
    positions: np.ndarray | None = None
    equivalent_to: str | None = None      # for merged seeds: the kept seed it duplicates
    forcefield: str | None = None         # 'MMFF94', 'UFF' or None (unrelaxed)
    other_rings: str = ""                 # the other rings' forms ('r2=chair:equatorial'), see ring.measure

    @property
    def kept(self) -> bool:
        return self.status == "ok"


def check_settings(settings: dict | None) -> dict:
    """Settings merged over DEFAULTS; unknown keys or bad values raise ChairqmError."""
    out = dict(DEFAULTS)
    for key, val in (settings or {}).items():
        if key not in DEFAULTS:
            raise ChairqmError(f"unknown seeds setting '{key}': use one of {', '.join(sorted(DEFAULTS))}")
        out[key] = val
    if not isinstance(out["twist_boats"], bool):
        raise ChairqmError("seeds.twist_boats must be true or false")
    for key in ("max_rotamers_per_form", "max_rotamer_starts"):
        if isinstance(out[key], bool) or not isinstance(out[key], int) or out[key] < 1:
            raise ChairqmError(f"seeds.{key} must be a positive integer, got {out[key]!r}")
    if isinstance(out["random_seed"], bool) or not isinstance(out["random_seed"], int) or out["random_seed"] < 0:
        raise ChairqmError(f"seeds.random_seed must be a non-negative integer, got {out['random_seed']!r}")
    w = out["ff_window_kcal"]
    if isinstance(w, bool) or not isinstance(w, (int, float)) or not w > 0:
        raise ChairqmError(f"seeds.ff_window_kcal must be a positive number, got {w!r}")
    out["ff_window_kcal"] = float(w)
    return out


# ---- the molecule-level context --------------------------------------------------------------------
@dataclass
class _Context:
    mol: Chem.Mol
    ring: list
    subs: list
    settings: dict
    ranks: list
    exo: list                       # per ring position: exocyclic neighbours, heavy first then by index
    ref_tags: dict                  # atom -> chiral tag of the input (tetrahedral stereocentres)
    ref_bonds: dict                 # bond idx -> stereo of the input (double bonds)
    heavy: list                     # atom indices of the heavy-atom graph (RemoveHs order)
    hydrogens: dict                 # heavy atom -> its hydrogens
    maps: list = field(default_factory=list)    # (mapping array over all atoms' heavy part, improper)
    forcefield: str | None = None
    props: object = None
    others: list = field(default_factory=list)  # chairqm.molecule.Perceived.other_rings
    planar: set = field(default_factory=set)    # ring positions of conjugated (trigonal) ring N atoms
    tilted: set = field(default_factory=set)    # of those, the N-aryl ones (seeded as shallow pyramids)


def planar_ring_nitrogen(mol, atom: int, ring_set) -> bool:
    """True for a ring N with one exocyclic neighbour that RDKit perceives as conjugated (sp2): the N of
    an amide, carbamate, urea, N-nitroso or N-aryl group on the ring. Its exocyclic bond starts in the
    plane of the N and its ring neighbours; a tetrahedral slot contradicts RDKit's sp2 geometry bounds, so
    embedding fails there, and the optimisation decides how far the N pyramidalises and to which side."""
    a = mol.GetAtomWithIdx(atom)
    if a.GetSymbol() != "N" or a.GetDegree() != 3 or a.GetFormalCharge() != 0:
        return False
    exo = [n for n in a.GetNeighbors() if n.GetIdx() not in ring_set]
    return len(exo) == 1 and a.GetHybridization() == Chem.HybridizationType.SP2


def _prepare(mol, ring, substituents, settings, other_rings=()) -> _Context:
    if mol is None or mol.GetNumAtoms() == 0:
        raise ChairqmError("no molecule to seed")
    if any(a.GetNumImplicitHs() for a in mol.GetAtoms()):
        raise ChairqmError("the molecule must carry explicit hydrogens (Chem.AddHs) before seeding")
    ring = [int(i) for i in ring]
    if len(ring) != 6 or len(set(ring)) != 6:
        raise ChairqmError(f"the analysed ring must have six distinct atoms, got {ring}")
    for k in range(6):
        if mol.GetBondBetweenAtoms(ring[k], ring[(k + 1) % 6]) is None:
            raise ChairqmError(f"ring atoms {ring[k]} and {ring[(k + 1) % 6]} are not bonded: "
                               "give the ring atoms in order around the ring")
    work, ref_tags, ref_bonds = chem.reference_stereo(mol)
    work.RemoveAllConformers()
    loose = [info.centeredOn for info in Chem.FindPotentialStereo(work)
             if info.type == Chem.StereoType.Atom_Tetrahedral and info.centeredOn in ring
             and info.specified == Chem.StereoSpecified.Unspecified]
    caged = cage_fixed_centres(work, loose) if loose else {}     # a cage decides these: no stereocentre
    for centre in loose:
        if centre not in caged:
            raise ChairqmError(f"stereo of ring atom {centre} is not specified: give the relative "
                               "configuration in the input (e.g. [C@H] / [C@@H])")
    ranks = list(Chem.CanonicalRankAtoms(work, breakTies=False, includeChirality=False))
    ring_set = set(ring)
    exo = []
    for a in ring:
        nbs = [n.GetIdx() for n in work.GetAtomWithIdx(a).GetNeighbors() if n.GetIdx() not in ring_set]
        nbs.sort(key=lambda i: (work.GetAtomWithIdx(i).GetAtomicNum() == 1, i))
        if len(nbs) > 2:
            raise ChairqmError(f"ring atom {a} has {len(nbs)} exocyclic neighbours; at most two are possible")
        exo.append(nbs)
    heavy = [a.GetIdx() for a in work.GetAtoms() if a.GetAtomicNum() > 1]
    hydrogens = {i: [n.GetIdx() for n in work.GetAtomWithIdx(i).GetNeighbors() if n.GetAtomicNum() == 1]
                 for i in heavy}
    ctx = _Context(mol=work, ring=ring, subs=list(substituents), settings=settings, ranks=ranks, exo=exo,
                   ref_tags=ref_tags, ref_bonds=ref_bonds, heavy=heavy, hydrogens=hydrogens,
                   others=[dict(o) for o in other_rings])
    ctx.planar = {k for k, a in enumerate(ring) if planar_ring_nitrogen(work, a, ring_set)}
    ctx.tilted = {k for k in ctx.planar if any(n.GetIsAromatic() for n in work.GetAtomWithIdx(ring[k]).GetNeighbors())}
    ctx.maps = symmetry.ring_automorphisms(work, ring)
    if AllChem.MMFFHasAllMoleculeParams(work):
        ctx.forcefield = "MMFF94"
        ctx.props = AllChem.MMFFGetMoleculeProperties(work)
        ctx.props.SetMMFFVerbosity(0)
    elif AllChem.UFFHasAllMoleculeParams(work):
        ctx.forcefield = "UFF"
    return ctx


# ---- building ---------------------------------------------------------------------------------------
def _forcefield(ctx, conf_id, targets=None):
    m = ctx.mol
    if ctx.forcefield == "MMFF94":
        ff = AllChem.MMFFGetMoleculeForceField(m, ctx.props, confId=conf_id)
        add = ff.MMFFAddTorsionConstraint if ff is not None else None
    elif ctx.forcefield == "UFF":
        ff = AllChem.UFFGetMoleculeForceField(m, confId=conf_id)
        add = ff.UFFAddTorsionConstraint if ff is not None else None
    else:
        return None
    if ff is None:
        return None
    if targets is not None:
        pairs = [(ctx.ring, targets)] if isinstance(targets, np.ndarray) else targets
        for item in pairs:
            if item[0] == "torsion":                 # ("torsion", (i, j, k, l), low, high) in degrees
                _, (i, j, k, l), lo, hi = item
                add(i, j, k, l, False, float(lo), float(hi), RING_TORSION_K)
                continue
            r, torsions = item
            n = len(r)
            for j in range(n):
                t = float(torsions[j])
                add(r[j], r[(j + 1) % n], r[(j + 2) % n], r[(j + 3) % n], False,
                    t - RING_TORSION_TOL, t + RING_TORSION_TOL, RING_TORSION_K)
    ff.Initialize()
    return ff


def _relax(ctx, X, targets):
    """Force-field relaxation with ring-torsion restraints; returns (positions, energy kcal/mol or None, note)."""
    if ctx.forcefield is None:
        return np.array(X, dtype=float), None, "no force-field parameters (MMFF94, UFF): unrelaxed embedding"
    cid = chem.set_positions(ctx.mol, X)
    ff = _forcefield(ctx, cid, targets)
    if ff is None:
        return np.array(X, dtype=float), None, f"{ctx.forcefield} set-up failed: unrelaxed embedding"
    note = ""
    for _ in range(10):
        if ff.Minimize(maxIts=1000) == 0:
            break
    else:
        note = f"{ctx.forcefield} relaxation not converged"
    Y = np.array(ctx.mol.GetConformer(cid).GetPositions())
    free = _forcefield(ctx, cid, None)
    energy = float(free.CalcEnergy(Y.ravel().tolist()))
    return Y, energy, note


def _stereo_mismatch(ctx, X) -> list:
    return chem.stereo_differences(ctx.mol, ctx.ref_tags, ctx.ref_bonds, X)


def _embed(ctx, pos, seed):
    coord = {int(i): Point3D(*map(float, p)) for i, p in pos.items()}
    attempts = [coord, {i: p for i, p in coord.items()
                        if ctx.mol.GetAtomWithIdx(i).GetAtomicNum() > 1 or i in ctx.ring}]
    for cmap in attempts:
        for extra in range(3):
            try:
                # chairqm.coordination: the plain RDKit call, or polyhedron bounds for an SF5-like centre
                cid = coordination.embed(ctx.mol, coordMap=cmap, randomSeed=seed + extra, useRandomCoords=True,
                                         enforceChirality=True, maxAttempts=50)
            except RuntimeError:        # RDKit's optimiser can stop on an impossible coordinate map
                cid = -1
            if cid < 0:
                continue
            X = np.array(ctx.mol.GetConformer(cid).GetPositions())
            keys = sorted(cmap)
            P = np.array([pos[i] for i in keys])
            T = chem.fit(P, X[keys])
            X = np.round(T(X), DECIMALS_START)
            if np.max(np.linalg.norm(X[keys] - P, axis=1)) < 0.05:
                return X
    return None


def _measure_into(ctx, seed: Seed, X, intended_form):
    meas = ringgeo.measure(X, ctx.ring, ctx.subs, ctx.others, ringgeo.trigonal_ring_atoms(ctx.mol, ctx.ring))
    seed.ring_form, seed.q, seed.theta, seed.phi = meas["ring_form"], meas["q"], meas["theta"], meas["phi"]
    seed.orientation = meas["orientation"]
    seed.other_rings = meas.get("other_rings", "")
    seed.positions = X
    notes = []
    if seed.ring_form != intended_form:
        notes.append(f"ring relaxed to {seed.ring_form} from a {intended_form} template")
    return notes


def _relax_into(ctx, seed: Seed, X0, targets, ring_xyz, form):
    """Relax start X0 with the ring restrained to `targets`, put it into the template frame and measure it
    into `seed` (positions, labels, ff_energy_kcal); returns (notes, stereo mismatches)."""
    Xr, energy, note = _relax(ctx, X0, targets)
    Xr = _frame(ctx, Xr, ring_xyz)
    notes = _measure_into(ctx, seed, Xr, form)
    if note:
        notes.append(note)
    seed.ff_energy_kcal = energy
    return notes, _stereo_mismatch(ctx, Xr)


def _frame(ctx, X, ring_xyz):
    """Put a structure into the template frame: ring atoms superposed on the template ring (proper fit)."""
    T = chem.fit(ring_xyz, X[ctx.ring])
    return np.round(T(X), DECIMALS_OUT) + 0.0


def _other_ring_chairs(ctx) -> tuple[list, str]:
    """(sets, cut): one restraint set per combination of the other rings' states, at most
    MAX_OTHER_RING_SETS of them (chairqm.other_rings), and the words for seeds.csv when that left
    combinations out ('' when none)."""
    chairs = [(t.q, t.theta, t.phi) for t in TEMPLATES if t.form == "chair"]
    sets, total = other_rings.restraint_sets(ctx.mol, ctx.others, chairs, MAX_OTHER_RING_SETS)
    return sets, other_rings.truncation_note(len(sets), total)


def _nitrogen_inversions(ctx, seeds) -> list:
    """For every inverting ring N of an other ring (its 'nitrogens'), a copy of each kept seed with that N
    inverted (chairqm.other_rings.invert_nitrogen), relaxed with the force field with both rings held to
    their torsions, kept when no kept seed carries its labels at a lower force-field energy (a state the
    restraint sets did not reach, or reached only through a strained start). Named SEED-n<atom>."""
    pivots = [(o["atoms"], n, x) for o in ctx.others for n, x, _ in o.get("nitrogens", ())]
    if not pivots:
        return []
    have = {}
    for s in seeds:
        if s.status == "ok" and s.ff_energy_kcal is not None:
            label = (s.ring_form, s.orientation, s.other_rings)
            have[label] = min(have.get(label, float("inf")), float(s.ff_energy_kcal))
    out = []
    for s in [s for s in seeds if s.status == "ok"]:
        for ring_atoms, n, x in pivots:
            X = other_rings.invert_nitrogen(ctx.mol, s.positions, ring_atoms, n, x)
            if X is None:
                continue
            twin = Seed(name=f"{s.name}-n{n}", template=s.template, forcefield=ctx.forcefield)
            hold = [(ctx.ring, np.round(ringgeo.ring_torsions(X[ctx.ring]), 4)),
                    (list(ring_atoms), np.round(ringgeo.ring_torsions(X[list(ring_atoms)]), 4))]
            notes, mismatch = _relax_into(ctx, twin, X, hold, X[ctx.ring], s.ring_form)
            label = (twin.ring_form, twin.orientation, twin.other_rings)
            if mismatch or twin.ff_energy_kcal is None or twin.ff_energy_kcal >= have.get(label, float("inf")):
                continue
            have[label] = float(twin.ff_energy_kcal)
            twin.reason = "; ".join([f"ring N {n} of {s.name} inverted"] + notes)
            out.append(twin)
    return out


# ---- the public entry points ------------------------------------------------------------------------
def build_seeds(mol, ring, substituents, settings=None, other_rings=()) -> list[Seed]:
    """Every seed of one molecule — kept, merged, screened and failed — in a fixed order.

    `mol`: RDKit Mol with explicit H and stereo; `ring`: six atom indices in ring order; `substituents`:
    objects with id, ring_atom, first_atom, atoms (see chairqm.molecule.Substituent); `settings`: the
    seeds block (see DEFAULTS); `other_rings`: the molecule's other six-membered rings
    (chairqm.molecule.Perceived.other_rings), each seeded in both chairs. Positions are in `mol` atom
    order, Å, in the template frame (ring centroid at the origin, mean plane ~ xy).
    """
    settings = check_settings(settings)
    ctx = _prepare(mol, ring, substituents, settings, other_rings)
    other_sets, cut = _other_ring_chairs(ctx)
    seed0 = settings["random_seed"]
    free, fixed = _choices(ctx)
    combos = list(itertools.product((0, 1), repeat=len(free)))

    templates = [t for t in TEMPLATES if t.form == "chair"]
    skipped = []
    if settings["twist_boats"]:
        templates += [t for t in TEMPLATES if t.form == "twist-boat"]
    else:
        skipped = [t for t in TEMPLATES if t.form == "twist-boat"]

    # ring-level candidates in a fixed order: chairs first, within a form choice-vector-major
    cands = []
    for form in ("chair", "twist-boat"):
        tpls = [t for t in templates if t.form == form]
        for ci, combo in enumerate(combos):
            for tpl in tpls:
                name = tpl.name if ci == 0 else f"{tpl.name}-v{ci + 1}"
                cands.append((name, tpl, combo))

    ring_xyz = {t.name: _template_ring(ctx, t) for t in templates}
    skel_heavy = sorted(a for a in ctx.ring) + sorted(
        e for ex in ctx.exo for e in ex if ctx.mol.GetAtomWithIdx(e).GetAtomicNum() > 1)
    skel_h = {a: [e for e in ex if ctx.mol.GetAtomWithIdx(e).GetAtomicNum() == 1]
              for a, ex in zip(ctx.ring, ctx.exo)}
    # symmetries restricted to the skeleton (unique restrictions only)
    skel_maps, seen = [], set()
    for m, imp in ctx.maps:
        key = (imp, tuple(int(m[i]) for i in skel_heavy))
        if key not in seen:
            seen.add(key)
            skel_maps.append((m, imp))

    n_atoms = ctx.mol.GetNumAtoms()
    out: list[Seed] = []
    kept_skeletons = []          # (name, form, skeleton array)
    rotors = rotamers.rotatable_bonds(ctx.mol, ctx.ring, ctx.subs, ctx.ranks)
    same_rotamer = functools.partial(symmetry.equivalent_structures, maps=ctx.maps, atoms_heavy=np.asarray(ctx.heavy),
                                     h_of=dict(ctx.hydrogens), tol_max=rotamers.MERGE_MAXDEV,
                                     tol_rmsd=rotamers.MERGE_RMSD)

    for name, tpl, combo in cands:
        X = ring_xyz[tpl.name]
        choice = [0] * 6
        for k, c in zip(free, combo):
            choice[k] = c
        choice, bad = _fix_stereo(ctx, X, choice, fixed)
        seed = Seed(name=name, template=tpl.name, forcefield=ctx.forcefield)
        if bad:
            seed.status, seed.reason = "failed", (f"template {tpl.name} cannot carry the input configuration "
                                                  f"at ring atoms {bad}")
            out.append(seed)
            continue
        pos = _skeleton(ctx, X, choice)
        spanned = _unspannable_fusion(ctx, pos)
        if spanned:
            seed.status, seed.reason = "screened", spanned
            out.append(seed)
            continue
        S = np.zeros((n_atoms, 3))
        for i, p in pos.items():
            S[i] = p
        merged_with = None
        for kname, kform, KS in kept_skeletons:
            if kform != tpl.form:
                continue
            same, improper = symmetry.equivalent_structures(KS, S, skel_maps, skel_heavy, skel_h, SKELETON_TOL)
            if same:
                merged_with = (kname, improper)
                break

        Xb = _embed(ctx, pos, seed0)
        if Xb is None:
            if merged_with is not None:
                seed.status, seed.equivalent_to = "merged", merged_with[0]
                seed.reason = (f"symmetry-equivalent of {merged_with[0]}; not built (RDKit embedding with the "
                               f"ring fixed at template {tpl.name} failed)")
            else:
                seed.status = "failed"
                seed.reason = (f"RDKit embedding with the ring fixed at template {tpl.name} failed for this "
                               "substitution pattern")
            out.append(seed)
            continue
        targets = np.round(ringgeo.ring_torsions(X), 4)
        fused_chairs = _fused_chairs(ctx, pos)
        built = False
        for io, extra in enumerate(other_sets if merged_with is None else other_sets[:1]):
            s_io = seed if io == 0 else Seed(name=f"{name}-o{io + 1}", template=tpl.name, forcefield=ctx.forcefield)
            relax = functools.partial(_relax_into, ctx, targets=[(ctx.ring, targets)] + extra + fused_chairs, ring_xyz=X,
                                      form=tpl.form)
            notes, mismatch = relax(s_io, Xb)
            Xr = s_io.positions
            if mismatch:
                s_io.status = "failed"
                s_io.reason = "; ".join([f"stereo from 3D differs from the input at {', '.join(mismatch)}"] + notes)
                out.append(s_io)
                continue
            if merged_with is not None:
                kname, improper = merged_with
                s_io.status = "merged"
                s_io.equivalent_to = kname
                how = "mirror image" if improper else "rotation and atom permutation"
                s_io.reason = "; ".join([f"symmetry-equivalent of {kname} ({how})"] + notes)
                out.append(s_io)
                continue
            built = True
            if not rotors:
                s_io.reason = "; ".join(notes)
                out.append(s_io)
                continue
            out.extend(rotamers.enumerate_rotamers(ctx.mol, s_io, Xr, rotors, settings, relax, same_rotamer,
                                                   DECIMALS_START, ring=ctx.ring))
        if built:
            kept_skeletons.append((name, tpl.form, S))

    for tpl in skipped:
        out.append(Seed(name=tpl.name, template=tpl.name, status="screened",
                        reason="twist-boats switched off (seeds.twist_boats = false)"))
    out += _nitrogen_inversions(ctx, out)
    if cut:                                 # never silent: every seed that was built says so
        for s in out:
            if s.status == "ok":
                s.reason = "; ".join(x for x in (s.reason, cut) if x)
    return out
