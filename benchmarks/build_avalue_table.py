"""Build chairqm/data/avalues.csv from the published compilation of experimental A-values.

    python benchmarks/build_avalue_table.py ../shared/data/avalues-compilation.csv [--out chairqm/data/avalues.csv]

The compilation (one row per group: group, fragment_smiles, a_value_kcal, range_low/high, conditions,
reference, compilation; its .md beside it lists the caveats) is read with the csv module, never with '#'
as a comment character (SMILES hold '#'). The package carries the result; nothing reads the compilation
at run time. The rules, applied here and documented in chairqm/avalues.py and docs/accuracy.md:

1. Headline value: the first value the compilation prints with an original reference (a superscript key),
   in the order printed; only when no such value exists, the compilation's first single value (from its
   general references, which name no method, solvent or temperature and are often older and lower).
   The compilation's own headline is kept beside it (`compilation_value_kcal`).
2. Range: the compilation's range_low/high (every value printed for the group).
3. Method, solvent, temperature: read off the chosen value's conditions. Direct low-temperature NMR
   values get the temperature band the compilation gives for them (170-200 K) in temperature_low_k /
   temperature_high_k; temperature_k only where a temperature is printed (the O-SiR3 values, 200 K).
4. Source: the original reference of the chosen value as the compilation prints it; `references` and
   `conditions` keep everything printed for the group.
5. Left out: rows without a fragment (carbodiimido, R unspecified), rows without any reference (silyl,
   from a teaching table), rows with only a lower bound (trimethylphosphonio, dimethylthiophosphoryl),
   except tert-butyl, which the additive estimate and the calibration need as a number: it keeps the
   previous table's 4.9 with that table's citation, marked from_memory, inside the compilation's bound.
"""

from __future__ import annotations

import argparse
import csv
import math
import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from chairqm.avalues import COLUMNS, canonical_fragment  # noqa: E402

GENERAL = "general refs"
NO_REF = "no reference"
LOW_T_BAND_K = (170.0, 200.0)      # the compilation's .md: direct low-temperature NMR values, about 170-200 K

ENTRY = re.compile(r"^(?P<value>>?-?\d+(?:\.\d+)?(?:-\d+(?:\.\d+)?)?) \[(?P<key>[^\]]+)\]: (?P<desc>.*)$")

# Values kept from outside the compilation: fragment -> (value, source, why). Each names its own citation.
KEPT = {
    "[*]C(C)(C)C": (
        4.9,
        "E. L. Eliel and S. H. Wilen, Stereochemistry of Organic Compounds, Wiley, New York 1994, Table 11.7",
        "the compilation prints only a lower bound (> 4.5, general refs); the additive estimate and the "
        "calibration need a number, so the previous table's 4.9 stays (recalled, not read off the book), "
        "consistent with the compilation's bound"),
}

# Notes on the compilation's ambiguities, by group (from its .md).
AMBIGUITY = {
    "bromo": "0.49 (ref 9) sits behind a malformed tag in the compilation's page source; kept in the range",
    "methylthio": "1.07 and 1.1 both carry key 2a in the compilation (probably one belongs to another "
                  "reference); the first, 1.07, is used",
    "amino": "the first entry is a range (1.2-1.7, general refs); the next single value, 1.23 (ref 9), is used",
    "trimethylsilyloxy": "ref 10 values are probably Marzabadi et al. 2003 (10b, 200 K, CD2Cl2); "
                         "O-SiR3 values are unusually solvent-sensitive",
    "triisopropylsilyloxy": "ref 10 values are probably Marzabadi et al. 2003 (10b, 200 K, CD2Cl2); "
                            "O-SiR3 values are unusually solvent-sensitive",
    "tert-butyldimethylsilyloxy": "ref 10 values are probably Marzabadi et al. 2003 (10b, 200 K, CD2Cl2); "
                                  "O-SiR3 values are unusually solvent-sensitive",
    "tert-butyldiphenylsilyloxy": "ref 10 values are probably Marzabadi et al. 2003 (10b, 200 K, CD2Cl2); "
                                  "O-SiR3 values are unusually solvent-sensitive",
}
HIRSCH_NOTE = ("general refs: the compilation prints Hirsch's table as Top. Stereochem. 1967, volume 3; "
               "volume 1 is the likely volume")


def parse_conditions(text: str):
    """(entries, notes): entries are dicts value/key/desc in printed order; notes the other segments."""
    entries, notes = [], []
    for seg in (s.strip() for s in text.split("; ")):
        if not seg:
            continue
        m = ENTRY.match(seg)
        if m:
            entries.append(m.groupdict())
        else:
            notes.append(seg)
    return entries, notes


def parse_references(text: str) -> dict:
    """key -> the reference text as printed ('2a' -> 'Jensen, F. R.; ...'; 'general refs' -> '...')."""
    out = {}
    for part in (p.strip() for p in text.split(" | ")):
        if part.startswith("general refs"):
            out[GENERAL] = part.split("): ", 1)[1] if "): " in part else part
        elif part.startswith("ref "):
            key, body = part[4:].split(": ", 1)
            out[key.strip()] = body.strip()
    return out


