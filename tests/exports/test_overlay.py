"""The overlay drawing keeps the pixel convention of ARCHITECTURE.md: the continuous point (i + 0.5, j + 0.5) is
the centre of pixel (i, j), also after scaling; a half-pixel slip here would misplace every drawn line."""

from __future__ import annotations

import numpy as np

from tracedesk.exports.overlay import Mark, OverlayContent, Polyline, draw_overlay, to_drawing

RED = (255, 0, 0)


def _drawn(image: np.ndarray, content: OverlayContent, max_side: int) -> np.ndarray:
    return np.asarray(draw_overlay(image, content, max_side=max_side).convert("RGB"))


def test_pixel_centres_map_to_their_pixel_at_full_size() -> None:
    white = np.full((10, 20, 3), 255, dtype=np.uint8)
    line = Polyline(np.array([[3.5, 4.5], [10.5, 4.5]]), "#ff0000", "", width=1)
    drawn = _drawn(white, OverlayContent(lines=[line]), max_side=100)
    red_rows, red_columns = np.nonzero((drawn == RED).all(axis=2))
    assert set(red_rows.tolist()) == {4}
    assert (red_columns.min(), red_columns.max()) == (3, 10)


def test_scaling_keeps_the_corner_origin() -> None:
    """At half size, the continuous point (7, 9) becomes (3.5, 4.5): the centre of pixel (3, 4)."""
    assert to_drawing(np.array([[7.0, 9.0]]), (0.5, 0.5)) == [(3.0, 4.0)]
    assert to_drawing(np.array([[0.0, 0.0]]), (1.0, 1.0)) == [(-0.5, -0.5)]  # the image corner, not a centre
    white = np.full((20, 40, 3), 255, dtype=np.uint8)
    line = Polyline(np.array([[7.0, 9.0], [7.0, 9.0]]), "#ff0000", "", width=1)
    drawn = _drawn(white, OverlayContent(lines=[line]), max_side=20)
    assert drawn.shape == (10, 20, 3)
    assert tuple(drawn[4, 3]) == RED
    assert (drawn == RED).all(axis=2).sum() == 1


def test_gaps_are_not_bridged_and_marks_and_legend_are_drawn() -> None:
    white = np.full((60, 200, 3), 255, dtype=np.uint8)
    points = np.array([[150.5, 40.5], [160.5, 40.5], [np.nan, np.nan], [180.5, 40.5], [190.5, 40.5]])
    content = OverlayContent(lines=[Polyline(points, "#ff0000", "pen 1", width=1)], marks=[Mark(100.0, 30.0, "max")])
    drawn = _drawn(white, content, max_side=400)
    row = (drawn[40] == RED).all(axis=1)
    assert row[150:161].all() and not row[161:180].any() and row[180:191].all()
    assert (drawn[:, 85:116] == (224, 0, 0)).all(axis=2).any()  # the circle of the mark
    assert (drawn[5:40, 5:40] != 255).any()  # the legend box in the corner
