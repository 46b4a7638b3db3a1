"""Tabulated experimental A-values: load the packaged table and look a group up by its fragment SMILES.

An A-value is the free-energy difference G(axial) − G(equatorial) of a monosubstituted cyclohexane,
in kcal/mol (E. L. Eliel and S. H. Wilen, Stereochemistry of Organic Compounds, Wiley 1994, ch. 11).
The table `chairqm/data/avalues.csv` has one row per group with the columns in `COLUMNS`. Groups are
keyed by their canonical fragment SMILES with the attachment point written '[*]' first (e.g.
'[*]C(F)(F)F'), the same canonical form the intake stage gives each substituent.

Where the values come from. The table is built by `benchmarks/build_avalue_table.py` from a published
compilation of experimental A-values (H. J. Reich's table "Conformational Energies (A-Values)", as
transcribed in the project's shared data, with every value printed, its conditions and the original
references as the compilation prints them); nothing reads the compilation at run time. Per group:

- ``a_value_kcal``: the first value the compilation prints with an original reference (mostly direct
  low-temperature NMR: Jensen, Bushweller and Beck 1969; Schneider and Hoppen 1978; ...); only where
  there is none, the compilation's first single value, which comes from its general references (Hirsch
  1967, Jensen and Bushweller 1971, Eliel and Wilen, Eliel, Wilen and Doyle 2001) and names no method,
  solvent or temperature. Those older values are often lower (F 0.15 against 0.28 and 0.36), so the
  rule prefers the attributed measurement. ``compilation_value_kcal`` keeps the compilation's own
  headline; ``range_low_kcal``/``range_high_kcal`` span every value it prints; ``conditions`` and
  ``references`` hold its text verbatim; ``source`` is the reference of the value used.
- Temperature: ``temperature_k`` only where a temperature is printed (the O-SiR3 values, 200 K in
  CD2Cl2); ``temperature_low_k``/``temperature_high_k`` give the 170–200 K band the compilation states for
  its direct low-temperature NMR values, so a comparison can be made there instead of at 298 K; empty
  when the method is not stated.
- ``from_memory`` is false for every compilation value. The one value kept from elsewhere is tert-butyl
  4.9 (Eliel and Wilen 1994, recalled, ``from_memory`` true): the compilation prints only "> 4.5" and the
  additive estimate and the calibration need a number; its range starts at the compilation's bound.
- Ambiguities, as the compilation's notes say: SMe 1.07 and 1.1 carry the same reference key (1.07, the
  first, is used); NH2's first entry is a range (1.23, the next single value, is used); Br 0.49 (ref 9)
  sits behind a malformed tag (kept in the range); the O-SiR3 ref-10 values are probably Marzabadi et al.
  2003; Hirsch's table is printed as volume 3 (volume 1 is likely). Each row's ``note`` says which apply.
- Left out: carbodiimido (the compilation does not say what R is), silyl (from a teaching table without
  a reference), trimethylphosphonio and dimethylthiophosphoryl (lower bounds only). Ethoxycarbonyl and
  cyclopropyl are not in the compilation and are not tabulated (the run computes them).
- Charged groups (carboxylate, ammonio, thiolate) stay in the table for reference; the additive model
  treats charged groups as outside the model. Isotope-labelled rows (D, T, OCD3) can never match a run,
  which refuses isotope labels; they are kept as printed.
"""

from __future__ import annotations

import functools
import io
import re
from importlib import resources

import pandas as pd

from .errors import ChairqmError

TABLE_FILE = "avalues.csv"
COLUMNS = ["group", "fragment", "a_value_kcal", "range_low_kcal", "range_high_kcal", "temperature_k",
           "temperature_low_k", "temperature_high_k", "solvent", "method", "source", "from_memory", "note",
           "compilation_value_kcal", "conditions", "references", "compilation"]
TEXT_COLUMNS = ("group", "fragment", "solvent", "method", "source", "note", "conditions", "references",
                "compilation")
