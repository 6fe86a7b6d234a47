"""Details of the explorer's views, in-process (no browser): units, legends, ranges, updates.

The browser shows what these cannot (pixels, rendered ticks, console warnings):
see ``test_browser_views.py``.  Common practice, no source, unless a test says
otherwise.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from bokeh.models import DataRange1d, Legend, LogScale, Range1d

from app.explorer import build_explorer
from app.views import LOG_AXIS_DECADES, SweepView, area_unit
from physics import scenario as scn

ROOT = Path(__file__).parents[2]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.json"))


def _page(name: str):
    return build_explorer(scn.load(ROOT / "scenarios" / f"{name}.json"))


def _open(page, section: str):
    """The view of a section, opened first if the page builds it on demand."""
    opener = getattr(page, "explorer_open", None)
    if opener is not None:
        opener(section)
    return page.explorer_views[section]


def _figures(page) -> list:
    views = page.explorer_views
    out = [views["spectrum"].figure, views["array"].figure, views["far"].figure]
    for name in ("probe", "bands"):
        out += list(_open(page, name).figures)
    return out + list(SweepView(page.explorer_state).figures)  # (its figures, without a run)


def test_cross_section_is_shown_as_an_area_in_the_lab_unit():
    """λ0² → µm²: multiply by (λ0 in µm)², the unit conversion itself (common practice)."""
    page = _page("nonagon_ring")  # a plane-wave probe: the signal is the extinction cross-section
    st = page.explorer_state
    probe = _open(page, "probe")
    assert st.analysis.probe.kind == "plane_wave" and "[λ0²]" in st.analysis.signal_name
    st.units = "lab"
    s = probe.figures[0]
    lam_um = st.transition_obj.wavelength_nm / 1000.0  # Rb87 D2: 0.780 µm
    assert s.yaxis[0].axis_label == "extinction cross-section [µm²]"
    np.testing.assert_allclose(probe.spec.data["y"], st.analysis.signal * lam_um ** 2, rtol=1e-12)
    assert area_unit(st) == ("µm²", pytest.approx(lam_um ** 2, rel=1e-12))
    st.units = "internal"
    assert s.yaxis[0].axis_label == "extinction cross-section [λ0²]"
    np.testing.assert_allclose(probe.spec.data["y"], st.analysis.signal, rtol=1e-12)
    st.param.update(transition="custom", wavelength_nm=1500.0, units="lab")
    assert area_unit(st) == ("µm²", pytest.approx(2.25, rel=1e-12))  # (1.5 µm)²
    np.testing.assert_allclose(probe.spec.data["y"], st.analysis.signal * 2.25, rtol=1e-12)


def test_a_cross_section_and_probabilities_never_share_one_axis():
    """A plane wave on the 16 × 16 mirror: σ_ext in µm² on the left, the sheet's |r|² right."""
    page = _page("mirror_square_16x16")
    st = page.explorer_state
    probe = _open(page, "probe")
    st.probe_kind = "plane_wave"
    assert st.analysis.sheet is not None
    assert probe.sheet_line.y_range_name == "probability" and probe.probability_axis.visible
    assert "µm²" in probe.figures[0].yaxis[0].axis_label
    st.probe_kind = "gaussian_beam"  # |r|² is the signal itself: one axis, |r|² drawn once
    assert not probe.probability_axis.visible and not probe.r_line.visible
    assert not probe.r_item.visible and probe.signal_item.label.value == "|r|²"


def test_the_chiral_decay_is_drawn_on_a_sane_log_axis():
    """Perfectly chiral guide: nothing goes backwards; that channel is named, not drawn."""
    page = _page("chiral_waveguide_defective")
    st = page.explorer_state
    probe = _open(page, "probe")
    dec = st.analysis.decay
    assert np.all(np.asarray(dec["guided, towards −x"]) == 0.0)  # the trigger of the defect
    labels = probe.channels.data["label"]
    assert "emitted into guided, towards +x" in labels
    assert not any("−x" in label for label in labels)
    assert "guided, towards −x" in probe.summary and "not drawn" in probe.summary
    d = probe.figures[2]
    lo, hi = d.y_range.start, d.y_range.end
    assert lo > 0 and 10 < hi / lo < 10 ** (LOG_AXIS_DECADES + 1)
    for ys in [probe.decay.data["p"], probe.decay.data["w"], *probe.channels.data["ys"]]:
        ys = np.asarray(ys, float)
        assert np.all(ys[np.isfinite(ys)] > 1e-200)  # no stand-in for zero on the log axis
        assert np.isfinite(ys).any()


@pytest.mark.parametrize("name", ["nonagon_ring", "mirror_square_16x16",
                                  "fibre_chain_partly_chiral", "chiral_waveguide_defective"])
