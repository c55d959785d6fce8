"""Tests for veer.planning.curves: Dubins and Reeds-Shepp shortest paths."""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares, minimize

from veer.planning.curves import (
    CurvePath,
    dubins_length,
    dubins_lengths_unit,
    dubins_shortest,
    integrate_segments,
    reeds_shepp_length,
    reeds_shepp_lengths_unit,
    reeds_shepp_shortest,
    wrap_angle,
)
from veer.planning.errors import PlanningError

PI = math.pi
# Wheelbase 2 m at 30 degrees steer: r = L / tan(delta) = 3.464 m
# source: LaValle, Planning Algorithms 2006, section 13.1.2.1
CAR_RADIUS_M = 3.464
RADII_M = (1.0, CAR_RADIUS_M)
FAMILIES = (
    pytest.param(dubins_shortest, id="dubins"),
    pytest.param(reeds_shepp_shortest, id="reeds_shepp"),
)
QUICK = settings(max_examples=40, deadline=None, database=None)

coord_m = st.floats(-8.0, 8.0, allow_nan=False)
heading_rad = st.floats(-PI, PI, allow_nan=False)
poses = st.tuples(coord_m, coord_m, heading_rad)
radii_m = st.sampled_from(RADII_M)


def _angle_gap(a, b):
    return abs(wrap_angle(a - b))


# ------------------------------------------------------------------------------------
# Independent forward model: compose segments with complex numbers (not the module's
# chord formula). L of signed length s about centre p + i e^{i th}; R about p - i e^{i th}.
# source: LaValle 2006, eq. 15.48 integrated with u2 = +1, 0, -1 (unit radius)
# ------------------------------------------------------------------------------------


def _compose_unit(kinds, lengths):
    """End poses of words; kinds (k,) of 'L'/'S'/'R', lengths (n, k) signed, unit r."""
    n = lengths.shape[0]
    z = np.zeros(n, dtype=complex)
    th = np.zeros(n)
    for kind, s in zip(kinds, lengths.T):
        e = np.exp(1j * th)
        if kind == "L":
            z = z + 1j * e * (1.0 - np.exp(1j * s))
            th = th + s
        elif kind == "R":
            z = z - 1j * e * (1.0 - np.exp(-1j * s))
            th = th - s
        else:
            z = z + s * e
    return z.real, z.imag, th


def _relative(start, goal, r):
    c, s = math.cos(start[2]), math.sin(start[2])
    dx, dy = goal[0] - start[0], goal[1] - start[1]
    return (c * dx + s * dy) / r, (-s * dx + c * dy) / r, goal[2] - start[2]


# ------------------------------------------------------------------------------------
# Check values
# ------------------------------------------------------------------------------------


@pytest.mark.parametrize("r", RADII_M)
@pytest.mark.parametrize("d", [0.3, 2.0, 9.5])
def test_straight_ahead_is_the_distance(r, d):
    # source: Dubins 1957 and Reeds & Shepp 1990 (check values in docs/reference.md): |dxy| is a
    # lower bound that a straight attains
    for family in (dubins_shortest, reeds_shepp_shortest):
        path = family((0, 0, 0), (d, 0, 0), r)
        assert path.length_m == pytest.approx(d, abs=1e-12)
        assert path.gear_changes == 0
        assert all(v >= 0 for _, v in path.segments)


@pytest.mark.parametrize("r", RADII_M)
@pytest.mark.parametrize("d", [0.3, 2.0, 9.5])
def test_straight_behind_is_reversing_the_distance(r, d):
    # source: Reeds & Shepp 1990, section 8 (timeflip of the straight; docs/reference.md check values)
    path = reeds_shepp_shortest((0, 0, 0), (-d, 0, 0), r)
    assert path.length_m == pytest.approx(d, abs=1e-12)
    assert path.reverse_length_m == pytest.approx(d, abs=1e-12)
    assert path.gear_changes == 0
    samples = path.sample((0, 0, 0), 0.25)
    assert (samples[:, 3] == -1).all()
    np.testing.assert_allclose(samples[-1, :3], [-d, 0, 0], atol=1e-12)


