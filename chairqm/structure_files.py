"""Reading structure files (.sdf, .mol, .xyz) into one RDKit molecule, with a clear refusal for what a
file from another program may hold that chairqm cannot use.

What is accepted, and how it is read (README, "Structure files"):

- MDL molfiles and SD files, V2000 and V3000 (RDKit's reader). An SD file must hold exactly one record;
  blank records after the last ``$$$$`` are ignored.
- 3-D coordinates give the stereo (from the geometry). 2-D coordinates, or a file whose z coordinates are
  all zero even if its header says 3D, give the stereo from wedge and hash bonds; a stereocentre without
  a wedge is unspecified (and then refused unless ``enumerate_stereo`` is set, as for SMILES).
- Hydrogens may be explicit or implicit: missing ones are added from the valences, as RDKit reads a
  molfile. Coordinates only carry stereo: every conformer is built anew by the seeds stage.
- XYZ: line 1 the atom count, line 2 a comment, then one ``Element x y z`` line per atom (extra columns
  are ignored); bonds are assigned from the geometry for the configuration's ``charge``
  (RDKit's DetermineBonds). Only closed-shell molecules: an odd electron count is refused.

Refused, with the reason: several records in one SD file; query atoms (A, Q, *, atom lists) and R-groups;
query bonds; atoms on top of each other (< 0.5 Å) in a 3-D file; XYZ files whose count line disagrees
with their atom lines, or that hold unknown elements; empty or binary files; other file types.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

from rdkit import Chem

from .errors import ChairqmError

SUFFIXES = (".sdf", ".mol", ".xyz")
#: closer than this (Å) two atoms of a 3-D file are one atom written twice, or a unit mix-up
MIN_DISTANCE_A = 0.5
_COMPRESSED = {".gz": "gzip", ".bz2": "bzip2", ".xz": "xz", ".zip": "zip", ".zst": "zstd"}


def read(name: str, path: Path, charge) -> Chem.Mol:
    """The molecule in structure file `path` (sanitised, stereo assigned, hydrogens explicit); raises
    ChairqmError starting with `name` for anything chairqm cannot use."""
    path = Path(path)
    if not path.is_file():
        raise ChairqmError(f"{name}: structure file not found: {path}")
    suffix = path.suffix.lower()
    if suffix in _COMPRESSED:
        raise ChairqmError(f"{name}: {path.name} is {_COMPRESSED[suffix]}-compressed: decompress it first "
                           f"(chairqm reads {', '.join(SUFFIXES)})")
    if suffix not in SUFFIXES:
        raise ChairqmError(f"{name}: unsupported structure file type '{suffix}': use .sdf, .mol or .xyz")
    data = path.read_bytes()
    if not data.strip():
        raise ChairqmError(f"{name}: {path.name} is empty")
    if b"\x00" in data:
        raise ChairqmError(f"{name}: {path.name} contains NUL bytes: not a text structure file")
    text = data.decode("utf-8", errors="replace")
    try:
        if suffix == ".xyz":
            return _xyz(name, path.name, text, charge)
        return _molfile(name, path.name, text, suffix)
    except ChairqmError:
        raise
    except Exception as exc:           # RDKit raises several types; only its words reach the user
        raise ChairqmError(f"{name}: cannot read {path.name}: {_first_line(exc)}") from None


def _first_line(exc) -> str:
    lines = str(exc).strip().splitlines()
    return lines[0] if lines else type(exc).__name__


# ------------------------------------------------------------------------------ molfile / SD file

def _records(text: str) -> list[str]:
    """The records of an SD file (split at lines that are exactly '$$$$'), blank ones left out."""
    parts = re.split(r"^\$\$\$\$[ \t]*\r?$", text, flags=re.M)
    # a record after a '$$$$' line starts after that line's own line break; its title line may be blank
    parts = parts[:1] + [re.sub(r"^\r?\n", "", p, count=1) for p in parts[1:]]
    return [p for p in parts if p.strip()]


def _molfile(name: str, fname: str, text: str, suffix: str) -> Chem.Mol:
    records = _records(text) if suffix == ".sdf" else [text]
    if len(records) != 1:
        titles = [r.splitlines()[0].strip() or "(no title)" for r in records[:4]]
        more = ", ..." if len(records) > 4 else ""
        raise ChairqmError(f"{name}: {fname} holds {len(records)} records ({'; '.join(titles)}{more}): chairqm "
                           "does not guess which one is meant; give one molecule per file (one entry per record)")
    block = records[0]
    if "M  END" not in block:
        raise ChairqmError(f"{name}: {fname} is not a molfile record (no 'M  END' line)")
    mol = Chem.MolFromMolBlock(block, sanitize=False, removeHs=False, strictParsing=True)
    if mol is None:
        raise ChairqmError(f"{name}: cannot read {fname} as a MOL/SDF record: check the counts line and the "
                           "atom and bond blocks")
    _refuse_queries(name, fname, mol)
    problem = _sanitize_message(mol)
    if problem:
        raise ChairqmError(f"{name}: {fname} is not a valid molecule ({problem})")
    three_d = mol.GetNumConformers() > 0 and mol.GetConformer().Is3D()
    if three_d and all(abs(z) < 1e-6 for _, _, z in mol.GetConformer().GetPositions().tolist()):
        mol.GetConformer().Set3D(False)      # flat "3D": the wedges, not the geometry, carry the stereo
        three_d = False
    if three_d:
        _refuse_overlaps(name, fname, mol)
        Chem.AssignStereochemistryFrom3D(mol)
    else:
        Chem.AssignChiralTypesFromBondDirs(mol)
        Chem.AssignStereochemistry(mol, cleanIt=True, force=True)
    return Chem.AddHs(mol, addCoords=mol.GetNumConformers() > 0)


def _refuse_queries(name: str, fname: str, mol: Chem.Mol) -> None:
    """Query atoms (A, Q, *, L lists), R-groups and query bonds describe a family of molecules, not one."""
    found = []
    for a in mol.GetAtoms():
        if a.HasProp("_MolFileRLabel"):
            found.append(f"R-group R{a.GetIntProp('_MolFileRLabel')} at atom {a.GetIdx() + 1}")
        elif a.HasQuery() or a.GetAtomicNum() == 0:
            label = a.GetQueryType() if a.HasQuery() else ""
            if not label and a.HasProp("_MolFileAtomQuery"):
                label = "atom list"
            found.append(f"query atom '{label or a.GetSymbol()}' at atom {a.GetIdx() + 1}")
    for b in mol.GetBonds():
        if b.HasQuery():
            found.append(f"query bond {b.GetBeginAtomIdx() + 1}-{b.GetEndAtomIdx() + 1}")
    if found:
        more = f" and {len(found) - 4} more" if len(found) > 4 else ""
        raise ChairqmError(f"{name}: {fname} describes a family of molecules, not one ({'; '.join(found[:4])}{more}): "
                           "replace each query atom, R-group or query bond by the actual atom or bond")


def _sanitize_message(mol) -> str:
    try:
        Chem.SanitizeMol(mol)
    except Exception as exc:
        return _first_line(exc)
    return ""


def _refuse_overlaps(name: str, fname: str, mol: Chem.Mol) -> None:
    import numpy as np
    pos = np.asarray(mol.GetConformer().GetPositions(), dtype=float)
    if len(pos) < 2:
        return
    d = np.linalg.norm(pos[:, None, :] - pos[None, :, :], axis=-1)
    d[np.diag_indices(len(pos))] = np.inf
    i, j = np.unravel_index(int(np.argmin(d)), d.shape)
    if d[i, j] < MIN_DISTANCE_A:
        a, b = sorted((int(i), int(j)))
        raise ChairqmError(f"{name}: {fname}: atoms {a + 1} and {b + 1} are {d[i, j]:.2f} Å apart (an atom written "
                           f"twice, or coordinates not in ångström): a 3-D structure needs every pair at least "
                           f"{MIN_DISTANCE_A} Å apart")


# ---------------------------------------------------------------------------------------------- XYZ

def _xyz(name: str, fname: str, text: str, charge) -> Chem.Mol:
    from rdkit.Chem import rdDetermineBonds
    lines = text.splitlines()
    try:
        n = int(lines[0].split()[0])
    except (IndexError, ValueError):
        raise ChairqmError(f"{name}: cannot read {fname} as XYZ: line 1 must be the atom count "
                           "(first line: atom count, second: comment)") from None
    if n < 1:
        raise ChairqmError(f"{name}: {fname}: the atom count on line 1 is {n}")
    body = [l for l in lines[2:] if l.strip()]
    if len(body) != n:
        raise ChairqmError(f"{name}: {fname}: line 1 says {n} atoms but {len(body)} atom line(s) follow the comment "
                           "line (several structures in one file, or a truncated file?): give one structure")
    table = Chem.GetPeriodicTable()
    atoms, electrons = [], 0
    for k, line in enumerate(body, start=3):
        parts = line.split()
        if len(parts) < 4:
            raise ChairqmError(f"{name}: {fname}: line {k} must read 'Element x y z', got {line.strip()!r}")
        sym = parts[0]
        if sym.isdigit():
            z = int(sym)
            sym = table.GetElementSymbol(z) if 0 < z < 119 else sym
        sym = sym[:1].upper() + sym[1:].lower()
        try:
            z = table.GetAtomicNumber(sym)
        except Exception:
            z = 0
        if z <= 0:
            raise ChairqmError(f"{name}: {fname}: line {k}: unknown element {parts[0]!r}")
        try:
            xyz = [float(v) for v in parts[1:4]]
        except ValueError:
            raise ChairqmError(f"{name}: {fname}: line {k}: coordinates must be numbers, got {' '.join(parts[1:4])!r}") from None
        if not all(math.isfinite(v) for v in xyz):
            raise ChairqmError(f"{name}: {fname}: line {k}: coordinates must be finite numbers")
        atoms.append((sym, xyz))
        electrons += z
    charge = int(charge or 0)
    electrons -= charge
    if electrons % 2:
        raise ChairqmError(f"{name}: {fname} has {electrons} electrons with charge {charge}, an odd count: chairqm "
                           "assigns bonds to closed-shell structures only; check the charge and whether a hydrogen "
                           "is missing (a radical is given as SMILES with 'multiplicity: 2')")
    block = f"{n}\n\n" + "".join(f"{s} {x:.8f} {y:.8f} {z:.8f}\n" for s, (x, y, z) in atoms)
    mol = Chem.MolFromXYZBlock(block)
    if mol is None or mol.GetNumAtoms() != n:
        raise ChairqmError(f"{name}: cannot read {fname} as XYZ (first line: atom count, second: comment)")
    mol = Chem.Mol(mol)
    _refuse_overlaps(name, fname, mol)
    try:
        rdDetermineBonds.DetermineBonds(mol, charge=charge)
    except Exception as exc:
        raise ChairqmError(f"{name}: cannot assign bonds to {fname} with charge {charge} "
                           f"({_first_line(exc)}): check the charge and geometry") from None
    Chem.SanitizeMol(mol)
    Chem.AssignStereochemistryFrom3D(mol)
    return mol
