"""Direction of travel and wheelbase from one pair of tracks (front and rear).

The physics (kinematic bicycle model): the rear axle never slips sideways, so at every point of
the rear track, the tangent followed one wheelbase forward in the direction of travel meets the
front track (Finn, Mathematics Magazine 2004). For a candidate pair we test every hypothesis
(which track is the rear one, which way it was driven), fit the wheelbase to each by least
squares on a truncated (robust) loss, and compare the best fits of the two directions.

This module works on :class:`geoops.clean.CleanRut` objects in a local metric frame. It never
reads files, builds frames or groups ruts into passes.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np

from . import kernels
from .clean import CleanRut
from .curves import Array

#: plausible wheelbase range, metres  # common practice: child's bicycle to long truck/forwarder
WHEELBASE_MIN_M = 0.4
WHEELBASE_MAX_M = 12.0
#: probability of the travel direction at or above which a pass is `decided`
DECIDE_AT = 0.95
#: chi-square 95 % quantile with one degree of freedom (profile-likelihood interval)
CHI2_95_1DOF = 3.841458820694124  # source: chi-square distribution table, 1 dof, p = 0.95
#: residual floor (m): digitising and numeric precision  # common practice
RESIDUAL_FLOOR_M = 0.005
#: farthest a front track can part from its rear track, metres: off-tracking is about
#: L^2 / (2 R), and a 6 m wheelbase on an 8 m radius gives 2.25 m  # common practice
#: (SAE J695 terms)
OFFTRACK_MAX_M = 2.5
#: share of either track's overlap allowed farther than that from the other (plus three sigma
#: of the pair's noise): front and rear tracks of one vehicle stay within it all along; two
#: lines that run together for a stretch and then apart are two vehicles. On bench/accuracy.py's
#: scenarios no fitting pair exceeds 1 % and lines laid over each other exceed 9 %.
PARTED_SHARE = 0.05
#: largest lateral shift between same-side front and rear tracks, metres: half the largest
#: front/rear track difference of a tractor (1.5-2.3 m adjustable track)  # common practice
SHIFT_MAX_M = 0.5
#: a shift is tried only when the unshifted misfit exceeds this many sigma of the pair
SHIFT_TRY_AT = 1.5
#: temperature of the direction odds: the likelihood ratio is divided by it before it becomes
#: a probability (temperature scaling; Guo et al., "On Calibration of Modern Neural Networks",
#: ICML 2017). bench/accuracy.py's reliability table is the check: with the effective sample
#: count taken from the residuals' own correlation, 1.0 keeps white-noise passes calibrated;
#: raising it trades decided passes for safety under correlated survey error.
CONFIDENCE_TEMPERATURE = 1.0
#: largest log-odds reported; keeps confidences finite and below 1 - 1e-13
MAX_LOG_ODDS = 30.0

_GRID = np.geomspace(WHEELBASE_MIN_M, WHEELBASE_MAX_M, 24)
#: rear samples used to place the wheelbase on the coarse grid (the refinement and every
#: reported figure use all samples, up to FINE_SAMPLES)
COARSE_SAMPLES = 32
FINE_SAMPLES = 1500


@dataclass(frozen=True)
class HypothesisFit:
    """The best fit of one hypothesis.

    ``rear`` is the index (0 or 1) of the track taken as the rear one; ``along`` is +1 when the
    vehicle travelled in that track's vertex order, else -1; ``follows_first`` says whether the
    travel direction follows the vertex order of track 0.
    """

    rear: int
    along: int
    follows_first: bool
    wheelbase: float
    mse: float
    n_used: int
    tangent_var: float = 0.0
    shift: float = 0.0

    @property
    def raw_mse(self) -> float:
        """Mean squared miss as measured, before removing the expected tangent-noise part."""
        return self.mse + self.wheelbase**2 * self.tangent_var


@dataclass(frozen=True)
class PairResult:
    """Verdict on one candidate pair of tracks.

    ``verdict`` is ``decided``, ``ambiguous``, ``undetermined`` or ``not_a_pair``.
    ``follows_first`` is the travel direction relative to track 0's vertex order (None when not
    decided); ``confidence`` the probability that it is right (0.5 when not decided);
    ``p_follows_first`` the probability of that direction whatever the verdict;
    ``same_order`` whether the two tracks' vertex orders run the same way.
    """

    verdict: str
    reason: str
    rear: int | None
    follows_first: bool | None
    same_order: bool
    confidence: float
    p_follows_first: float
    p_rear_first: float
    wheelbase: float | None
    wheelbase_low: float | None
    wheelbase_high: float | None
    residual: float
    tolerance: float
    n_eff: float
    fits: tuple[HypothesisFit, ...]

    def follows(self, track: int) -> bool | None:
        """Whether travel follows the vertex order of track 0 or 1 (None when not decided)."""
        if self.follows_first is None:
            return None
        return self.follows_first if track == 0 else self.follows_first == self.same_order


def _clipped_index(position: Array, lo: int, hi: int) -> np.ndarray:
    """Nearest whole sample index of each ``position`` (in samples), within ``[lo, hi]``."""
    i = np.rint(position).astype(np.int64)
    np.maximum(i, lo, out=i)
    np.minimum(i, hi, out=i)
    return i


def _left_normals(u: Array) -> Array:
    """Unit vectors a quarter turn left of the unit vectors ``u`` (C-contiguous)."""
    return np.ascontiguousarray(u[:, ::-1] * np.array([-1.0, 1.0]))


def _interp_bool(mask: np.ndarray, s: Array, step: float) -> np.ndarray:
    i = _clipped_index(s / step, 0, len(mask) - 1)
    return np.asarray(mask[i], dtype=bool)


def _alignment(a: CleanRut, b: CleanRut) -> tuple[float, np.ndarray, Array]:
    """Mean tangent dot product of a's samples against b where they overlap, a's mask of
    samples whose nearest point on b is interior (the overlap), and each sample's distance
    to b (compiled: :func:`geoops.kernels.alignment`)."""
    index = b.index
    if not hasattr(index, "poly"):  # a one-point line: nothing to lie along
        return 0.0, np.zeros(len(a.xy), dtype=bool), np.full(len(a.xy), np.inf)
    mean_dot, inside, d = kernels.alignment(
        np.ascontiguousarray(a.xy), np.ascontiguousarray(a.tangents),
        np.ascontiguousarray(a.has_data), index.poly, index.geo, index.grid,
        np.ascontiguousarray(b.tangents), np.ascontiguousarray(b.has_data), float(b.step),
    )
    return float(mean_dot), inside, d


#: two tracks count as mapped as one line where, over a smoothing window, they stay closer
#: than this share of the pair's noise sigma: two lines surveyed on their own sit about one
#: sigma apart even where the wheels ran in one rut; a line drawn once for both sits at the
#: few-millimetre level of resampling (a digitiser's merged stretch)
MERGED_SHARE = 0.2
#: margin (in smoothing windows) left out beyond each end of a merged stretch: where the lines
#: part, the mapped line steps across to its own track, and smoothing spreads that jog over
#: half a window on each side
JUNCTION_MARGIN = 0.25


def _merged_stretches(
    track: CleanRut, dist: Array, overlap: np.ndarray, sigma: float
) -> np.ndarray:
    """Samples of ``track`` where it and the other track are one mapped line, widened by one
    smoothing window on each side (the jog where they part spreads over a window).

    Such stretches carry no direction evidence (a line predicts itself for any wheelbase
    only at zero wheelbase) and would pull the wheelbase towards zero."""
    w = track.window_pts | 1
    if len(dist) < w:
        return np.zeros(len(dist), dtype=bool)
    box = np.ones(w) / w
    rms = np.sqrt(np.convolve(np.where(overlap, dist * dist, np.inf), box, mode="same"))
    one = rms < MERGED_SHARE * sigma
    if not one.any():
        return one
    # the windowed test stops half a window short of a junction; widen back to it, plus the
    # margin
    reach = w + 2 * int(round(JUNCTION_MARGIN * w))
    wide = np.convolve(one.astype(np.float64), np.ones(reach), mode="same") > 0.5
    return np.asarray(wide, dtype=bool)


def _need(samples: int) -> int:
    """Predictions that must count for a misfit: at least a quarter of the overlap's samples
    (a short leg of a three-point turn may see its front track only over its length minus one
    wheelbase), and 8."""
    return max(8, int(0.25 * samples))


class _Objective:
    """Mean truncated squared miss of the tangent-extended rear points against the target."""

    def __init__(
        self,
        rear: CleanRut,
        target: CleanRut,
        along: int,
        idx: np.ndarray,
        cap: float,
        usable: np.ndarray | None = None,
    ):
        self.idx = idx
        # target samples a prediction may land on: observed, and not where the two tracks are
        # mapped as one line (see _merged_stretches)
        self.usable = np.ascontiguousarray(target.has_data if usable is None else usable, bool)
        self.base = np.ascontiguousarray(rear.xy[idx], dtype=np.float64)
        self.u = np.ascontiguousarray(along * rear.tangents[idx], dtype=np.float64)
        # left of the travel direction
        self.n = _left_normals(self.u)
        self.shift = 0.0
        # tangent noise adds L^2 var(theta) to the expected squared miss; remove it so that
        # noise does not pull the wheelbase towards zero (errors in variables)
        self.tvar = rear.tangent_var
        self.target = target
        self.cap2 = cap * cap
        self.need = _need(len(idx))
        self.edge = 2.0 * target.step

    def reaches(self, s: Array) -> np.ndarray:
        """Whether predictions at target positions ``s`` count: interior and usable."""
        t = self.target
        return (s > self.edge) & (s < t.length - self.edge) & _interp_bool(self.usable, s, t.step)

    def points(self, lengths: Array) -> Array:
        """Predicted front points for each wheelbase in ``lengths``, ``(len(lengths) * m, 2)``."""
        base = self.base + self.shift * self.n
        return (base[None, :, :] + lengths[:, None, None] * self.u[None, :, :]).reshape(-1, 2)

    def misses(self, length: float) -> tuple[np.ndarray, Array]:
        """Valid mask and signed lateral miss (target minus prediction, along the left normal)
        at one wheelbase, in rear-track order."""
        pts = self.points(np.array([length]))
        d, s, _, foot = self.target.index.nearest(pts)
        valid = self.reaches(s)
        valid &= d * d < self.cap2
        return valid, np.einsum("ij,ij->i", foot - pts, self.n)

    def _sums(self, lengths: Array, mode: int) -> np.ndarray:
        """The compiled sums of :func:`geoops.kernels.misfit_sums` for these wheelbases."""
        index = self.target.index
        if not hasattr(index, "poly"):  # a one-point target: nothing can land on it
            return np.zeros((len(lengths), 8))
        return kernels.misfit_sums(
            self.base, self.u, self.n, float(self.shift), np.ascontiguousarray(lengths, float),
            mode, index.poly, index.geo, index.grid, self.usable, float(self.target.step),
            float(self.edge), float(self.cap2), SHIFT_MAX_M,
        )

    def _mse(self, sums: np.ndarray, lengths: Array) -> tuple[Array, Array]:
        used = sums[:, kernels.USED]
        mse = sums[:, kernels.SUM_SQ] / np.maximum(used, 1) - lengths**2 * self.tvar
        return np.where(used >= self.need, mse, np.inf), used.astype(np.int64)

    def profiled(self, lengths: Array) -> tuple[Array, Array, Array]:
        """Like :meth:`many` with the best constant lateral shift profiled out per wheelbase:
        (mse, samples used, shift). The shift moves every prediction along the travel
        normal, so for a given wheelbase the best one is the mean signed lateral miss (within
        the truncation and :data:`SHIFT_MAX_M`); a wheelbase and a shift are fitted jointly in
        one batch instead of one after the other."""
        sums = self._sums(lengths, kernels.PROFILED)
        mse, used = self._mse(sums, lengths)
        return mse, used, self.shift + sums[:, kernels.SHIFT]

    def many(self, lengths: Array) -> tuple[Array, Array]:
        """Mean truncated squared miss and samples used, per wheelbase."""
        return self._mse(self._sums(lengths, kernels.PLAIN), lengths)


def _subsample(mask: np.ndarray, most: int) -> np.ndarray:
    idx = np.flatnonzero(mask)
    if len(idx) > most:
        idx = idx[np.linspace(0, len(idx) - 1, most).round().astype(np.int64)]
    return idx


def _newton(
    obj: _Objective, start: float, bracket: tuple[float, float], shift: float,
    free_shift: bool = False,
) -> tuple[float, float, int, float]:
    """Refine a wheelbase from ``start`` (and, with ``free_shift``, a lateral shift from
    ``shift``; else the predictions keep that shift) by Gauss-Newton steps on
    the truncated misfit (:func:`geoops.kernels.newton_fit`, each step one compiled pass over
    all samples). Returns the best (wheelbase, mse, samples used, shift) seen.

    Each prediction's signed miss e is measured along the target's normal at its nearest
    point; moving the prediction by dL along the rear tangent u (or by dc along the rear
    normal n) changes that miss by dL (u . n_target) (or dc (n . n_target)) to first order,
    the target's own tangent direction carrying no miss. Truncated samples contribute nothing
    to the slope; the expected tangent-noise term L^2 var(theta) is removed as in
    :meth:`_Objective.many`."""
    index = obj.target.index
    if not hasattr(index, "poly"):  # a one-point target: nothing can land on it
        return float("nan"), float("inf"), 0, shift
    length, mse, used, shift = kernels.newton_fit(
        obj.base, obj.u, obj.n, float(shift), float(start), float(bracket[0]),
        float(bracket[1]), free_shift, index.poly, index.geo, index.grid, obj.usable,
        float(obj.target.step), float(obj.edge), float(obj.cap2), SHIFT_MAX_M, float(obj.tvar),
        int(obj.need),
    )
    return float(length), float(mse), int(used), float(shift)


class _Hypothesis:
    """One hypothesis's objective on two sample sets: a few rear samples to place the
    wheelbase on the coarse grid, and all of them (up to FINE_SAMPLES) to refine it and for
    every figure that is reported or compared. The objectives are built when first asked
    for: most hypotheses need only their plain fit (:meth:`fit`)."""

    def __init__(
        self,
        rear: CleanRut,
        target: CleanRut,
        along: int,
        samples: list[np.ndarray],
        cap: float,
        usable: np.ndarray,
    ):
        self.rear, self.target, self.along = rear, target, along
        self.samples, self.cap = samples, cap
        self.usable = np.ascontiguousarray(usable, bool)

    @cached_property
    def coarse(self) -> _Objective:
        return _Objective(self.rear, self.target, self.along, self.samples[0], self.cap,
                          self.usable)

    @cached_property
    def fine(self) -> _Objective:
        return _Objective(self.rear, self.target, self.along, self.samples[1], self.cap,
                          self.usable)

    def set_shift(self, shift: float) -> None:
        self.coarse.shift = self.fine.shift = shift

    def fit(self, rear_arrays: list[tuple[Array, Array]]) -> tuple[float, float, int, float]:
        """Best wheelbase without a lateral shift, in one compiled call
        (:func:`geoops.kernels.fit_direction`): a log grid on the coarse samples places it
        between two grid neighbours, Gauss-Newton steps on all samples refine it.
        ``rear_arrays`` holds the rear track's points and tangents at the coarse and the fine
        samples (shared by both directions). Returns (wheelbase, mse, samples used, shift)."""
        index = self.target.index
        if not hasattr(index, "poly"):  # a one-point target: nothing can land on it
            return float("nan"), float("inf"), 0, 0.0
        (coarse_base, coarse_tangents), (fine_base, fine_tangents) = rear_arrays
        length, mse, used, shift = kernels.fit_direction(
            coarse_base, coarse_tangents, fine_base, fine_tangents, float(self.along), _GRID,
            index.poly, index.geo, index.grid, self.usable, float(self.target.step),
            2.0 * self.target.step, self.cap * self.cap, SHIFT_MAX_M,
            float(self.rear.tangent_var), _need(len(self.samples[0])),
            _need(len(self.samples[1])),
        )
        return float(length), float(mse), int(used), float(shift)


def _measure(obj: _Objective, profiled: bool) -> Callable[[Array], tuple[Array, Array]]:
    """The objective's batched misfit: as it stands, or with the lateral shift profiled out."""
    if profiled:
        return lambda lengths: obj.profiled(lengths)[:2]
    return obj.many