@pytest.mark.parametrize("r", RADII_M)
def test_quarter_circle_is_one_arc(r):
    # Degenerate case: the zero-length straight of LSL must not drop the word (a 5x
    # longer path would come back).
    # source: Dubins 1957 / Reeds & Shepp 1990, check value (1, 1, pi/2) = pi/2 and the LSL pitfall
    # of docs/reference.md
    for family in (dubins_shortest, reeds_shepp_shortest):
        path = family((0, 0, 0), (r, r, PI / 2), r)
        assert path.length_m == pytest.approx(PI / 2 * r, abs=1e-9)
        moving = [(k, v) for k, v in path.segments if v != 0.0]
        assert len(moving) == 1 and moving[0][0] == "L"
        assert moving[0][1] == pytest.approx(PI / 2 * r, abs=1e-9)


@pytest.mark.parametrize("r", RADII_M)
@pytest.mark.parametrize("start_heading", [0.0, 0.3, -2.0, PI / 2, PI])
def test_any_single_arc_up_to_half_a_turn_is_returned_as_itself(r, start_heading):
    # An arc of angle a <= pi is optimal: it attains the lower bound r |dtheta|
    # (L_RS >= r |wrap(dtheta)| and L_Dubins >= L_RS, docs/reference.md, derived). Goals are
    # the ends of the arcs, so the straights and other arcs of the words are all zero:
    # the degenerate cases of the formulas.
    start = (1.0, -2.0, start_heading)
    for angle in np.linspace(0.05, PI, 7):
        for kind in "LR":
            for gear in (1, -1):
                seg = ((kind, gear * angle * r),)
                end = tuple(integrate_segments(start, seg, r, 100.0)[-1, :3])
                rs = reeds_shepp_shortest(start, end, r)
                assert rs.length_m == pytest.approx(angle * r, abs=1e-9)
                assert rs.gear_changes == 0
                if gear > 0:
                    assert dubins_length(start, end, r) == pytest.approx(angle * r, abs=1e-9)


@pytest.mark.parametrize("r", RADII_M)
def test_half_circle_u_turn(r):
    # source: Dubins 1957 / Reeds & Shepp 1990, check value (0, 2, pi) = pi, unit r (docs/reference.md)
    for family in (dubins_shortest, reeds_shepp_shortest):
        assert family((0, 0, 0), (0, 2 * r, PI), r).length_m == pytest.approx(PI * r, abs=1e-9)


@pytest.mark.parametrize("r", RADII_M)
def test_dubins_turn_on_the_spot_is_seven_thirds_pi(r):
    # source: Dubins 1957 (LaValle 2006, section 15.3.1), check value (0,0,0) -> (0,0,pi) = 7 pi / 3
    # of docs/reference.md
    # (LRL or RLR, middle arc 5 pi / 3)
    path = dubins_shortest((0, 0, 0), (0, 0, PI), r)
    assert path.length_m == pytest.approx(7 * PI / 3 * r, abs=1e-9)
    assert path.word in ("LRL", "RLR")


@pytest.mark.parametrize("r", RADII_M)
@pytest.mark.parametrize("eps", [1e-3, 1e-6])
def test_dubins_tiny_heading_change_costs_a_full_loop(r, eps):
    # source: Dubins 1957, check value (0, 0, eps) -> 2 pi (docs/reference.md)
    assert dubins_length((0, 0, 0), (0, 0, eps), r) == pytest.approx(2 * PI * r, abs=2 * eps * r)
    # Reeds-Shepp is continuous there: the lower bound r |dtheta| is attained by
    # L+R-L+ with tiny arcs (derived: the C|C|C heading change equals its length)
    assert reeds_shepp_length((0, 0, 0), (0, 0, eps), r) == pytest.approx(eps * r, abs=1e-9)


@pytest.mark.parametrize("family", FAMILIES)
def test_identical_poses_give_a_single_sample(family):
    # common practice: zero distance, zero length, one pose
    pose = (1.5, -2.0, 0.7)
    path = family(pose, pose, CAR_RADIUS_M)
    assert path.length_m == 0.0
    assert path.gear_changes == 0
    samples = path.sample(pose, 0.1)
    assert samples.shape == (1, 4)
    np.testing.assert_allclose(samples[0], [1.5, -2.0, 0.7, 1.0])


# ------------------------------------------------------------------------------------
# Bounds and properties
# ------------------------------------------------------------------------------------


