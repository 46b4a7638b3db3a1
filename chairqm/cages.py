"""Cages inside groups: which apparent stereocentres a cage decides, and which rings of a group stay rigid.

RDKit's potential-stereo perception marks the bridgeheads of cages (bicyclo[1.1.1]pentane, norbornane,
adamantane, cubane, bicyclo[2.2.2]octane) as possible ring stereocentres; :func:`cage_fixed_centres` finds
those whose configuration the cage decides, so that chairqm.molecule does not ask for them while it still
asks for the real ones (cis/trans next to a cage, exo/endo of a 2-norbornyl). :func:`in_rigid_ring_system`
keeps a group's bridged or fused polycycle out of the rings seeded in chair or pucker states, and
:func:`in_bridged_system` keeps a cage's six-membered rings from being chosen as the analysed ring.
"""

from __future__ import annotations

from rdkit import Chem
from rdkit.Chem import AllChem


def ring_systems(mol) -> list[set[int]]:
    """The atoms of each polycyclic ring system (rings joined through shared atoms, two rings or more)."""
    systems = []
    for r in mol.GetRingInfo().AtomRings():
        joined = [s for s in systems if s[0] & set(r)]
        atoms, count = set(r), 1
        for s in joined:
            atoms |= s[0]
            count += s[1]
            systems.remove(s)
        systems.append((atoms, count))
    return [atoms for atoms, count in systems if count > 1]


def _invert(mol, atoms):
    m = Chem.Mol(mol)
    for i in atoms:
        a = m.GetAtomWithIdx(i)
        a.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CW if a.GetChiralTag() == Chem.ChiralType.CHI_TETRAHEDRAL_CCW
                       else Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
    return m


def _same_stereoisomer(a, b) -> bool:
    """Same constitution and configuration: a graph isomorphism that respects the chiral tags (RDKit's
    chirality-aware substructure match in both directions; unlike canonical SMILES it is not misled by the
    ring stereo of cages such as adamantane or cubane)."""
    return (a.GetNumAtoms() == b.GetNumAtoms() and a.HasSubstructMatch(b, useChirality=True)
            and b.HasSubstructMatch(a, useChirality=True))


def buildable(mol, seed=0xC0DE) -> bool:
    """True when RDKit's distance geometry builds a 3D structure with every chiral tag of `mol` kept."""
    m = Chem.AddHs(mol)
    return any(AllChem.EmbedMolecule(m, randomSeed=seed + k, enforceChirality=True, maxAttempts=5) >= 0
               for k in range(2))


