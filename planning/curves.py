"""Dubins and Reeds-Shepp shortest paths for a car with a minimum turning radius.

Model (LaValle, *Planning Algorithms*, 2006, eq. 15.48, unit radius after dividing
lengths by the turning radius r)::

    dx/ds = u1 cos(theta),  dy/ds = u1 sin(theta),  dtheta/ds = u1 u2,  u2 in [-1, 1]

with u1 = +1 (Dubins, forward only) or u1 in {-1, +1} (Reeds-Shepp, forward and
reverse). Cost is the arc length of the reference point (the rear-axle middle).

A path is a word of segments: ``L`` (full left lock), ``S`` (straight), ``R`` (full
right lock), each with a signed length in metres, negative when driven in reverse.

Derivation used here (worked out afresh from the cited geometry). Put the start at
(0, 0, 0) and the goal at (x, y, phi), unit radius. The left turning circle of the start
is centred at (0, 1); the goal's left and right circles at (x - sin phi, y + cos phi) and
(x + sin phi, y - cos phi). Every word's end pose reduces to one of two vectors,

    a = (x - sin phi, y - 1 + cos phi)   start-left to goal-left centre
    b = (x + sin phi, y - 1 - cos phi)   start-left to goal-right centre

written in polar form (rho, theta); each word then has a closed-form solution (see the
``_rs_*`` helpers). Arc parameters are taken modulo 2 pi in [0, 2 pi), so every solution
of a word is a real path whatever its arc lengths; the candidate set therefore contains
the sufficient set of Reeds & Shepp (each parameter in its published range) and the min
over it is the optimum.

References
----------
.. [1] L. E. Dubins, "On curves of minimal length with a constraint on average curvature,
   and with prescribed initial and terminal positions and tangents", American Journal of
   Mathematics 79(3):497-516, 1957. doi:10.2307/2372560
.. [2] J. A. Reeds and L. A. Shepp, "Optimal paths for a car that goes both forwards and
   backwards", Pacific Journal of Mathematics 145(2):367-393, 1990, section 8.
   doi:10.2140/pjm.1990.145.367
.. [3] S. M. LaValle, *Planning Algorithms*, Cambridge University Press, 2006,
   sections 15.3.1 (Dubins) and 15.3.2 (Reeds-Shepp).
.. [4] A. M. Shkel and V. Lumelsky, "Classification of the Dubins set", Robotics and
   Autonomous Systems 34:179-202, 2001. doi:10.1016/S0921-8890(00)00127-5
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from veer.planning.angles import wrap_angle
from veer.planning.errors import PlanningError
from veer.planning.inputs import pose_argument, positive_length

__all__ = [
    "CurvePath",
    "integrate_segments",
    "dubins_shortest",
    "dubins_length",
    "dubins_lengths_unit",
    "reeds_shepp_shortest",
    "reeds_shepp_length",
    "reeds_shepp_shortest_few",
    "dubins_shortest_few",
    "reeds_shepp_lengths_unit",
    "cheapest_curves",
    "cheapest_words",
    "all_curves",
]

_PI = math.pi
_TWO_PI = 2.0 * math.pi
_HALF_PI = 0.5 * math.pi
_INV_TWO_PI = 1.0 / _TWO_PI

# An angle this close below 2 pi is a rounding of 0 (else a "full loop" appears).
_ANGLE_SNAP_RAD = 1e-10
# A centre-to-centre vector shorter than this (unit radius) has no reliable direction.
_ZERO_VECTOR = 1e-10
# Slack for squares / sine and cosine arguments that rounding pushed out of range
# (e.g. p^2 = -8.9e-16 for the exact quarter circle). Endpoint error stays ~1e-9 r.
_DOMAIN_EPS = 1e-9
# Unit-radius segment lengths below this are set to exactly 0 (no motion, no gear).
_ZERO_LENGTH = 1e-12
# Candidates within this (unit) of the best count as ties; fewer cusps win.
_TIE = 1e-12

_KINDS = ("L", "S", "R")
_SWAP = {"L": "R", "R": "L", "S": "S"}


# --------------------------------------------------------------------------------------
# Angles and poses
# --------------------------------------------------------------------------------------


def _mod2pi(a: float) -> float:
    """``a`` modulo 2 pi in [0, 2 pi), with values just under 2 pi snapped to 0."""
    r = a - _TWO_PI * math.floor(a * _INV_TWO_PI)
    return 0.0 if r > _TWO_PI - _ANGLE_SNAP_RAD else r


def _mod2pi_np(a: np.ndarray) -> np.ndarray:
    """Vectorised :func:`_mod2pi` (same formula, so the two agree to rounding)."""
    r = a - _TWO_PI * np.floor(a * _INV_TWO_PI)
    r[r > _TWO_PI - _ANGLE_SNAP_RAD] = 0.0
    return r


def _polar(a: float, b: float) -> tuple[float, float]:
    rho = math.hypot(a, b)
    if rho < _ZERO_VECTOR:  # atan2(0, 0): any direction; 0 keeps arcs shortest
        return rho, 0.0
    return rho, math.atan2(b, a)


def _polar_np(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    rho = np.sqrt(a * a + b * b)  # np.hypot is several times slower; no overflow here
    theta = np.arctan2(b, a)
    theta[rho < _ZERO_VECTOR] = 0.0
    return rho, theta


def _check_radius(turn_radius_m) -> float:
    try:
        return positive_length(turn_radius_m, "turn_radius_m")
    except PlanningError:
        raise PlanningError(
            f"turn_radius_m must be a finite number > 0, got {turn_radius_m!r}; "
            "plan turn-in-place bases without curves"
        ) from None


def _relative_unit(start, goal, turn_radius_m, *, checked: bool = True):
    """Goal in the start's frame, lengths divided by the radius: (x, y, phi).

    ``checked=False`` skips the argument checks, for callers that already hold finite
    float poses and a positive radius (the search).
    """
    if checked:
        r = _check_radius(turn_radius_m)
        x0, y0, th0 = pose_argument(start, "start")
        x1, y1, th1 = pose_argument(goal, "goal")
    else:
        r, (x0, y0, th0), (x1, y1, th1) = turn_radius_m, start, goal
    c, s = math.cos(th0), math.sin(th0)
    dx, dy = x1 - x0, y1 - y0
    return (c * dx + s * dy) / r, (-s * dx + c * dy) / r, wrap_angle(th1 - th0), r


# --------------------------------------------------------------------------------------
# The path value and its integration
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CurvePath:
    """A word of full-lock arcs and straights for a given turning radius.

    Parameters
    ----------
    word : str
        Segment kinds, e.g. ``"LSL"`` (Dubins) or ``"L+R-L+"`` (Reeds-Shepp, with the
        gear of each segment). Zero-length segments of the word are kept.
    segments : tuple of (str, float)
        ``(kind, length_m)`` with kind in ``"L"``, ``"S"``, ``"R"``; the signed length is
        negative when the segment is driven in reverse.
    turn_radius_m : float
        Radius of the ``L`` and ``R`` arcs, > 0.

    Raises
    ------
    PlanningError
        If a kind is not L/S/R, a length is not finite, or the radius is not > 0.

    Examples
    --------
    >>> p = CurvePath("L+S+", (("L", math.pi / 2), ("S", 1.0)), 1.0)
    >>> round(p.length_m, 4), p.gear_changes
    (2.5708, 0)
    """

    word: str
    segments: tuple[tuple[str, float], ...]
    turn_radius_m: float

    def __post_init__(self):
        _check_radius(self.turn_radius_m)
        segs = tuple((str(k), float(v)) for k, v in self.segments)
        for kind, length in segs:
            if kind not in _KINDS:
                raise PlanningError(f"segment kind must be L, S or R, got {kind!r}")
            if not math.isfinite(length):
                raise PlanningError(f"segment length must be finite, got {length!r}")
        object.__setattr__(self, "segments", segs)

    @property
    def length_m(self) -> float:
        """Total distance driven, forward plus reverse, in metres."""
        return float(sum(abs(v) for _, v in self.segments))

    @property
    def reverse_length_m(self) -> float:
        """Distance driven in reverse, in metres."""
        return float(sum(-v for _, v in self.segments if v < 0.0))

    @property
    def gear_changes(self) -> int:
        """Number of cusps: sign changes between consecutive segments that move."""
        gears = [1 if v > 0 else -1 for _, v in self.segments if v != 0.0]
        return sum(1 for g0, g1 in zip(gears, gears[1:]) if g0 != g1)

    def sample(self, start, step_m: float) -> np.ndarray:
        """Poses along the path driven from `start`.

        Parameters
        ----------
        start : (float, float, float)
            (x_m, y_m, heading_rad) of the first pose.
        step_m : float
            Largest distance along the path between consecutive samples, > 0.

        Returns
        -------
        numpy.ndarray, shape (N, 4)
            Columns x_m, y_m, heading_rad (wrapped to [-pi, pi)), gear (+1 / -1). The
            first row is `start`, the last the path's end; every segment end (so every
            cusp) is a row. A row's gear is that of the motion reaching it; the first
            row carries the gear of the first moving segment. N = 1 for a path of
            length 0.

        Raises
        ------
        PlanningError
            If `start` is not a finite pose or `step_m` is not > 0.
        """
        return integrate_segments(start, self.segments, self.turn_radius_m, step_m)


def integrate_segments(start, segments, turn_radius_m, step_m) -> np.ndarray:
    """Drive a sequence of L/S/R segments in closed form and sample the poses.

    Each pose is computed exactly from its segment's start pose: an arc of signed length
    s on radius r turns the heading by +s/r (L) or -s/r (R) and moves the reference point
    along the chord 2 r sin(s / 2r) in the direction of the mean heading (LaValle 2006,
    section 15.3, integrating eq. 15.48 with u2 = +1, 0, -1).

    Parameters
    ----------
    start : (float, float, float)
        (x_m, y_m, heading_rad).
    segments : sequence of (str, float)
        ``(kind, signed_length_m)``, kind in ``"L"``, ``"S"``, ``"R"``.
    turn_radius_m : float
        Arc radius, > 0.
    step_m : float
        Largest distance along the path between consecutive samples, > 0.

    Returns
    -------
    numpy.ndarray, shape (N, 4)
        x_m, y_m, heading_rad in [-pi, pi), gear; see :meth:`CurvePath.sample`.

    Raises
    ------
    PlanningError
        On a bad pose, radius, step or segment kind.
    """
    r = _check_radius(turn_radius_m)
    x, y, th = start_pose = pose_argument(start, "start")
    try:
        step = float(step_m)
    except (TypeError, ValueError):
        step = float("nan")
    if not (math.isfinite(step) and step > 0.0):
        raise PlanningError(f"step_m must be a finite number > 0, got {step_m!r}")

    moving = []
    for kind, length in segments:
        if kind not in _KINDS:
            raise PlanningError(f"segment kind must be L, S or R, got {kind!r}")
        if float(length) != 0.0:
            moving.append((kind, float(length)))
    first_gear = 1.0 if not moving or moving[0][1] > 0 else -1.0
    # every segment's start pose in closed form, then all samples in one vectorised pass
    counts, lengths, turn, x0, y0, th0 = [], [], [], [], [], []
    for kind, length in moving:
        sign = 1.0 if kind == "L" else -1.0 if kind == "R" else 0.0
        counts.append(max(1, math.ceil(abs(length) / step)))
        lengths.append(length)
        turn.append(sign)
        x0.append(x)
        y0.append(y)
        th0.append(th)
        half = sign * length / (2.0 * r)
        chord = length if not sign else 2.0 * r * math.sin(length / (2.0 * r))
        x, y, th = x + chord * math.cos(th + half), y + chord * math.sin(th + half), th + 2.0 * half
    total = sum(counts)
    out = np.empty((total + 1, 4))
    out[0] = (*start_pose, first_gear)
    if total:
        seg = np.repeat(np.arange(len(counts)), counts)
        n = np.asarray(counts, dtype=float)[seg]
        offsets = np.cumsum(counts) - np.asarray(counts)
        k = np.arange(1, total + 1, dtype=float) - np.repeat(offsets, counts)
        length = np.asarray(lengths)[seg]
        s = length * (k / n)  # k = n gives exactly the segment's length
        sign = np.asarray(turn)[seg]
        half = sign * s / (2.0 * r)
        chord = np.where(sign == 0.0, s, 2.0 * r * np.sin(s / (2.0 * r)))
        heading0 = np.asarray(th0)[seg]
        out[1:, 0] = np.asarray(x0)[seg] + chord * np.cos(heading0 + half)
        out[1:, 1] = np.asarray(y0)[seg] + chord * np.sin(heading0 + half)
        out[1:, 2] = heading0 + 2.0 * half
        out[1:, 3] = np.where(length > 0, 1.0, -1.0)
    out[:, 2] = wrap_angle(out[:, 2])
    return out


# --------------------------------------------------------------------------------------
# Word solvers, scalar. Inputs: phi and the polar forms (rho, theta) of vectors a, b.
# Each returns the list of magnitude tuples (unit radius) for its base word.
# --------------------------------------------------------------------------------------


def _rs_lsl(phi, ra, ta, rb, tb):
    # L+ S+ L+: a = u (cos t, sin t), phi = t + v.
    t = _mod2pi(ta)
    return [(t, ra, _mod2pi(phi - t))]


def _rs_lsr(phi, ra, ta, rb, tb):
    # L+ S+ R+: b = Rot(t) (u, -2), so |b|^2 = u^2 + 4; phi = t - v.
    d = rb * rb - 4.0
    if d < -_DOMAIN_EPS:
        return []
    u = math.sqrt(max(d, 0.0))
    t = _mod2pi(tb + math.atan2(2.0, u))
    return [(t, u, _mod2pi(t - phi))]


def _ccc_arcs(ra, ta):
    # L+ R- L{+,-}: a = -4 sin(u/2) (cos(t + u/2), sin(t + u/2)), two roots for u.
    q = ra * 0.25
    if q > 1.0 + _DOMAIN_EPS:
        return []
    h = math.asin(min(q, 1.0))
    return [(_mod2pi(ta - _PI - h), 2.0 * h), (_mod2pi(ta + h), _TWO_PI - 2.0 * h)]


def _rs_lrl_cusp2(phi, ra, ta, rb, tb):
    # L+ R- L+ (C|C|C): phi = t + u + v.
    return [(t, u, _mod2pi(phi - t - u)) for t, u in _ccc_arcs(ra, ta)]


def _rs_lrl_cusp1(phi, ra, ta, rb, tb):
    # L+ R- L- (C|CC): phi = t + u - v.
    return [(t, u, _mod2pi(t + u - phi)) for t, u in _ccc_arcs(ra, ta)]


def _rs_lrlr_a(phi, ra, ta, rb, tb):
    # L+ R+(u) L-(u) R- (CCu|CuC): b = -2i e^{i(t-u)} (2 cos u - 1); phi = t - 2u + v.
    out = []
    c1 = (2.0 + rb) * 0.25  # root with 2 cos u - 1 >= 0
    if c1 <= 1.0 + _DOMAIN_EPS:
        u = math.acos(min(c1, 1.0))
        t = _mod2pi(tb + u + _HALF_PI)
        out.append((t, u, u, _mod2pi(phi - t + 2.0 * u)))
    c2 = (2.0 - rb) * 0.25  # root with 2 cos u - 1 <= 0
    if c2 >= -1.0 - _DOMAIN_EPS:
        u = math.acos(max(c2, -1.0))
        t = _mod2pi(tb + u - _HALF_PI)
        out.append((t, u, u, _mod2pi(phi - t + 2.0 * u)))
    return out


def _rs_lrlr_b(phi, ra, ta, rb, tb):
    # L+ R-(u) L-(u) R+ (C|CuCu|C): b = -2i e^{it} (2 - e^{iu}); phi = t - v.
    c = (20.0 - rb * rb) / 16.0
    if c > 1.0 + _DOMAIN_EPS or c < -1.0 - _DOMAIN_EPS:
        return []
    c = min(max(c, -1.0), 1.0)
    u = math.acos(c)
    t = _mod2pi(tb + _HALF_PI + math.atan2(math.sqrt(1.0 - c * c), 2.0 - c))
    return [(t, u, u, _mod2pi(t - phi))]


def _rs_lrsl(phi, ra, ta, rb, tb):
    # L+ R-(pi/2) S- L- (C|C(pi/2)SC): a = -e^{it} (2 + i(2 + u)); phi = t + pi/2 - v.
    u = math.sqrt(max(ra * ra - 4.0, 0.0)) - 2.0
    if u < -_DOMAIN_EPS:
        return []
    u = max(u, 0.0)
    t = _mod2pi(ta - _PI - math.atan2(2.0 + u, 2.0))
    return [(t, _HALF_PI, u, _mod2pi(t + _HALF_PI - phi))]


def _rs_lrsr(phi, ra, ta, rb, tb):
    # L+ R-(pi/2) S- R- (C|C(pi/2)SC): b = -i (2 + u) e^{it}; phi = t + pi/2 + v.
    u = rb - 2.0
    if u < -_DOMAIN_EPS:
        return []
    u = max(u, 0.0)
    t = _mod2pi(tb + _HALF_PI)
    return [(t, _HALF_PI, u, _mod2pi(phi - t - _HALF_PI))]


def _rs_lrslr(phi, ra, ta, rb, tb):
    # L+ R-(pi/2) S- L-(pi/2) R+ (C|C(pi/2)SC(pi/2)|C): b = -e^{it} (2 + i(4 + u)).
    u = math.sqrt(max(rb * rb - 4.0, 0.0)) - 4.0
    if u < -_DOMAIN_EPS:
        return []
    u = max(u, 0.0)
    t = _mod2pi(tb - _PI - math.atan2(4.0 + u, 2.0))
    return [(t, _HALF_PI, u, _HALF_PI, _mod2pi(t - phi))]


def _dubins_lrl(phi, ra, ta, rb, tb):
    # L+ R+ L+: a = 4 sin(u/2) e^{i(t - u/2)}; phi = t - u + v.
    q = ra * 0.25
    if q > 1.0 + _DOMAIN_EPS:
        return []
    h = math.asin(min(q, 1.0))
    out = []
    for u in (2.0 * h, _TWO_PI - 2.0 * h):
        t = _mod2pi(ta + 0.5 * u)
        out.append((t, u, _mod2pi(phi - t + u)))
    return out


def _pattern(word: str) -> tuple[tuple[str, int], ...]:
    """'L+R-S-L-' -> (('L', 1), ('R', -1), ...)."""
    return tuple((word[i], 1 if word[i + 1] == "+" else -1) for i in range(0, len(word), 2))


# (base word, solver, also solved on the reversed ("backwards") goal)
_RS_BASE = (
    (_pattern("L+S+L+"), _rs_lsl, False),
    (_pattern("L+S+R+"), _rs_lsr, False),
    (_pattern("L+R-L+"), _rs_lrl_cusp2, False),
    (_pattern("L+R-L-"), _rs_lrl_cusp1, True),
    (_pattern("L+R+L-R-"), _rs_lrlr_a, False),
    (_pattern("L+R-L-R+"), _rs_lrlr_b, False),
    (_pattern("L+R-S-L-"), _rs_lrsl, True),
    (_pattern("L+R-S-R-"), _rs_lrsr, True),
    (_pattern("L+R-S-L-R+"), _rs_lrslr, False),
)
_DUBINS_BASE = (
    (_pattern("L+S+L+"), _rs_lsl),
    (_pattern("L+S+R+"), _rs_lsr),
    (_pattern("L+R+L+"), _dubins_lrl),
)


def _circle_vectors(x, y, phi):
    s, c = math.sin(phi), math.cos(phi)
    ra, ta = _polar(x - s, y - 1.0 + c)
    rb, tb = _polar(x + s, y - 1.0 - c)
    return ra, ta, rb, tb


def _variant(pattern, refl: bool, flip: bool, back: bool):
    """A base word's pattern under reflection (L <-> R), timeflip (gears negated), reversal."""
    if refl:
        pattern = tuple((_SWAP[k], g) for k, g in pattern)
    if flip:
        pattern = tuple((k, -g) for k, g in pattern)
    return pattern[::-1] if back else pattern


