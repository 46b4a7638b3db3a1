"""Intake: turn a configuration entry into a perceived molecule — its saturated six-membered ring and substituents.

Atom order is the input's: for SMILES, RDKit's parse order of the heavy atoms followed by the added
hydrogens; for structure files, the file's atom order. Every later stage uses this order, and the
perceived molecule is stored as an atom-mapped SMILES with explicit hydrogens so that order and
stereo survive a round trip through a text file.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass, field
from pathlib import Path

from rdkit import Chem, RDLogger
from rdkit.Chem.EnumerateStereoisomers import EnumerateStereoisomers, StereoEnumerationOptions

from . import cages, relstereo
from .errors import ChairqmError

RDLogger.DisableLog("rdApp.*")

MAX_Z = 86                      # GFN2-xTB is parametrised for H–Rn (Bannwarth, Ehlert, Grimme, JCTC 2019, 15, 1652)
RING_ELEMENTS = {"B", "C", "N", "O", "Si", "P", "S", "Ge", "Se"}
MAX_STEREO_ISOMERS = 16


@dataclass
class Substituent:
    id: str                     # s1, s2, ... in ring order
    ring_atom: int              # 0-based index of the ring atom it is bonded to
    first_atom: int             # the group's atom bonded to the ring atom
    atoms: list[int]            # every atom of the group, hydrogens included
    fragment: str               # canonical fragment SMILES with attachment point, e.g. [*]C
    charge: int = 0             # formal charge of the group
    # for a bond to a ring fused to the analysed one (decalins, hydrindanes): that ring's label in
    # Perceived.other_rings ('r2'); its two fusion bonds are two substituents sharing `atoms`, and
    # `fragment` is the fused part with two attachment points ('[*]CCCC[*]'), which has no A-value
    fused: str = ""


#: sizes of a ring fused (sharing one bond) to the analysed ring that chairqm seeds and measures
FUSED_RING_SIZES = (5, 6)


@dataclass
class Perceived:
    name: str
    smiles: str                 # canonical isomeric SMILES (no explicit H)
    mapped_smiles: str          # explicit-H SMILES with atom maps = index + 1 (order and stereo)
    charge: int
    multiplicity: int
    ring: list[int]             # analysed ring, ordered around the ring
    rings: list[list[int]]      # every saturated six-membered ring found
    ring_elements: list[str]
    substituents: list[Substituent]
    stereo: str                 # human-readable stereo summary
    source: str                 # 'smiles' or the file name
    input_hash: str
    note: str = ""
    reference: bool = False
    notes: list[str] = field(default_factory=list)
    # the other analysable six-membered rings (inside substituents): label r2, r3, ..., ring atoms in ring
    # order, and the bond leading from the ring towards the analysed ring (link_atom in this ring, link_to
    # its neighbour on that path), whose axial/equatorial position on this ring names its chair
    other_rings: list[dict] = field(default_factory=list)

    @property
    def mol(self) -> Chem.Mol:
        return mol_from_mapped(self.mapped_smiles)

    def to_json(self) -> str:
        return json.dumps(asdict(self), indent=1, sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> "Perceived":
        d = json.loads(text)
        d["substituents"] = [Substituent(**s) for s in d["substituents"]]
        return cls(**d)


def mol_from_mapped(mapped: str) -> Chem.Mol:
    """Rebuild a molecule (explicit H, stereo) from atom-mapped SMILES, atoms in map order."""
    params = Chem.SmilesParserParams()
    params.removeHs = False
    mol = Chem.MolFromSmiles(mapped, params)
    order = sorted(range(mol.GetNumAtoms()), key=lambda i: mol.GetAtomWithIdx(i).GetAtomMapNum())
    mol = Chem.RenumberAtoms(mol, order)
    for a in mol.GetAtoms():
        a.SetAtomMapNum(0)
    Chem.AssignStereochemistry(mol, cleanIt=True, force=True)
    return mol


def mapped_smiles(mol: Chem.Mol) -> str:
    m = Chem.Mol(mol)
    for a in m.GetAtoms():
        a.SetAtomMapNum(a.GetIdx() + 1)
    return Chem.MolToSmiles(m, allHsExplicit=False)


def canonical_fragment(smiles: str) -> str:
    """Canonical fragment SMILES with a bracketed attachment point '[*]' first, e.g. '[*]C(F)(F)F'."""
    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        raise ChairqmError(f"invalid fragment SMILES {smiles!r}")
    dummies = [a for a in mol.GetAtoms() if a.GetAtomicNum() == 0]
    if len(dummies) != 1:
        raise ChairqmError(f"fragment {smiles!r} must have exactly one attachment point '[*]'")
    for a in dummies:
        a.SetIsotope(0)
        a.SetAtomMapNum(0)
    root = dummies[0].GetIdx()
    smi = Chem.MolToSmiles(mol, rootedAtAtom=root, canonical=True)
    if smi.startswith("*"):
        smi = "[*]" + smi[1:]
    return smi


# ---------------------------------------------------------------- reading

def _sanitize_message(mol) -> str:
    try:
        Chem.SanitizeMol(mol)
    except Exception as exc:          # RDKit raises several types; we only want its words
        return str(exc).strip().splitlines()[0]
    return ""


def _from_smiles(name: str, smiles: str) -> Chem.Mol:
    raw = Chem.MolFromSmiles(smiles, sanitize=False)
    if raw is None:
        raise ChairqmError(f"{name}: cannot parse SMILES {smiles!r}: check brackets, ring-closure digits and atom symbols")
    problem = _sanitize_message(Chem.Mol(raw))
    if problem:
        raise ChairqmError(f"{name}: SMILES {smiles!r} is not a valid molecule ({problem})")
    mol = Chem.MolFromSmiles(smiles)
    return Chem.AddHs(mol)


def _from_file(name: str, path: Path, charge) -> Chem.Mol:
    """A structure file (.sdf, .mol, .xyz) read by chairqm.structure_files, which says what it accepts."""
    from .structure_files import read
    return read(name, path, charge)


# ---------------------------------------------------------------- perception

def _ring_problem(mol: Chem.Mol, ring) -> str:
    """Why a six-membered ring cannot be analysed ('' when it can): every ring atom one of RING_ELEMENTS,
    no aromatic atom, every ring bond single. Exocyclic double bonds (C=O, C=CH2, S=O, P=O) are allowed."""
    ring = list(ring)
    for i in ring:
        a = mol.GetAtomWithIdx(i)
        if a.GetIsAromatic():
            return f"ring atom {i} ({a.GetSymbol()}) is aromatic"
        if a.GetSymbol() not in RING_ELEMENTS:
            return (f"ring atom {i} is {a.GetSymbol()}; ring atoms may be "
                    f"{', '.join(sorted(RING_ELEMENTS))}")
    for k in range(6):
        b = mol.GetBondBetweenAtoms(ring[k], ring[(k + 1) % 6])
        if b.GetBondType() != Chem.BondType.SINGLE:
            return (f"the ring bond {ring[k]}-{ring[(k + 1) % 6]} is {str(b.GetBondType()).lower()}: an "
                    "endocyclic double bond makes half-chair forms, which chairqm does not build")
    return ""


def saturated_six_rings(mol: Chem.Mol) -> list[list[int]]:
    """Every six-membered ring chairqm can analyse (see :func:`_ring_problem`), each in ring order."""
    return sorted(_order_ring(mol, list(r)) for r in mol.GetRingInfo().AtomRings()
                  if len(r) == 6 and not _ring_problem(mol, r))


def is_trigonal_exocyclic(mol: Chem.Mol, ring_atom: int, first_atom: int) -> bool:
    """True for an exocyclic double bond at a trigonal ring atom (the O of a ring C=O, the CH2 of a ring
    C=CH2): it lies in the ring atom's plane, so it has no axial or equatorial position. A double bond at a
    tetrahedral ring atom (S=O, P=O) does, and stays a substituent."""
    b = mol.GetBondBetweenAtoms(ring_atom, first_atom)
    a = mol.GetAtomWithIdx(ring_atom)
    return (b is not None and b.GetBondType() == Chem.BondType.DOUBLE and a.GetSymbol() in ("B", "C", "N")
            and a.GetDegree() == 3)


def _order_ring(mol, ring):
    """Start at the lowest index, walk towards its lower-indexed ring neighbour."""
    start = min(ring)
    k = ring.index(start)
    ring = ring[k:] + ring[:k]
    if ring[-1] < ring[1]:
        ring = [ring[0]] + ring[1:][::-1]
    return ring


def _group_atoms(mol, ring_set, ring_atom, first):
    """The group's atoms (`_component`), or None when the group touches the ring again: fused, bridged
    or spiro."""
    atoms = _component(mol, ring_set, first)
    if any(nb.GetIdx() in ring_set and (i, nb.GetIdx()) != (first, ring_atom)
           for i in atoms for nb in mol.GetAtomWithIdx(i).GetNeighbors()):
        return None
    return atoms


def _fragment(mol, ring_atom, first, atoms) -> str:
    """Canonical fragment SMILES of the group, cut at the ring bond (RDKit keeps the group's stereo)."""
    if mol.GetAtomWithIdx(first).GetAtomicNum() == 1:
        return "[*][H]"
    bond = mol.GetBondBetweenAtoms(ring_atom, first)
    pieces = Chem.FragmentOnBonds(mol, [bond.GetIdx()], addDummies=True, dummyLabels=[(0, 0)])
    frags = []
    groups = Chem.GetMolFrags(pieces, asMols=True, sanitizeFrags=False, frags=frags)
    group = groups[frags[first]]
    group = Chem.RemoveHs(group, sanitize=False)
    try:
        Chem.SanitizeMol(group)
    except Exception:
        pass
    return canonical_fragment(Chem.MolToSmiles(group))


def _stereo(mol, name, enumerate_stereo):
    """Return list of (suffix, mol) with stereo fully set, or raise naming unspecified ring stereocentres.
    Centres a cage fixes (:func:`chairqm.cages.cage_fixed_centres`) are not asked for: they stay without a chiral tag
    (RDKit's embedding cannot enforce one at the inverted bridgeheads of bicyclo[1.1.1]pentane, and the
    cage builds itself right), marked with the atom property cages.CAGE_FIXED."""
    info = Chem.FindPotentialStereo(mol)
    unspecified = [s for s in info if s.specified == Chem.StereoSpecified.Unspecified]
    fixed = cages.cage_fixed_centres(mol, [s.centeredOn for s in unspecified
                                           if s.type == Chem.StereoType.Atom_Tetrahedral])
    if fixed:
        mol = Chem.Mol(mol)
        for i in fixed:
            mol.GetAtomWithIdx(i).SetBoolProp(cages.CAGE_FIXED, True)
        info = [s for s in info if not (s.type == Chem.StereoType.Atom_Tetrahedral and s.centeredOn in fixed)]
        unspecified = [s for s in unspecified
                       if not (s.type == Chem.StereoType.Atom_Tetrahedral and s.centeredOn in fixed)]
    if not unspecified:
        return [("", mol)]
    # enumeration below flips unassigned centres only: the cage's get a tag for it, removed afterwards
    tagged = Chem.Mol(mol)
    for i, tag in fixed.items():
        tagged.GetAtomWithIdx(i).SetChiralTag(tag)
    if len(info) == 1:
        # one stereo element only: the two choices are enantiomers, whose conformer energies are equal
        opts = StereoEnumerationOptions(onlyUnassigned=True, unique=True)
        return [("", cages.without_cage_tags(next(iter(EnumerateStereoisomers(tagged, options=opts)))))]
    if not enumerate_stereo:
        parts = []
        for s in unspecified:
            if s.type == Chem.StereoType.Atom_Tetrahedral:
                a = mol.GetAtomWithIdx(s.centeredOn)
                where = "ring " if a.IsInRing() else ""
                parts.append(f"{where}atom {s.centeredOn} ({a.GetSymbol()})")
            else:
                b = mol.GetBondWithIdx(s.centeredOn)
                parts.append(f"double bond {b.GetBeginAtomIdx()}-{b.GetEndAtomIdx()}")
        raise ChairqmError(f"{name}: stereo not specified at {', '.join(parts)}: write the relative configuration "
                           "(e.g. C[C@H]1CC[C@@H](C)CC1 for cis-1,4) or set 'enumerate_stereo: true'")
    opts = StereoEnumerationOptions(onlyUnassigned=True, unique=True, maxIsomers=MAX_STEREO_ISOMERS)
    polycyclic = any(s & {x.centeredOn for x in unspecified} for s in cages.ring_systems(mol))
    out, seen = [], set()
    for iso in EnumerateStereoisomers(tagged, options=opts):
        iso = cages.without_cage_tags(iso)
        smi = Chem.MolToSmiles(Chem.RemoveHs(iso))
        mirror = Chem.MolToSmiles(Chem.RemoveHs(mirror_image(iso)))
        key = min(smi, mirror)      # enantiomers have equal conformer energies: keep one of each pair
        if key in seen:
            continue
        seen.add(key)
        if polycyclic and not cages.buildable(Chem.RemoveHs(iso)):
            continue                # a combination no 3D structure has (one norbornane bridgehead inverted alone)
        out.append((f"-iso{len(out) + 1}", iso))
    return out


def mirror_image(mol):
    """The molecule with every tetrahedral centre inverted (its enantiomer; a meso form maps to itself)."""
    m = Chem.Mol(mol)
    for a in m.GetAtoms():
        t = a.GetChiralTag()
        if t == Chem.ChiralType.CHI_TETRAHEDRAL_CW:
            a.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
        elif t == Chem.ChiralType.CHI_TETRAHEDRAL_CCW:
            a.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CW)
    return m


