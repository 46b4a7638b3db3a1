"""Tabulated experimental A-values: load the packaged table and look a group up by its fragment SMILES.

An A-value is the free-energy difference G(axial) − G(equatorial) of a monosubstituted cyclohexane,
in kcal/mol (E. L. Eliel and S. H. Wilen, Stereochemistry of Organic Compounds, Wiley 1994, ch. 11).
The table `chairqm/data/avalues.csv` has one row per group with the columns in `COLUMNS`; every value
carries its published source, and `from_memory` is true for values recalled rather than read off the
document. Groups are keyed by their canonical fragment SMILES with the attachment point written
'[*]' first (e.g. '[*]C(F)(F)F'), the same canonical form the intake stage gives each substituent.
"""

from __future__ import annotations

import functools
import io
from importlib import resources

import pandas as pd

from .errors import ChairqmError

TABLE_FILE = "avalues.csv"
COLUMNS = ["group", "fragment", "a_value_kcal", "range_low_kcal", "range_high_kcal", "temperature_k",
           "solvent", "method", "source", "from_memory", "note"]


def canonical_fragment(smiles: str) -> str:
    """Canonical fragment SMILES with exactly one attachment point, written '[*]' first.

    Isotope labels and atom maps on the attachment point are dropped ('[1*]C' → '[*]C'). The
    canonical form is the intake stage's (`chairqm.molecule.canonical_fragment`: RDKit canonical
    ranking, SMILES rooted at the attachment point), so a table row and a perceived substituent match.
    Raises ChairqmError for text that is not a SMILES or that has zero or several attachment points.
    """
    if not isinstance(smiles, str) or not smiles.strip():
        raise ChairqmError(f"fragment {smiles!r} is not a SMILES string: write the group with one "
                           "attachment point, e.g. '[*]C(F)(F)F'")
    from .molecule import canonical_fragment as _canonical
    return _canonical(smiles.strip())


@functools.lru_cache(maxsize=1)
def _read_table() -> pd.DataFrame:
    text = resources.files("chairqm").joinpath("data", TABLE_FILE).read_text(encoding="utf-8")
    df = pd.read_csv(io.StringIO(text), dtype={"group": str, "fragment": str, "solvent": str,
                                               "method": str, "source": str, "note": str})
    missing = [c for c in COLUMNS if c not in df.columns]
    if missing:
        raise RuntimeError(f"packaged A-value table lacks columns {missing}")
    df = df[COLUMNS].copy()
    for c in ("solvent", "method", "note"):
        df[c] = df[c].fillna("")
    for c in ("a_value_kcal", "range_low_kcal", "range_high_kcal", "temperature_k"):
        df[c] = df[c].astype(float)
    df["from_memory"] = df["from_memory"].map(
        lambda v: v if isinstance(v, bool) else str(v).strip().lower() == "true").astype(bool)
    if df["fragment"].duplicated().any():
        raise RuntimeError("packaged A-value table lists a fragment twice: "
                           f"{sorted(df.loc[df['fragment'].duplicated(), 'fragment'])}")
    return df


def load_table() -> pd.DataFrame:
    """The packaged A-value table as a new DataFrame (columns `COLUMNS`; kcal/mol; temperature_k NaN if unknown)."""
    return _read_table().copy()


def lookup(fragment: str) -> pd.Series | None:
    """The table row (a pandas Series) of the group `fragment` after canonicalisation, or None if not tabulated."""
    key = canonical_fragment(fragment)
    df = _read_table()
    hit = df[df["fragment"] == key]
    if hit.empty:
        return None
    return hit.iloc[0].copy()


def a_value(fragment: str) -> float | None:
    """The tabulated A-value of `fragment` in kcal/mol, or None if the group is not tabulated."""
    row = lookup(fragment)
    return None if row is None else float(row["a_value_kcal"])
