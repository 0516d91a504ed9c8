"""Figures: axis labels with units, colour-blind-safe styling, marks placed where the data say,
headless drawing, and the progress reporter."""

from __future__ import annotations

import io

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib.colors import to_hex
from matplotlib.figure import Figure

from bandsolve.progress import ProgressBar, progress_bar, step
from bandsolve.report import figures as F
from bandsolve.report import figures_batch as FB

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
ANALYTES = ["dye A [mg/L]", "dye B [mg/L]"]


def _visible_axes(fig: Figure):
    # Colour bars are axes too; they carry their label on the y axis.
    return [ax for ax in fig.axes if ax.get_visible()]


def _assert_units(fig: Figure) -> None:
    for ax in _visible_axes(fig):
        xl, yl = ax.get_xlabel(), ax.get_ylabel()
        if ax.get_label() == "<colorbar>":
            assert "[" in yl and "]" in yl, yl
            continue
        if xl and xl != "sample":  # shared x axes label only the bottom panel; ids: no unit
            assert "[" in xl and "]" in xl, xl
        assert "[" in yl and "]" in yl, yl


def test_okabe_ito_palette_is_the_published_one():
    # Okabe & Ito (2008), Color Universal Design: the eight published colours.
    published = {"#000000", "#e69f00", "#56b4e9", "#009e73", "#f0e442", "#0072b2",
                 "#d55e00", "#cc79a7"}
    assert {c.lower() for c in F.OKABE_ITO} == published


def test_concentration_label_takes_the_unit_from_the_bracket():
    # common practice: "quantity [unit]" axis labels.
    assert F.concentration_label("dye A [mg/L]", "predicted") == "predicted dye A [mg/L]"
    assert F.concentration_label("nitrate") == "nitrate [concentration units]"


def test_component_spectra_distinct_colours_and_styles_and_units():
    spectra = gaussian_bands(AXIS, (480, 530, 590, 620), (40, 45, 40, 30))
    fig = F.component_spectra_figure(AXIS, spectra, ["A", "B", "C", "D"], axis_unit="nm")
    ax = fig.axes[0]
    lines = [ln for ln in ax.get_lines() if ln.get_label() in "ABCD"]
    assert len(lines) == 4
    colours = {to_hex(ln.get_color()) for ln in lines}
    styles = {ln.get_linestyle() for ln in lines}
    assert len(colours) == 4 and len(styles) == 4  # told apart in colour and in grey print
    assert colours <= {c.lower() for c in F.OKABE_ITO}
    np.testing.assert_array_equal(lines[2].get_ydata(), spectra[2])
    assert ax.get_xlabel() == "wavelength [nm]"  # unit from the axis unit (common practice)
    _assert_units(fig)


def test_wavenumber_axis_label():
    fig = F.component_spectra_figure(AXIS, AXIS[None, :], ["A"], axis_unit="cm-1")
    assert fig.axes[0].get_xlabel() == "wavenumber [cm⁻¹]"


def test_overlay_of_mixtures_colours_each_panel_by_its_analyte():
    rng = np.random.default_rng(1)
    conc = rng.uniform(0, 10, (12, 2))
    spectra = conc @ gaussian_bands(AXIS, (500, 560), (40, 40))
    fig = F.standards_overlay_figure(AXIS, spectra, conc, ANALYTES)
    panels = [ax for ax in fig.axes if ax.get_label() != "<colorbar>" and ax.get_visible()]
    assert len(panels) == 2
    for k, ax in enumerate(panels):
        coll = ax.collections[0]
        np.testing.assert_array_equal(coll.get_array(), conc[:, k])
        assert coll.get_cmap().name == "cividis"  # Nuñez et al. 2018: CVD-optimised map
    bars = [ax.get_ylabel() for ax in fig.axes if ax.get_label() == "<colorbar>"]
    assert bars == list(ANALYTES)
    _assert_units(fig)


