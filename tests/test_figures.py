"""The memo's figures: no round-off curves, legends clear of data and limits, distinguishable
curves, units on every axis, the design marked in sweeps, distinct pole markers, true captions.

Each test checks the defining property on the matplotlib objects the figure functions build
(lines, markers, legend boxes), never pixel hashes.
"""

from __future__ import annotations

import re
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from symbolic import derive, load_design
from symbolic.analysis.study import simulation_study
from symbolic.render import figures as fig
from symbolic.render.figure_layout import (
    COINCIDE_FRACTION,
    ROUNDOFF_FLOOR,
    axis_label,
    coincident_pairs,
    place_legend,
    ratio_unit,
    unit_text,
)
from symbolic.render.robust_figures import mismatch_pole_figure

WORKED = Path(__file__).resolve().parent.parent / "worked_designs"
UNIT = re.compile(r"\[[^\]]+\]$")


@pytest.fixture(scope="module")
def belt():
    d = derive(load_design(WORKED / "belt_drive.toml"))
    return d, simulation_study(d)


@pytest.fixture(scope="module")
def focus():
    d = derive(load_design(WORKED / "focus_actuator.toml"))
    return d, simulation_study(d, sweep=False)


def _responses(s):
    return [c.response for c in s.cases]


def _legend_box(ax):
    legend = ax.get_legend()
    assert legend is not None
    return legend.get_window_extent(ax.figure.canvas.get_renderer())


def _data_points_inside(ax, box) -> list[str]:
    """Labels of the lines with a vertex inside ``box`` (display coordinates); an independent
    check of the legend placement (vertices only, plus every horizontal limit line)."""
    hits = []
    for line in ax.lines:
        xy = line.get_transform().transform(np.asarray(line.get_xydata(), dtype=float))
        xy = xy[np.all(np.isfinite(xy), axis=1)]
        inside = (
            (xy[:, 0] > box.x0) & (xy[:, 0] < box.x1) & (xy[:, 1] > box.y0) & (xy[:, 1] < box.y1)
        )
        flat = xy.size and np.ptp(xy[:, 1]) == 0  # a horizontal line across the axes
        if inside.any() or (flat and box.y0 < xy[0, 1] < box.y1):
            hits.append(str(line.get_label()))
    return hits


def _labelled(ax, label_part: str):
    return [ln for ln in ax.lines if label_part in str(ln.get_label())]


# --------------------------------------------------------------------------------------
# Round-off
# --------------------------------------------------------------------------------------
def test_a_matched_estimate_error_of_round_off_is_not_drawn(belt):
    """The belt drive's matched estimate starts exact: its error (about 1e-12, round-off) is
    no curve; the legend names it as zero to rounding, and no drawn value lies below the floor."""
    d, s = belt
    rs = _responses(s)
    matched = rs[1].estimation_error_norm
    assert 0 < matched.max() < 1e-9  # the round-off the issue saw drawn as a curve
    f = fig.estimation_error_figure(rs, [x.unit for x in d.design.plant.states])
    ax = f.axes[0]
    plan = fig.estimation_plan(rs)
    drawn = [ln for ln in ax.lines if len(ln.get_xdata()) > 2]
    assert [str(ln.get_label()) for ln in drawn] == [fig.curve_label(rs[2])]
    y = np.asarray(drawn[0].get_ydata(), dtype=float)
    assert np.all(y[np.isfinite(y)] > plan["floor"])
    assert plan["floor"] == pytest.approx(
        ROUNDOFF_FLOOR * max(np.linalg.norm(r.state, axis=1).max() for r in rs[1:])
    )
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any("matched estimate: zero to rounding" in t for t in texts)
    assert ax.get_ylim()[0] >= plan["floor"] * (1 - 1e-12)


def test_a_real_estimation_error_is_drawn():
    """A series above the floor stays: a digital loop's between-sample error is no round-off."""
    t = np.linspace(0, 1, 50)
    state = np.column_stack([np.ones(50), np.zeros(50)])
    real = SimpleNamespace(
        name="a", slug="observer_matched", time=t, state=state, saturated=False,
        estimation_error_norm=1e-3 * np.abs(np.sin(20 * t)),
    )  # fmt: skip
    plan = fig.estimation_plan([real])
    assert plan["drawn"] == [0] and plan["zero"] == []