def _fit_shifted(h: _Hypothesis) -> tuple[float, float, int, float]:
    """Best wheelbase of one hypothesis with a constant lateral shift fitted jointly: a log
    grid on the coarse samples with the shift profiled out (see :meth:`_Objective.profiled`)
    places it between two grid neighbours, Gauss-Newton steps on all samples refine both
    (see :func:`_newton`); :meth:`_Hypothesis.fit` is the same without the shift. Returns
    (wheelbase, mse, samples used, shift)."""
    mse, _, shifts = h.coarse.profiled(_GRID)
    if not np.isfinite(mse).any():
        return float("nan"), float("inf"), 0, h.fine.shift
    i = int(np.argmin(np.where(np.isnan(mse), np.inf, mse)))
    bracket = (float(_GRID[max(i - 1, 0)]), float(_GRID[min(i + 1, len(_GRID) - 1)]))
    return _newton(h.fine, float(_GRID[i]), bracket, float(shifts[i]), free_shift=True)


def _fit_with_shift(
    h: _Hypothesis,
    start: tuple[float, float, int],
    corr_m: float,
    step: float,
) -> tuple[float, float, int, float]:
    """Fit the wheelbase jointly with a constant lateral shift of the prediction (same-side
    tracks of axles with different track widths, or a survey offset between two walked lines)
    and keep the shift only when it improves the fit by more than one parameter's worth.
    ``start`` is the fit without a shift: (wheelbase, mse, samples used).

    The shift is profiled out over the whole wheelbase grid first: fitting the wheelbase
    without it and then the shift at that wheelbase leaves the wheelbase biased by the
    unmodelled offset, by more than a narrow refit can recover."""
    length, mse, n_used = start
    if not np.isfinite(mse):
        return length, mse, n_used, 0.0
    h.set_shift(0.0)
    length2, mse2, n2, shift = _fit_shifted(h)
    h.set_shift(shift)
    if not (np.isfinite(mse2) and mse2 < mse):
        h.set_shift(0.0)
        return length, mse, n_used, 0.0
    n_eff = max(n2 * step / corr_m, 1.0)
    raw0 = mse + length**2 * h.fine.tvar
    gain = n_eff * (mse - mse2) / max(raw0, RESIDUAL_FLOOR_M**2)
    if gain < CHI2_95_1DOF:
        h.set_shift(0.0)
        return length, mse, n_used, 0.0
    return length2, mse2, n2, shift


