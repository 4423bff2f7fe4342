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