def _stereo_summary(mol) -> str:
    labels = []
    Chem.AssignStereochemistry(mol, cleanIt=True, force=True)
    for s in Chem.FindPotentialStereo(mol):
        if s.type == Chem.StereoType.Atom_Tetrahedral and mol.GetAtomWithIdx(s.centeredOn).HasProp(cages.CAGE_FIXED):
            continue
        if s.type == Chem.StereoType.Atom_Tetrahedral:
            a = mol.GetAtomWithIdx(s.centeredOn)
            lab = a.GetProp("_CIPCode") if a.HasProp("_CIPCode") else ("@" if a.GetChiralTag() == Chem.ChiralType.CHI_TETRAHEDRAL_CCW else "@@")
            labels.append(f"{s.centeredOn}{lab}")
        elif s.type == Chem.StereoType.Bond_Double:
            labels.append(f"b{s.centeredOn}{s.descriptor}")
    return " ".join(labels) if labels else "none"


def perceive(entry: dict, base_dir: Path | str = ".", settings: dict | None = None) -> list[Perceived]:
    """Perceive one configuration entry; a list because `enumerate_stereo` may expand it into isomers."""
    settings = settings or {}
    name = entry["name"]
    if "smiles" in entry:
        mol = _from_smiles(name, entry["smiles"])
        source = "smiles"
        raw = entry["smiles"].encode()
    else:
        path = Path(entry["file"])
        if not path.is_absolute():
            path = Path(base_dir) / path
        mol = _from_file(name, path, entry.get("charge", 0))
        source = path.name
        raw = path.read_bytes() if path.is_file() else b""
    if len(Chem.GetMolFrags(mol)) > 1:
        raise ChairqmError(f"{name}: the structure has {len(Chem.GetMolFrags(mol))} disconnected fragments: "
                           "give one connected molecule (no salts or solvent)")
    bad = sorted({a.GetSymbol() for a in mol.GetAtoms() if a.GetAtomicNum() > MAX_Z or a.GetAtomicNum() == 0})
    if bad:
        raise ChairqmError(f"{name}: element(s) {', '.join(bad)} are outside GFN2-xTB's parametrisation (H to Rn)")
    charge = Chem.GetFormalCharge(mol)
    if "charge" in entry and int(entry["charge"]) != charge and source != mol and "smiles" in entry:
        raise ChairqmError(f"{name}: 'charge: {entry['charge']}' disagrees with the structure's formal charge {charge}")
    if "charge" in entry:
        charge = int(entry["charge"]) if "smiles" not in entry else charge
    radicals = sum(a.GetNumRadicalElectrons() for a in mol.GetAtoms())
    if radicals and "multiplicity" not in entry:
        raise ChairqmError(f"{name}: the structure has {radicals} unpaired electron(s): add 'multiplicity: {radicals + 1}' "
                           "if the radical is intended, or fix the hydrogens")
    multiplicity = int(entry.get("multiplicity", radicals + 1))
    nelec = sum(a.GetAtomicNum() for a in mol.GetAtoms()) - charge
    if (nelec + multiplicity - 1) % 2:
        raise ChairqmError(f"{name}: multiplicity {multiplicity} is impossible with {nelec} electrons")
    rings = saturated_six_rings(mol)
    if not rings:
        six = [r for r in mol.GetRingInfo().AtomRings() if len(r) == 6]
        why = ("; ".join(_ring_problem(mol, r) for r in six) if six else
               "its rings form a bridged system (as in norbornane), whose six-membered cycles chairqm does not "
               "analyse" if _bridged(mol) else "it has no six-membered ring")
        raise ChairqmError(f"{name}: no six-membered ring chairqm can analyse (single ring bonds, ring atoms "
                           f"{', '.join(sorted(RING_ELEMENTS))}, none aromatic): {why}")
    out = []
    for suffix, iso in _stereo(mol, name, settings.get("enumerate_stereo", False)):
        out.append(_describe(iso, name + suffix, rings, charge, multiplicity, source, raw, entry))
    return out