def _rs_candidates(x, y, phi, variants=None):
    """All Reeds-Shepp candidates: list of (unit length, ((kind, sign), ...), mags).

    ``variants`` defaults to the Reeds-Shepp words; :func:`_priced_family` passes a set
    with the cusp-free CCC words added.
    """
    variants = variants or _RS_VARIANTS
    out = []
    for flip in (False, True):  # timeflip: (x, y, phi) -> (-x, y, -phi), signs negate
        for refl in (False, True):  # reflect: (x, y, phi) -> (x, -y, -phi), L <-> R
            gx = -x if flip else x
            gy = -y if refl else y
            gphi = -phi if flip != refl else phi
            for back in (False, True):
                if back:  # reversed word order: (x, y, phi) -> (x c + y s, x s - y c, phi)
                    s, c = math.sin(gphi), math.cos(gphi)
                    bx, by = gx * c + gy * s, gx * s - gy * c
                else:
                    bx, by = gx, gy
                vec = _circle_vectors(bx, by, gphi)
                for pat, solver in variants[(refl, flip, back)]:
                    for mags in solver(gphi, *vec):
                        if back:
                            mags = mags[::-1]
                        out.append((sum(mags), pat, mags))
    return out


# every base word's pattern under each (reflect, timeflip, backwards) variant, made once
_RS_VARIANTS = {
    (refl, flip, back): [
        (_variant(pattern, refl, flip, back), solver)
        for pattern, solver, has_back in _RS_BASE
        if has_back or not back
    ]
    for refl in (False, True) for flip in (False, True) for back in (False, True)
}


