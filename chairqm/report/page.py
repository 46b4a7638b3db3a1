"""The report page: the run's data model (model.py) rendered through Jinja2 templates (templates/*.j2).

The templates autoescape every value; SVG figures and nothing else enter the page as trusted markup
(markupsafe.Markup). The helpers below build the page's sentences as plain text for the templates.
"""

from __future__ import annotations

import functools
import html
from pathlib import Path

import jinja2
from markupsafe import Markup

from .. import fileio
from . import figures, views3d
from .filters import FILTERS, fmt_kcal, missing, num, orientation_words, plain, same_t, truthy
from .model import GFN2_TAG, REFINED_TAG, Entry, Molecule, Run, dft_level, dft_words, read_run

REPORT_NAME = "report.html"


# ------------------------------------------------------------------------------------------ sentences

def chair_words(fam) -> str:
    if fam is None:
        return "the ring-flipped chair"
    o = orientation_words(fam.get("orientation"))
    return "the chair" if o == "no substituent" else f"the chair with {o}"


def additive_paragraph(m: Molecule, e: Entry) -> str:
    """The additive estimate against the computed chair gap, in words."""
    best, other = m.chair_of(e.t, "best"), m.chair_of(e.t, "other")
    gap = e.chair_dg_kcal
    source = str(e.additive_source or "")
    level = f" ({REFINED_TAG})" if m.refined else ""
    if gap is not None:
        computed = (f"Computed{level}: {chair_words(best)} is lower in free energy by "
                    f"{fmt_kcal(abs(gap))} kcal/mol than the ring-flipped chair.")
    else:
        computed = f"Computed{level}: no free-energy gap between the two chairs is available."
    if e.a_value_kcal is not None:
        computed += f" Computed A-value{level}: {fmt_kcal(e.a_value_kcal)} kcal/mol."
    if source == "outside-model":
        why = e.additive_reason or "the substitution pattern is not covered by group additivity"
        return (f"The additive A-value model does not cover this molecule ({why}), "
                f"so no additive estimate is given. {computed}")
    if e.additive_dg is None:
        return f"No additive estimate was recorded. {computed}"
    add = e.additive_dg
    kind = {"tabulated": "tabulated A-values",
            "qm-derived": "QM-derived A-values from this run's reference rings"}.get(source, source or "A-values")
    if add == 0:
        said = "puts the two chairs level"
    elif not gap:
        said = f"gives a chair difference of {fmt_kcal(add, signed=True)} kcal/mol"
    else:
        same = (add > 0) == (gap > 0)
        said = f"favours {chair_words(best if same else other)} by {fmt_kcal(abs(add))} kcal/mol"
        if not same:
            said += " — the opposite chair to the computed one"
    diff = f" The two differ by {fmt_kcal(abs(gap - add))} kcal/mol." if gap is not None else ""
    why = f"; {e.additive_reason}" if e.additive_reason else ""
    return f"Additive estimate ({kind}{why}): {said}. {computed}{diff}"


def gfn2_paragraph(m: Molecule, e: Entry) -> str:
    """What a refined molecule gave without the DFT single points ('' for other molecules)."""
    u = e.unrefined
    if not m.refined or u is None:
        return ""
    signed, best_u = m.gfn2_chair_gap(e)
    if u.chair_dg_kcal is not None:
        words = chair_words(best_u) if best_u is not None else "the preferred chair"
        text = f"{words} is lower in free energy by {fmt_kcal(abs(u.chair_dg_kcal))} kcal/mol than the ring-flipped chair"
        if signed is not None and signed < 0:
            text += f" — the opposite chair to the {REFINED_TAG} result"
        text += "."
    else:
        text = "no free-energy gap between the two chairs is available."
    if u.a_value_kcal is not None:
        text += f" A-value: {fmt_kcal(u.a_value_kcal)} kcal/mol."
    if u.flag is not None and u.flag != e.flag:
        text += (f" At that level this molecule would be flagged: {u.flag_reason or 'no reason recorded'}."
                 if u.flag else " At that level this molecule would not be flagged.")
    return f"{GFN2_TAG} (the same run without the DFT single points): {text}"


def no_flag_text(e: Entry) -> str:
    """Why an unflagged molecule is not flagged."""
    if str(e.additive_source or "") == "outside-model" or e.additive_dg is None:
        text = "none of the flag criteria applies"
    else:
        text = "computed and additive results agree within the flag criteria"
    return text + (f" ({e.flag_reason})" if e.flag_reason else "") + "."