def _describe(mol, name, rings, charge, multiplicity, source, raw, entry) -> Perceived:
    ring = _choose_ring(mol, rings, entry.get("ring"), name)
    ring_set = set(ring)
    subs = []
    for ra in ring:
        atom = mol.GetAtomWithIdx(ra)
        for nb in sorted(atom.GetNeighbors(), key=lambda a: a.GetIdx()):
            j = nb.GetIdx()
            if j in ring_set:
                continue
            if nb.GetAtomicNum() == 1 and atom.GetSymbol() != "N":
                continue
            if is_trigonal_exocyclic(mol, ra, j):
                continue                 # C=O, C=CH2: in the ring atom's plane, no axial/equatorial
            group = _group_atoms(mol, ring_set, ra, j)
            fused_to = None
            if group is None:
                fused_to = _fused_ring(mol, ring, ra, j)
                if fused_to is None:
                    raise ChairqmError(f"{name}: the analysed ring {ring} is {_system_kind(mol, ring)}, which "
                                       "chairqm does not analyse: an analysed ring may share one bond with "
                                       "a saturated five- or six-membered ring (as in the decalins and "
                                       "hydrindanes) and nothing else; name another ring with 'ring:' where "
                                       "the molecule has one")
                group = _component(mol, ring_set, j)
                frag = _fused_fragment(mol, ring, group)
            else:
                frag = _fragment(mol, ra, j, group)
            gcharge = sum(mol.GetAtomWithIdx(k).GetFormalCharge() for k in group)
            subs.append(Substituent(id=f"s{len(subs) + 1}", ring_atom=ra, first_atom=j, atoms=group,
                                    fragment=frag, charge=gcharge,
                                    fused="" if fused_to is None else ",".join(map(str, fused_to))))
    notes = []
    if len(rings) > 1:
        notes.append(f"{len(rings)} saturated six-membered rings; analysing ring {ring}")
    fused = []
    for s_ in subs:
        if s_.fused and s_.fused not in fused:
            fused.append(s_.fused)
    fused_rings = [[int(i) for i in f.split(",")] for f in fused]
    others = _other_rings(mol, ring, rings, fused_rings)
    for s_ in subs:
        if s_.fused:
            atoms = {int(i) for i in s_.fused.split(",")}
            s_.fused = next(o["label"] for o in others if set(o["atoms"]) == atoms)
    for o in others:
        if o.get("fused"):
            kind = _fusion_kind(mol, ring, o, subs)
            o["fusion"] = kind
            notes.append(f"ring {o['label']} ({len(o['atoms'])} atoms) is {kind}-fused to the analysed ring"
                         + (": the pair cannot ring-flip (locked)" if kind == "trans" else
                            ": both rings flip together" if kind == "cis" else ""))
    return Perceived(
        name=name,
        smiles=Chem.MolToSmiles(Chem.RemoveHs(mol)),
        mapped_smiles=mapped_smiles(mol),
        charge=charge, multiplicity=multiplicity,
        ring=ring, rings=rings,
        ring_elements=[mol.GetAtomWithIdx(i).GetSymbol() for i in ring],
        substituents=subs,
        stereo=_stereo_summary(Chem.Mol(mol)),
        source=source,
        input_hash=hashlib.sha256(raw).hexdigest()[:16],
        note=entry.get("note", ""),
        reference=bool(entry.get("reference", False)),
        notes=notes,
        other_rings=others,
    )