def _dubins_candidates(x, y, phi):
    out = []
    for refl in (False, True):
        gy, gphi = (-y, -phi) if refl else (y, phi)
        vec = _circle_vectors(x, gy, gphi)
        for pattern, solver in _DUBINS_BASE:
            pat = tuple((_SWAP[k], g) for k, g in pattern) if refl else pattern
            for mags in solver(gphi, *vec):
                out.append((sum(mags), pat, mags))
    return out


# the Reeds-Shepp words plus the cusp-free CCC word, under the same reflections and
# timeflips (so LRL and RLR driven all forward, and all in reverse)
_PRICED_VARIANTS = {
    key: words + ([(_variant(_pattern("L+R+L+"), key[0], key[1], False), _dubins_lrl)] if not key[2] else [])
    for key, words in _RS_VARIANTS.items()
}


def _priced_family(x, y, phi, reverse: bool):
    """Words for choosing by cost: the Reeds-Shepp set plus the cusp-free CCC words in either gear.

    The Reeds-Shepp set is sufficient for length only: it holds every CSC word in one
    gear, but a cusp-free CCC word is never shortest once reversing is allowed and so is
    left out. Once reversing and gear changes cost extra, such a Dubins word can be the
    cheapest, so it joins the family, as does its timeflip, driven wholly in reverse.
    """
    if not reverse:
        return _dubins_candidates(x, y, phi)
    return _rs_candidates(x, y, phi, _PRICED_VARIANTS)


