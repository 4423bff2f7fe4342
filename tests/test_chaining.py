"""Pieces of one rut mapped as separate features (geoops.chaining), on drawn geometry."""

from __future__ import annotations

import numpy as np

from geoops.chaining import chain_features


def _line(x0: float, x1: float, y: float, step: float = 0.5) -> np.ndarray:
    x = np.arange(x0, x1 + 1e-9, step)
    return np.column_stack([x, np.full_like(x, y)])


def test_a_gap_with_the_partner_running_past_is_bridged():
    front_a, front_b = _line(0, 30, 0.0), _line(34, 70, 0.0)
    rear = _line(-2, 68, 0.4)  # the same side's other track, unbroken across the gap
    assert chain_features([front_a, rear, front_b]) == [[0, 2]]


def test_a_track_sticking_out_ahead_of_its_partner_is_not_a_piece_of_it():
    """At a pass's end the front track runs one wheelbase beyond the rear track: end to end in
    distance, but alongside, not beyond."""
    rear = _line(0, 50, 0.0)
    front_tail = _line(47, 52, 0.05)  # short: its own heading does not count
    other_side = _line(0, 53, 1.6)
    assert chain_features([rear, front_tail, other_side]) == []


def test_a_path_starting_where_a_rut_ends_is_not_its_continuation():
    """A footpath leaving from where a vehicle's ruts end: no other track runs past the gap."""
    rut, partner = _line(0, 40, 0.0), _line(0, 40, 1.5)
    footpath = _line(43, 80, 0.0)
    footpath[:, 1] += 0.3 * np.sin(footpath[:, 0] / 3.0) * (footpath[:, 0] > 50)
    assert chain_features([rut, partner, footpath]) == []


def test_pieces_that_turn_away_are_not_chained():
    a = _line(0, 30, 0.0)
    t = np.linspace(0, np.pi / 2, 30)
    b = np.column_stack([34 + 10 * np.sin(t), 10 - 10 * np.cos(t) + 8.0])  # off to the side
    partner = _line(-2, 60, 0.5)
    assert chain_features([a, b, partner]) == []


def test_end_headings_are_the_least_squares_lines_of_the_end_vertices():
    # source: numpy 2.x linalg.svd: the first right singular vector of the centred vertices
    # is the direction of their least-squares (orthogonal) line
    from geoops.chaining import END_FIT_M, _line_ends

    rng = np.random.default_rng(3)
    lines = [np.cumsum(rng.normal(0.0, 0.4, (int(rng.integers(3, 60)), 2)), axis=0) + 5e5
             for _ in range(200)]
    owner, _, point, heading, inner = _line_ends(lines)
    assert len(owner) > 100
    for k, (line, end, h, i) in enumerate(zip(owner, point, heading, inner, strict=True)):
        xy = lines[line] if k % 2 == 0 else lines[line][::-1]
        s = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(xy, axis=0).T))])
        near = xy[s <= min(END_FIT_M, s[-1] / 3.0)]
        near = near if len(near) >= 2 else xy[:2]
        axis = np.linalg.svd(near - near.mean(axis=0))[2][0]
        axis = axis if np.dot(axis, xy[0] - near[-1]) >= 0 else -axis
        assert np.array_equal(end, xy[0]) and np.array_equal(i, near[-1])
        assert np.allclose(h, axis, atol=1e-9)
