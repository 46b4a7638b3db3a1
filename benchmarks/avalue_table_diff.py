"""Which tabulated A-values changed between two versions of chairqm/data/avalues.csv, and by how much.

    python benchmarks/avalue_table_diff.py --old 8ac092a            # a git revision of this repository
    python benchmarks/avalue_table_diff.py --old-file OLD.csv [--new-file NEW.csv]

Prints Markdown: the groups in both tables (largest change first) with old → new value and range, the change (new − old), the
old and the new source; then the groups only in the old table and the number (and names) of those only in
the new one. The new table defaults to the working tree's chairqm/data/avalues.csv. Rows are matched by
canonical fragment.
"""

from __future__ import annotations

import argparse
import io
import subprocess
import sys
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
TABLE = "chairqm/data/avalues.csv"


def _read(text: str) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False)   # SMILES hold '#': no comments


def _short(source: str) -> str:
    s = source.replace("general refs: ", "general refs (")
    if s.startswith("general refs ("):
        return "compilation, general refs"
    if s.startswith("ref "):
        key, _, body = s[4:].partition(": ")
        first_author = body.split(",")[0].split(";")[0].strip()
        year = next((w.strip(",;.") for w in body.split() if w.strip(",;.").isdigit() and len(w.strip(",;.")) == 4), "")
        return f"compilation ref {key} ({first_author} {year})".replace(" )", ")")
    year = next((w.strip(",;.") for w in s.split() if w.strip(",;.").isdigit() and len(w.strip(",;.")) == 4), "")
    return f"{s.split(',')[0]} {year}".strip()


def _range(r) -> str:
    lo, hi = r.get("range_low_kcal", ""), r.get("range_high_kcal", "")
    return f"{float(lo):.2f}–{float(hi):.2f}" if lo and hi else ""


def diff(old: pd.DataFrame, new: pd.DataFrame) -> str:
    o = old.set_index("fragment")
    n = new.set_index("fragment")
    lines = ["| group | fragment | old (range) | new (range) | change | old source | new source |",
             "|---|---|---|---|---|---|---|"]
    both = sorted((f for f in o.index if f in n.index),
                  key=lambda f: -abs(float(n.loc[f, "a_value_kcal"]) - float(o.loc[f, "a_value_kcal"])))
    changed = 0
    for f in both:
        a, b = float(o.loc[f, "a_value_kcal"]), float(n.loc[f, "a_value_kcal"])
        d = b - a
        changed += abs(d) > 1e-9
        mem = " (from memory)" if str(o.loc[f, "from_memory"]).lower() == "true" else ""
        nmem = " (from memory)" if str(n.loc[f, "from_memory"]).lower() == "true" else ""
        lines.append(f"| {n.loc[f, 'group']} | `{f}` | {a:.2f} ({_range(o.loc[f])}) | {b:.2f} ({_range(n.loc[f])}) | "
                     f"{d:+.2f} | {_short(o.loc[f, 'source'])}{mem} | {_short(n.loc[f, 'source'])}{nmem} |")
    only_old = [f for f in o.index if f not in n.index]
    only_new = [f for f in n.index if f not in o.index]
    lines.append("")
    lines.append(f"{len(both)} groups in both tables, {changed} with a changed value; "
                 f"mean |change| {sum(abs(float(n.loc[f, 'a_value_kcal']) - float(o.loc[f, 'a_value_kcal'])) for f in both) / max(len(both), 1):.2f} kcal/mol.")
    for f in only_old:
        lines.append(f"Only in the old table: {o.loc[f, 'group']} (`{f}`, {float(o.loc[f, 'a_value_kcal']):.2f}).")
    lines.append(f"Only in the new table ({len(only_new)}): " + ", ".join(str(n.loc[f, "group"]) for f in only_new) + ".")
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    g = ap.add_mutually_exclusive_group(required=True)
    g.add_argument("--old", help="git revision whose chairqm/data/avalues.csv is the old table")
    g.add_argument("--old-file", type=Path)
    ap.add_argument("--new-file", type=Path, default=ROOT / TABLE)
    a = ap.parse_args(argv)
    if a.old:
        text = subprocess.run(["git", "-C", str(ROOT), "show", f"{a.old}:{TABLE}"], check=True,
                              capture_output=True, text=True).stdout
    else:
        text = a.old_file.read_text(encoding="utf-8")
    print(diff(_read(text), _read(a.new_file.read_text(encoding="utf-8"))))
    return 0


if __name__ == "__main__":
    sys.exit(main())