def _bridged(mol) -> bool:
    """True when two rings of the smallest set share more than one bond's worth of atoms, or two atoms
    that are not bonded: a bridged ring system."""
    rings = [set(r) for r in mol.GetRingInfo().AtomRings()]
    for i, a in enumerate(rings):
        for b in rings[i + 1:]:
            shared = a & b
            if len(shared) > 2 or (len(shared) == 2 and mol.GetBondBetweenAtoms(*sorted(shared)) is None):
                return True
    return False


def _system_kind(mol, ring) -> str:
    """'spiro-joined', 'fused' or 'bridged' to another ring, from the atoms it shares with it (SSSR)."""
    kinds = []
    for other in mol.GetRingInfo().AtomRings():
        shared = set(other) & set(ring)
        if not shared or set(other) == set(ring):
            continue
        if len(shared) == 1:
            kinds.append("spiro-joined to another ring (a shared atom)")
        elif len(shared) == 2 and mol.GetBondBetweenAtoms(*sorted(shared)) is not None:
            if len(other) in FUSED_RING_SIZES and not any(mol.GetAtomWithIdx(i).GetIsAromatic() for i in other):
                continue                 # a supported fusion (decalin, hydrindane): not the reason
            kinds.append(f"fused to a {len(other)}-membered{' aromatic' if any(mol.GetAtomWithIdx(i).GetIsAromatic() for i in other) else ''} "
                         "ring (fused saturated five- and six-membered rings are supported)")
        else:
            kinds.append("part of a bridged ring system")
    return kinds[0] if kinds else "part of a fused, bridged or spiro ring system"