# --------------------------------------------------------------------------------------
# Legends
# --------------------------------------------------------------------------------------
def test_the_control_legend_is_clear_of_the_6_ampere_limit_and_the_data(belt):
    """The issue: the legend covered the +6 A input limit line."""
    d, s = belt
    rs = _responses(s) + [s.saturated[2].response]
    f = fig.control_effort_figure(rs, "i_q", "A", s.u_max)
    ax = f.axes[0]
    box = _legend_box(ax)
    assert _data_points_inside(ax, box) == []
    for sign in (1, -1):  # the limit lines, in pixels
        y = ax.transData.transform((0.5, sign * s.u_max))[1]
        assert not box.y0 - 2 < y < box.y1 + 2


@pytest.mark.parametrize("maker", ["step", "saturation", "estimation"])
def test_time_response_legends_cover_no_data(belt, maker):
    d, s = belt
    rs = _responses(s)
    f = {
        "step": lambda: fig.step_response_figure(rs, "theta_L", "rad", 1.0),
        "saturation": lambda: fig.step_response_figure(
            [rs[2], s.saturated[2].response], "theta_L", "rad", 1.0
        ),
        "estimation": lambda: fig.estimation_error_figure(rs, ["rad", "rad/s"] * 2),
    }[maker]()
    ax = f.axes[0]
    assert _data_points_inside(ax, _legend_box(ax)) == []


def test_a_legend_with_no_free_corner_goes_above_the_data_or_below_the_axes():
    """Data across the whole axes: the legend may not cover it anywhere."""
    f = fig.blank_figure((6.4, 3.4))
    f.subplots_adjust(left=0.13, right=0.97, bottom=0.15, top=0.96)
    ax = f.add_subplot(1, 1, 1)
    x = np.linspace(0, 1, 400)
    for k in range(12):
        ax.axvline(k / 11, color="k", label=f"v{k}" if k == 0 else None)
    ax.plot(x, np.sin(40 * x), label="wiggle")
    ax.set_xlim(0, 1)
    place_legend(ax)
    box = _legend_box(ax)
    axes_box = ax.get_window_extent(f.canvas.get_renderer())
    assert box.y1 <= axes_box.y0  # nowhere inside is free: below the axes
    assert f.get_figheight() > 3.4  # the figure grew to hold it


# --------------------------------------------------------------------------------------
# Distinguishable curves
# --------------------------------------------------------------------------------------
def test_coinciding_step_curves_get_markers_and_the_caption_says_so(belt):
    """State feedback and the matched estimate are the same response (separation principle:
    Luenberger 1971, from memory), drawn on top of each other in the issue."""
    d, s = belt
    rs = _responses(s)
    f = fig.step_response_figure(rs, "theta_L", "rad", 1.0)
    ax = f.axes[0]
    truth = _labelled(ax, "true state")[0]
    matched = _labelled(ax, "matched estimate")[0]
    assert truth.get_marker() in ("None", None, "")
    assert matched.get_marker() not in ("None", None, "")
    assert truth.get_linestyle() != matched.get_linestyle()
    sentence = fig.curves_coincidence(rs, fig.output_curves(rs))
    assert "coincide" in sentence and rs[0].name in sentence and rs[1].name in sentence
    assert rs[2].name not in sentence  # the mismatched estimate differs visibly


def test_coincidence_threshold():
    t = np.linspace(0, 1, 100)
    y = np.sin(3 * t)
    span = np.ptp(y)
    near = y + 0.5 * COINCIDE_FRACTION * span
    far = y + 2 * COINCIDE_FRACTION * span
    assert coincident_pairs([(t, y), (t, near), (t, far)]) == [(0, 1)]
    # a different time grid is compared by interpolation
    t2 = np.linspace(0, 1, 37)
    assert coincident_pairs([(t, y), (t2, np.sin(3 * t2))]) == [(0, 1)]


# --------------------------------------------------------------------------------------
# Units
# --------------------------------------------------------------------------------------
def _assert_units(f):
    axes = [ax for ax in f.axes if ax.get_visible()]
    for ax in axes:
        assert UNIT.search(ax.get_ylabel()), ax.get_ylabel()
    assert any(UNIT.search(ax.get_xlabel()) for ax in axes)
    for ax in axes:
        if ax.get_xlabel():
            assert UNIT.search(ax.get_xlabel()), ax.get_xlabel()