def test_overlay_of_pure_standards_has_one_colour_per_analyte():
    levels = np.array([[1.0, 0], [2.0, 0], [0, 1.0], [0, 2.0], [0, 0]])
    spectra = levels @ gaussian_bands(AXIS, (500, 560), (40, 40))
    fig = F.standards_overlay_figure(AXIS, spectra, levels, ANALYTES)
    lines = fig.axes[0].get_lines()
    colours = [to_hex(ln.get_color()) for ln in lines]
    # Two standards per analyte share a colour; the analytes' colours differ (Okabe & Ito
    # 2008 palette) and the blank is grey.
    assert colours[0] == colours[1] != colours[2] == colours[3] != colours[4]
    assert [t.get_text() for t in fig.axes[0].get_legend().get_texts()] == ["dye A", "dye B",
                                                                          "blank"]
    _assert_units(fig)


def test_rmsecv_marks_the_chosen_count_and_writes_each_pvalue():
    a = [1, 2, 3, 4, 5]
    rmsecv = np.array([[3.0, 2.0], [1.0, 0.9], [0.11, 0.12], [0.10, 0.12], [0.10, 0.13]])
    pvals = [0.001, 0.002, 0.3, None, None]
    fig = F.rmsecv_figure(a, rmsecv, ANALYTES, chosen=3, rule="randomization",
                          pvalues=pvals, alpha=0.05)
    for k, ax in enumerate(_visible_axes(fig)):
        ring = next(ln for ln in ax.get_lines() if ln.get_label() == "chosen: 3")
        assert ring.get_xdata()[0] == 3 and ring.get_ydata()[0] == rmsecv[2, k]
        texts = sorted(t.get_text() for t in ax.texts)
        assert texts == ["p=0.001", "p=0.002", "p=0.3"]
        # dye A: 3.0 / 0.10 = 30 > 20, log scale keeps the plateau readable; dye B: 2.0 / 0.12
        # = 16.7, linear.
        assert ax.get_yscale() == ("log" if k == 0 else "linear")
        assert "RMSECV" in ax.get_ylabel() and "[mg/L]" in ax.get_ylabel()


def test_predicted_reference_identity_and_limit_marks():
    ref = np.array([[0.0, 1.0], [2.0, 3.0], [4.0, 5.0], [6.0, 7.0]])
    pred = ref + 0.1
    fig = F.predicted_reference_figure(ref, pred, ANALYTES, lod=[0.2, 0.3], loq=[0.6, 0.9])
    ax = _visible_axes(fig)[0]
    ident = next(ln for ln in ax.get_lines() if ln.get_label() == "identity")
    np.testing.assert_array_equal(ident.get_xdata(), ident.get_ydata())  # y = x
    lod = next(ln for ln in ax.get_lines() if ln.get_label().startswith("LOD"))
    loq = next(ln for ln in ax.get_lines() if ln.get_label().startswith("LOQ"))
    assert lod.get_xdata()[0] == 0.2 and loq.get_xdata()[0] == 0.6
    assert ax.get_xlabel() == "reference dye A [mg/L]"
    assert ax.get_ylabel() == "predicted dye A [mg/L]"
    _assert_units(fig)


def test_residual_spectra_highlight_flagged_rows():
    rng = np.random.default_rng(2)
    resid = rng.normal(0, 0.002, (5, AXIS.size))
    fig = F.residual_spectra_figure(AXIS, resid, highlight=[False, True, False, False, True])
    dashed = [ln for ln in fig.axes[0].get_lines()
              if ln.get_linestyle() == "--" and len(ln.get_xdata()) == AXIS.size]
    assert len(dashed) == 2
    assert all(to_hex(ln.get_color()) == F.HIGHLIGHT.lower() for ln in dashed)
    _assert_units(fig)


def test_nas_selectivity_bars_and_missing_values():
    nas = gaussian_bands(AXIS, (480, 560), (30, 30))
    fig = F.nas_selectivity_figure(AXIS, nas, np.array([0.8, np.nan]), ANALYTES)
    bars = fig.axes[1].patches
    assert [b.get_height() for b in bars] == [0.8, 0.0]
    assert sorted(t.get_text() for t in fig.axes[1].texts) == ["0.80", "n/a"]
    _assert_units(fig)