def _component(mol, ring_set, first) -> list[int]:
    """Every atom reachable from `first` without entering the analysed ring (hydrogens included)."""
    seen = {first}
    stack = [first]
    while stack:
        i = stack.pop()
        for nb in mol.GetAtomWithIdx(i).GetNeighbors():
            j = nb.GetIdx()
            if j not in ring_set and j not in seen:
                seen.add(j)
                stack.append(j)
    return sorted(seen)


def _fused_ring(mol, ring, ring_atom, first):
    """The ring fused to the analysed one through the bond at `ring_atom` that `first` starts, in ring
    order, or None when the analysed ring is not simply fused there: the part reached through `first`
    must touch the analysed ring at exactly two bonded atoms, and a saturated ring of FUSED_RING_SIZES
    atoms must run through `first` and share exactly that bond with the analysed ring."""
    ring_set = set(ring)
    comp = _component(mol, ring_set, first)
    touching = {nb.GetIdx() for i in comp for nb in mol.GetAtomWithIdx(i).GetNeighbors() if nb.GetIdx() in ring_set}
    if len(touching) != 2 or ring_atom not in touching or mol.GetBondBetweenAtoms(*sorted(touching)) is None:
        return None
    for r in mol.GetRingInfo().AtomRings():
        if len(r) in FUSED_RING_SIZES and first in r and set(r) & ring_set == touching:
            if any(mol.GetAtomWithIdx(i).GetIsAromatic() for i in r):
                return None
            return _order_ring(mol, list(r))
    return None


