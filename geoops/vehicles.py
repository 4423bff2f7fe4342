"""Vehicle classes by wheelbase and track width, for the `vehicle_class` suggestion.

The table holds typical dimension ranges with their sources. It is a suggestion, never an
identification: many classes overlap, and the output says so by giving `unknown` when nothing
fits. This module must not do geometry.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class VehicleClass:
    name: str
    wheelbase_m: tuple[float, float]
    track_m: tuple[float, float] | None  # None: single-track vehicle
    source: str


#: Typical dimensions (wheelbase, centre-to-centre track width), metres.
VEHICLE_CLASSES: tuple[VehicleClass, ...] = (
    VehicleClass(
        "bicycle", (0.93, 1.30), None, "common practice: road 0.96-1.05, mountain 1.10-1.30"
    ),
    VehicleClass("motorcycle", (1.30, 1.65), None, "common practice"),
    VehicleClass("atv", (1.10, 1.40), (0.80, 1.05), "common practice: ATV / quad"),
    VehicleClass("car", (2.35, 3.05), (1.40, 1.70), "common practice: passenger car"),
    VehicleClass(
        "pickup",
        (3.05, 4.25),
        (1.50, 1.80),
        "common practice; AASHTO Green Book P design vehicle wheelbase 3.35 m (11 ft)",
    ),
    VehicleClass(
        "tractor", (1.95, 3.25), (1.45, 2.35), "common practice: farm tractor, adjustable track"
    ),
    VehicleClass(
        "forestry_machine",
        (3.15, 6.10),
        (2.00, 2.85),
        "common practice: skidder 3.2-4.0 / 2.3-2.8, forwarder 4.5-6.0 / 2.0-2.3",
    ),
    VehicleClass(
        "truck",
        (4.50, 8.00),
        (1.80, 2.10),
        "AASHTO Green Book SU-30 design vehicle wheelbase 6.1 m (20 ft); range common practice",
    ),
)


def _score(value: float, rng: tuple[float, float]) -> float:
    centre = 0.5 * (rng[0] + rng[1])
    half = 0.5 * (rng[1] - rng[0])
    return abs(value - centre) / half


def suggest_class(
    wheelbase: float | None, track_width: float | None, single_track: bool | None
) -> str:
    """Suggest a vehicle class from the wheelbase and, when known, the track width.

    Parameters
    ----------
    wheelbase
        Estimated wheelbase, metres (None: not estimable).
    track_width
        Estimated track width, metres (None: not seen).
    single_track
        True when the pass shows one track per axle and nothing suggests a wider vehicle;
        None when unknown (e.g. one side of a four-wheeled vehicle seen as a single pair).

    Examples
    --------
    >>> suggest_class(1.05, None, True)
    'bicycle'
    >>> suggest_class(2.7, None, True)
    'car'
    >>> suggest_class(2.7, 1.55, False)
    'car'
    >>> suggest_class(0.5, None, True)
    'unknown'
    """
    if wheelbase is None:
        return "unknown"
    fits = []
    for cls in VEHICLE_CLASSES:
        lo, hi = cls.wheelbase_m
        if not lo <= wheelbase <= hi:
            continue
        if track_width is not None:
            if cls.track_m is None or not cls.track_m[0] <= track_width <= cls.track_m[1]:
                continue
            score = _score(wheelbase, cls.wheelbase_m) + _score(track_width, cls.track_m)
        else:
            score = _score(wheelbase, cls.wheelbase_m)
            # a pair seen alone is more likely single-track when a single-track class fits
            if single_track and cls.track_m is None:
                score -= 1.0
        fits.append((score, cls.name))
    return min(fits)[1] if fits else "unknown"