def _cusps(pat, mags) -> int:
    gears = [g for (_, g), m in zip(pat, mags) if m > _ZERO_LENGTH]
    return sum(1 for g0, g1 in zip(gears, gears[1:]) if g0 != g1)


def _best_path(candidates, r: float, signed_word: bool) -> CurvePath:
    best = min(c[0] for c in candidates)
    ties = [c for c in candidates if c[0] <= best + _TIE * max(1.0, best)]
    _, pat, mags = min(ties, key=lambda c: _cusps(c[1], c[2]))  # first of fewest cusps
    return _to_path(pat, mags, r, signed_word)


def _to_path(pat, mags, r: float, signed_word: bool) -> CurvePath:
    segments = tuple(
        (k, g * (m * r if m > _ZERO_LENGTH else 0.0)) for (k, g), m in zip(pat, mags)
    )
    if signed_word:
        word = "".join(k + ("+" if g > 0 else "-") for k, g in pat)
    else:
        word = "".join(k for k, _ in pat)
    return CurvePath(word, segments, r)


def _few_paths(candidates, r: float, signed_word: bool, count: int) -> list[CurvePath]:
    """The ``count`` shortest distinct candidates, shortest first (ties: fewer cusps)."""
    if count == 1:
        return [_best_path(candidates, r, signed_word)]
    ordered = sorted(candidates, key=lambda c: (round(c[0], 9), _cusps(c[1], c[2])))
    paths: list[CurvePath] = []
    seen = set()
    for _, pat, mags in ordered:
        path = _to_path(pat, mags, r, signed_word)
        signature = tuple((k, round(length, 6)) for k, length in path.segments if abs(length) > 1e-9)
        if signature in seen:
            continue
        seen.add(signature)
        paths.append(path)
        if len(paths) == count:
            break
    return paths