# ------------------------------------------------------------------------------------------ tables

def settings_pairs(run: Run) -> list[tuple[str, str]]:
    """The run's settings, the usual ones first; a refined run shows the settings its single points used."""
    settings = run.settings
    order = ["temperatures_k", "solvent", "engine", "method", "thermo"]
    keys = [k for k in order if k in settings] + sorted(k for k in settings if k not in order)
    shown = dict(settings)
    if run.refine is not None:
        shown["refine"] = run.refine              # defaults filled in
    return [(k, plain(shown[k])) for k in keys]


def provenance_pairs(run: Run) -> list[tuple[str, str]]:
    info = run.info
    pairs = [("chairqm", str(info.get("chairqm_version", "?")))]
    skip = {"project", "chairqm_version", "settings", "started", "finished", "wall_seconds",
            "engine_seconds", "n_cpus"}
    for k in sorted(info):
        if k in skip:
            continue
        v = info[k]
        if isinstance(v, dict) and len(v) > 12:      # e.g. one input hash per molecule: keep the page short
            pairs.append((k, f"{len(v)} entries (see provenance.json)"))
        else:
            pairs.append((k, plain(v)))
    pairs.append(("CPU cores", str(info.get("n_cpus", "?"))))
    return pairs


def refine_decision_words(decision: dict | None) -> str:
    """'refined: ring O next to the substituted carbon; ...' or 'not refined: ...' (settings.refine: auto)."""
    if not decision:
        return ""
    return f"{'refined' if truthy(decision.get('refine')) else 'not refined'}: {decision.get('reason') or 'no reason recorded'}"


def refine_view(m: Molecule, rs: dict) -> dict:
    """A molecule's DFT refinement: its settings, counts of single points, the failed ones, the DFT time."""
    rows, info = m.refine_rows, m.refine_info
    own = dict(rs)
    if isinstance(info.get("settings"), dict):
        own.update(info["settings"])
    status = [str(r.get("status", "")).strip() for r in rows]
    failed = [r for r, s in zip(rows, status) if s not in ("ok", "not-selected")]
    seconds = num(info.get("dft_seconds"))
    if seconds is None and rows:
        seconds = sum(num(r.get("seconds")) or 0.0 for r in rows)
    return {"own": own, "n_ok": status.count("ok"), "n_skip": status.count("not-selected"), "failed": failed,
            "n": len(rows), "seconds": seconds,
            "settings": {k: v for k, v in own.items() if k not in ("functional", "basis")},
            "versions": info.get("versions") if isinstance(info.get("versions"), dict) else {}}


def group_fragments(m: Molecule) -> str:
    return ", ".join(str(s.get("fragment", "")) for s in m.record.get("substituents") or [])


def seed_failures(m: Molecule) -> list[dict]:
    """Seeds whose optimisation or verification failed (minima.csv): never counted, always shown."""
    return [r for r in m.minima if str(r.get("status", "")).strip() not in ("ok", "duplicate")]


def has_dft_column(m: Molecule, confs: list[dict]) -> bool:
    return bool(m.refined or m.refine_rows or any(not missing(c.get("refined_single_point")) for c in confs))


def n_not_counted(confs: list[dict]) -> int:
    return sum(1 for c in confs if str(c.get("status", "")).strip() != "ok")


def additive_terms(e: Entry) -> list:
    """The additive estimate's (term, kcal/mol) pairs, anything malformed left out."""
    return [tm for tm in e.terms if isinstance(tm, (list, tuple)) and len(tm) >= 2]


def refine_rows_by_id(m: Molecule) -> dict:
    return {str(r.get("conformer", "")): r for r in m.refine_rows}


# ------------------------------------------------------------------------------------------ figures

def depiction(m: Molecule) -> dict:
    """{'svg': Markup} or {'error': text}, or {} when there is no structure record to draw."""
    rec = m.record
    smiles = rec.get("mapped_smiles") or rec.get("smiles")
    if not smiles:
        return {}
    try:
        return {"svg": Markup(figures.depiction_svg(smiles, rec.get("substituents") or [], rec.get("ring") or []))}
    except Exception as exc:      # a broken record must not stop the page
        return {"error": str(exc)}