@settings(max_examples=15, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 3), st.floats(0, 3)), min_size=1, max_size=12))
def test_outlier_map_highlights_exactly_the_points_at_or_over_a_limit(points):
    x = np.array([p[0] for p in points])
    y = np.array([p[1] for p in points])
    ids = [f"s{i}" for i in range(len(points))]
    fig = FB.outlier_map_figure(x, y, sample_ids=ids)
    ax = fig.axes[0]
    # Definition of a limit ratio (common practice): flagged when ratio >= 1.
    expected = {ids[i] for i in range(len(ids)) if x[i] >= 1 or y[i] >= 1}
    assert {t.get_text() for t in ax.texts} == expected
    red = sum(len(ln.get_xdata()) for ln in ax.get_lines()
              if ln.get_label().endswith("(over a limit)"))
    assert red == len(expected)
    _assert_units(fig)


def test_batch_intervals_and_flag_markers():
    est = np.array([[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]])
    low, high = est - 0.5, est + np.array([[0.5], [1.0], [0.25]])
    fig = FB.batch_figure(["a", "b", "c"], est, low, high, ANALYTES, [False, True, False])
    ax = fig.axes[0]
    crosses = [ln for ln in ax.get_lines() if ln.get_marker() == "X"]
    assert len(crosses) == 1 and list(crosses[0].get_ydata()) == [3.0]
    # Error bar ends are the interval ends (low, high) of each sample.
    segs = [s for c in ax.collections for s in c.get_segments()]
    assert {(float(s[0, 1]), float(s[1, 1])) for s in segs} == {(0.5, 1.5), (2.5, 4.0),
                                                                (4.5, 5.25)}
    assert [t.get_text() for t in fig.axes[-1].get_xticklabels()] == ["a", "b", "c"]
    _assert_units(fig)


def test_batch_legend_covers_no_panel():
    # Intervals spanning the whole value range at every sample leave no free corner inside
    # the axes, so only a legend outside them can avoid hiding data (common practice).
    rng = np.random.default_rng(7)
    n = 40
    est = rng.uniform(0.0, 10.0, (n, 2))
    fig = FB.batch_figure([f"s{i}" for i in range(n)], est, est - 10.0, est + 10.0, ANALYTES,
                         rng.random(n) < 0.3)
    renderer = fig.canvas.get_renderer()
    fig.draw(renderer)
    legends = [*fig.legends, *(ax.get_legend() for ax in fig.axes if ax.get_legend())]
    assert len(legends) == 1  # one legend serves every panel
    box = legends[0].get_window_extent(renderer)
    assert [t.get_text() for t in legends[0].get_texts()] == ["estimate", "flagged sample"]
    assert "95 % prediction interval" in legends[0].get_title().get_text()
    for ax in fig.axes:
        assert not box.overlaps(ax.get_window_extent(renderer))
    assert fig.bbox.contains(box.x0, box.y0) and fig.bbox.contains(box.x1, box.y1)


def test_figures_stay_out_of_pyplot():
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    F.component_spectra_figure(AXIS, AXIS[None, :], ["A"])
    assert plt.get_fignums() == before  # nothing registered with a GUI figure manager


class _Tty(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_only_on_a_terminal_and_not_when_quiet():
    assert progress_bar(stream=io.StringIO()) is None  # pipe or file: silent
    assert progress_bar(quiet=True, stream=_Tty()) is None
    stream = _Tty()
    bar = progress_bar(stream=stream)
    assert isinstance(bar, ProgressBar)
    for i in range(1, 5):
        step(bar, i, 4, "figures")
    text = stream.getvalue()
    assert text.count("\r") == 4 and text.endswith("\n") and "4/4" in text
    assert "[" + "#" * bar.width + "]" in text  # full bar at the end
    step(None, 1, 2)  # no callback: nothing happens, nothing fails
