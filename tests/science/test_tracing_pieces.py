"""Pieces of the tracer checked on their own: regions, the colour lookup table, the coarse score map,
the coverage centroid, and the chart renderer the end-to-end tests rely on."""

import numpy as np
import pytest
from matplotlib.path import Path
from numpy.testing import assert_allclose
from skimage.color import deltaE_ciede2000, rgb2lab

from tests.science.chart_render import LinearChartMapping, PenStroke, render_sheet, rotation_about
from tracedesk.science.colour import colour_to_lab
from tracedesk.science.pen_likelihood import (
    CoarseGrid,
    block_maximum,
    build_pen_colour_model,
    coarse_score_map,
    quantised_colour_index,
)
from tracedesk.science.polar_unwrap import PolarGrid, angle_of_point_deg, unwrap_map
from tracedesk.science.subpixel import coverage_weights
from tracedesk.science.trace_quality import gap_spans
from tracedesk.science.trace_regions import BoxRegion, box_window, points_in_polygon, polygon_row_mask

POLYGON = np.array([[3.2, 4.1], [40.7, 2.0], [30.3, 35.5], [18.0, 12.0], [5.5, 30.0]])


def test_box_window_takes_the_pixels_whose_centres_are_inside():
    """Pixel (i, j) is centred at (i + 0.5, j + 0.5) (ARCHITECTURE.md)."""
    window = box_window(BoxRegion(10.5, 20.0, 13.49, 22.4), (100, 100, 3))
    assert (window.col_start, window.col_stop) == (10, 13)  # centres 10.5, 11.5, 12.5
    assert (window.row_start, window.row_stop) == (20, 22)  # centres 20.5, 21.5


def test_polygon_masks_match_matplotlib():
    """matplotlib.path.Path.contains_points is a general-purpose reference for point-in-polygon."""
    rows, cols = np.arange(0, 40), np.arange(0, 45)
    mask = polygon_row_mask(POLYGON, rows=rows, columns=cols)
    centres = np.stack(np.meshgrid(cols + 0.5, rows + 0.5), axis=-1).reshape(-1, 2)
    expected = Path(POLYGON).contains_points(centres).reshape(len(rows), len(cols))
    assert mask.sum() > 300
    assert (mask == expected).all()
    points = np.random.default_rng(2).uniform(0, 45, (5000, 2))
    assert (points_in_polygon(POLYGON, points[:, 0], points[:, 1]) == Path(POLYGON).contains_points(points)).all()


def test_score_table_matches_direct_ciede2000_within_quantisation():
    """The 5-bit table scores a colour by its bin centre; the difference to scikit-image's CIEDE2000 of
    the exact colour stays within the change over half a bin (a few units)."""
    model = build_pen_colour_model(colour_to_lab("#1f3cc8"), tolerance=20.0)
    rgb = np.random.default_rng(4).integers(0, 256, (5000, 3), dtype=np.uint8)
    lab = rgb2lab(rgb[None])[0]
    exact = deltaE_ciede2000(lab, np.broadcast_to(model.pen_lab, lab.shape))
    table = model.difference_table[quantised_colour_index(rgb)]
    assert np.median(np.abs(table - exact)) < 1.0
    assert np.percentile(np.abs(table - exact), 99) < 4.0
    score = model.score_table[quantised_colour_index(rgb)]
    assert (score[table < 20.0] >= 1).all()
    assert (score[table >= 20.0] == 0).all()


def test_block_maximum_matches_plain_reduction():
    values = np.random.default_rng(1).integers(0, 255, (37, 53), dtype=np.uint8)
    blocks = block_maximum(values, 4, 3)
    padded = np.zeros((40, 54), dtype=np.uint8)
    padded[:37, :53] = values
    assert (blocks == padded.reshape(10, 4, 18, 3).max(axis=(1, 3))).all()


@pytest.mark.parametrize("background", ["random", "paper"])
@pytest.mark.parametrize(("block", "step"), [(1, 1), (4, 2), (6, 2)])
def test_coarse_score_map_is_the_block_maximum_of_the_table(block, step, background):
    """Checked on random colours (every block passes the one-channel gate) and on noisy paper with
    specks of near-pen colour (few blocks pass; they are looked up one by one)."""
    rng = np.random.default_rng(block)
    if background == "random":
        image = rng.integers(0, 256, (97, 131, 3), dtype=np.uint8)
    else:
        image = (rng.integers(240, 256, (97, 131, 3))).astype(np.uint8)
        specks = rng.integers(0, 97 * 131, 25)
        image.reshape(-1, 3)[specks] = rng.integers(20, 80, (25, 3)) + np.array([0, 20, 120])
    image[40:43, 10:120] = (31, 60, 200)
    model = build_pen_colour_model(colour_to_lab("#1f3cc8"), tolerance=25.0)
    grid = CoarseGrid(5, 90, 7, 125, block, step)
    coarse = coarse_score_map(image, grid, model)
    scores = model.score_table[quantised_colour_index(image[5:90, 7:125])]
    scores[:, np.arange(scores.shape[1]) % step != 0] = 0  # columns the coarse pass does not read
    assert coarse.shape == (grid.n_rows, grid.n_cols)
    assert (coarse == block_maximum(scores, block, block)).all()