# --------------------------------------------------------------------------------------
# Public scalar API
# --------------------------------------------------------------------------------------


def dubins_shortest(start, goal, turn_radius_m) -> CurvePath:
    """Shortest forward-only path between two poses (Dubins 1957).

    A shortest path has at most three pieces, CSC or CCC, and is one of the six words
    LSL, LSR, RSL, RSR, LRL, RLR ([1]_; [3]_ section 15.3.1; [4]_). All six are solved in
    closed form, arcs in [0, 2 pi), and the shortest is returned.

    Parameters
    ----------
    start, goal : (float, float, float)
        (x_m, y_m, heading_rad).
    turn_radius_m : float
        Minimum turning radius, > 0.

    Returns
    -------
    CurvePath
        Unsigned word (e.g. ``"RSL"``), all segment lengths >= 0. Identical poses give a
        path of length 0.

    Raises
    ------
    PlanningError
        If a pose is not finite or `turn_radius_m` is not > 0.

    Notes
    -----
    The Dubins length is asymmetric and discontinuous (a goal a hair to the left of the
    start heading costs a full loop), so it is not a metric ([3]_ section 14.1).

    References
    ----------
    .. [1] Dubins, Am. J. Math. 79(3):497-516, 1957.
    .. [3] LaValle, *Planning Algorithms*, 2006, section 15.3.1.
    .. [4] Shkel & Lumelsky, Robotics and Autonomous Systems 34:179-202, 2001.

    Examples
    --------
    >>> round(dubins_shortest((0, 0, 0), (0, 0, math.pi), 1.0).length_m, 4)
    7.3304
    """
    x, y, phi, r = _relative_unit(start, goal, turn_radius_m)
    return _best_path(_dubins_candidates(x, y, phi), r, signed_word=False)


def dubins_length(start, goal, turn_radius_m) -> float:
    """Length in metres of :func:`dubins_shortest` (forward only).

    Raises
    ------
    PlanningError
        If a pose is not finite or `turn_radius_m` is not > 0.
    """
    return dubins_shortest(start, goal, turn_radius_m).length_m


def reeds_shepp_shortest(start, goal, turn_radius_m) -> CurvePath:
    """Shortest forward-and-reverse path between two poses (Reeds & Shepp 1990).

    A shortest path has the form CCSCC with at most two cusps; Reeds & Shepp section 8
    gives a sufficient set of words, each with an explicit formula ([2]_; [3]_ section
    15.3.2, 48 words). This function solves the nine base words

    ``C|C|C, C|CC, CSC (same and opposite turns), CCu|CuC, C|CuCu|C, C|C(pi/2)SC
    (two kinds), C|C(pi/2)SC(pi/2)|C``

    and obtains the others by timeflip (gears reversed), reflection (L and R swapped)
    and, for C|CC and C|C(pi/2)SC, backwards traversal (giving CC|C and CSC(pi/2)|C).
    Among equally short candidates the one with fewer cusps is returned.

    Parameters
    ----------
    start, goal : (float, float, float)
        (x_m, y_m, heading_rad).
    turn_radius_m : float
        Minimum turning radius, > 0.

    Returns
    -------
    CurvePath
        Signed word (e.g. ``"L+R-L-"``), segment lengths negative in reverse.

    Raises
    ------
    PlanningError
        If a pose is not finite or `turn_radius_m` is not > 0.

    Notes
    -----
    64 candidates in closed form; a call takes about 0.1 ms.

    References
    ----------
    .. [2] Reeds & Shepp, Pacific J. Math. 145(2):367-393, 1990, section 8.
    .. [3] LaValle, *Planning Algorithms*, 2006, section 15.3.2.

    Examples
    --------
    >>> p = reeds_shepp_shortest((0, 0, 0), (-2.0, 0, 0), 1.0)
    >>> round(p.length_m, 6), p.segments[1]
    (2.0, ('S', -2.0))
    """
    x, y, phi, r = _relative_unit(start, goal, turn_radius_m)
    return _best_path(_rs_candidates(x, y, phi), r, signed_word=True)


