"""The e-mail chart: a valid, fixed-size PNG, byte-stable, and showing what the checks say.

PNG layout per the PNG specification (W3C PNG 2nd ed. / ISO/IEC 15948, also RFC 2083): an 8-byte
signature, then the IHDR chunk whose data start with width and height as 4-byte big-endian ints.
Pixels are read back with Pillow as an independent decoder.
"""

from __future__ import annotations

import io
from dataclasses import replace

import numpy as np
import pytest
from PIL import Image

from monitor.domain.check import DayCheck
from monitor.report.charts import (
    ALERT_SIZE,
    ChartPanel,
    _figure,
    alert_chart_png,
    digest_chart_png,
    png_bytes,
)
from monitor.store.checks import load_checks
from monitor.store.models import get_model
from tests.support.png import png_size
from tests.support.world import MODEL, World


def stored_checks(world: World) -> list[DayCheck]:
    with world.engine.connect() as conn:
        model = get_model(conn, MODEL)
        return load_checks(conn, model.id, model=MODEL)


def test_alert_chart_is_a_stable_png_of_the_configured_size(changed: World) -> None:
    checks = stored_checks(changed)
    first = alert_chart_png(checks, 0.95)
    assert png_size(first) == ALERT_SIZE == (640, 360)
    with Image.open(io.BytesIO(first)) as image:
        assert image.format == "PNG" and image.size == ALERT_SIZE
        pixels = np.asarray(image.convert("RGB"))
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 10  # something was drawn
    assert alert_chart_png(checks, 0.95) == first
    assert b"Software" not in first and b"matplotlib" not in first


def test_alert_chart_shows_a_signal(changed: World) -> None:
    checks = stored_checks(changed)
    assert any(c.cusum_signal for c in checks)
    quiet = [replace(c, cusum_signal=False) for c in checks]
    assert alert_chart_png(checks, 0.95) != alert_chart_png(quiet, 0.95)


def test_alert_chart_takes_any_sequence_and_copes_with_nothing(calm: World) -> None:
    checks = stored_checks(calm)
    assert alert_chart_png(tuple(checks), 0.95) == alert_chart_png(checks, 0.95)
    assert png_size(alert_chart_png([], 0.95)) == ALERT_SIZE


def test_digest_chart_stacks_one_pair_of_panels_per_model(changed: World) -> None:
    checks = stored_checks(changed)
    panels = [ChartPanel(name, checks, 0.95) for name in ("dock_loading", "yard_moves", "ramp")]
    data = digest_chart_png(panels)
    assert png_size(data) == (ALERT_SIZE[0], 3 * ALERT_SIZE[1])
    assert data == digest_chart_png(panels)  # byte-stable
    with Image.open(io.BytesIO(data)) as image:  # Pillow as an independent decoder
        assert image.size == (ALERT_SIZE[0], 3 * ALERT_SIZE[1])
    assert digest_chart_png(panels[:1]) == alert_chart_png(checks, 0.95)


@pytest.mark.parametrize("name", ["cost $ (net) per $", "$\\undefined{x}$", "pallets$_{2}"])
def test_names_with_dollar_signs_are_drawn_as_plain_text(name: str) -> None:
    """Column and model names go onto the charts as typed: matplotlib's mathtext would parse
    "$...$" as a formula and fail on most names (matplotlib's ``text.parse_math`` rcParam)."""
    with _figure((400, 300)) as fig:
        ax = fig.add_subplot()
        ax.plot([0, 1], [0, 1], label=name)
        ax.set_xlabel(name)
        title = ax.set_title(name)
        ax.legend()
        data = png_bytes(fig)
        assert title.get_text() == name and not title.get_parse_math()
    assert data.startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (W3C PNG specification)