def _single(value: str) -> float | None:
    if value.startswith(">") or re.search(r"\d-\d", value):
        return None
    return float(value)


def _conditions_of(desc: str):
    """(method, solvent, temperature_k, low_t) of one printed value's description."""
    parts = [p.strip() for p in desc.split(",")]
    solvent = ""
    for tok, name in (("toluene-d8", "toluene-d8"), ("CD2Cl2", "CD2Cl2"), ("in ether", "diethyl ether")):
        if tok in desc:
            solvent = name
    m = re.search(r"about (\d+(?:\.\d+)?) K", desc)
    temperature = float(m.group(1)) if m else math.nan
    low_t = desc.startswith("low-T")
    method = ", ".join(p for p in parts if p not in ("toluene-d8", "CD2Cl2", "in ether")
                       and not re.match(r"about \d+", p) and not p.startswith("(OSiR3"))
    return method, solvent, temperature, low_t


def build(rows):
    """(table rows, left-out list of (group, why))."""
    table, left_out = [], []
    for r in rows:
        group = r["group"].strip()
        if not r["fragment_smiles"].strip():
            left_out.append((group, "no fragment: the compilation does not say what R is"))
            continue
        frag = canonical_fragment(r["fragment_smiles"])
        entries, notes = parse_conditions(r["conditions"])
        refs = parse_references(r["reference"])
        singles = [e for e in entries if _single(e["value"]) is not None]
        attributed = [e for e in singles if e["key"] not in (GENERAL, NO_REF)]
        note = []
        if attributed:
            chosen = attributed[0]
            if singles and singles[0] is not chosen:
                note.append(f"headline: the first value with an original reference ({chosen['value']}, "
                            f"ref {chosen['key']}) rather than the general-reference {singles[0]['value']}")
        elif singles and singles[0]["key"] == GENERAL:
            chosen = singles[0]
        elif singles:
            left_out.append((group, "no reference given by the compilation (" + r["compilation"].split(" (")[0] + ")"))
            continue
        else:
            chosen = None
        lo = float(r["range_low"]) if r["range_low"].strip() else math.nan
        hi = float(r["range_high"]) if r["range_high"].strip() else math.nan
        from_memory = False
        if chosen is None:
            if frag not in KEPT:
                left_out.append((group, "lower bound only (" + entries[0]["value"] + ")"))
                continue
            value, source, why = KEPT[frag]
            from_memory = True
            method, solvent, temperature, low_t = ("value kept from outside the compilation", "", math.nan, False)
            note.append(f"kept from outside the compilation: {why}")
            if math.isnan(hi):
                hi = value
        else:
            value = _single(chosen["value"])
            method, solvent, temperature, low_t = _conditions_of(chosen["desc"])
            key = chosen["key"]
            if key == GENERAL:
                source = "general refs: " + refs[GENERAL]
                note.append(HIRSCH_NOTE)
            else:
                source = f"ref {key}: {refs[key]}"
        if group in AMBIGUITY:
            note.append(AMBIGUITY[group])
        note.extend(n for n in notes)
        compilation_value = float(r["a_value_kcal"]) if r["a_value_kcal"].strip() else math.nan
        table.append({
            "group": group, "fragment": frag, "a_value_kcal": value,
            "range_low_kcal": lo, "range_high_kcal": hi,
            "temperature_k": temperature,
            "temperature_low_k": LOW_T_BAND_K[0] if low_t else math.nan,
            "temperature_high_k": LOW_T_BAND_K[1] if low_t else math.nan,
            "solvent": solvent, "method": method, "source": source, "from_memory": from_memory,
            "note": "; ".join(note), "compilation_value_kcal": compilation_value,
            "conditions": r["conditions"], "references": r["reference"], "compilation": r["compilation"],
        })
    return table, left_out


def _fmt(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return "" if math.isnan(v) else f"{v:g}"
    return v


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("compilation", type=Path)
    ap.add_argument("--out", type=Path, default=ROOT / "chairqm" / "data" / "avalues.csv")
    a = ap.parse_args(argv)
    with a.compilation.open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))          # plain csv: '#' in SMILES is data, not a comment
    table, left_out = build(rows)
    frags = [t["fragment"] for t in table]
    dup = sorted({f for f in frags if frags.count(f) > 1})
    if dup:
        raise SystemExit(f"fragments listed twice after canonicalisation: {dup}")
    with a.out.open("w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=COLUMNS, lineterminator="\n")
        w.writeheader()
        for t in table:
            w.writerow({k: _fmt(t[k]) for k in COLUMNS})
    print(f"{len(rows)} compilation rows -> {len(table)} table rows in {a.out}")
    for g, why in left_out:
        print(f"  left out: {g}: {why}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