def test_every_drawn_probe_line_has_a_legend_entry_and_no_other(name):
    page = _page(name)
    probe = _open(page, "probe")
    for legend in (probe.spec_legend, probe.decay_legend):
        assert legend.visible
        for item in legend.items:
            drawn = all(r.visible for r in item.renderers)
            if item is probe.channel_item:  # one entry per channel line drawn
                drawn = drawn and len(probe.channels.data["xs"]) > 0
            assert item.visible == drawn, item.label
    assert probe.signal_item.visible  # the scan signal (solid line) is named
    label = probe.signal_item.label.value
    assert label and label in page.explorer_state.analysis.signal_name
    assert probe.sheet_item.visible == (page.explorer_state.analysis.sheet is not None)


def test_a_guided_probe_has_no_map_and_says_why():
    page = _page("fibre_chain_partly_chiral")
    probe = _open(page, "probe")
    assert page.explorer_state.analysis.probe.kind == "guided"
    s, m, d = probe.figures
    assert not m.visible and s.visible and d.visible
    assert "no field map: the guided probe" in probe.summary.lower()


def test_without_bands_the_bands_figures_are_hidden_and_the_summary_says_why():
    page = _page("nonagon_ring")  # a ring has no infinite counterpart
    page.explorer_state.bands_visible = True
    view = _open(page, "bands")
    assert not any(fig.visible for fig in view.figures)
    assert "No bands" in view.summary


def test_legends_sit_outside_the_plot_frames():
    page = _page("mirror_square_16x16")
    page.explorer_state.bands_visible = True  # (the bands section computes while open)
    for fig in _figures(page):
        assert not [r for r in fig.center if isinstance(r, Legend)], fig.name
    named = [fig for fig in _figures(page) if any(isinstance(r, Legend) for r in fig.below)]
    assert {f.name for f in named} >= {"choir-probe-plot", "choir-decay-plot", "choir-bands-shift",
                                       "choir-bands-decay", "choir-bands-map-plot"}


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_every_figure_has_explicit_ranges(path):
    """BokehJS must never derive a range from empty data (it warns, and a log axis collapses).

    Either a Range1d set by the view, or a DataRange1d following only the view's
    invisible two-point extent glyph (axes that share one scale).
    """
    page = build_explorer(scn.load(path))
    page.explorer_state.bands_visible = True
    for fig in _figures(page):
        for rng, scale in ((fig.x_range, fig.x_scale), (fig.y_range, fig.y_scale)):
            if isinstance(rng, DataRange1d):
                assert fig.match_aspect and len(rng.renderers) == 1, fig.name
                extent = rng.renderers[0].data_source.data
                assert len(extent["x"]) == 2 and np.all(np.isfinite(extent["x"] + extent["y"]))
            else:
                assert isinstance(rng, Range1d), fig.name
                assert np.isfinite([rng.start, rng.end]).all() and rng.start != rng.end
                if isinstance(scale, LogScale):
                    assert min(rng.start, rng.end) > 0, fig.name


def test_the_spectrum_sends_numbers_and_formats_them_in_the_hover():
    page = _page("nonagon_ring")
    st, view = page.explorer_state, page.explorer_views["spectrum"]
    for name, column in view.source.data.items():
        assert isinstance(column, np.ndarray) and column.dtype.kind in "fiu", name
    tips = view.hover.tooltips
    assert ("shift", "@x{%+.4g} MHz") in tips and ("lifetime", "@life{%.4g} ns") in tips
    st.color_by = "shift"  # same units: the tooltip text is not sent again
    assert view.hover.tooltips is tips
    st.units = "internal"
    assert ("decay rate", "@rate{%.4g} Γ0") in view.hover.tooltips
    k = int(np.argmax(view.source.data["rate"]))
    names = view.tag_names.args["names"]
    assert names[view.source.data["tag"][k]] == "superradiant"  # (the ring's bright mode)
    np.testing.assert_allclose(view.source.data["rate"][k], st.result.modes.decay_rates[k])


def test_a_new_selection_sends_only_what_changed():
    page = _page("fibre_chain_partly_chiral")  # a waveguide axis drawn in the array view
    st, view = page.explorer_state, page.explorer_views["array"]
    before = dict(view.source.data)
    lines = dict(view.env_lines.data)
    assert len(lines["xs"]) == 1
    st.selected_mode = 5
    after = view.source.data
    for name in ("x", "y", "idx"):  # positions and numbering stay: not reassigned
        assert after[name] is before[name], name
    assert not np.allclose(after["r"], before["r"])
    for name, column in view.env_lines.data.items():
        assert column is lines[name], name
