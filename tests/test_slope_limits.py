"""The slope chart's decision intervals are solved once, at the fit, and stored with the
version: a check context built from the stored ones equals one that solves them again, and
other settings than those they were solved for are solved afresh (the root search took about
90 % of building a version's check context: 42 of 48 ms a model, once per model a night)."""

from __future__ import annotations

import json
from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import numpy as np
from sqlalchemy import Engine

from monitor.domain.codec import decode, encode
from monitor.domain.version import SlopeLimits
from monitor.monitoring.context import VersionContext, slope_chart_of
from monitor.stats.window_summary import FitDiagnosis
from monitor.stats.within_slope import design_slope_chart
from monitor.store.models import get_model
from monitor.store.versions import active_version, store_slope_limits
from tests.support.world import World, settings_for


def _version(engine: Engine, make_settings, tmp_path: Path):
    world = World(engine, settings_for(make_settings, engine), tmp_path, seed=4)
    with engine.connect() as conn:
        return world.settings, active_version(conn, get_model(conn, "dock_loading").id)


def test_a_fitted_version_stores_the_limits_a_fresh_solve_gives(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    settings, version = _version(engine, make_settings, tmp_path)
    limits = version.baseline.slope_limits
    assert limits is not None and limits.matches(settings.check.slope_chart_step,
                                                 settings.check.slope_chart_arl_days,
                                                 settings.check.guarantee,
                                                 settings.check.slope_chart_small_step,
                                                 settings.check.slope_chart_reference)
    fresh = slope_chart_of(version.baseline.reference, version.baseline.diagnosis,
                           settings.check)  # no stored limits: the root search runs
    assert fresh is not None and np.isfinite(fresh.h).all()
    np.testing.assert_array_equal(limits.array(), fresh.h)  # exactly, through JSON and back
    stored = VersionContext.build(version, settings.check).slope_chart
    unstored = VersionContext.build(
        replace(version, draft=replace(version.draft, baseline=replace(
            version.baseline, slope_limits=None))),
        settings.check).slope_chart
    assert stored is not None and unstored is not None
    for field in ("h", "slopes", "tau2", "target", "reference_se", "inflation"):
        np.testing.assert_array_equal(getattr(stored, field), getattr(unstored, field))


def test_limits_solved_for_other_settings_are_solved_again(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    settings, version = _version(engine, make_settings, tmp_path)
    wider = replace(settings.check, slope_chart_arl_days=settings.check.slope_chart_arl_days * 4)
    chart = VersionContext.build(version, wider).slope_chart
    fresh = slope_chart_of(version.baseline.reference, version.baseline.diagnosis, wider)
    assert chart is not None and fresh is not None
    np.testing.assert_array_equal(chart.h, fresh.h)
    assert (chart.h > version.baseline.slope_limits.array()).all()  # a longer ARL, a wider H


def test_limits_stored_for_other_settings_are_replaced_by_the_first_check(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    # A version fitted before the chart had two lanes stores one limit for a fixed reference;
    # the first night solves the limits for the settings in force and keeps them with the
    # version, so later nights do not solve them again.
    world = World(engine, settings_for(make_settings, engine), tmp_path, seed=4)
    with engine.connect() as conn:
        model = get_model(conn, "dock_loading")
        version = active_version(conn, model.id)
    assert version is not None and version.baseline.slope_limits is not None
    old = SlopeLimits(0.10, 5000.0, 0.95, version.baseline.slope_limits.h[:1])
    with engine.begin() as conn:
        store_slope_limits(conn, version.id, old)
    with engine.connect() as conn:
        assert active_version(conn, model.id).baseline.slope_limits == old
    first = version.active_from
    world.add_days(first, first + timedelta(days=1), 41, "night.csv")
    world.check(first + timedelta(days=1))
    with engine.connect() as conn:
        now = active_version(conn, model.id).baseline.slope_limits
    check = world.settings.check
    assert now is not None and now.matches(check.slope_chart_step, check.slope_chart_arl_days,
                                           check.guarantee, check.slope_chart_small_step,
                                           check.slope_chart_reference)
    np.testing.assert_array_equal(now.array(), version.baseline.slope_limits.array())


def test_a_version_stored_before_rows_were_dropped_keeps_clipping_them(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    # Versions fitted now leave a day's rows beyond 4 robust sd out of its slope, and their
    # stored noise ratio and shift were computed that way; a version stored before has no
    # rule in its diagnosis, its ratio and shift were computed for clipped rows, and its chart
    # must go on clipping (common practice, no source: a stored design is read as it was made).
    settings, version = _version(engine, make_settings, tmp_path)
    diagnosis = version.baseline.diagnosis
    assert diagnosis is not None and diagnosis.slope_row_rule == "drop"
    chart = VersionContext.build(version, settings.check).slope_chart
    assert chart is not None and chart.row_rule == "drop"
    stored = encode(diagnosis)
    del stored["slope_row_rule"]
    older = decode(FitDiagnosis, json.loads(json.dumps(stored)))
    assert older.slope_row_rule == "clip"
    old_version = replace(version, draft=replace(version.draft, baseline=replace(
        version.baseline, diagnosis=older)))
    old_chart = VersionContext.build(old_version, settings.check).slope_chart
    assert old_chart is not None and old_chart.row_rule == "clip"


def test_a_version_stored_before_the_guarded_between_variance_keeps_the_raw_one(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    # Versions fitted now store the between-day variance of their fit window's guarded day
    # slopes and their chart uses it; a version stored before has none, and its chart must go
    # on estimating it from the raw day slopes, as when its limits were solved (common
    # practice, no source: a stored design is read as it was made).
    settings, version = _version(engine, make_settings, tmp_path)
    diagnosis = version.baseline.diagnosis
    assert diagnosis is not None and len(diagnosis.slope_between_var) == 1
    chart = VersionContext.build(version, settings.check).slope_chart
    assert chart is not None
    np.testing.assert_array_equal(chart.tau2, diagnosis.slope_between_var)
    marked = replace(diagnosis, slope_between_var=(0.0123,))  # a value the raw rows do not give
    marked_chart = slope_chart_of(version.baseline.reference, marked, settings.check)
    assert marked_chart is not None
    np.testing.assert_array_equal(marked_chart.tau2, [0.0123])
    stored = encode(marked)
    del stored["slope_between_var"]
    older = decode(FitDiagnosis, json.loads(json.dumps(stored)))
    assert older.slope_between_var == ()
    old_chart = slope_chart_of(version.baseline.reference, older, settings.check)
    raw = design_slope_chart(version.baseline.reference, older.slope_noise_ratio,
                             settings.check.slope_chart_step, settings.check.slope_chart_arl_days,
                             settings.check.guarantee, row_scale=older.robust_sd,
                             raw_inflation=older.slope_noise_ratio_raw,
                             clip_shift=older.slope_clip_shift, row_rule=older.slope_row_rule)
    assert old_chart is not None and raw is not None
    np.testing.assert_array_equal(old_chart.tau2, raw.tau2)
    assert old_chart.tau2[0] != 0.0123
