"""Unique minima: merge duplicate conformers symmetry-aware, find mirror-image pairs, assign degeneracy.

Two optimised conformers are the same minimum when BOTH
  - their RMSD after optimal superposition, minimised over the molecule's symmetry-equivalent atom
    permutations (graph automorphisms; RDKit ``rdMolAlign.GetBestRMS``), is at most ``rmsd_tol`` Å, and
  - their energies agree within ``energy_tol_kcal``.
The RMSD runs over the heavy atoms plus hydrogens on heteroatoms (O–H, N–H, S–H ...).  Hydrogens on
carbon are left out: in a minimum their positions follow from the carbon frame (staggered), so they tell
no minima apart, while each CH2 pair and CH3 triple multiplies the permutations to try (2 and 6 each).
Hydrogens on heteroatoms stay in because O–H/N–H rotamers are distinct minima that only they tell apart.

Mirror images: the reflected geometry (x → −x) of conformer B is compared with conformer A the same way.
A conformer is a *chiral conformer* when it does not match its own reflection.

Degeneracy rule (what the thermochemistry multiplies each unique minimum's Boltzmann weight by):
  - Chiral molecule (its isomeric SMILES differs from its mirror's, checked on the RDKit Mol): mirror
    images are the other enantiomer, a different molecule, never counted: degeneracy 1 for every minimum,
    no mirror search.  (Stereo must be specified in the Mol; an unspecified centre counts as achiral.)
  - Achiral molecule, achiral conformer: degeneracy 1.
  - Achiral molecule, chiral conformer: it has an enantiomeric partner of the same energy.  If the
    partner is among the minima, the two are merged into one unique minimum (the lower-energy one
    represents; ``mirror_of`` names the partner) with degeneracy 2; if not, it stands alone with
    degeneracy 2 and ``mirror_of`` None.  Either way the pair is counted exactly twice, never four times.
Duplicates are never counted: a duplicate only adds its name to ``duplicates``.  Pass only conformers
that optimised successfully (status ok).

Which member represents a group: the lowest-energy one, unless `prefer` ranks the members first.  When
the molecule's symmetry swaps the analysed ring with another ring (bicyclohexyl, the cyclohexyl group's
own reference ring), one minimum can be labelled two ways: "analysed ring with its link axial, the other
ring's equatorial" and "analysed ring equatorial, the other ring's link axial".  Their energies differ
only by numerical noise, so energy alone would put the minimum into the analysed ring's axial family or
its equatorial family at random, and the A-value with it.  The stages pass
:func:`other_ring_rank` as `prefer`, which keeps the labelling whose other rings are in their lowest
state (chair, link equatorial): the analysed ring carries the difference.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from chairqm.units import KCAL_PER_HARTREE


@dataclass
class Record:
    """One optimised conformer as :func:`unique_minima` reads it (dicts with these keys work too)."""

    name: str
    positions: np.ndarray            # (N, 3) Å, atom order of the RDKit Mol
    energy_hartree: float


@dataclass
class UniqueMinimum:
    name: str                        # representative: the lowest-energy member
    energy_hartree: float            # the representative's energy
    members: list = field(default_factory=list)          # every record name it stands for (name first)
    duplicates: list = field(default_factory=list)       # names of duplicates of the representative
    mirror_of: str | None = None     # representative name of the merged mirror-image partner
    mirror_members: list = field(default_factory=list)   # the partner's names (its duplicates included)
    chiral_conformer: bool = False   # not superimposable on its own mirror image
    degeneracy: int = 1              # see the module docstring


def _get(rec, key):
    return rec[key] if isinstance(rec, dict) else getattr(rec, key)


def is_chiral_molecule(mol) -> bool:
    """True if the molecule differs from its mirror image (canonical isomeric SMILES of the Mol and of a
    copy with every tetrahedral centre inverted; double-bond E/Z is unchanged by reflection)."""
    from rdkit import Chem

    CT = Chem.ChiralType
    base = Chem.RemoveHs(Chem.Mol(mol), sanitize=False)
    mirror = Chem.Mol(base)
    flipped = False
    for atom in mirror.GetAtoms():
        tag = atom.GetChiralTag()
        if tag == CT.CHI_TETRAHEDRAL_CW:
            atom.SetChiralTag(CT.CHI_TETRAHEDRAL_CCW)
            flipped = True
        elif tag == CT.CHI_TETRAHEDRAL_CCW:
            atom.SetChiralTag(CT.CHI_TETRAHEDRAL_CW)
            flipped = True
    if not flipped:
        return False
    return Chem.MolToSmiles(base) != Chem.MolToSmiles(mirror)


def comparison_atoms(mol) -> list[int]:
    """Indices of the atoms the RMSD runs over: heavy atoms and hydrogens not bonded to carbon."""
    keep = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() != 1:
            keep.append(atom.GetIdx())
        elif not any(n.GetAtomicNum() == 6 for n in atom.GetNeighbors()):
            keep.append(atom.GetIdx())
    return keep


def _reduced(mol, keep):
    from rdkit import Chem

    rw = Chem.RWMol(Chem.Mol(mol))
    rw.RemoveAllConformers()
    for idx in sorted(set(range(mol.GetNumAtoms())) - set(keep), reverse=True):
        rw.RemoveAtom(idx)
    red = rw.GetMol()
    red.UpdatePropertyCache(strict=False)
    return red


def _without_conformers(mol):
    from rdkit import Chem

    m = Chem.Mol(mol)
    m.RemoveAllConformers()
    return m


class _Comparer:
    """Symmetry-aware best RMSD between geometries of one molecule (over `comparison_atoms`)."""

    def __init__(self, mol, all_atoms: bool = False):
        self.keep = list(range(mol.GetNumAtoms())) if all_atoms else comparison_atoms(mol)
        self.red = _without_conformers(mol) if all_atoms else _reduced(mol, self.keep)

    def _with(self, pos):
        from chairqm import chem

        return chem.with_positions(self.red, np.asarray(pos, dtype=float)[self.keep])

    def rmsd(self, pos_a, pos_b, reflect_b: bool = False) -> float:
        from rdkit.Chem import rdMolAlign

        b = np.array(pos_b, dtype=float)
        if reflect_b:
            b[:, 0] *= -1.0
        return float(rdMolAlign.GetBestRMS(self._with(b), self._with(pos_a)))


def best_rmsd(mol, pos_a, pos_b, reflect_b: bool = False, all_atoms: bool = False) -> float:
    """Best RMSD (Å) of geometry B (reflected if asked) onto A over symmetry-equivalent permutations."""
    return _Comparer(mol, all_atoms).rmsd(pos_a, pos_b, reflect_b)


def other_ring_rank(text) -> int:
    """How far the other rings of a conformer are from their lowest state, from its `other_rings` text
    ('r2=chair:equatorial;r3=twist-boat:pseudo-axial', chairqm.ring.other_ring_states): per six-membered
    ring 0 for a chair, 2 for a twist-boat, 3 for anything else, plus 1 when its link is axial or
    pseudo-axial; four- and five-membered rings' puckers count 0.  Used as `prefer` of :func:`unique_minima`."""
    rank = 0
    for part in str(text or "").split(";"):
        state = part.partition("=")[2]
        if ":" not in state:
            continue
        form, _, link = state.partition(":")
        if form in ("envelope", "twist", "puckered", "planar"):
            continue                        # a four- or five-membered ring's pucker
        rank += {"chair": 0, "twist-boat": 2}.get(form, 3) + (1 if "axial" in link else 0)
    return rank