def _fused_fragment(mol, ring, atoms) -> str:
    """The fused part cut at its two bonds to the analysed ring, with two attachment points."""
    ring_set = set(ring)
    keep = set(atoms)
    bonds = [b.GetIdx() for b in mol.GetBonds()
             if (b.GetBeginAtomIdx() in keep) != (b.GetEndAtomIdx() in keep)
             and (b.GetBeginAtomIdx() in ring_set or b.GetEndAtomIdx() in ring_set)]
    pieces = Chem.FragmentOnBonds(mol, bonds, addDummies=True, dummyLabels=[(0, 0)] * len(bonds))
    frags = []
    groups = Chem.GetMolFrags(pieces, asMols=True, sanitizeFrags=False, frags=frags)
    group = Chem.RemoveHs(groups[frags[min(keep)]], sanitize=False)
    for a in group.GetAtoms():
        a.SetChiralTag(Chem.ChiralType.CHI_UNSPECIFIED)      # the fusion's stereo is the molecule's
    try:
        Chem.SanitizeMol(group)
    except Exception:
        pass
    return Chem.MolToSmiles(group).replace("*", "[*]").replace("[[*]]", "[*]")


def _fusion_kind(mol, ring, other, substituents) -> str:
    """'cis' or 'trans' for a ring fused to the analysed ring: the relative configuration of its two bonds
    into the analysed ring (`relstereo.words` of the two fused substituents), '' when it cannot be told."""
    bonds = [s for s in substituents if s.fused == other["label"]]
    return relstereo.words(mol, ring, bonds) if len(bonds) == 2 else ""