def plots(m: Molecule) -> list[dict]:
    """The molecule's plots in page order: {'kind', 'svg'} for a drawn one, {'kind', 'error'} when drawing
    failed (reported on the page, never fatal); a plot without data is left out."""
    out = []
    if m.lead is not None:
        try:
            svg = figures.energy_levels_svg(m.conformers, m.families, m.lead, salt=f"levels-{m.name}")
            if svg:
                out.append({"kind": "levels", "svg": Markup(svg)})
        except Exception as exc:
            out.append({"kind": "levels", "error": str(exc)})
    try:
        svg = figures.population_curve_svg(m.ensemble.get("curve"), m.temperatures, salt=f"curve-{m.name}")
        if svg:
            out.append({"kind": "curve", "svg": Markup(svg)})
    except Exception as exc:
        out.append({"kind": "curve", "error": str(exc)})
    return out


def structures_3d(m: Molecule) -> dict:
    """The 3-D views of the molecule's leading conformers (views3d.drawings) with their SVG as trusted
    markup: {'drawings', 't'[, 'missing']}, {'error': text} when they cannot be drawn, {} when there is
    nothing to draw (a failed molecule, no counted conformer)."""
    try:
        res = views3d.drawings(m)
    except Exception as exc:      # a broken geometry must not stop the page
        return {"error": f"{type(exc).__name__}: {exc}"}
    for d in res.get("drawings", []):
        d.views = {k: Markup(v) for k, v in d.views.items()}
    return res


# ------------------------------------------------------------------------------------------ rendering

def _finalize(value):
    """Every {{ value }} of the templates: None prints as nothing; text is escaped with the standard
    library's html.escape (quotes too), so the page's escapes stay the ones this report always wrote;
    markup the page trusts (Markup: inline SVG) passes unchanged. Autoescaping stays on underneath."""
    if value is None:
        return ""
    if hasattr(value, "__html__"):
        return value
    return Markup(html.escape(str(value), quote=True))


def _relative_stereo(record: dict) -> str:
    from .. import relstereo
    return relstereo.words_from_record(record)


@functools.lru_cache(maxsize=1)
def environment() -> jinja2.Environment:
    """The one template environment of a process (its compiled templates are reused; Jinja reloads a
    template whose file changed)."""
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(Path(__file__).parent / "templates")),
        autoescape=True, finalize=_finalize, undefined=jinja2.StrictUndefined,
        trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=False)
    env.filters.update(FILTERS)
    env.globals.update(
        REFINED_TAG=REFINED_TAG, GFN2_TAG=GFN2_TAG, num=num, missing=missing, truthy=truthy, same_t=same_t,
        dft_level=dft_level, dft_words=dft_words, refine_decision_words=refine_decision_words, additive_paragraph=additive_paragraph,
        gfn2_paragraph=gfn2_paragraph, no_flag_text=no_flag_text, settings_pairs=settings_pairs,
        provenance_pairs=provenance_pairs, refine_view=refine_view, group_fragments=group_fragments,
        seed_failures=seed_failures, has_dft_column=has_dft_column, n_not_counted=n_not_counted,
        additive_terms=additive_terms, refine_rows_by_id=refine_rows_by_id,
        depiction=depiction, plots=plots, structures_3d=structures_3d, relative_stereo=_relative_stereo,
        TILT_DEG=views3d.TILT_DEG)
    return env


def build_report(out_dir, run_info: dict, summary_rows=None) -> str:
    """The report page as a string (see write_report)."""
    run = read_run(out_dir, run_info or {}, summary_rows)
    return environment().get_template("page.html.j2").render(run=run) + "\n"


def write_report(out_dir, run_info: dict, path=None, summary_rows=None) -> Path:
    """Write the run's self-contained HTML report (default OUT/report.html) atomically; return its path.

    `run_info` is the provenance record (project, chairqm_version, engine versions, settings, started,
    finished, wall_seconds, engine_seconds, n_cpus); unknown keys are listed under provenance.
    `summary_rows` are the rows of summary.csv as the report stage computed them (values as Python
    objects, flags as bools or 'true'/'false'); when given, summary.csv is not read; when None, it is.
    """
    target = Path(path) if path is not None else Path(out_dir) / REPORT_NAME
    fileio.write_text(target, build_report(out_dir, run_info or {}, summary_rows))
    return target