def _correlation_length(miss: Array, spacing: float) -> float:
    """Integrated autocorrelation length (m) of a residual series: spacing times
    1 + 2 * (sum of the autocorrelations up to the first that is not positive), Geyer's
    initial positive sequence (Geyer, "Practical Markov Chain Monte Carlo", Statistical
    Science 7(4), 1992). Catches slowly wandering error even under white noise, which a lag-1
    estimate would miss."""
    n = len(miss)
    if n < 8:
        return float("inf")
    x = miss - miss.mean()
    den = float(np.dot(x, x))
    if den <= 0:
        return spacing
    size = 1 << (2 * n - 1).bit_length()
    f = np.fft.rfft(x, size)
    acf = np.fft.irfft(f * np.conj(f), size)[: n // 2] / den
    stop = np.flatnonzero(acf[1:] <= 0.0)
    k = int(stop[0]) + 1 if len(stop) else len(acf)
    tau = 1.0 + 2.0 * float(np.sum(acf[1:k]))
    return spacing * max(tau, 1.0)


#: widest 95 % interval, as a share of the wheelbase, for which the wheelbase counts as
#: identified (reported, and a direction may be decided)
IDENTIFIABLE_SHARE = 0.5
#: relative offsets from the estimate of the interval's first grid, and of the points looked
#: at next on a side where the first grid's end is still inside the bound
_NEAR_STEPS = np.array([-0.3, -0.2, -0.1, 0.1, 0.2, 0.3])
_FAR_STEPS = (0.4, IDENTIFIABLE_SHARE)
#: wheelbases tried between the last grid point inside the bound and the first outside
_CROSSING_POINTS = 3


def _interval(
    obj: _Objective, length: float, mse0: float, scale: float, shifted: bool = False
) -> tuple[float, float] | None:
    """95 % profile interval of the wheelbase: where n_eff*(mse-mse0)/sigma^2 <= chi2(0.95, 1),
    or None when it is wider than :data:`IDENTIFIABLE_SHARE` of the wheelbase (or reaches
    the end of the plausible range), so that the wheelbase is not identified.

    The chi-square profile is evaluated on a grid within 30 % of the estimate; a side whose
    last point is still inside the bound is looked at further out, up to the identifiable
    width; each crossing is then refined on a few wheelbases between the last point inside
    and the first outside. With ``shifted`` the lateral shift is profiled out too (it trades
    off against the wheelbase, most of all on steady turns)."""
    measure = _measure(obj, shifted)
    if shifted:
        obj.shift = 0.0
        mse0 = min(mse0, float(measure(np.array([length]))[0][0]))

    def chi_at(grid: Array) -> Array:
        return np.asarray(scale * (measure(grid)[0] - mse0))

    def within(grid: Array) -> Array:
        return grid[(grid >= WHEELBASE_MIN_M) & (grid <= WHEELBASE_MAX_M)]

    grid = np.concatenate([within(length * (1 + _NEAR_STEPS)), [length]])
    chi = np.concatenate([chi_at(grid[:-1]), [0.0]])
    inside = np.isfinite(chi) & (chi <= CHI2_95_1DOF)
    far = [
        length * (1 + sign * np.array(_FAR_STEPS))
        for sign, end in ((-1, grid[:-1].min(initial=length)), (1, grid[:-1].max(initial=length)))
        if end == length or inside[grid == end].all()
    ]
    if far:
        extra = within(np.concatenate(far))
        grid, chi = np.concatenate([grid, extra]), np.concatenate([chi, chi_at(extra)])
    order = np.argsort(grid)
    grid, chi = grid[order], chi[order]
    lo_k, hi_k = _inside_run(grid, chi, length)
    if lo_k == 0 or hi_k == len(grid) - 1:
        return None  # inside the bound up to the last wheelbase looked at
    refine = [
        np.linspace(a, b, _CROSSING_POINTS + 2)[1:-1] for a, b in _brackets(grid, chi, length)
    ]
    fine = np.concatenate(refine)
    grid = np.concatenate([grid, fine])
    chi = np.concatenate([chi, chi_at(fine)])
    order = np.argsort(grid)
    low, high = _crossings(grid[order], chi[order], length)
    if high - low > IDENTIFIABLE_SHARE * length:
        return None
    return low, high


def _inside_run(grid: Array, chi: Array, length: float) -> tuple[int, int]:
    """First and last grid index of the run of wheelbases inside the bound around ``length``."""
    inside = np.isfinite(chi) & (chi <= CHI2_95_1DOF)
    k = int(np.argmin(np.abs(grid - length)))
    inside[k] = True
    lo_k = k
    while lo_k > 0 and inside[lo_k - 1]:
        lo_k -= 1
    hi_k = k
    while hi_k < len(grid) - 1 and inside[hi_k + 1]:
        hi_k += 1
    return lo_k, hi_k


def _brackets(grid: Array, chi: Array, length: float) -> list[tuple[float, float]]:
    lo_k, hi_k = _inside_run(grid, chi, length)
    out = []
    if lo_k > 0:
        out.append((float(grid[lo_k - 1]), float(grid[lo_k])))
    if hi_k < len(grid) - 1:
        out.append((float(grid[hi_k]), float(grid[hi_k + 1])))
    return out


def _crossings(grid: Array, chi: Array, length: float) -> tuple[float, float]:
    lo_k, hi_k = _inside_run(grid, chi, length)

    def edge(a: int, b: int) -> float:
        # linear interpolation of the chi-square crossing between grid points a (in) and b (out)
        ca, cb = chi[a], chi[b]
        if not np.isfinite(cb) or cb == ca:
            return float(grid[a])
        f = (CHI2_95_1DOF - ca) / (cb - ca)
        return float(grid[a] + min(max(f, 0.0), 1.0) * (grid[b] - grid[a]))

    low = WHEELBASE_MIN_M if lo_k == 0 else edge(lo_k, lo_k - 1)
    high = WHEELBASE_MAX_M if hi_k == len(grid) - 1 else edge(hi_k, hi_k + 1)
    return min(low, length), max(high, length)


#: share of its mean magnitude by which the curvature must vary (beyond noise) before a
#: direction can be decided: slowly wandering survey error bends a steady turn a little, by a
#: few percent of its curvature on the benchmark's circles (bench/accuracy.md), which the
#: white-noise test alone reads as a change; real manoeuvres vary by about their own size
CURVATURE_CHANGE_SHARE = 0.3


def curvature_varies(track: CleanRut, z: float = 3.0) -> bool:
    """Whether the track's curvature changes by more than its noise explains.

    All direction evidence comes from changes of curvature: on a constant curvature (a circle,
    a straight) both directions fit. Curvature is read as the heading change across one
    smoothing window, at window spacing (nearly independent samples); its noise follows from
    the tangent variance. True when the variance of those samples exceeds the noise variance
    by ``z`` standard errors of a variance estimate, and the excess standard deviation is at
    least :data:`CURVATURE_CHANGE_SHARE` of the mean absolute curvature (a steady turn under
    correlated survey error is still a steady turn).
    """
    kappa, centres, noise = track.curvature()
    half = max(track.window_pts // 2, 1)
    samples = kappa[track.has_data[centres]][:: 2 * half]
    if len(samples) < 4:
        return False
    noise_var = noise**2
    excess = float(np.var(samples, ddof=1)) - noise_var
    # standard error of a sample variance of m normal values: var * sqrt(2 / (m - 1))
    significant = excess > z * noise_var * np.sqrt(2.0 / (len(samples) - 1)) + 1e-12
    level = float(np.mean(np.abs(samples)))
    return bool(significant and np.sqrt(max(excess, 0.0)) >= CURVATURE_CHANGE_SHARE * level)


def curvature_shared(
    rear: CleanRut, front: CleanRut, along: int, length: float, shift: float = 0.0,
    z: float = 1.0,
) -> bool:
    """Whether the rear track's changes of curvature show in the front track as well.

    A real change of steering bends both tracks at once; survey error (a slowly wandering
    GNSS error on a steady turn, say) bends each line on its own. The rear's curvature at
    window spacing is compared with the front's where the hypothesis puts the front axle at
    that moment (one wheelbase along the rear tangent): true when they are positively
    correlated by more than ``z`` standard errors (1 / sqrt(samples)). Too short a pair to
    say counts as shared (the other checks decide).
    """
    kr, cr, _ = rear.curvature()
    kf, cf, _ = front.curvature()
    half = max(rear.window_pts // 2, 1)
    keep = cr[rear.has_data[cr]][:: 2 * half]
    if len(keep) < 6 or len(kf) == 0:
        return True
    u = along * rear.tangents[keep]
    normal = _left_normals(u)
    d, s = front.index.distance_and_position(rear.xy[keep] + length * u + shift * normal)
    j = np.rint(s / front.step).astype(np.int64) - int(cf[0])
    np.maximum(j, 0, out=j)
    np.minimum(j, len(kf) - 1, out=j)
    a = kr[keep - cr[0]] - kr[keep - cr[0]].mean()
    b = kf[j] - kf[j].mean()
    den = float(np.sqrt(np.dot(a, a) * np.dot(b, b)))
    if den <= 0:
        return False
    # curvature is signed by each line's own vertex order: align the front's to the rear's
    at_front = np.minimum(j + int(cf[0]), len(front.tangents) - 1)
    same = float(np.mean(np.einsum("ij,ij->i", rear.tangents[keep], front.tangents[at_front])))
    r = float(np.dot(a, b)) / den * (1.0 if same >= 0 else -1.0)
    return r > z / np.sqrt(len(a))


#: largest factor by which a slowly wandering misfit widens the tolerance
WANDER_FACTOR_MAX = 2.0


def _wander_factor(corr_len: float, window: float) -> float:
    """How much to widen the misfit tolerance for residuals correlated over ``corr_len``
    metres when the noise was measured over a smoothing ``window``: sqrt(corr_len / window),
    at most :data:`WANDER_FACTOR_MAX`.

    The pair's sigma comes from each line's scatter about its own smoothed curve, which a
    slowly wandering survey error (GNSS multipath, a drifting base) does not show: two
    straight tracks of one vehicle then sit apart by more than that sigma explains, smoothly.
    A residual series correlated far beyond the window is that signature; a wrong pairing's
    misfit stays mostly within a window on bench/accuracy.py's unrelated lines."""
    if not np.isfinite(corr_len) or window <= 0:
        return 1.0
    return min(max(math.sqrt(corr_len / window), 1.0), WANDER_FACTOR_MAX)


def _sigmoid(x: float) -> float:
    return 1.0 / (1.0 + math.exp(-min(max(x, -MAX_LOG_ODDS), MAX_LOG_ODDS)))


def solve_pair(first: CleanRut, second: CleanRut, legs: bool = False) -> PairResult:
    """Test every front/rear hypothesis for two tracks and return a verdict.

    Parameters
    ----------
    first, second
        Cleaned tracks in one local metric frame; their vertex order carries no meaning.
    legs
        True when either track is a leg of a line cut at its reversals: the tight curves of a
        manoeuvre bring stretches of the other line's legs near it that its partner leg never
        runs alongside, so the parting test (:data:`PARTED_SHARE`) does not apply.

    Returns
    -------
    PairResult
    """
    tracks = (first, second)
    align, overlap0, dist0 = _alignment(first, second)
    _, overlap1, dist1 = _alignment(second, first)
    sigma_pair = float(np.hypot(first.sigma, second.sigma))
    tol_base = max(3.0 * sigma_pair, 0.05)
    cap = 4.0 * tol_base
    empty = PairResult(
        verdict="not_a_pair",
        reason="no_overlap",
        rear=None,
        follows_first=None,
        same_order=align >= 0,
        confidence=0.5,
        p_follows_first=0.5,
        p_rear_first=0.5,
        wheelbase=None,
        wheelbase_low=None,
        wheelbase_high=None,
        residual=float("inf"),
        tolerance=tol_base,
        n_eff=0.0,
        fits=(),
    )
    if overlap0.sum() < 8 or overlap1.sum() < 8 or align == 0.0:
        return empty
    same_order = align > 0
    apart = OFFTRACK_MAX_M + 3.0 * sigma_pair
    parted = max(np.mean(dist0[overlap0] > apart), np.mean(dist1[overlap1] > apart))
    if not legs and parted > PARTED_SHARE:
        return replace(empty, reason="tracks_part", same_order=same_order)
    merged = (
        _merged_stretches(first, dist0, overlap0, sigma_pair),
        _merged_stretches(second, dist1, overlap1, sigma_pair),
    )
    usable = (first.has_data & ~merged[0], second.has_data & ~merged[1])
    overlaps = (overlap0 & ~merged[0], overlap1 & ~merged[1])
    if overlaps[0].sum() < 8 or overlaps[1].sum() < 8:
        # one line drawn for both tracks: a pair, but nothing to measure
        return replace(
            empty, verdict="undetermined", reason="merged_tracks", same_order=same_order
        )

    fits: list[HypothesisFit] = []
    objs: dict[tuple[int, int], _Hypothesis] = {}
    for rear_i in (0, 1):
        rear, target = tracks[rear_i], tracks[1 - rear_i]
        samples = [_subsample(overlaps[rear_i], most) for most in (COARSE_SAMPLES, FINE_SAMPLES)]
        rear_arrays = [
            (np.ascontiguousarray(rear.xy[idx]), np.ascontiguousarray(rear.tangents[idx]))
            for idx in samples
        ]
        for along in (1, -1):
            hyp = _Hypothesis(rear, target, along, samples, cap, usable[1 - rear_i])
            length, mse, n_used, _ = hyp.fit(rear_arrays)
            follows_rear_order = along > 0
            follows_first = follows_rear_order if rear_i == 0 else follows_rear_order == same_order
            fits.append(
                HypothesisFit(rear_i, along, follows_first, length, mse, n_used, rear.tangent_var)
            )
            objs[(rear_i, along)] = hyp
    finite = [f for f in fits if np.isfinite(f.mse)]
    if not finite:
        return empty
    best = min(finite, key=lambda f: f.mse)
    window = max(first.window_m, second.window_m)

    def sample_spacing(f: HypothesisFit) -> float:
        stride = overlaps[f.rear].sum() / max(len(objs[(f.rear, f.along)].fine.base), 1)
        return tracks[f.rear].step * max(stride, 1.0)

    if np.sqrt(max(best.mse, 0.0)) > SHIFT_TRY_AT * sigma_pair:
        # a misfit a constant lateral shift may explain (same-side tracks of axles with
        # different track widths): the best of each direction takes its own shift, and the
        # two are compared with it; ranked without one, the wrong direction can come first
        rival = [f for f in finite if f.follows_first != best.follows_first]
        shifted = []
        for f in [best, *([min(rival, key=lambda g: g.mse)] if rival else [])]:
            length, mse, n_used, shift = _fit_with_shift(
                objs[(f.rear, f.along)], (f.wheelbase, f.mse, f.n_used), window,
                sample_spacing(f),
            )
            shifted.append(replace(f, wheelbase=length, mse=mse, n_used=n_used, shift=shift))
        by_key = {(f.rear, f.along): f for f in shifted}
        finite = [by_key.get((f.rear, f.along), f) for f in finite]
        best = min(shifted, key=lambda f: f.mse)
    shift = best.shift
    rear_track = tracks[best.rear]
    target_track = tracks[1 - best.rear]
    best_hyp = objs[(best.rear, best.along)]
    best_obj = best_hyp.fine
    spacing = sample_spacing(best)
    residual = float(np.sqrt(best.raw_mse))
    # judged on the misfit left after removing the expected tangent-noise part (a short leg's
    # tangents are noisy, and that noise, carried one wheelbase forward, is not a misfit)
    misfit = float(np.sqrt(max(best.mse, 0.0)))
    at_bound = best.wheelbase < WHEELBASE_MIN_M * 1.05 or best.wheelbase > WHEELBASE_MAX_M / 1.05
    if at_bound:
        # no wheelbase was found, only the end of the range, where L^2 var(theta) is largest:
        # removing it there would excuse any misfit (two unrelated lines become a pair). Judge
        # the plain misfit at its best wheelbase instead: straight tracks still fit (at a short
        # one), unrelated lines do not
        grid_mse, _ = best_obj.many(_GRID)
        raw = grid_mse + _GRID**2 * best_obj.tvar
        misfit = float(np.sqrt(max(float(np.min(raw)), 0.0))) if np.isfinite(raw).any() else misfit
    # residuals are correlated (smoothing windows, slowly wandering GNSS error): count
    # independent stretches of the residual series, not samples
    used_length = best.n_used * spacing
    valid, miss = best_obj.misses(best.wheelbase)
    corr_len = max(
        _correlation_length(miss[valid], spacing), rear_track.window_m, target_track.window_m
    )
    tolerance = (tol_base + 0.01 * best.wheelbase) * _wander_factor(corr_len, window)
    n_eff = max(used_length / corr_len, 1.0)
    scale = n_eff / max(best.raw_mse, RESIDUAL_FLOOR_M**2)

    def class_best(pred: Callable[[HypothesisFit], bool]) -> float:
        vals = [f.mse for f in finite if pred(f)]
        return min(vals) if vals else cap * cap

    mse_fwd = class_best(lambda f: f.follows_first)
    mse_bwd = class_best(lambda f: not f.follows_first)
    p_first = _sigmoid(0.5 * scale * (mse_bwd - mse_fwd) / CONFIDENCE_TEMPERATURE)
    mse_r0 = class_best(lambda f: f.rear == 0)
    mse_r1 = class_best(lambda f: f.rear == 1)
    p_rear_first = _sigmoid(0.5 * scale * (mse_r1 - mse_r0) / CONFIDENCE_TEMPERATURE)

    base = PairResult(
        verdict="not_a_pair",
        reason="misfit",
        rear=None,
        follows_first=None,
        same_order=same_order,
        confidence=0.5,
        p_follows_first=p_first,
        p_rear_first=p_rear_first,
        wheelbase=None,
        wheelbase_low=None,
        wheelbase_high=None,
        residual=residual,
        tolerance=tolerance,
        n_eff=n_eff,
        fits=tuple(fits),
    )
    if misfit > tolerance:
        return base
    interval = _interval(best_obj, best.wheelbase, best.mse, scale, shift != 0.0)
    identifiable = not at_bound and interval is not None
    p_dir = max(p_first, 1.0 - p_first)
    if p_dir >= DECIDE_AT and not (
        curvature_varies(rear_track)
        and curvature_shared(rear_track, target_track, best.along, best.wheelbase, shift)
    ):
        # constant curvature (a circle or a straight): both directions fit, whatever small
        # systematic survey error makes one look better (Finn 2004; Tabachnikov 2004); a
        # change of curvature that only one line shows is survey error, not steering
        p_dir = 0.5
    rear_known = max(p_rear_first, 1 - p_rear_first) >= DECIDE_AT
    if identifiable and interval is not None:
        low, high = interval
        base = replace(base, wheelbase=best.wheelbase, wheelbase_low=low, wheelbase_high=high)
    if identifiable and p_dir >= DECIDE_AT:
        return replace(
            base,
            verdict="decided",
            reason="",
            rear=best.rear,
            follows_first=p_first >= 0.5,
            confidence=p_dir,
        )
    rear_index = best.rear if rear_known else None
    if identifiable:
        return replace(base, verdict="ambiguous", reason="both_directions_fit", rear=rear_index)
    return replace(base, verdict="undetermined", reason="too_little_curvature", rear=rear_index)