def test_kim_cheong_bound_on_dubins_excess():
    # source: Kim & Cheong, "The cost of bounded curvature", arXiv:1106.6214:
    # L_Dubins - |dxy| <= 7 pi / 3 r for every pair of poses
    rng = np.random.default_rng(11)
    n = 100_000
    dist = rng.uniform(0.0, 4.0, n) ** 2  # many short pairs, where the bound is tight
    bearing = rng.uniform(-PI, PI, n)
    x, y = dist * np.cos(bearing), dist * np.sin(bearing)
    excess = dubins_lengths_unit(x, y, rng.uniform(-PI, PI, n)) - dist
    assert excess.max() <= 7 * PI / 3 + 1e-9
    assert excess.max() > 2 * PI  # the sample does reach the hard region


@QUICK
@given(a=poses, b=poses, r=radii_m)
def test_reeds_shepp_bounds_and_symmetry(a, b, r):
    # source: Reeds & Shepp 1990 / Dubins 1957, properties (derived, docs/reference.md): L_RS(a,b) = L_RS(b,a),
    # |dxy| <= L_RS <= L_Dubins, L_RS >= r |wrap(dtheta)|
    ab = reeds_shepp_length(a, b, r)
    tol = 1e-9 * (1.0 + ab)
    assert reeds_shepp_length(b, a, r) == pytest.approx(ab, abs=tol)
    assert ab <= dubins_length(a, b, r) + tol
    assert ab >= math.hypot(b[0] - a[0], b[1] - a[1]) - tol
    assert ab >= r * abs(wrap_angle(b[2] - a[2])) - tol


@QUICK
@given(
    a=poses,
    b=poses,
    r=radii_m,
    shift=st.tuples(coord_m, coord_m),
    turn=heading_rad,
)
def test_lengths_do_not_depend_on_the_frame(a, b, r, shift, turn):
    # common practice: the car model is invariant under rigid motions of the plane
    c, s = math.cos(turn), math.sin(turn)

    def move(p):
        return (c * p[0] - s * p[1] + shift[0], s * p[0] + c * p[1] + shift[1], p[2] + turn)

    for length in (reeds_shepp_length, dubins_length):
        before = length(a, b, r)
        after = length(move(a), move(b), r)
        if length is dubins_length and abs(after - before) > 1e-6:
            # Dubins is discontinuous: a rounding of the relative heading across 0 may
            # flip between a straight and a full loop
            assert abs(abs(after - before) - 2 * PI * r) < 1e-6
            continue
        assert after == pytest.approx(before, abs=1e-8 * (1.0 + before))


def test_vectorised_lengths_equal_the_scalar_ones():
    # the heuristic table and the analytic expansion must agree (derived requirement)
    rng = np.random.default_rng(5)
    n = 300
    x, y = rng.uniform(-6, 6, n), rng.uniform(-6, 6, n)
    phi = rng.uniform(-PI, PI, n)
    # a few degenerate goals: the start, the quarter circle, straight ahead and behind
    x[:4], y[:4], phi[:4] = [0, 1, 3, -3], [0, 1, 0, 0], [0, PI / 2, 0, 0]
    rs = reeds_shepp_lengths_unit(x, y, phi)
    du = dubins_lengths_unit(x, y, phi)
    for i in range(n):
        goal = (x[i], y[i], phi[i])
        assert rs[i] == pytest.approx(reeds_shepp_length((0, 0, 0), goal, 1.0), abs=1e-9)
        assert du[i] == pytest.approx(dubins_length((0, 0, 0), goal, 1.0), abs=1e-9)
    # any equal shape in, the same shape out; radius scaling is the caller's
    grid = reeds_shepp_lengths_unit(x[:12].reshape(3, 4), y[:12].reshape(3, 4), 0.5)
    assert grid.shape == (3, 4)
    scaled = reeds_shepp_length((0, 0, 0), (3.0 * x[7], 3.0 * y[7], phi[7]), 3.0)
    assert scaled == pytest.approx(3.0 * rs[7], abs=1e-9)
    # a goal that is not a number gives NaN, not a length
    assert np.isnan(reeds_shepp_lengths_unit([np.nan, 1.0], 0.0, 0.0)).tolist() == [True, False]
    assert np.isnan(dubins_lengths_unit(1.0, np.inf, 0.0))


# ------------------------------------------------------------------------------------
# Optimality against independent searches
# ------------------------------------------------------------------------------------

