"""The report's energy-level figure stays readable for molecules with many families: no two family labels
overlap and every label lies inside the figure, from two families to thirty (menthol-sized runs have
about fifteen)."""

from __future__ import annotations

import itertools

import pytest

from chairqm.report import figures

FORMS = ["chair", "twist-boat", "boat"]
HOW = ["axial", "equatorial", "pseudo-axial", "pseudo-equatorial", "isoclinal"]


def _invented_run(n_families: int, n_subs: int = 3):
    """n families of an invented three-substituent ring, two conformers each, G rising by 0.4 kcal/mol."""
    orients = itertools.product(HOW, repeat=n_subs)
    families, conformers = [], []
    for i in range(n_families):
        form = FORMS[i % len(FORMS)] if i else "chair"
        orient = ";".join(f"s{j + 1}={h}" for j, h in enumerate(next(orients)))
        g = 0.4 * i
        families.append({"temperature_k": "298.15", "ring_form": form, "orientation": orient, "g_rel_kcal": str(g)})
        for d in (0.0, 0.25):
            conformers.append({"temperature_k": "298.15", "status": "ok", "ring_form": form,
                               "orientation": orient, "g_rel_kcal": str(g + d)})
    return conformers, families


def _overlaps(boxes):
    return [(a, b) for a, b in itertools.combinations(range(len(boxes)), 2) if boxes[a].overlaps(boxes[b])]


@pytest.mark.parametrize("n", [2, 4, 6, 7, 15, 30])
def test_family_labels_never_overlap(n):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    conformers, families = _invented_run(n)
    fig = figures.energy_levels_figure(conformers, families, 298.15)
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    ax = fig.axes[0]
    labels = [t for t in (ax.get_yticklabels() if n > figures.LEVEL_COLUMNS_MAX else ax.get_xticklabels())
              if t.get_text()]
    assert len(labels) == n                      # every family labelled, none grouped away
    boxes = [t.get_window_extent(renderer) for t in labels]
    assert not _overlaps(boxes), f"{n} families: labels overlap"
    fig_box = fig.bbox
    for b in boxes:
        assert b.x0 >= fig_box.x0 - 1 and b.x1 <= fig_box.x1 + 1 and b.y0 >= fig_box.y0 - 1 and b.y1 <= fig_box.y1 + 1


def test_lowest_family_comes_first_and_svg_is_reproducible():
    conformers, families = _invented_run(15)
    fig = figures.energy_levels_figure(conformers, families, 298.15)
    first = fig.axes[0].get_yticklabels()[0].get_text()
    assert first.startswith("chair")               # family 0 (G = 0) is on top
    a = figures.energy_levels_svg(conformers, families, 298.15, salt="x")
    b = figures.energy_levels_svg(conformers, families, 298.15, salt="x")
    assert a == b and a.startswith("<svg")