def test_every_axis_of_the_response_figures_has_a_unit(belt):
    d, s = belt
    rs = _responses(s)
    ctrl = s.controller
    f_study = np.array([x for x, _ in s.speed_study])
    values = np.ones_like(f_study)
    for f in (
        fig.step_response_figure(rs, "theta_L", "rad", 1.0),
        fig.estimation_error_figure(rs, ["rad", "rad/s", "rad", "rad/s"]),
        fig.control_effort_figure(rs, "i_q", "A", 6.0),
        fig.pole_map_figure(ctrl.controller_poles, ctrl.observer_poles),
        fig.observer_study_figure(f_study, values, values, values, "i_q", "A", (5.0, 5.0)),
    ):
        _assert_units(f)


def test_unit_text():
    assert unit_text("kg m^2") == "kg m²"
    assert unit_text("m/s^2") == "m/s²"
    assert axis_label("gap", "") == "gap [–]"
    assert ratio_unit("A", "rad/s") == "A/(rad/s)"
    assert ratio_unit("A", "") == "A"


# --------------------------------------------------------------------------------------
# Pole maps
# --------------------------------------------------------------------------------------
def test_pole_map_markers_are_distinct_and_only_zeros_are_circles():
    """Root-locus convention: poles ×, zeros ○ (Franklin, Powell and Emami-Naeini, *Feedback
    Control of Dynamic Systems*, root-locus chapter; from memory)."""
    f = fig.pole_map_figure(
        np.array([-2 + 1j, -2 - 1j]),
        np.array([-8 + 4j, -8 - 4j]),
        None,
        np.array([0.0, -1.0]),
        np.array([-3.0]),
    )
    ax = f.axes[0]
    kinds = {
        "controller poles": _labelled(ax, "controller poles")[0],
        "observer poles": _labelled(ax, "observer poles")[0],
        "plant poles": _labelled(ax, "plant poles")[0],
        "plant zeros": _labelled(ax, "plant zeros")[0],
    }
    markers = {k: ln.get_marker() for k, ln in kinds.items()}
    assert markers["plant zeros"] == "o"
    assert [k for k, m in markers.items() if m == "o"] == ["plant zeros"]
    assert len(set(markers.values())) == 4
    assert len({ln.get_color() for ln in kinds.values()}) == 4
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert all(any(k in t for t in legend) for k in kinds)


def test_a_zero_outside_the_view_is_named_in_the_legend(belt):
    """The belt drive's plant zero at −600 lies far left of its poles."""
    d, s = belt
    ctrl = s.controller
    f = fig.pole_map_figure(
        ctrl.controller_poles, ctrl.observer_poles, None, np.linalg.eigvals(d.plant.A),
        s.plant_zeros,
    )  # fmt: skip
    ax = f.axes[0]
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any("outside the view" in t and "600" in t for t in legend)
    assert not [ln for ln in ax.lines if ln.get_marker() == "o" and len(ln.get_xdata())]


def test_the_mismatch_map_draws_no_circles_and_triangles_only_for_unstable_points():
    rng = np.random.default_rng(1)
    poles = -1 - rng.random((10, 4)) + 1j * rng.random((10, 4))
    stable = np.ones(10, dtype=bool)
    f = mismatch_pole_figure(poles, stable, np.array([-1.0, -2.0]), np.array([-5.0, -6.0]))
    ax = f.axes[0]
    assert "o" not in {ln.get_marker() for ln in ax.lines}
    assert "^" not in {ln.get_marker() for ln in ax.lines}  # every point stable
    stable[3] = False
    poles[3, 0] = 0.5
    f = mismatch_pole_figure(poles, stable, np.array([-1.0, -2.0]), np.array([-5.0, -6.0]))
    assert "^" in {ln.get_marker() for ln in f.axes[0].lines}


# --------------------------------------------------------------------------------------
# Sweeps
# --------------------------------------------------------------------------------------
def test_the_chosen_speed_factor_is_marked_on_every_panel(belt):
    d, s = belt
    factors = np.array([x for x, _ in s.speed_study])
    m = s.cases[2].metrics
    col = np.array([x.overshoot_percent for _, x in s.speed_study])
    chosen = (5.0, 5.0)
    f = fig.observer_study_figure(
        factors, col, col, col, "i_q", "A", chosen,
        (m.overshoot_percent, m.settling_time_2pct, m.peak_control),
    )  # fmt: skip
    for ax in f.axes:
        lines = [ln for ln in ax.lines if np.allclose(ln.get_xdata(), 5.0)]
        assert any(len(ln.get_xdata()) == 2 for ln in lines)  # the vertical line
        assert any(ln.get_marker() == "*" for ln in lines)  # the shipped design's value
    band = fig.observer_study_figure(factors, col, col, col, "i_q", "A", (3.3, 4.0))
    for ax in band.axes:
        assert ax.patches, "explicit observer poles: the band of their ratios"