# Reeds & Shepp 1990 section 8 base words; parameter kinds: a = arc in [0, pi],
# u = arc in [0, pi/2] shared by the two marked arcs, h = pi/2 arc, s = straight in [0, 4].
_BASE_WORDS = (
    ("L+S+L+", "asa"),
    ("L+S+R+", "asa"),
    ("L+R-L+", "aaa"),
    ("L+R-L-", "aaa"),
    ("L+R+L-R-", "auua"),
    ("L+R-L-R+", "auua"),
    ("L+R-S-L-", "ahsa"),
    ("L+R-S-R-", "ahsa"),
    ("L+R-S-L-R+", "ahsha"),
)


def _all_words():
    """The 48 words: base words under timeflip, reflection and reversal."""
    words = {}
    for word, spec in _BASE_WORDS:
        segs = [(word[i], word[i + 1]) for i in range(0, len(word), 2)]
        for flip in (False, True):
            for refl in (False, True):
                for back in (False, True):
                    w = [
                        ({"L": "R", "R": "L", "S": "S"}[k] if refl else k,
                         {"+": "-", "-": "+"}[g] if flip else g)
                        for k, g in segs
                    ]
                    p = list(spec)
                    if back:
                        w, p = w[::-1], p[::-1]
                    words["".join(k + g for k, g in w)] = "".join(p)
    return words


def _random_lengths(spec, n, rng):
    cols, shared = [], rng.uniform(0, PI / 2, n)
    for kind in spec:
        cols.append(
            {"a": lambda: rng.uniform(0, PI, n), "u": lambda: shared,
             "h": lambda: np.full(n, PI / 2), "s": lambda: rng.uniform(0, 4, n)}[kind]()
        )
    return np.stack(cols, axis=1)


def test_no_reeds_shepp_word_beats_the_returned_length():
    # Dense random search over the parameters of every word of the sufficient set
    # (Reeds & Shepp 1990 section 8; LaValle 2006 section 15.3.2, 48 words) plus
    # arbitrary words of up to five segments: each is a real path to its end pose, so
    # the shortest length there can never exceed it. End poses come from the
    # independent complex-number model above.
    rng = np.random.default_rng(3)
    words = _all_words()
    assert len(words) == 48  # source: LaValle 2006 section 15.3.2
    tight = 0
    for word, spec in words.items():
        kinds = word[0::2]
        gears = np.array([1.0 if g == "+" else -1.0 for g in word[1::2]])
        lengths = _random_lengths(spec, 500, rng) * gears
        x, y, th = _compose_unit(kinds, lengths)
        total = np.abs(lengths).sum(axis=1)
        best = reeds_shepp_lengths_unit(x, y, th)
        assert (best <= total + 1e-9).all(), word
        tight += int((np.abs(best - total) < 1e-9).any())
    assert tight >= 40  # most words are the optimum somewhere in their range
    for k in range(1, 6):
        kinds = "".join(rng.choice(list("LSR"), k))
        lengths = rng.uniform(-PI, PI, (4000, k))
        x, y, th = _compose_unit(kinds, lengths)
        best = reeds_shepp_lengths_unit(x, y, th)
        assert (best <= np.abs(lengths).sum(axis=1) + 1e-9).all(), kinds


def test_no_forward_word_beats_the_dubins_length():
    # Dubins 1957: no forward path of bounded curvature is shorter than the Dubins
    # path; random forward words of up to five segments give real paths.
    rng = np.random.default_rng(4)
    for k in range(1, 6):
        for _ in range(4):
            kinds = "".join(rng.choice(list("LSR"), k))
            lengths = rng.uniform(0, 2 * PI, (3000, k))
            x, y, th = _compose_unit(kinds, lengths)
            best = dubins_lengths_unit(x, y, th)
            assert (best <= lengths.sum(axis=1) + 1e-9).all(), kinds