def cage_fixed_centres(mol, centres) -> dict[int, Chem.ChiralType]:
    """Of these unspecified tetrahedral centres, those inside a polycyclic ring system that are no free
    stereocentre, each with the chiral tag one real 3D structure of the molecule has there.

    A cage's bridgeheads (bicyclo[1.1.1]pentane, adamantane, cubane, bicyclo[2.2.2]octane) look like
    ring stereocentres to RDKit's potential-stereo perception, but the cage decides their configuration.
    Tested on one embedding of the molecule (its specified stereo kept; hydrogens implicit), ring system
    by ring system: a centre whose inversion alone gives the same molecule is fixed; of the others, those
    whose inversion alone no 3D structure can have (RDKit's embedding fails with it enforced: one
    bridgehead of a norbornane) are inverted together, and they are fixed when that gives the same
    molecule again (the cage's mirror image), free stereocentres when it gives another one that can be
    built (endo instead of exo 2-norbornyl). When RDKit cannot rebuild even the embedded configuration
    with its tags enforced (the inverted bridgehead carbons of bicyclo[1.1.1]pentane), every centre
    that is not fixed by symmetry goes to that joint test."""
    systems = [s for s in ring_systems(mol) if s & set(centres)]
    if not systems:
        return {}
    work = Chem.Mol(mol)
    for a in work.GetAtoms():
        a.SetIntProp("_chairqm_index", a.GetIdx())
    m3d = Chem.AddHs(work)
    if AllChem.EmbedMolecule(m3d, randomSeed=0xC0DE, enforceChirality=True, maxAttempts=20) < 0:
        return {}
    Chem.AssignAtomChiralTagsFromStructure(m3d, replaceExistingTags=False)
    for a in m3d.GetAtoms():             # that tags every atom: keep the input's and the centres asked about
        i = a.GetIntProp("_chairqm_index") if a.HasProp("_chairqm_index") else -1
        if i < 0 or (i not in centres and mol.GetAtomWithIdx(i).GetChiralTag() != a.GetChiralTag()):
            a.SetChiralTag(Chem.ChiralType.CHI_UNSPECIFIED)
    tags = {a.GetIntProp("_chairqm_index"): a.GetChiralTag() for a in m3d.GetAtoms() if a.HasProp("_chairqm_index")}
    base = Chem.RemoveHs(m3d)
    base.RemoveAllConformers()
    where = {a.GetIntProp("_chairqm_index"): a.GetIdx() for a in base.GetAtoms()}
    tetra = (Chem.ChiralType.CHI_TETRAHEDRAL_CW, Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
    trusted = None                       # can RDKit build the embedded configuration back? (asked once)
    fixed = {}
    for atoms in systems:
        inside = [c for c in centres if c in atoms and c in where
                  and base.GetAtomWithIdx(where[c]).GetChiralTag() in tetra]
        found = [c for c in inside if _same_stereoisomer(base, _invert(base, [where[c]]))]
        rest = [c for c in inside if c not in found]
        if rest:
            if trusted is None:
                trusted = buildable(base)
            forced = [c for c in rest if not trusted or not buildable(_invert(base, [where[c]]))]
            if forced:
                flipped = _invert(base, [where[c] for c in forced])
                if _same_stereoisomer(base, flipped) or (trusted and not buildable(flipped)):
                    found += forced
        fixed.update({c: tags[c] for c in found})
    return fixed


CAGE_FIXED = "_chairqm_cage_fixed"     # atom property: a centre whose configuration its cage decides


def without_cage_tags(mol):
    """A copy of `mol` with no chiral tag on the atoms marked CAGE_FIXED."""
    m = Chem.Mol(mol)
    for a in m.GetAtoms():
        if a.HasProp(CAGE_FIXED):
            a.SetChiralTag(Chem.ChiralType.CHI_UNSPECIFIED)
    return m


def in_rigid_ring_system(mol, r, ring) -> bool:
    """True when ring `r` of a group shares two or more atoms with another ring of the molecule (not the
    analysed `ring`): a bridged or fused polycycle, such as the cages bicyclo[1.1.1]pentyl, norbornyl,
    adamantyl, cubyl and bicyclo[2.2.2]octyl. Such a ring is not seeded in chair or pucker states
    (chairqm.other_rings restrains each ring's torsions on its own, which would bend a cage, whose rings
    cannot flip, and would set the rings of a fused polycycle independently of each other): it is left
    rigid, as the embedding built it, and its state is not labelled."""
    for other in mol.GetRingInfo().AtomRings():
        if set(other) != set(r) and set(other) != set(ring) and len(set(other) & set(r)) >= 2:
            return True
    return False


def in_bridged_system(mol, r) -> bool:
    """True when six-membered ring `r` is part of a bridged ring system (it shares three or more atoms, or
    two unbonded ones, with another ring: adamantane, bicyclo[2.2.2]octane, norbornane): never chosen
    before a ring that is not, so that 1-adamantylcyclohexane is analysed at its cyclohexane."""
    for other in mol.GetRingInfo().AtomRings():
        shared = set(other) & set(r)
        if set(other) != set(r) and (len(shared) >= 3 or (len(shared) == 2 and mol.GetBondBetweenAtoms(
                *sorted(shared)) is None)):
            return True
    return False