def test_the_schedule_marks_the_nominal_design():
    from symbolic.render.schedule_code import gain_schedule
    from symbolic.render.schedule_pages import nominal_gains, schedule_figure

    d = derive(load_design(WORKED / "focus_actuator.toml"))
    s = gain_schedule(d, points=5)
    f = schedule_figure(s)
    x0 = float(next(p.value for p in d.design.parameters if p.name == s.axes[0].name))
    panels = [ax for ax in f.axes if ax.get_visible()]
    for ax, g in zip(panels, nominal_gains(s)):
        stars = [ln for ln in ax.lines if ln.get_marker() == "*"]
        assert stars and np.allclose(stars[0].get_xdata(), x0)
        assert np.allclose(stars[0].get_ydata(), g)
        assert UNIT.search(ax.get_ylabel())


# --------------------------------------------------------------------------------------
# Captions
# --------------------------------------------------------------------------------------
def test_captions_describe_only_what_is_drawn(focus):
    """The issue: the control caption described a limited run that was not drawn."""
    from symbolic.render.study_memo import memo_simulation

    d, s = focus
    assert s.saturated is None and s.u_max is not None
    ctx, _files = memo_simulation(d, s)
    captions = {str(c["stem"]): c["caption"] for c in ctx["figures"]}
    assert "dash-dotted" not in captions["control"]
    assert "no limited run is drawn" in captions["control"]
    assert "zero to rounding" in captions["estimation-error"]
    assert "no finite zeros" in ctx["pole_map_caption"]


def _inset_case(controller, observer, plant):
    figure = fig.pole_map_figure(
        np.asarray(controller, dtype=complex),
        np.asarray(observer, dtype=complex),
        None,
        np.asarray(plant, dtype=complex),
        np.array([], dtype=complex),
    )
    figure.canvas.draw()
    return figure


def test_crowded_poles_at_the_origin_get_an_inset_that_hides_no_pole():
    # the camera pan axis: observer poles near −2000, the plant's poles at 0 and −3 and the
    # controller's near −26: at the main scale the last four sit on one spot
    controller, observer = [-26 + 20j, -26 - 20j, -2160], [-2160, -180 + 180j, -180 - 180j]
    plant = [0.0, -3.0, -2160.0]
    figure = _inset_case(controller, observer, plant)
    (main,) = figure.axes
    (box,) = main.child_axes  # the inset
    renderer = figure.canvas.get_renderer()
    covered = box.get_tightbbox(renderer)  # the inset with its tick labels, in pixels
    every = np.array(controller + observer + plant, dtype=complex)
    points = main.transData.transform(np.column_stack([every.real, every.imag]))
    hidden = [p for p, (x, y) in zip(every, points, strict=True) if covered.contains(x, y)]
    assert hidden == []
    # the inset's view holds the crowded poles, apart from each other
    (x0, x1), (y0, y1) = box.get_xlim(), box.get_ylim()
    near = every[np.abs(every) < 100]
    assert all(x0 <= z.real <= x1 and y0 <= z.imag <= y1 for z in near)
    # and the caption says so, from the same rule
    assert fig.pole_map_inset(controller, observer, plant) is not None


def test_poles_that_read_apart_get_no_inset():
    # the same poles scaled so that nothing crowds: one axes only, and no inset in the caption
    figure = _inset_case(
        [-26 + 20j, -26 - 20j, -60], [-90, -80 + 30j, -80 - 30j], [0.0, -30.0, -60]
    )
    assert len(figure.axes) == 1 and not figure.axes[0].child_axes
    assert (
        fig.pole_map_inset(
            [-26 + 20j, -26 - 20j, -60], [-90, -80 + 30j, -80 - 30j], [0.0, -30.0, -60]
        )
        is None
    )
    # a repeated pole is one marker at every scale: no inset for it alone
    assert fig.pole_map_inset([-150 + 50j, -150 - 50j], [-300, -310], [0.0, 1e-12]) is None