def reeds_shepp_shortest_few(start, goal, turn_radius_m, count: int = 3) -> list[CurvePath]:
    """The ``count`` shortest distinct Reeds-Shepp candidates, shortest first.

    The first equals :func:`reeds_shepp_shortest`. A planner that finds the shortest
    curve blocked can try the next ones before giving up on a shot (cf. Dang et al.,
    "Improved analytic expansions in hybrid A-star path planning for non-holonomic
    robots", Applied Sciences 12:5999, 2022).
    """
    x, y, phi, r = _relative_unit(start, goal, turn_radius_m)
    return _few_paths(_rs_candidates(x, y, phi), r, True, count)


def dubins_shortest_few(start, goal, turn_radius_m, count: int = 3) -> list[CurvePath]:
    """The ``count`` shortest distinct Dubins candidates, shortest first."""
    x, y, phi, r = _relative_unit(start, goal, turn_radius_m)
    return _few_paths(_dubins_candidates(x, y, phi), r, False, count)


class _LazyCurve:
    """A priced word whose CurvePath is built on first use (most priced words are never sampled)."""

    __slots__ = ("pattern", "mags", "radius", "signed", "_path")

    def __init__(self, pattern, mags, radius, signed):
        self.pattern, self.mags, self.radius, self.signed, self._path = pattern, mags, radius, signed, None

    def path(self) -> CurvePath:
        if self._path is None:
            self._path = _to_path(self.pattern, self.mags, self.radius, self.signed)
        return self._path


def cheapest_curves(
    start, goal, turn_radius_m, price, count: int = 1, *, reverse: bool = True, checked: bool = True
) -> list[tuple[float, CurvePath]]:
    """The ``count`` cheapest distinct curves from ``start`` to ``goal`` under ``price``, cheapest first.

    See :func:`cheapest_words`, which this calls; this one builds every curve.
    """
    return [(cost, word.path()) for cost, word in cheapest_words(
        start, goal, turn_radius_m, price, count, reverse=reverse, checked=checked)]


def _signature(pat, mags) -> tuple:
    """What makes two solved words the same curve: the moving segments with their gears and lengths."""
    return tuple((k, g, round(m, 9)) for (k, g), m in zip(pat, mags) if m > _ZERO_LENGTH)


def cheapest_words(
    start, goal, turn_radius_m, price, count: int = 1, *, reverse: bool = True, checked: bool = True,
    with_shortest: bool = False,
) -> list:
    """The ``count`` cheapest distinct curves from ``start`` to ``goal`` under ``price``, cheapest first.

    Every word of the family is solved in closed form (with ``reverse``: the Reeds-Shepp
    candidates and the cusp-free CCC words driven all forward or all in reverse; else
    the six Dubins words) and priced with ``price(pattern, mags)``:
    ``pattern`` is the word as ``((kind, gear), ...)`` with kind L / S / R and gear +1 / -1,
    ``mags`` the unit-radius segment lengths (>= 0; a segment of length 0 is not driven).
    A planner's own cost model thus chooses the curve: the shortest is not always the
    cheapest once reversing and gear changes cost extra (cf. Dang, Ahn, Lee & Lee,
    "Improved analytic expansions in hybrid A-star path planning for non-holonomic
    robots", Applied Sciences 12:5999, 2022, on trying more than the shortest curve).

    ``price`` must never be below the word's length in metres (every cost model here
    charges at least the distance driven): words are priced shortest first and the rest
    skipped once no longer word can be among the ``count`` cheapest. Returns
    ``[(price, word), ...]``, ``word.path()`` building the CurvePath on demand (most
    priced words are never sampled); among equal prices the shorter word comes first.
    ``checked=False`` skips the argument checks (finite float poses, radius > 0 assumed).
    ``with_shortest`` puts the shortest word second when it is not among the ``count``
    cheapest: when the cheapest collides, the shortest sweeps the least ground and is the
    likeliest to be clear (the last of the cheapest then drops out).
    """
    x, y, phi, r = _relative_unit(start, goal, turn_radius_m, checked=checked)
    candidates = _priced_family(x, y, phi, reverse)
    by_length = sorted(range(len(candidates)), key=lambda j: candidates[j][0])
    # price never falls below the length in metres, so once the next-shortest word is
    # longer than the count-th cheapest price found, no later word can enter the answer
    kept: list[tuple[float, int]] = []  # (price, candidate index), cheapest first
    for i in by_length:
        unit_length, pat, mags = candidates[i]
        if len(kept) == count and unit_length * r > kept[-1][0]:
            break
        cost = price(pat, mags)
        if len(kept) == count and cost >= kept[-1][0]:
            continue
        # the same curve found by two words has the same price: compare only then
        if any(abs(cost - other_cost) <= 1e-9 and _signature(pat, mags) == _signature(*candidates[j][1:])
               for other_cost, j in kept):
            continue
        kept.append((cost, i))
        kept.sort(key=lambda item: item[0])
        del kept[count:]
    if with_shortest and count > 1 and by_length:
        # the shortest word sweeps the least ground: second in line when it is not among the cheapest
        i = by_length[0]
        signature = _signature(candidates[i][1], candidates[i][2])
        if all(signature != _signature(*candidates[j][1:]) for _, j in kept):
            kept.insert(1, (price(candidates[i][1], candidates[i][2]), i))
            del kept[count:]
    return [(cost, _LazyCurve(candidates[i][1], candidates[i][2], r, reverse)) for cost, i in kept]


