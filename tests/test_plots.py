"""Tests of the offline PNG figures: files exist, something is drawn where expected, bytes are
stable."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402
from matplotlib.image import imread  # noqa: E402
from support.synthetic_result import make_result  # noqa: E402

from balloonpath.plots import (  # noqa: E402
    PALETTE,
    draw_range_rings,
    new_figure,
    nice_ring_radii,
    plot_map,
    plot_profile,
    save_png,
)
from balloonpath.zones import compute_zones  # noqa: E402

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), §5.2


@pytest.fixture(scope="module")
def forecast():  # noqa: ANN201
    result = make_result(n=200, seed=41)
    return result, compute_zones(result)


def _non_white_fraction(img: np.ndarray) -> float:
    rgb = img[..., :3]
    return float(np.mean(np.any(rgb < 0.95, axis=-1)))


def test_map_png_is_drawn_and_deterministic(tmp_path, forecast) -> None:  # noqa: ANN001
    result, zones = forecast
    a = plot_map(result, zones, tmp_path / "map.png")
    data = a.read_bytes()
    assert data.startswith(PNG_SIGNATURE) and len(data) > 10_000
    img = imread(a)
    assert _non_white_fraction(img) > 0.02
    # The landing ellipses are drawn in the vermillion of PALETTE somewhere on the map.
    r, g, b = (int(PALETTE["landing_ellipse"][i : i + 2], 16) / 255 for i in (1, 3, 5))
    close = (
        (np.abs(img[..., 0] - r) < 0.08)
        & (np.abs(img[..., 1] - g) < 0.08)
        & (np.abs(img[..., 2] - b) < 0.08)
    )
    assert np.count_nonzero(close) > 200
    b2 = plot_map(result, zones, tmp_path / "map2.png")
    assert b2.read_bytes() == data  # no time stamp or version in the PNG
    assert b"Software" not in data


def test_profile_png(tmp_path, forecast) -> None:  # noqa: ANN001
    result, _zones = forecast
    p = plot_profile(result, tmp_path / "profile.png")
    img = imread(p)
    h, w = img.shape[:2]
    assert _non_white_fraction(img[h // 4 : 3 * h // 4, w // 4 : 3 * w // 4]) > 0.01


def test_range_rings_are_drawn_and_blank_is_blank(tmp_path) -> None:  # noqa: ANN001
    blank = new_figure(3.0, 3.0)
    ax = blank.add_subplot(1, 1, 1)
    ax.set_axis_off()
    ax.set_xlim(7.5, 9.5)
    ax.set_ylim(46.5, 48.0)
    empty = imread(save_png(blank, tmp_path / "blank.png"))
    assert _non_white_fraction(empty) == 0.0  # the check can fail: a blank figure reads as blank
    draw_range_rings(ax, 47.2, 8.4, [20_000.0, 40_000.0], label=False)
    drawn = imread(save_png(blank, tmp_path / "rings.png"))
    assert _non_white_fraction(drawn) > 0.005


def test_nice_ring_radii() -> None:
    np.testing.assert_array_equal(
        nice_ring_radii(70_000.0), [20_000.0, 40_000.0, 60_000.0, 80_000.0]
    )
    np.testing.assert_array_equal(nice_ring_radii(4_000.0), [1_000.0, 2_000.0, 3_000.0, 4_000.0])
