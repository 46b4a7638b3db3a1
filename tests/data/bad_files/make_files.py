"""Writes the structure files of the second bad-input corpus (tests/test_bad_files.py). Run once from
this folder (`python make_files.py`); the files are committed, so the tests do not depend on it, and the
hand-edited ones (query atoms, R-groups, truncations) are written out literally here."""

import gzip
from pathlib import Path

from rdkit import Chem
from rdkit.Chem import AllChem

HERE = Path(__file__).resolve().parent


def mol3d(smiles, seed=7):
    m = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(m, randomSeed=seed)
    AllChem.MMFFOptimizeMolecule(m)
    return m


def mol2d(smiles):
    m = Chem.MolFromSmiles(smiles)
    AllChem.Compute2DCoords(m)
    return m


def xyz(m, drop=()):
    pos = m.GetConformer().GetPositions()
    rows = [(a.GetSymbol(), p) for a, p in zip(m.GetAtoms(), pos) if a.GetIdx() not in drop]
    return f"{len(rows)}\nwritten by make_files.py\n" + "".join(
        f"{s} {x:.6f} {y:.6f} {z:.6f}\n" for s, (x, y, z) in rows)


def write(name, text):
    (HERE / name).write_text(text)


mch = mol3d("CC1CCCCC1")
chx = mol3d("C1CCCCC1")
mch.SetProp("_Name", "methylcyclohexane")
chx.SetProp("_Name", "cyclohexane")

# SD files
w = Chem.SDWriter(str(HERE / "two_records.sdf"))
w.write(mch)
w.write(chx)
w.close()
write("one_record_trailing_blank.sdf", Chem.MolToMolBlock(mch) + "$$$$\n\n\n$$$$\n\n")
write("empty.sdf", "")
write("UPPER_CASE.SDF", Chem.MolToMolBlock(mch) + "$$$$\n")
write("v3000.mol", Chem.MolToMolBlock(mch, forceV3000=True))
cis3d = mol3d("C[C@H]1CC[C@@H](C)CC1")
write("v3000_cis14_3d.sdf", Chem.MolToMolBlock(cis3d, forceV3000=True) + "$$$$\n")

# 2-D molfiles: stereo from wedges; without wedges; header 3D but flat
trans2d = mol2d("C[C@H]1CC[C@H](C)CC1")
Chem.WedgeMolBonds(trans2d, trans2d.GetConformer())
block = Chem.MolToMolBlock(trans2d)
write("wedges_2d_trans14.mol", block)
write("flat_3d_header_trans14.mol", block.replace("2D", "3D", 1))
write("no_wedges_2d_14.mol", Chem.MolToMolBlock(mol2d("CC1CCC(C)CC1")))

# query features
q = Chem.MolToMolBlock(mol2d("CC1CCCCC1")).splitlines()
atom = q[4]
write("query_atom_A.mol", "\n".join(q[:4] + [atom[:31] + "A  " + atom[34:]] + q[5:]) + "\n")
write("rgroup.mol", "\n".join(q[:4] + [atom[:31] + "R# " + atom[34:]] + q[5:-1] + ["M  RGP  1   1   1", "M  END"]) + "\n")
write("atom_list.mol", Chem.MolToMolBlock(Chem.MolFromSmarts("[C,N]1CCCCC1")))
bonds = [i for i, l in enumerate(q) if len(l.split()) == 4 and l.startswith("  1  2")]
qb = list(q)
qb[bonds[0]] = "  1  2  8  0"
write("query_bond_any.mol", "\n".join(qb) + "\n")

# radicals, charges, isotopes, hydrogens
rad = Chem.MolFromSmiles("[CH2]C1CCCCC1")
AllChem.Compute2DCoords(rad)
write("radical.mol", Chem.MolToMolBlock(rad))
pip = mol3d("C[NH2+]1CCCCC1".replace("C[NH2+]", "[NH2+]").replace("[NH2+]1", "[NH2+]1"))
write("piperidinium.mol", Chem.MolToMolBlock(pip))
d = Chem.MolFromSmiles("[2H]C([2H])([2H])C1CCCCC1")
AllChem.Compute2DCoords(d)
write("isotope_cd3.mol", Chem.MolToMolBlock(d))
hs = [a.GetIdx() for a in mch.GetAtoms() if a.GetAtomicNum() == 1]
partial = Chem.RWMol(mch)
for i in sorted(hs[:5], reverse=True):           # five of the fourteen hydrogens left out
    partial.RemoveAtom(i)
write("some_hydrogens_missing.sdf", Chem.MolToMolBlock(partial) + "$$$$\n")
pent = Chem.MolToMolBlock(mol2d("CC1CCCCC1")).splitlines()
counts = pent[3]
n_atoms, n_bonds = int(counts[:3]), int(counts[3:6])
extra = ["    2.0000    2.0000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0",
         "    3.0000    2.0000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0",
         "    2.0000    3.0000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0",
         "    1.0000    3.0000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0"]
new_bonds = [f"{2:>3}{n_atoms + k:>3}  1  0" for k in range(1, 5)]   # ring atom 2 gets six bonds
pent[3] = f"{n_atoms + 4:>3}{n_bonds + 4:>3}" + counts[6:]
write("carbon_with_six_bonds.mol", "\n".join(pent[:4 + n_atoms] + extra + pent[4 + n_atoms:4 + n_atoms + n_bonds]
                                             + new_bonds + pent[4 + n_atoms + n_bonds:]) + "\n")

# not molfiles
write("smiles_text.mol", "CC1CCCCC1\n")
trunc = Chem.MolToMolBlock(mch).splitlines()
write("truncated.mol", "\n".join(trunc[:9]) + "\n")
(HERE / "binary.sdf").write_bytes(bytes(range(256)) * 4)
with gzip.open(HERE / "mch.sdf.gz", "wt") as fh:
    fh.write(Chem.MolToMolBlock(mch) + "$$$$\n")

# XYZ
write("mch.xyz", xyz(mch))
write("odd_electrons.xyz", xyz(mch, drop=(hs[0],)))
write("piperidinium.xyz", xyz(pip))
write("two_frames.xyz", xyz(mch) + xyz(mch))
body = xyz(mch).splitlines()
write("count_too_large.xyz", "\n".join([str(int(body[0]) + 1)] + body[1:]) + "\n")
write("unknown_element.xyz", "\n".join(body[:2] + ["Xx" + body[2][1:]] + body[3:]) + "\n")
write("duplicate_atom.xyz", "\n".join([str(int(body[0]) + 1)] + body[1:] + [body[2]]) + "\n")
write("atomic_numbers.xyz", "\n".join(body[:2] + [("6" if l.split()[0] == "C" else "1") + l[1:] for l in body[2:]]) + "\n")