def test_coverage_weights_recover_the_mixing_fraction():
    """Agg blends colour = a * pen + (1 - a) * paper; the projection recovers a, and a colour off the
    mixture line (a printed grid) gets no weight."""
    pen, paper = np.array([31.0, 60.0, 200.0]), np.array([251.0, 250.0, 245.0])
    fractions = np.linspace(0.0, 1.0, 11)
    mixtures = fractions[:, None] * pen + (1 - fractions[:, None]) * paper
    assert_allclose(coverage_weights(mixtures, pen_rgb=pen, paper_rgb=paper), fractions, atol=1e-12)
    grid_colour = np.array([[200.0, 32.0, 42.0]])
    assert coverage_weights(grid_colour, pen_rgb=pen, paper_rgb=paper)[0] == 0.0


def test_gap_spans_use_outer_column_edges():
    found = np.array([False, True, True, False, False, True, False])
    assert gap_spans(found, np.arange(8.0) + 100.0) == [(100.0, 101.0), (103.0, 105.0), (106.0, 107.0)]
    assert gap_spans(np.ones(3, dtype=bool), np.arange(4.0)) == []


def test_polar_grid_angles_are_clockwise_on_screen():
    """ARCHITECTURE.md: angles as seen on the image, clockwise on the screen; with v down, 90 degrees
    clockwise from 3 o'clock is 6 o'clock (larger v)."""
    grid = PolarGrid((100.0, 100.0), 0.0, 1.0, 50, 0.0, np.pi / 2, 4)
    u, v = grid.to_pixels(np.array([np.pi / 2]), np.array([10.0]))
    assert_allclose((u[0], v[0]), (100.0, 110.0), atol=1e-12)
    assert angle_of_point_deg((100.0, 100.0), (100.0, 110.0)) == pytest.approx(90.0)
    assert angle_of_point_deg((100.0, 100.0), (110.0, 99.0)) == pytest.approx(360.0 - np.degrees(np.arctan(0.1)))


def test_unwrap_map_reads_a_ring_back_as_a_row():
    """A map that is 1 on a ring of radius 30 px (cells of 2 px) unwraps to a bright row at radius 30."""
    cell = 2.0
    centres = (np.arange(50) + 0.5) * cell
    uu, vv = np.meshgrid(centres, centres)
    ring = (np.abs(np.hypot(uu - 50.0, vv - 50.0) - 30.0) < 1.5).astype(float)
    grid = PolarGrid((50.0, 50.0), 10.0, 1.0, 40, 0.0, 2 * np.pi / 90, 90)
    unwrapped = unwrap_map(ring, origin_uv=(0.0, 0.0), cell_px=cell, grid=grid)
    brightest = grid.radius_px(np.argmax(unwrapped, axis=0))
    assert_allclose(brightest, 30.0, atol=1.0)


def test_renderer_draws_in_sheet_pixels():
    """The helper's contract: a line drawn at v = 100.3 has its ink centroid at v = 100.3, and the chart
    mapping round-trips."""
    sheet = render_sheet(
        width_px=200,
        height_px=150,
        strokes=[PenStroke(np.array([[10, 100.3], [190, 100.3]]), "#000000", 2.0)],
        paper="#ffffff",
    )
    ink = 255.0 - sheet[:, 100, 0]
    assert_allclose(np.sum(ink * (np.arange(150) + 0.5)) / ink.sum(), 100.3, atol=0.01)
    mapping = LinearChartMapping(x_range=(0, 10), y_range=(-1, 1), box_px=(60, 40, 740, 460))
    assert_allclose(mapping.data_to_pixel(np.array([0.0, 10.0]), np.array([1.0, -1.0])), [[60, 40], [740, 460]])
    data = np.array([[2.5, 0.3], [7.0, -0.9]])
    assert_allclose(mapping.pixel_to_data(mapping.data_to_pixel(data[:, 0], data[:, 1])), data, atol=1e-12)
    assert_allclose(rotation_about(90.0, (0.0, 0.0))(np.array([[1.0, 0.0]])), [[0.0, 1.0]], atol=1e-12)
