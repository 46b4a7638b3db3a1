"""Relative configuration of the substituents on the analysed ring, in words: cis / trans for two groups,
r/c/t labels (reference group r, the others cis or trans to it) for more.

Two groups on different ring atoms are cis when they sit on the same face of the ring (IUPAC, Basic
terminology of stereochemistry, Pure Appl. Chem. 1996, 68, 2193, "cis, trans"; the r/c/t convention of
IUPAC Rule E-2.3.3, 1974). The face is read from one 3-D embedding of the perceived molecule (its
stereo tags fix it): at each substituted ring atom, the group's bond and the atom's other exocyclic bond
point to opposite faces, so the sign of (group − other) along the ring's mean-plane normal says which
face the group is on, whatever the ring's conformation. A ring atom with two groups (geminal) or whose
configuration is not set has no face, and the words leave it out.
"""

from __future__ import annotations

import numpy as np


def faces(mol, ring: list[int], substituents, seed: int = 0xC4A1) -> dict[str, int]:
    """{substituent id: +1 or -1} for every group whose face is defined (see module docstring); `mol`
    has explicit hydrogens and its stereo tags (Perceived.mol()); one ETKDG embedding with a fixed seed."""
    from rdkit import Chem
    from rdkit.Chem import AllChem

    work = Chem.Mol(mol)
    work.RemoveAllConformers()
    params = AllChem.ETKDGv3()
    params.randomSeed = seed
    if AllChem.EmbedMolecule(work, params) != 0:
        return {}
    x = work.GetConformer().GetPositions()
    ring = [int(i) for i in ring]
    centre = x[ring].mean(axis=0)
    normal = np.linalg.svd(x[ring] - centre)[2][2]
    per_atom: dict[int, list] = {}
    for s in substituents:
        per_atom.setdefault(int(s.ring_atom), []).append(s)
    centres = {int(a.GetIdx()) for a in work.GetAtoms()
               if a.GetChiralTag() != Chem.ChiralType.CHI_UNSPECIFIED}
    out = {}
    for atom, groups in per_atom.items():
        if len(groups) != 1 or atom not in centres:
            continue
        s = groups[0]
        others = [n.GetIdx() for n in work.GetAtomWithIdx(atom).GetNeighbors()
                  if n.GetIdx() not in ring and n.GetIdx() != int(s.first_atom)]
        if len(others) != 1:
            continue
        d = float(normal @ (x[int(s.first_atom)] - x[others[0]]))
        out[s.id] = 1 if d > 0 else -1
    return out


def words(mol, ring, substituents) -> str:
    """'cis' / 'trans' for two groups with a defined face; 'r-s1, c-s2, t-s3' for more (s1 the
    reference); '' when fewer than two groups have a face."""
    f = faces(mol, ring, substituents)
    ids = [s.id for s in substituents if s.id in f]
    if len(ids) < 2:
        return ""
    if len(ids) == 2:
        return "cis" if f[ids[0]] == f[ids[1]] else "trans"
    ref = ids[0]
    return ", ".join([f"r-{ref}"] + [f"{'c' if f[i] == f[ref] else 't'}-{i}" for i in ids[1:]])


def words_from_record(record: dict) -> str:
    """`words` for a molecule.json record (mapped_smiles, ring, substituents); '' when the record is
    incomplete or the geometry cannot be embedded (the report then shows the stereo tags alone)."""
    try:
        from types import SimpleNamespace

        from .molecule import mol_from_mapped
        subs = [SimpleNamespace(id=s["id"], ring_atom=s["ring_atom"], first_atom=s["first_atom"])
                for s in record.get("substituents") or []]
        return words(mol_from_mapped(record["mapped_smiles"]), record["ring"], subs)
    except Exception:                # a display helper: never break the page over it
        return ""