NUMBER_COLUMNS = ("a_value_kcal", "range_low_kcal", "range_high_kcal", "temperature_k", "temperature_low_k",
                  "temperature_high_k", "compilation_value_kcal")


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
    # comment=None (the default): SMILES hold '#', which must never start a comment
    df = pd.read_csv(io.StringIO(text), dtype={c: str for c in TEXT_COLUMNS})
    missing = [c for c in COLUMNS if c not in df.columns]
    if missing:
        raise RuntimeError(f"packaged A-value table lacks columns {missing}")
    df = df[COLUMNS].copy()
    for c in ("solvent", "method", "note", "conditions", "references", "compilation"):
        df[c] = df[c].fillna("")
    for c in NUMBER_COLUMNS:
        df[c] = df[c].astype(float)
    df["from_memory"] = df["from_memory"].map(
        lambda v: v if isinstance(v, bool) else str(v).strip().lower() == "true").astype(bool)
    if df["fragment"].duplicated().any():
        raise RuntimeError("packaged A-value table lists a fragment twice: "
                           f"{sorted(df.loc[df['fragment'].duplicated(), 'fragment'])}")
    return df


def load_table() -> pd.DataFrame:
    """The packaged A-value table as a new DataFrame (columns `COLUMNS`; kcal/mol; temperatures NaN if not stated)."""
    return _read_table().copy()


def lookup(fragment: str) -> pd.Series | None:
    """The table row (a pandas Series) of the group `fragment` after canonicalisation, or None if not tabulated."""
    key = canonical_fragment(fragment)
    df = _read_table()
    hit = df[df["fragment"] == key]
    if hit.empty:
        return None
    return hit.iloc[0].copy()


def _year(text: str) -> str:
    return next((w.strip(",;.()") for w in text.split()
                 if len(w.strip(",;.()")) == 4 and w.strip(",;.()").isdigit()
                 and w.strip(",;.()").startswith(("19", "20"))), "")


def _cite_one(ref: str) -> str:
    """'Jensen, F. R.; Bushweller, C. H.; Beck, B. H. J. Am. Chem. Soc. 1969, 91, 344' -> 'Jensen et al. 1969'."""
    ref = ref.strip()
    for mark in ("(a) ", "(b) "):
        ref = ref.removeprefix(mark)
    if "authors not given" in ref:
        return f"{ref.split(',')[0].strip()}"
    authors = re.split(r" (?:J\. Am\. Chem\.|J\. Org\. Chem\.|J\. Chem\.|Tetrahedron|Top\. |Adv\. )", ref)[0]
    names = [a.split(",")[0].strip() for a in authors.split(";") if a.strip()]
    if len(names) == 1:
        who = names[0]
    elif len(names) == 2:
        who = f"{names[0]} and {names[1]}"
    else:
        who = f"{names[0]} et al."
    return f"{who} {_year(ref)}".strip()


def short_citation(row) -> str:
    """A compact citation of a table row's value for labels: first authors and year of its original
    reference as the compilation prints it ('Jensen et al. 1969'; both where one key holds two papers),
    'general references of the A-value compilation' for a general-reference value, otherwise the source's
    authors and year; ', from memory' appended for a recalled value."""
    src = str(row["source"]).strip()
    mem = ", from memory" if bool(row["from_memory"]) else ""
    if src.startswith("general refs"):
        return "general references of the A-value compilation" + mem
    if src.startswith("ref "):
        body = src.split(": ", 1)[1] if ": " in src else src
        return " / ".join(_cite_one(part) for part in body.split("; (b) ")) + mem
    return f"{src.split(',')[0].strip()} {_year(src)}".strip() + mem


def a_value(fragment: str) -> float | None:
    """The tabulated A-value of `fragment` in kcal/mol, or None if the group is not tabulated."""
    row = lookup(fragment)
    return None if row is None else float(row["a_value_kcal"])