def _compose_one(kinds, lengths):
    """Scalar twin of _compose_unit, for the optimiser's many small calls."""
    z, th = 0j, 0.0
    for kind, s in zip(kinds, lengths):
        e = cmath.exp(1j * th)
        if kind == "L":
            z, th = z + 1j * e * (1.0 - cmath.exp(1j * s)), th + s
        elif kind == "R":
            z, th = z - 1j * e * (1.0 - cmath.exp(-1j * s)), th - s
        else:
            z = z + s * e
    return z.real, z.imag, th


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_local_search_over_free_words_finds_nothing_shorter(seed):
    # For a random goal, search five-segment words with free signed lengths: reach the
    # goal by least squares from random starts, then shorten the path along the goal
    # constraint (SLSQP). Every converged path is feasible, so none may be shorter
    # than Reeds-Shepp.
    # source: scipy.optimize (least_squares, SLSQP); Reeds & Shepp 1990 (optimality)
    rng = np.random.default_rng(seed)
    goal = (rng.uniform(-3, 3), rng.uniform(-3, 3), rng.uniform(-PI, PI))
    best_rs = float(reeds_shepp_lengths_unit(*goal))
    bounds = [(-2 * PI, 2 * PI)] * 5
    found = []
    for kinds in ("LRLRL", "LSRSL", "RSLSR"):
        def miss(s, kinds=kinds):
            x, y, th = _compose_one(kinds, s)
            dth = th - goal[2]
            return np.array([x - goal[0], y - goal[1], math.sin(dth), math.cos(dth) - 1.0])

        for _ in range(4):
            reach = least_squares(miss, rng.uniform(-2, 2, 5), bounds=(-2 * PI, 2 * PI))
            res = minimize(
                lambda s: np.sqrt(s * s + 1e-12).sum(),
                reach.x,
                method="SLSQP",
                bounds=bounds,
                constraints={"type": "eq", "fun": miss},
                options={"maxiter": 100, "ftol": 1e-12},
            )
            if np.abs(miss(res.x)).max() < 1e-8:
                found.append(np.abs(res.x).sum())
    assert len(found) >= 6, "the local search found too few feasible paths"
    assert min(found) >= best_rs - 1e-6


# ------------------------------------------------------------------------------------
# Sampling: the returned paths are drivable and land on the goal
# ------------------------------------------------------------------------------------


def _three_point_curvature(xy):
    a = xy[1:-1] - xy[:-2]
    b = xy[2:] - xy[1:-1]
    c = xy[2:] - xy[:-2]
    cross = np.abs(a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0])
    denom = np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1) * np.linalg.norm(c, axis=1)
    return 2.0 * cross / np.maximum(denom, 1e-300)  # 1 / circumradius


@pytest.mark.parametrize("family", FAMILIES)
def test_sampled_paths_land_on_the_goal_and_respect_the_turn_radius(family):
    rng = np.random.default_rng(7)
    for _ in range(25):
        r = float(rng.choice(RADII_M))
        start = (rng.uniform(-10, 10), rng.uniform(-10, 10), rng.uniform(-PI, PI))
        goal = (rng.uniform(-10, 10), rng.uniform(-10, 10), rng.uniform(-PI, PI))
        step = 0.05 * r
        path = family(start, goal, r)
        samples = path.sample(start, step)
        # starts at the start, ends on the goal
        np.testing.assert_allclose(samples[0, :2], start[:2], atol=1e-12)
        assert _angle_gap(samples[0, 2], start[2]) < 1e-12
        np.testing.assert_allclose(samples[-1, :2], goal[:2], atol=1e-6)
        assert _angle_gap(samples[-1, 2], goal[2]) < 1e-6
        # spacing: a chord is never longer than its arc, and the arcs add up
        chords = np.linalg.norm(np.diff(samples[:, :2], axis=0), axis=1)
        assert chords.max() <= step * (1 + 1e-9)
        assert chords.sum() == pytest.approx(path.length_m, rel=1e-3)
        # curvature within each gear run never exceeds 1 / r
        # source: three-point (circumcircle) curvature, common practice
        for run in np.split(samples, np.flatnonzero(np.diff(samples[:, 3])) + 1):
            if len(run) >= 3:
                assert _three_point_curvature(run[:, :2]).max() <= (1 + 1e-6) / r
        # every cusp pose is a sample, exactly
        for k in range(1, len(path.segments)):
            head = integrate_segments(start, path.segments[:k], r, 10 * r)[-1]
            assert (np.abs(samples[:, :3] - head[:3]).max(axis=1) < 1e-12).any()
        if family is dubins_shortest:
            assert (samples[:, 3] == 1).all()


