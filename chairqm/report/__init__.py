"""The run report: one self-contained HTML page (inline CSS and SVG, no network) a chemist reads after a run.

`write_report(out_dir, run_info, summary_rows=...)` reads the result files of a run's output folder once —
per molecule `molecule.json`, `families.csv`, `conformers.csv`, `conformers.sdf`, `minima.csv`,
`ensemble.json` (and, after a DFT refinement, `refine.csv` and `refine.json`) — takes the run's summary rows from the caller (or, when
none are given, from `summary.csv`) and writes `report.html` next to them. Nothing is computed here beyond
formatting: every number on the page is read from those files (the one exception: a refined molecule's
GFN2-xTB-only chair gap is given the sign of the refined chairs' axis in the additive table), so the page
and the machine-readable results cannot disagree.

Layout: model.py reads the folder into dataclasses, figures.py draws the inline SVG (matplotlib, RDKit),
views3d.py the leading conformers in 3-D (static SVG from conformers.sdf, no script), filters.py formats
values, page.py renders templates/*.html.j2 with Jinja2 (autoescaping on).

Refined runs (settings.refine): the headline numbers of a refined molecule are composite free energies,
a DFT single point on the GFN2-xTB minimum plus the GFN2-xTB thermal correction, written
`DFT//GFN2-xTB` on the page (REFINED_TAG); wherever such a number appears, the GFN2-xTB-only value the
run also recorded stands beside it, tagged GFN2_TAG. Molecules of a refined run whose single points all
failed carry GFN2-xTB values only and say so. Unrefined runs render without any of these columns.

Sign convention assumed for the additive comparison: `additive.dg_kcal` and `chair_dg_kcal` are the
same difference of the two chair families (whatever its orientation); equal signs mean the additive
estimate favours the chair the calculation favours, opposite signs the ring-flipped chair.
"""

from .figures import depiction_svg, energy_levels_svg, population_curve_svg
from .filters import fmt_kcal, fmt_pct, fmt_seconds, fmt_t, orientation_short, orientation_words
from .model import GFN2_TAG, REFINED_TAG, dft_level, dft_words
from .page import REPORT_NAME, build_report, write_report

__all__ = ["GFN2_TAG", "REFINED_TAG", "REPORT_NAME", "build_report", "depiction_svg", "dft_level", "dft_words",
           "energy_levels_svg", "fmt_kcal", "fmt_pct", "fmt_seconds", "fmt_t", "orientation_short",
           "orientation_words", "population_curve_svg", "write_report"]