def unique_minima(mol, records, rmsd_tol: float = 0.125, energy_tol_kcal: float = 0.1,
                  all_atoms: bool = False, prefer=None) -> list[UniqueMinimum]:
    """Group optimised conformers into unique minima (see the module docstring for the rules).

    mol: RDKit Mol with Hs and the input's stereo, atom order as in the records.  records: items (objects
    or dicts) with `name`, `positions` (N, 3) Å and `energy_hartree`.  Returns the unique minima sorted
    by energy.  all_atoms=True compares over every atom instead of heavy atoms + heteroatom H.
    prefer: optional function of a record's name returning a sortable rank; among the members of a group
    the lowest (rank, energy) represents it (default: the lowest energy).
    """
    recs = sorted(records, key=lambda r: float(_get(r, "energy_hartree")))
    if not recs:
        return []
    n = mol.GetNumAtoms()
    for r in recs:
        if np.asarray(_get(r, "positions")).shape != (n, 3):
            raise ValueError(f"record {_get(r, 'name')!r}: positions shape "
                             f"{np.asarray(_get(r, 'positions')).shape}, molecule has {n} atoms")
    cmp = _Comparer(mol, all_atoms)
    e_tol = energy_tol_kcal / KCAL_PER_HARTREE

    groups: list[dict] = []   # {rep, names}
    for r in recs:
        e, pos = float(_get(r, "energy_hartree")), np.asarray(_get(r, "positions"), dtype=float)
        for g in groups:
            if abs(e - g["e"]) <= e_tol and cmp.rmsd(g["pos"], pos) <= rmsd_tol:
                g["dups"].append(_get(r, "name"))
                g["all"].append((_get(r, "name"), e, pos))
                break
        else:
            groups.append({"name": _get(r, "name"), "e": e, "pos": pos, "dups": [],
                           "all": [(_get(r, "name"), e, pos)]})
    if prefer is not None:
        for g in groups:
            name, e, pos = min(g["all"], key=lambda m: (prefer(m[0]), m[1]))
            g.update(name=name, e=e, pos=pos, dups=[m[0] for m in g["all"] if m[0] != name])

    chiral_mol = is_chiral_molecule(mol)
    out: list[UniqueMinimum] = []
    if chiral_mol:
        for g in groups:
            out.append(UniqueMinimum(name=g["name"], energy_hartree=g["e"], members=[g["name"], *g["dups"]],
                                     duplicates=list(g["dups"]), chiral_conformer=True, degeneracy=1))
        return out

    for g in groups:
        g["chiral"] = cmp.rmsd(g["pos"], g["pos"], reflect_b=True) > rmsd_tol
    used = set()
    for i, g in enumerate(groups):
        if i in used:
            continue
        um = UniqueMinimum(name=g["name"], energy_hartree=g["e"], members=[g["name"], *g["dups"]],
                           duplicates=list(g["dups"]), chiral_conformer=g["chiral"],
                           degeneracy=2 if g["chiral"] else 1)
        if g["chiral"]:
            for j in range(i + 1, len(groups)):
                h = groups[j]
                if j in used or not h["chiral"] or abs(h["e"] - g["e"]) > e_tol:
                    continue
                if cmp.rmsd(g["pos"], h["pos"], reflect_b=True) <= rmsd_tol:
                    used.add(j)
                    um.mirror_of = h["name"]
                    um.mirror_members = [h["name"], *h["dups"]]
                    um.members += um.mirror_members
                    break
        out.append(um)
    return out
