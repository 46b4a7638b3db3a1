"""Value formatting for the report page, registered as Jinja2 filters (see FILTERS).

Every function returns plain text: escaping is the template engine's job, never done here.
"""

from __future__ import annotations

import math
import re

DASH = "—"


def missing(x) -> bool:
    """True for None, NaN and the empty / 'nan' / 'none' / 'null' cells of a CSV file."""
    if x is None:
        return True
    if isinstance(x, float) and math.isnan(x):
        return True
    return isinstance(x, str) and x.strip().lower() in ("", "nan", "none", "null")


def num(x):
    """A float, or None for an empty / non-numeric cell."""
    if missing(x):
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(v) else v


def truthy(x) -> bool:
    """A flag cell as a bool: a Python bool, or the strings 'true', '1', 'yes', ... of a CSV file."""
    if isinstance(x, bool):
        return x
    return str(x).strip().lower() in ("true", "1", "yes", "y", "t")


def same_t(a, b) -> bool:
    a, b = num(a), num(b)
    return a is not None and b is not None and abs(a - b) < 1e-6


def fmt_kcal(x, digits=2, signed=False) -> str:
    v = num(x)
    if v is None:
        return DASH
    if abs(v) < 0.5 * 10 ** -digits:
        v = 0.0
    return f"{v:+.{digits}f}" if signed else f"{v:.{digits}f}"


def fmt_pct(p) -> str:
    v = num(p)
    if v is None:
        return DASH
    if 0.999 < v < 1.0:
        return ">99.9 %"
    if 0.0 < v < 0.001:
        return "<0.1 %"
    return f"{100.0 * v:.1f} %"


def fmt_t(t) -> str:
    v = num(t)
    if v is None:
        return "" if t is None else str(t)
    return f"{v:.2f}".rstrip("0").rstrip(".") + " K"


def fmt_seconds(s) -> str:
    v = num(s)
    if v is None:
        return DASH
    if v < 120:
        return f"{v:.1f} s"
    m, sec = divmod(int(round(v)), 60)
    if m < 120:
        return f"{m} min {sec:02d} s"
    h, m = divmod(m, 60)
    return f"{h} h {m:02d} min"


def fmt_coord(x, digits: int) -> str:
    """A puckering coordinate with a fixed number of decimals, or a dash."""
    v = num(x)
    return DASH if v is None else f"{v:.{digits}f}"


ORIENT_SHORT = {"axial": "ax", "equatorial": "eq", "planar": "pl", "pseudo-axial": "p-ax", "pseudo-equatorial": "p-eq",
                "pseudoaxial": "p-ax", "pseudoequatorial": "p-eq"}


def _orient_pairs(orientation) -> list[tuple[str, str]]:
    if missing(orientation):
        return []
    out = []
    for part in str(orientation).split(";"):
        part = part.strip()
        if not part:
            continue
        sid, _, how = part.partition("=")
        out.append((sid.strip(), how.strip()))
    return out


def orientation_short(orientation) -> str:
    """'s1=axial;s2=equatorial' -> 's1 ax, s2 eq'."""
    pairs = _orient_pairs(orientation)
    if not pairs:
        return "no substituent"
    return ", ".join(f"{s} {ORIENT_SHORT.get(h, h)}" if h else s for s, h in pairs)


def other_rings_short(text) -> str:
    """'r2=chair:equatorial;r3=puckered:pseudo-axial' -> 'r2 chair (link eq), r3 puckered (link p-ax)';
    '' for no other ring (empty, None, NaN or an undefined value)."""
    if text is None or isinstance(text, float) or not str(text).strip() or str(text) == "nan":
        return ""
    parts = []
    for item in str(text).split(";"):
        label, _, state = item.partition("=")
        form, _, link = state.partition(":")
        parts.append(f"{label} {form}" + (f" (link {ORIENT_SHORT.get(link, link)})" if link else ""))
    return ", ".join(parts)


def orientation_words(orientation) -> str:
    """'s1=axial;s2=equatorial' -> 's1 axial and s2 equatorial'."""
    pairs = _orient_pairs(orientation)
    if not pairs:
        return "no substituent"
    words = [f"{s} {h}" if h else s for s, h in pairs]
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def short_label(label) -> str:
    """'chair s1=axial;s2=equatorial' -> 'chair s1 ax, s2 eq' (a family label for a legend or a sentence)."""
    text = re.sub(r"(s\d+)=([A-Za-z-]+)", lambda mm: f"{mm.group(1)} {ORIENT_SHORT.get(mm.group(2), mm.group(2))}",
                  str(label))
    return text.replace(";", ", ")


def _plain_raw(v) -> str:
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k}={_plain_raw(x)}" for k, x in sorted(v.items())) + "}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_plain_raw(x) for x in v) + "]"
    if v is None:
        return "none"
    return str(v)


def plain(v) -> str:
    """A setting or provenance value in words: 'yes'/'no', 'k=v, k=v', 'a, b'."""
    if v is None:
        return "none"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, dict):
        if not v:
            return DASH
        return ", ".join(f"{k}={_plain_raw(x)}" for k, x in sorted(v.items()))
    if isinstance(v, (list, tuple)):
        return ", ".join(_plain_raw(x) for x in v)
    return str(v)


def anchor(name) -> str:
    """The id of a molecule's section: 'm-' and the name with anything but [A-Za-z0-9_.-] replaced."""
    return "m-" + re.sub(r"[^A-Za-z0-9_.-]", "_", str(name))


FILTERS = {f.__name__: f for f in (fmt_kcal, fmt_pct, fmt_t, fmt_seconds, fmt_coord, orientation_short, other_rings_short,
                                   orientation_words, short_label, plain, anchor)}