def all_curves(start, goal, turn_radius_m, *, reverse: bool = True) -> list[CurvePath]:
    """Every solved word from ``start`` to ``goal``, unsorted: the family :func:`cheapest_curves` prices.

    For checks that want the whole family, such as a brute-force minimum under some cost.
    """
    x, y, phi, r = _relative_unit(start, goal, turn_radius_m)
    candidates = _priced_family(x, y, phi, reverse)
    return [_to_path(pat, mags, r, signed_word=reverse) for _, pat, mags in candidates]


def reeds_shepp_length(start, goal, turn_radius_m) -> float:
    """Length in metres of :func:`reeds_shepp_shortest`.

    Raises
    ------
    PlanningError
        If a pose is not finite or `turn_radius_m` is not > 0.
    """
    return reeds_shepp_shortest(start, goal, turn_radius_m).length_m


# --------------------------------------------------------------------------------------
# Vectorised lengths (unit radius), same formulas as the scalar solvers above
# --------------------------------------------------------------------------------------


# Goals per block in the vectorised functions: small enough for the ~100 temporary
# arrays of a block to stay in cache (measured 1.7x faster than one big block).
_BLOCK = 16384


def _blockwise(kernel, x, y, phi) -> np.ndarray:
    """Apply ``kernel(x, y, phi)`` (1-D arrays) block by block over broadcast inputs."""
    x, y, phi = np.broadcast_arrays(
        np.asarray(x, dtype=float), np.asarray(y, dtype=float), np.asarray(phi, dtype=float)
    )
    shape = x.shape
    x, y, phi = x.ravel(), y.ravel(), wrap_angle(phi.ravel())
    out = np.empty(x.shape)
    with np.errstate(invalid="ignore"):  # NaN marks a word with no solution
        for i in range(0, x.size, _BLOCK):
            j = slice(i, i + _BLOCK)
            out[j] = kernel(x[j], y[j], phi[j])
    out[~(np.isfinite(x) & np.isfinite(y) & np.isfinite(phi))] = np.nan
    return out.reshape(shape)


def _ccc_np(ra, ta):
    q = ra * 0.25
    q[(q > 1.0) & (q <= 1.0 + _DOMAIN_EPS)] = 1.0
    h = np.arcsin(q)  # NaN where no C|C|C word exists
    return ((_mod2pi_np(ta - _PI - h), 2.0 * h), (_mod2pi_np(ta + h), _TWO_PI - 2.0 * h))


def _rs_forward_np(p, ra, ta, rb, tb):
    """Shortest of the base words solved on the goal only (NaN where none)."""
    # L+ S+ L+
    t = _mod2pi_np(ta)
    best = t + ra + _mod2pi_np(p - t)
    # L+ S+ R+
    d = rb * rb - 4.0
    d[(d < 0.0) & (d >= -_DOMAIN_EPS)] = 0.0
    u = np.sqrt(d)
    t = _mod2pi_np(tb + np.arctan2(2.0, u))
    best = np.fmin(best, t + u + _mod2pi_np(t - p))
    # L+ R- L+
    for t, u in _ccc_np(ra, ta):
        best = np.fmin(best, t + u + _mod2pi_np(p - t - u))
    # L+ R+(u) L-(u) R-
    c = (2.0 + rb) * 0.25
    c[(c > 1.0) & (c <= 1.0 + _DOMAIN_EPS)] = 1.0
    u = np.arccos(c)
    t = _mod2pi_np(tb + u + _HALF_PI)
    best = np.fmin(best, t + 2.0 * u + _mod2pi_np(p - t + 2.0 * u))
    c = (2.0 - rb) * 0.25
    c[(c < -1.0) & (c >= -1.0 - _DOMAIN_EPS)] = -1.0
    u = np.arccos(c)
    t = _mod2pi_np(tb + u - _HALF_PI)
    best = np.fmin(best, t + 2.0 * u + _mod2pi_np(p - t + 2.0 * u))
    # L+ R-(u) L-(u) R+
    c = (20.0 - rb * rb) * (1.0 / 16.0)
    c[(c > 1.0) & (c <= 1.0 + _DOMAIN_EPS)] = 1.0
    c[(c < -1.0) & (c >= -1.0 - _DOMAIN_EPS)] = -1.0
    u = np.arccos(c)
    t = _mod2pi_np(tb + _HALF_PI + np.arctan2(np.sqrt(1.0 - c * c), 2.0 - c))
    best = np.fmin(best, t + 2.0 * u + _mod2pi_np(t - p))
    # L+ R-(pi/2) S- L-(pi/2) R+
    u = np.sqrt(np.maximum(rb * rb - 4.0, 0.0)) - 4.0
    u[(u < 0.0) & (u >= -_DOMAIN_EPS)] = 0.0
    u[u < 0.0] = np.nan
    t = _mod2pi_np(tb - _PI - np.arctan2(4.0 + u, 2.0))
    best = np.fmin(best, t + _PI + u + _mod2pi_np(t - p))
    return best