def test_closed_form_matches_numeric_integration_of_the_car_model():
    # source: LaValle 2006, eq. 15.48, integrated with scipy.integrate.solve_ivp
    r = CAR_RADIUS_M
    start = (1.0, -2.0, 0.4)
    path = reeds_shepp_shortest(start, (-3.0, 2.5, -2.0), r)
    assert path.gear_changes >= 1
    state = np.array(start, dtype=float)
    for kind, length in path.segments:
        if length == 0.0:
            continue
        u1 = math.copysign(1.0, length)
        u2 = {"L": 1.0, "S": 0.0, "R": -1.0}[kind]
        sol = solve_ivp(
            lambda _s, q: [u1 * math.cos(q[2]), u1 * math.sin(q[2]), u1 * u2 / r],
            (0.0, abs(length)), state, rtol=1e-11, atol=1e-12,
        )
        state = sol.y[:, -1]
    end = path.sample(start, 0.5)[-1]
    np.testing.assert_allclose(end[:2], state[:2], atol=1e-7)
    assert _angle_gap(end[2], state[2]) < 1e-7


def test_gears_follow_the_motion_in_a_cusp_case():
    # Goal straight behind and to the left, same heading: no forward-only path is as
    # short; the shortest parks with cusps (common practice, "parallel parking").
    r = CAR_RADIUS_M
    goal = (-1.0 * r, 1.0 * r, 0.0)
    path = reeds_shepp_shortest((0, 0, 0), goal, r)
    assert path.gear_changes >= 1
    assert path.length_m < dubins_length((0, 0, 0), goal, r)
    samples = path.sample((0, 0, 0), 0.1)
    gears = samples[:, 3]
    assert set(gears) == {-1.0, 1.0}
    assert int((np.diff(gears) != 0).sum()) == path.gear_changes
    # the gear of a sample is the direction of the motion that reached it
    move = np.diff(samples[:, :2], axis=0)
    mid = samples[:-1, 2] + 0.5 * wrap_angle(np.diff(samples[:, 2]))
    along = move[:, 0] * np.cos(mid) + move[:, 1] * np.sin(mid)
    np.testing.assert_array_equal(np.sign(along), gears[1:])
    first = next(v for _, v in path.segments if v != 0.0)
    assert gears[0] == math.copysign(1.0, first)
    reverse_run = np.abs(along[gears[1:] < 0]).sum()
    assert reverse_run == pytest.approx(path.reverse_length_m, rel=1e-3)


# ------------------------------------------------------------------------------------
# Small pieces and bad input
# ------------------------------------------------------------------------------------


def test_wrap_angle_range():
    # common practice: [-pi, pi), pi itself maps to -pi
    assert wrap_angle(PI) == -PI
    assert wrap_angle(-PI) == -PI
    assert wrap_angle(3 * PI / 2) == pytest.approx(-PI / 2)
    values = np.linspace(-20, 20, 1001)
    wrapped = wrap_angle(values)
    assert ((wrapped >= -PI) & (wrapped < PI)).all()
    np.testing.assert_allclose(np.cos(wrapped), np.cos(values), atol=1e-12)
    np.testing.assert_allclose(np.sin(wrapped), np.sin(values), atol=1e-12)


def test_gear_changes_ignore_zero_length_segments():
    path = CurvePath("L+S-L+", (("L", 1.0), ("S", 0.0), ("L", 1.0)), 2.0)
    assert path.gear_changes == 0
    path = CurvePath("L+S-L-", (("L", 1.0), ("S", 0.0), ("L", -1.0)), 2.0)
    assert path.gear_changes == 1
    assert path.length_m == 2.0 and path.reverse_length_m == 1.0


@pytest.mark.parametrize("bad", [0.0, -1.0, float("nan"), float("inf"), "wide"])
def test_turn_radius_must_be_positive(bad):
    for call in (dubins_shortest, reeds_shepp_shortest, dubins_length, reeds_shepp_length):
        with pytest.raises(PlanningError, match="turn_radius_m"):
            call((0, 0, 0), (1, 1, 0), bad)
    with pytest.raises(ValueError, match="turn_radius_m"):
        CurvePath("S+", (("S", 1.0),), bad)


def test_bad_poses_steps_and_kinds_are_refused():
    with pytest.raises(PlanningError, match="goal"):
        reeds_shepp_shortest((0, 0, 0), (1, float("nan"), 0), 1.0)
    with pytest.raises(PlanningError, match="start"):
        dubins_shortest((0, 0), (1, 1, 0), 1.0)
    with pytest.raises(PlanningError, match="step_m"):
        integrate_segments((0, 0, 0), (("S", 1.0),), 1.0, 0.0)
    with pytest.raises(PlanningError, match="kind"):
        CurvePath("Q+", (("Q", 1.0),), 1.0)