def _other_rings(mol, ring, rings, fused=()) -> list[dict]:
    """The rings fused to the analysed one (`fused`, in ring order; 'fused': True), the analysable
    six-membered rings other than the analysed one, then the saturated four- and five-membered rings
    (cyclobutyl, oxetanyl, azetidinyl, cyclopentyl, tetrahydrofuranyl, pyrrolidinyl), each with the bond that leads from it towards the analysed ring (shortest path
    through the molecular graph; for a fused ring, the first shared atom's bond to its analysed-ring
    neighbour outside the fused ring)."""
    out = []
    for r in fused:
        shared = [a for a in ring if a in set(r)]
        a = shared[0]
        k = ring.index(a)
        nbr = ring[k - 1] if ring[k - 1] not in set(r) else ring[(k + 1) % 6]
        out.append({"label": f"r{len(out) + 2}", "atoms": list(r), "link_atom": int(a), "link_to": int(nbr),
                    "fused": True})
    small = sorted(_order_ring(mol, list(r)) for r in mol.GetRingInfo().AtomRings()
                   if len(r) in (4, 5) and not any(mol.GetAtomWithIdx(i).GetIsAromatic() for i in r)
                   and all(mol.GetBondBetweenAtoms(r[k], r[(k + 1) % len(r)]).GetBondType() == Chem.BondType.SINGLE
                           for k in range(len(r))))
    for r in list(rings) + small:
        if r == ring or set(r) & set(ring):
            continue
        if cages.in_rigid_ring_system(mol, r, ring):
            continue                      # a cage or fused polycycle inside a group stays as built
        best = None
        for a in r:
            for b in ring:
                path = Chem.GetShortestPath(mol, a, b)
                if path and (best is None or len(path) < len(best)):
                    best = path
        entry = {"label": f"r{len(out) + 2}", "atoms": list(r), "link_atom": int(best[0]), "link_to": int(best[1])}
        if len(r) == 6:
            from .other_rings import inverting_nitrogens
            nitrogens = inverting_nitrogens(mol, r, best[0])
            if nitrogens:                 # ring N-H / N-R that inverts: its side is part of the ring's state
                entry["nitrogens"] = [[int(n), int(x), mol.GetAtomWithIdx(int(x)).GetSymbol()] for n, x in nitrogens]
        out.append(entry)
    return out


def _choose_ring(mol, rings, wanted=None, name="molecule"):
    """The analysed ring. `wanted` (the entry's `ring:`) names it by six atom indices or a SMARTS matching
    its six atoms; otherwise the ring carrying most heavy-atom groups wins, ties going to the ring with
    fewest heteroatoms (a cyclohexane before a piperidine that hangs on it), then to the lowest indices."""
    if wanted is not None:
        if isinstance(wanted, str):
            patt = Chem.MolFromSmarts(wanted)
            if patt is None:
                raise ChairqmError(f"{name}: ring: {wanted!r} is not a valid SMARTS")
            hits = {frozenset(m) for m in mol.GetSubstructMatches(patt)}
            chosen = [r for r in rings if frozenset(r) in hits or any(frozenset(r) <= h for h in hits)]
        else:
            chosen = [r for r in rings if set(r) == {int(i) for i in wanted}]
        if len(chosen) != 1:
            found = "; ".join(str(r) for r in rings)
            raise ChairqmError(f"{name}: ring: {wanted!r} matches {len(chosen)} of the analysable six-membered "
                               f"rings ({found}): give one ring's six atom indices or a SMARTS of it")
        return chosen[0]

    def count(r):
        s = set(r)
        return sum(1 for i in r for nb in mol.GetAtomWithIdx(i).GetNeighbors()
                   if nb.GetIdx() not in s and nb.GetAtomicNum() > 1)

    def hetero(r):
        return sum(1 for i in r if mol.GetAtomWithIdx(i).GetSymbol() != "C")
    return sorted(rings, key=lambda r: (cages.in_bridged_system(mol, r), -count(r), hetero(r), r))[0]


def substituents_table(p: Perceived):
    import pandas as pd
    return pd.DataFrame([{"substituent": s.id, "ring_atom": s.ring_atom, "fragment": s.fragment}
                         for s in p.substituents], columns=["substituent", "ring_atom", "fragment"])