def _rs_both_ways_np(p, ra, ta, rb, tb):
    """Shortest of the base words solved on the goal and the backwards goal."""
    best = None
    # L+ R- L-
    for t, u in _ccc_np(ra, ta):
        cand = t + u + _mod2pi_np(t + u - p)
        best = cand if best is None else np.fmin(best, cand)
    # L+ R-(pi/2) S- L-
    u = np.sqrt(np.maximum(ra * ra - 4.0, 0.0)) - 2.0
    u[(u < 0.0) & (u >= -_DOMAIN_EPS)] = 0.0
    u[u < 0.0] = np.nan
    t = _mod2pi_np(ta - _PI - np.arctan2(2.0 + u, 2.0))
    best = np.fmin(best, t + _HALF_PI + u + _mod2pi_np(t + _HALF_PI - p))
    # L+ R-(pi/2) S- R-
    u = rb - 2.0
    u[(u < 0.0) & (u >= -_DOMAIN_EPS)] = 0.0
    u[u < 0.0] = np.nan
    t = _mod2pi_np(tb + _HALF_PI)
    best = np.fmin(best, t + _HALF_PI + u + _mod2pi_np(p - t - _HALF_PI))
    return best


def reeds_shepp_lengths_unit(x, y, phi) -> np.ndarray:
    """Shortest Reeds-Shepp lengths from (0, 0, 0) to many goals, unit turning radius.

    The same closed forms as :func:`reeds_shepp_shortest` ([2]_ section 8; [3]_ section
    15.3.2), evaluated with numpy over all goals at once; meant for filling heuristic
    tables in the goal frame. Multiply by the turning radius for metres, and divide goal
    positions by it before the call.

    Parameters
    ----------
    x, y : array_like
        Goal position in turning radii, in the start's frame (x ahead, y to the left).
    phi : array_like
        Goal heading minus start heading, radians.

    Returns
    -------
    numpy.ndarray
        Lengths in turning radii, of the broadcast shape of the inputs.

    Notes
    -----
    64 candidate words, each a handful of array passes over blocks of goals: 200 000
    goals take about 0.2 s on one core.

    References
    ----------
    .. [2] Reeds & Shepp, Pacific J. Math. 145(2):367-393, 1990, section 8.
    .. [3] LaValle, *Planning Algorithms*, 2006, section 15.3.2.

    Examples
    --------
    >>> reeds_shepp_lengths_unit([1.0, -3.0], [1.0, 0.0], [math.pi / 2, 0.0]).round(6)
    array([1.570796, 3.      ])
    """
    return _blockwise(_rs_block, x, y, phi)


def _rs_block(x, y, phi):
    s0, c0 = np.sin(phi), np.cos(phi)
    best = np.full(x.shape, np.inf)
    for fx, fy in ((1.0, 1.0), (1.0, -1.0), (-1.0, 1.0), (-1.0, -1.0)):
        # timeflip negates x and phi, reflection negates y and phi
        gx = x if fx > 0 else -x
        gy = y if fy > 0 else -y
        gp, gs = (phi, s0) if fx * fy > 0 else (-phi, -s0)
        ra, ta = _polar_np(gx - gs, gy - 1.0 + c0)
        rb, tb = _polar_np(gx + gs, gy - 1.0 - c0)
        best = np.fmin(best, _rs_forward_np(gp, ra, ta, rb, tb))
        best = np.fmin(best, _rs_both_ways_np(gp, ra, ta, rb, tb))
        bx = gx * c0 + gy * gs
        by = gx * gs - gy * c0
        ra, ta = _polar_np(bx - gs, by - 1.0 + c0)
        rb, tb = _polar_np(bx + gs, by - 1.0 - c0)
        best = np.fmin(best, _rs_both_ways_np(gp, ra, ta, rb, tb))
    return best


def dubins_lengths_unit(x, y, phi) -> np.ndarray:
    """Shortest Dubins lengths from (0, 0, 0) to many goals, unit turning radius.

    Vectorised form of :func:`dubins_shortest` ([1]_; [3]_ section 15.3.1; [4]_).

    Parameters
    ----------
    x, y : array_like
        Goal position in turning radii, in the start's frame.
    phi : array_like
        Goal heading minus start heading, radians.

    Returns
    -------
    numpy.ndarray
        Lengths in turning radii, of the broadcast shape of the inputs.

    References
    ----------
    .. [1] Dubins, Am. J. Math. 79(3):497-516, 1957.
    .. [3] LaValle, *Planning Algorithms*, 2006, section 15.3.1.
    .. [4] Shkel & Lumelsky, Robotics and Autonomous Systems 34:179-202, 2001.

    Examples
    --------
    >>> round(float(dubins_lengths_unit(0.0, 0.0, math.pi)), 4)
    7.3304
    """
    return _blockwise(_dubins_block, x, y, phi)


def _dubins_block(x, y, phi):
    s0, c0 = np.sin(phi), np.cos(phi)
    best = np.full(x.shape, np.inf)
    for fy in (1.0, -1.0):  # reflection: (x, y, phi) -> (x, -y, -phi)
        gy, gp, gs = (y, phi, s0) if fy > 0 else (-y, -phi, -s0)
        ra, ta = _polar_np(x - gs, gy - 1.0 + c0)
        rb, tb = _polar_np(x + gs, gy - 1.0 - c0)
        # L S L
        t = _mod2pi_np(ta)
        best = np.fmin(best, t + ra + _mod2pi_np(gp - t))
        # L S R
        d = rb * rb - 4.0
        d[(d < 0.0) & (d >= -_DOMAIN_EPS)] = 0.0
        u = np.sqrt(d)
        t = _mod2pi_np(tb + np.arctan2(2.0, u))
        best = np.fmin(best, t + u + _mod2pi_np(t - gp))
        # L R L, both roots of the middle arc
        q = ra * 0.25
        q[(q > 1.0) & (q <= 1.0 + _DOMAIN_EPS)] = 1.0
        h = np.arcsin(q)
        for t, u in (
            (_mod2pi_np(ta + h), 2.0 * h),
            (_mod2pi_np(ta + _PI - h), _TWO_PI - 2.0 * h),
        ):
            best = np.fmin(best, t + u + _mod2pi_np(gp - t + u))
    return best
