"""Straight segments and their uncertainty (inclination.traces).

Chains are built here directly: the edge midpoints between the two sides of a
digital straight line on a square or hexagonal grid (conventions §1), ordered
along the line. This is the geometry a boundary network hands over, written with
numpy alone.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
import shapely
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from scipy import stats

from inclination.errors import InputError, SettingError
from inclination.traces import (
    SEGMENT_COLUMNS,
    LineFit,
    fit_line_tls,
    fit_segments,
    group_collinear,
    split_polyline,
    trace_sigma_model_deg,
)

SQ3 = np.sqrt(3.0)


# --- chain builders ---------------------------------------------------------------------------


def _positions(i, j, step, grid):
    """Point (row i, col j) in S (µm), conventions §1."""
    if grid == "square":
        return j * step, i * step
    return j * step + (i % 2) * step / 2, i * step * SQ3 / 2


def _neighbour_pairs(n_rows, n_cols, grid):
    """(row, col) index pairs of neighbouring points: 4-neighbours or 6-neighbours."""
    i, j = np.mgrid[0:n_rows, 0:n_cols]
    out = [((i[:, :-1], j[:, :-1]), (i[:, 1:], j[:, 1:]))]
    if grid == "square":
        out.append(((i[:-1], j[:-1]), (i[1:], j[1:])))
        return out
    for shift in (0, 1):
        a_i, a_j = i[:-1], j[:-1]
        # Row below: columns j-1, j on even rows, j, j+1 on odd rows (odd rows shifted right).
        b_j = a_j + (a_i % 2) - 1 + shift
        ok = (b_j >= 0) & (b_j < n_cols)
        out.append(((a_i[ok], a_j[ok]), (a_i[ok] + 1, b_j[ok])))
    return out


def _boundary_midpoints(side, n_rows, n_cols, step, grid, origin=(0, 0)):
    """Midpoints of the edges where side(x, y) changes, over a patch of the grid."""
    mids = []
    for (ai, aj), (bi, bj) in _neighbour_pairs(n_rows, n_cols, grid):
        xa, ya = _positions(ai + origin[0], aj + origin[1], step, grid)
        xb, yb = _positions(bi + origin[0], bj + origin[1], step, grid)
        sa, sb = side(xa, ya), side(xb, yb)
        cut = sa != sb
        mids.append(
            np.stack([(xa[cut] + xb[cut]) / 2, (ya[cut] + yb[cut]) / 2, sa[cut], sb[cut]], axis=1)
        )
    return np.concatenate(mids)


def digital_line(angle_deg, centre, length, *, step=1.0, grid="square"):
    """Ordered edge midpoints of a straight boundary of given length, angle and position."""
    theta = np.radians(angle_deg)
    t = np.array([np.cos(theta), np.sin(theta)])
    normal = np.array([-t[1], t[0]])
    centre = np.asarray(centre, float)
    half = length / 2 + 3 * step
    row_step = step if grid == "square" else step * SQ3 / 2
    i0 = int(np.floor((centre[1] - half) / row_step)) - 2
    i0 -= i0 % 2  # keep row parity, so odd rows stay the shifted ones
    j0 = int(np.floor((centre[0] - half) / step)) - 2
    n_rows = int(2 * half / row_step) + 6
    n_cols = int(2 * half / step) + 6

    def side(x, y):
        return (x - centre[0]) * normal[0] + (y - centre[1]) * normal[1] > 0

    m = _boundary_midpoints(side, n_rows, n_cols, step, grid, origin=(i0, j0))[:, :2]
    along = (m - centre) @ t
    keep = np.abs(along) <= length / 2
    return m[keep][np.argsort(along[keep], kind="stable")]


def network(chains, *, pairs=None, closed=None, misorientation=None):
    """A boundary network of the contract (architecture.md) from a list of (N, 2) chains."""
    n = len(chains)
    pairs = np.array([(1, 2)] * n if pairs is None else pairs, dtype=np.int64).reshape(n, 2)
    counts = [len(c) for c in chains]
    return SimpleNamespace(
        offsets=np.concatenate([[0], np.cumsum(counts)]).astype(np.int64),
        points_um=np.concatenate(chains) if n else np.zeros((0, 2)),
        grain_a=pairs[:, 0],
        grain_b=pairs[:, 1],
        phase_a=np.ones(n, dtype=np.int64),
        phase_b=np.ones(n, dtype=np.int64),
        n_edges=np.array(counts, dtype=np.int64),
        misorientation_deg=np.full(n, 38.9) if misorientation is None else misorientation,
        misorientation_spread_deg=np.full(n, 0.5),
        is_phase_boundary=np.zeros(n, dtype=bool),
        closed=np.zeros(n, dtype=bool) if closed is None else np.asarray(closed, dtype=bool),
    )


def angle_error_deg(a, b):
    """Signed difference of two undirected line angles, in [-90, 90)."""
    return np.mod(np.asarray(a) - np.asarray(b) + 90.0, 180.0) - 90.0


def bicrystal_chain(angle_deg, n_rows, n_cols, *, grid="square", step=1.0):
    """Edge midpoints of a straight boundary through the middle of a whole map, ordered."""
    theta = np.radians(angle_deg)
    t = np.array([np.cos(theta), np.sin(theta)])
    centre = np.array(_positions(n_rows / 2 - 0.3, n_cols / 2 + 0.2, step, grid), dtype=float)

    def side(x, y):
        return (x - centre[0]) * -t[1] + (y - centre[1]) * t[0] > 0

    m = _boundary_midpoints(side, n_rows, n_cols, step, grid)[:, :2]
    return m[np.argsort((m - centre) @ t, kind="stable")]


# --- TLS fit ------------------------------------------------------------------------------------


def test_tls_hand_derived_rectangle():
    # Hand derivation: the corners of a 2 x 1 rectangle have centre (1, 0.5), major axis
    # along x, every corner 0.5 from that axis, so the RMS residual is 0.5; span 2.
    fit = fit_line_tls([[0.0, 0.0], [2.0, 0.0], [0.0, 1.0], [2.0, 1.0]])
    assert isinstance(fit, LineFit)
    assert_allclose(fit.centre_um, (1.0, 0.5), rtol=0, atol=1e-12)
    assert_allclose(fit.angle_deg, 0.0, rtol=0, atol=1e-12)
    assert_allclose([fit.residual_um, fit.span_um], [0.5, 2.0], rtol=0, atol=1e-12)
    assert fit.n == 4


def test_tls_matches_numpy_svd():
    # Reference: the TLS line is the first right singular vector of the centred points
    # and the RMS residual is the smallest singular value over sqrt(n) (numpy.linalg.svd).
    rng = np.random.default_rng(7)
    for _ in range(20):
        theta = rng.uniform(0, np.pi)
        t = rng.uniform(-20, 20, 50)
        pts = np.stack([3 + t * np.cos(theta), -2 + t * np.sin(theta)], 1)
        pts += rng.normal(0, 0.4, pts.shape)
        centred = pts - pts.mean(0)
        _, sv, vt = np.linalg.svd(centred)
        ref_angle = np.degrees(np.arctan2(vt[0, 1], vt[0, 0])) % 180
        fit = fit_line_tls(pts)
        assert_allclose(angle_error_deg(fit.angle_deg, ref_angle), 0, rtol=0, atol=1e-9)
        assert_allclose(fit.residual_um, sv[1] / np.sqrt(len(pts)), rtol=1e-10, atol=0)
        assert_allclose(fit.centre_um, pts.mean(0), rtol=0, atol=1e-12)


def test_tls_sigma_matches_least_squares_slope_error():
    # Reference: scipy.stats.linregress gives the standard error of an ordinary
    # least-squares slope; for a nearly horizontal line with scatter in y only, TLS
    # and OLS agree and d(angle) = d(slope) / (1 + slope²).
    rng = np.random.default_rng(3)
    x = np.linspace(0, 50, 200)
    y = 0.05 * x + rng.normal(0, 0.3, x.size)
    ref = stats.linregress(x, y)
    fit = fit_line_tls(np.stack([x, y], 1))
    assert_allclose(fit.sigma_deg, np.degrees(ref.stderr / (1 + ref.slope**2)), rtol=0.02, atol=0)
    assert_allclose(fit.angle_deg, np.degrees(np.arctan(ref.slope)), rtol=0, atol=0.01)


@given(
    st.floats(0, 180, exclude_max=True),
    st.floats(-50, 50),
    st.floats(-50, 50),
    st.booleans(),
)
def test_tls_angle_range_and_direction_free(angle_deg, x, y, reverse):
    # Invariant: an undirected line has one angle in [0, 180), whichever way its
    # points are listed, including next to the wrap at 0/180.
    t = np.linspace(-10, 10, 7)
    theta = np.radians(angle_deg)
    pts = np.stack([x + t * np.cos(theta), y + t * np.sin(theta)], 1)
    fit = fit_line_tls(pts[::-1] if reverse else pts)
    assert 0.0 <= fit.angle_deg < 180.0
    assert_allclose(angle_error_deg(fit.angle_deg, angle_deg), 0, rtol=0, atol=1e-7)
    assert_allclose(np.hypot(*fit.direction), 1.0, rtol=0, atol=1e-12)


def test_tls_wrap_near_zero_and_180():
    for angle_deg in (0.05, 179.95, 1e-9, 180 - 1e-9):
        seg = fit_segments(network([digital_line(angle_deg, (0.3, 0.2), 60.0)]), step_um=1.0)
        assert 0.0 <= seg["trace_angle_deg"][0] < 180.0
        assert abs(angle_error_deg(seg["trace_angle_deg"][0], angle_deg)) < 3 * max(
            seg["trace_sigma_deg"][0], 1e-9
        )


# --- farthest-point split -------------------------------------------------------------------------


def test_split_matches_shapely_douglas_peucker():
    # Reference: shapely's simplify(preserve_topology=False) is the Douglas–Peucker
    # algorithm (GEOS); on random walks (no ties) it keeps exactly our break vertices.
    rng = np.random.default_rng(11)
    for _ in range(30):
        pts = np.cumsum(rng.normal(0, 1, (rng.integers(3, 80), 2)), axis=0)
        tol = rng.uniform(0.3, 3.0)
        ref = np.asarray(shapely.LineString(pts).simplify(tol, preserve_topology=False).coords)
        breaks = split_polyline(pts, tol)
        assert_allclose(pts[breaks], ref, rtol=0, atol=1e-12)


def test_split_closed_square_loop_any_start():
    # A square loop of side 20 traced from every possible start: always its 4 corners.
    side = np.arange(20.0)
    loop = np.concatenate(
        [
            np.stack([side, 0 * side], 1),
            np.stack([20 + 0 * side, side], 1),
            np.stack([20 - side, 20 + 0 * side], 1),
            np.stack([0 * side, 20 - side], 1),
        ]
    )
    corners = {(0.0, 0.0), (20.0, 0.0), (20.0, 20.0), (0.0, 20.0)}
    for start in range(0, 80, 7):
        rolled = np.roll(loop, -start, axis=0)
        breaks = split_polyline(rolled, 1.5, closed=True)
        assert {tuple(p) for p in rolled[breaks].tolist()} == corners


def test_split_short_polylines():
    assert split_polyline(np.zeros((0, 2)), 1.0).tolist() == []
    assert split_polyline([[1.0, 2.0]], 1.0).tolist() == [0]
    assert split_polyline([[0.0, 0.0], [1.0, 0.0]], 1.0).tolist() == [0, 1]
    assert split_polyline([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]], 0.1, closed=True).tolist() == [
        0,
        1,
        2,
    ]


def test_vectorised_split_equals_one_chain_at_a_time():
    rng = np.random.default_rng(5)
    chains = [np.cumsum(rng.normal(0, 1, (rng.integers(1, 40), 2)), axis=0) for _ in range(60)]
    seg = fit_segments(network(chains), step_um=1.0, tolerance_um=1.2)
    for c, pts in enumerate(chains):
        breaks = split_polyline(pts, 1.2)
        rows = seg["chain_id"] == c
        assert rows.sum() == max(len(breaks) - 1, 1)
        if len(breaks) < 2 or len(pts) < 3:
            continue
        fits = []
        for a, b in zip(breaks[:-1], breaks[1:], strict=True):
            # The documented rule: a break vertex inside the chain enters neither fit,
            # as long as each fit keeps two points.
            lo = a + 1 if (a > 0 and b - a + 1 >= 4) else a
            hi = b - 1 if (b < len(pts) - 1 and b - lo + 1 >= 3 and b - a + 1 >= 4) else b
            fits.append(fit_line_tls(pts[lo : hi + 1]))
        assert_allclose(
            angle_error_deg(seg["trace_angle_deg"][rows], [f.angle_deg for f in fits]),
            0,
            rtol=0,
            atol=1e-9,
        )
        assert_allclose(
            seg["residual_um"][rows], [f.residual_um for f in fits], rtol=1e-9, atol=1e-12
        )
        assert seg["n_edges"][rows].tolist() == [f.n for f in fits]


# --- hand-built boundaries ------------------------------------------------------------------------


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
@pytest.mark.parametrize("angle_deg", [0.0, 30.0, 45.0, 90.0, 137.0])
def test_bicrystal_one_segment_at_its_angle(angle_deg, grid):
    chain = bicrystal_chain(angle_deg, 64, 64, grid=grid, step=0.5)
    seg = fit_segments(network([chain]), step_um=0.5, grid=grid)
    assert len(seg["segment_id"]) == 1
    err = abs(angle_error_deg(seg["trace_angle_deg"][0], angle_deg))
    # The quantisation bound: within 3σ of the model, and never worse than the
    # (s/L)^1.5-rad quantisation scale (inclination.traces, module docstring) times 3.
    assert err <= 3 * seg["trace_sigma_deg"][0] + 1e-9
    assert err <= 3 * np.degrees((0.5 / seg["length_um"][0]) ** 1.5) + 1e-9
    assert not seg["too_short"][0]
    assert seg["n_edges"][0] == len(chain)


def test_fitted_length_is_true_length_not_staircase():
    # Hand derivation: a digital line at angle θ on a square grid crosses
    # (|cos θ| + |sin θ|)/s edges per unit length, so the staircase (edges × s) is
    # longer than the line by that factor, 4/π on average over θ — the ~27 % of
    # Bobrowski (2020). The fitted length must carry no such bias.
    rng = np.random.default_rng(2)
    angles = rng.uniform(0, 180, 300)
    length = 40.0
    chains = [digital_line(a, rng.uniform(0, 5, 2), length) for a in angles]
    seg = fit_segments(network(chains), step_um=1.0)
    staircase = np.array([len(c) for c in chains]) * 1.0
    assert_allclose(np.mean(staircase / length), 4 / np.pi, rtol=0.02, atol=0)
    assert_allclose(np.mean(seg["length_um"] / length), 1.0, rtol=0, atol=0.005)
    assert np.max(np.abs(seg["length_um"] / length - 1)) < 0.05


def test_fitted_end_points_lie_on_the_line_and_span_the_length():
    chain = digital_line(23.0, (10.0, 7.0), 50.0, step=0.25)
    seg = fit_segments(network([chain]), step_um=0.25)
    p0 = np.array([seg["x0_um"][0], seg["y0_um"][0]])
    p1 = np.array([seg["x1_um"][0], seg["y1_um"][0]])
    assert_allclose(np.hypot(*(p1 - p0)), seg["length_um"][0], rtol=1e-12, atol=0)
    direction = (p1 - p0) / np.hypot(*(p1 - p0))
    theta = np.radians(seg["trace_angle_deg"][0])
    assert_allclose(abs(direction @ [np.cos(theta), np.sin(theta)]), 1.0, rtol=0, atol=1e-12)
    # The chain runs from its first to its last midpoint: so does the segment.
    assert np.hypot(*(p0 - chain[0])) < 0.25 and np.hypot(*(p1 - chain[-1])) < 0.25


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
def test_l_shaped_boundary_splits_at_the_corner(grid):
    # Grain A is the quadrant x < c_x and y < c_y of a tilted frame: the boundary is
    # two straight arms at 20° and 110° meeting at the corner c.
    corner = np.array([20.3, 20.1])
    u = np.array([np.cos(np.radians(20)), np.sin(np.radians(20))])
    v = np.array([-u[1], u[0]])

    def inside(x, y):
        return ((x - corner[0]) * u[0] + (y - corner[1]) * u[1] < 0) & (
            (x - corner[0]) * v[0] + (y - corner[1]) * v[1] < 0
        )

    mids = _boundary_midpoints(inside, 48, 48, 1.0, grid)[:, :2]
    rel = mids - corner
    on_first = np.abs(rel @ v) < np.abs(rel @ u)
    # First arm runs along -u toward the corner, the second from the corner along -v.
    arm1 = mids[on_first][np.argsort(rel[on_first] @ u)]
    arm2 = mids[~on_first][np.argsort(-(rel[~on_first] @ v))]
    seg = fit_segments(network([np.concatenate([arm1, arm2])]), step_um=1.0, grid=grid)
    assert len(seg["segment_id"]) == 2
    assert abs(angle_error_deg(seg["trace_angle_deg"][0], 20.0)) < 3 * seg["trace_sigma_deg"][0]
    assert abs(angle_error_deg(seg["trace_angle_deg"][1], 110.0)) < 3 * seg["trace_sigma_deg"][1]
    meet = np.array([seg["x1_um"][0], seg["y1_um"][0]])
    start = np.array([seg["x0_um"][1], seg["y0_um"][1]])
    # Both pieces end where their fitted lines cross, next to the true corner.
    assert_allclose(meet, start, rtol=0, atol=1e-9)
    assert np.hypot(*(meet - corner)) < 0.75


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
def test_tricrystal_three_segments_meet_at_one_junction(grid):
    # Three grains are the sectors between rays at 10°, 130° and 250° from a junction.
    junction = np.array([30.2, 25.7])
    rays = np.radians([10.0, 130.0, 250.0])

    def sector(x, y):
        a = np.mod(np.arctan2(y - junction[1], x - junction[0]) - rays[0], 2 * np.pi)
        return np.searchsorted(np.mod(rays - rays[0], 2 * np.pi), a, side="right")

    cut = _boundary_midpoints(sector, 60, 60, 1.0, grid)
    chains, pairs = [], []
    for k, ray in enumerate(rays):
        t = np.array([np.cos(ray), np.sin(ray)])
        pair = {k + 1, (k - 1) % 3 + 1}
        mine = np.array([{int(a), int(b)} == pair for a, b in cut[:, 2:]])
        pts = cut[mine, :2]
        chains.append(pts[np.argsort((pts - junction) @ t)])
        pairs.append(sorted(pair))
    seg = fit_segments(network(chains, pairs=pairs), step_um=1.0, grid=grid)
    assert len(seg["segment_id"]) == 3
    assert_array_equal(seg["chain_id"], [0, 1, 2])
    for k, ray in enumerate(np.degrees(rays)):
        err = angle_error_deg(seg["trace_angle_deg"][k], ray)
        assert abs(err) < 3 * seg["trace_sigma_deg"][k]
    near = np.stack([seg["x0_um"], seg["y0_um"]], 1)
    assert np.all(np.hypot(*(near - junction).T) < 1.5)
    # Each pair of fitted lines crosses next to the junction.
    theta = np.radians(seg["trace_angle_deg"])
    for a, b in ((0, 1), (1, 2), (0, 2)):
        m = np.array([[np.cos(theta[a]), -np.cos(theta[b])], [np.sin(theta[a]), -np.sin(theta[b])]])
        s = np.linalg.solve(m, near[b] - near[a])
        crossing = near[a] + s[0] * np.array([np.cos(theta[a]), np.sin(theta[a])])
        assert np.hypot(*(crossing - junction)) < 1.5


def test_closed_loop_gives_its_sides():
    # A square grain of 20 x 20 points inside another grain: one closed chain, four sides.
    def inside(x, y):
        return (x > 9.5) & (x < 29.5) & (y > 9.5) & (y < 29.5)

    mids = _boundary_midpoints(inside, 40, 40, 1.0, "square")[:, :2]
    # Order the loop by angle about its centre, starting in the middle of a side.
    order = np.argsort(np.arctan2(mids[:, 1] - 19.5, mids[:, 0] - 19.5))
    seg = fit_segments(network([mids[order]], closed=[True]), step_um=1.0)
    assert len(seg["segment_id"]) == 4
    assert sorted(np.round(seg["trace_angle_deg"], 6).tolist()) == [0.0, 0.0, 90.0, 90.0]
    # The corners are where the fitted sides cross: each side is its true 20 steps.
    assert_allclose(seg["length_um"], 20.0, rtol=0, atol=1e-9)


def test_closed_chain_listing_its_first_point_twice():
    side = np.arange(10.0)
    loop = np.concatenate([np.stack([side, 0 * side], 1), np.stack([10 + 0 * side, side], 1)])
    loop = np.concatenate([loop, np.stack([10 - side, 10 + 0 * side], 1)])
    loop = np.concatenate([loop, np.stack([0 * side, 10 - side], 1)])
    once = fit_segments(network([loop], closed=[True]), step_um=1.0)
    twice = fit_segments(network([np.concatenate([loop, loop[:1]])], closed=[True]), step_um=1.0)
    for name in ("trace_angle_deg", "length_um", "n_edges"):
        assert_allclose(once[name], twice[name], rtol=0, atol=1e-12)


def test_table_columns_flags_and_pass_through():
    chains = [digital_line(60.0, (0, 0), 30.0), digital_line(10.0, (50, 0), 7.0)]
    net = network(chains, pairs=[(1, 2), (3, 7)], misorientation=np.array([59.9, 12.5]))
    seg = fit_segments(net, step_um=1.0)
    assert tuple(seg) == SEGMENT_COLUMNS
    assert len({len(v) for v in seg.values()}) == 1
    assert seg["too_short"].tolist() == [False, True]
    assert seg["grain_a"].tolist() == [1, 3] and seg["grain_b"].tolist() == [2, 7]
    assert_allclose(seg["misorientation_deg"], [59.9, 12.5], rtol=0, atol=0)
    assert seg["segment_id"].tolist() == [0, 1]
    # min_length_um is a setting: 5 µm keeps the 6 µm piece.
    assert not fit_segments(net, step_um=1.0, min_length_um=5.0)["too_short"].any()


def test_single_edge_chain_has_no_angle():
    seg = fit_segments(network([np.array([[3.0, 0.5]])]), step_um=1.0)
    assert np.isnan(seg["trace_angle_deg"][0]) and np.isnan(seg["trace_sigma_deg"][0])
    assert seg["too_short"][0] and seg["n_edges"][0] == 1


def test_empty_network_gives_empty_table():
    seg = fit_segments(network([]), step_um=1.0)
    assert tuple(seg) == SEGMENT_COLUMNS
    assert all(len(v) == 0 for v in seg.values())
    assert group_collinear(seg, max_offset_um=1.0).tolist() == []


# --- the σ model ---------------------------------------------------------------------------------


def _random_boundaries(n, grid, rng, ratio_range=(5.0, 100.0)):
    gen = np.random.default_rng(rng)
    angles = gen.uniform(0, 180, n)
    lengths = np.exp(gen.uniform(*np.log(ratio_range), n))
    chains = [
        digital_line(a, gen.uniform(0, 10, 2), length, grid=grid)
        for a, length in zip(angles, lengths, strict=True)
    ]
    seg = fit_segments(network(chains), step_um=1.0, grid=grid)
    assert len(seg["segment_id"]) == n  # a straight staircase is never split
    return angle_error_deg(seg["trace_angle_deg"], angles), seg


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
def test_sigma_model_matches_rms_error_on_random_boundaries(grid):
    err, seg = _random_boundaries(2000, grid, 20260101)
    ratio = seg["length_um"]
    for lo, hi in ((5, 10), (10, 20), (20, 40), (40, 100)):
        m = (ratio >= lo) & (ratio < hi)
        rms_err = np.sqrt(np.mean(err[m] ** 2))
        rms_sigma = np.sqrt(np.mean(seg["trace_sigma_deg"][m] ** 2))
        assert_allclose(rms_err / rms_sigma, 1.0, rtol=0, atol=0.3)
        # Without the angle the averaged constant gives the same RMS.
        rms_any = np.sqrt(np.mean(trace_sigma_model_deg(ratio[m], 1.0, 0.0, 10, grid=grid) ** 2))
        assert_allclose(rms_err / rms_any, 1.0, rtol=0, atol=0.3)
    # Heavier tails than a normal law (module docstring: 0.8 % beyond 3σ), but bounded.
    beyond = np.mean(np.abs(err) > 3 * seg["trace_sigma_deg"])
    assert beyond < 0.02


def test_rms_error_against_published_simulation_square():
    # A published simulation whose source was not recorded (so: from memory): RMS angle
    # error of straight boundaries on square grids 1.6° at L/s = 10, 0.60° at 20, 0.15°
    # at 50. Computed here with the TLS fit on edge midpoints: 1.59°, 0.53°, 0.150° (this
    # test, 400 boundaries each); 1.62°, 0.57°, 0.148° with 1000 each (benchmarks/).
    gen = np.random.default_rng(1)
    for ratio, published in ((10, 1.6), (20, 0.60), (50, 0.15)):
        angles = gen.uniform(0, 180, 400)
        chains = [digital_line(a, gen.uniform(0, 10, 2), float(ratio)) for a in angles]
        seg = fit_segments(network(chains), step_um=1.0)
        rms = np.sqrt(np.mean(angle_error_deg(seg["trace_angle_deg"], angles) ** 2))
        assert_allclose(rms, published, rtol=0.3, atol=0)


def test_sigma_model_adds_roughness_beyond_the_staircase():
    # Points scattered about a line by a normal law of 0.8 steps: the excess residual
    # term must carry the RMS angle error (least-squares slope error, textbook).
    gen = np.random.default_rng(9)
    angles = gen.uniform(0, 180, 600)
    chains = []
    for a in angles:
        t = np.linspace(-15, 15, 40)
        theta = np.radians(a)
        pts = np.stack([t * np.cos(theta), t * np.sin(theta)], 1)
        chains.append(pts + gen.normal(0, 0.8, pts.shape) * [-np.sin(theta), np.cos(theta)])
    seg = fit_segments(network(chains), step_um=1.0, tolerance_um=10.0)
    err = angle_error_deg(seg["trace_angle_deg"], angles)
    rms_sigma = np.sqrt(np.mean(seg["trace_sigma_deg"] ** 2))
    assert_allclose(np.sqrt(np.mean(err**2)) / rms_sigma, 1.0, rtol=0, atol=0.3)
    clean = trace_sigma_model_deg(
        seg["length_um"], 1.0, 0.0, seg["n_edges"], angle_deg=seg["trace_angle_deg"]
    )
    assert np.all(seg["trace_sigma_deg"] > clean)


def test_sigma_model_scaling_and_special_values():
    # (s/L)^1.5: doubling L divides the quantisation term by 2^1.5; it depends on s/L only.
    a = trace_sigma_model_deg(10.0, 1.0, 0.0, 14)
    b = trace_sigma_model_deg(20.0, 1.0, 0.0, 28)
    assert_allclose(a / b, 2**1.5, rtol=1e-12, atol=0)
    assert_allclose(trace_sigma_model_deg(5.0, 0.5, 0.0, 14), a, rtol=1e-12, atol=0)
    assert np.isnan(trace_sigma_model_deg(0.0, 1.0, 0.0, 1))
    assert np.isnan(trace_sigma_model_deg(10.0, 1.0, 0.0, 14, angle_deg=np.nan))
    # Along a grid row the few steps dominate: larger σ than at a general angle.
    rows = trace_sigma_model_deg(30.0, 1.0, 0.0, 30, angle_deg=[0.0, 90.0, 20.0])
    assert rows[0] == rows[1] > rows[2]


# --- collinear pieces ----------------------------------------------------------------------------


def test_group_collinear_pieces_of_one_boundary():
    line = digital_line(33.0, (20, 20), 60.0)
    n = len(line)
    # A junction artefact removes three edges in the middle: two chains, one boundary.
    first, second = line[: n // 2 - 1], line[n // 2 + 2 :]
    t = np.array([np.cos(np.radians(33.0)), np.sin(np.radians(33.0))])
    normal = np.array([-t[1], t[0]])
    parallel = digital_line(33.0, np.array([20, 20]) + 6 * normal, 40.0)
    # Collinear, further along, but between other grains.
    other_pair = digital_line(33.0, np.array([20, 20]) + 60 * t, 30.0)
    crossing = digital_line(80.0, (20, 20), 30.0)
    net = network(
        [first, second, parallel, other_pair, crossing],
        pairs=[(1, 2), (2, 1), (1, 2), (1, 3), (1, 2)],
    )
    seg = fit_segments(net, step_um=1.0)
    groups = group_collinear(seg, max_offset_um=1.5)
    assert groups.tolist() == [0, 0, 1, 2, 3]


def test_group_collinear_keeps_nan_angles_apart():
    seg = fit_segments(network([np.array([[0.0, 0.5]]), np.array([[1.0, 0.5]])]), step_um=1.0)
    assert group_collinear(seg, max_offset_um=5.0).tolist() == [0, 1]


# --- bad input ------------------------------------------------------------------------------------


def test_bad_settings_raise():
    net = network([digital_line(10.0, (0, 0), 20.0)])
    with pytest.raises(SettingError, match="Expected `step_um` to be a finite number > 0"):
        fit_segments(net, step_um=0.0)
    with pytest.raises(SettingError, match="Expected `tolerance_um` to be a finite number > 0"):
        fit_segments(net, step_um=1.0, tolerance_um=-1.0)
    with pytest.raises(SettingError, match="Expected `min_length_um` to be a finite number >= 0"):
        fit_segments(net, step_um=1.0, min_length_um=np.nan)
    with pytest.raises(
        SettingError, match=r"Expected `grid` to be one of \('square', 'hexagonal'\)"
    ):
        fit_segments(net, step_um=1.0, grid="hex")
    with pytest.raises(SettingError, match="Expected `grid` to be one of"):
        trace_sigma_model_deg(10.0, 1.0, 0.0, 10, grid="triangular")
    with pytest.raises(SettingError, match="Expected `tolerance_um` to be a finite number > 0"):
        split_polyline([[0, 0], [1, 1]], 0.0)


def test_bad_network_raises():
    net = network([digital_line(10.0, (0, 0), 20.0)])
    with pytest.raises(
        TypeError, match="Expected `network` to be a BoundaryNetwork.*without closed"
    ):
        fit_segments(
            SimpleNamespace(**{k: v for k, v in vars(net).items() if k != "closed"}), step_um=1.0
        )
    bad = SimpleNamespace(**{**vars(net), "offsets": np.array([0, 3])})
    with pytest.raises(InputError, match="Expected `network.offsets` to rise from 0"):
        fit_segments(bad, step_um=1.0)
    bad = SimpleNamespace(**{**vars(net), "offsets": np.array([0.0, 1.0])})
    with pytest.raises(InputError, match="Expected `network.offsets` to be a 1-D integer array"):
        fit_segments(bad, step_um=1.0)
    bad = SimpleNamespace(**{**vars(net), "grain_b": np.array([2, 3])})
    with pytest.raises(InputError, match=r"Expected `network.grain_b` to have shape \(1,\)"):
        fit_segments(bad, step_um=1.0)
    points = net.points_um.copy()
    points[4, 1] = np.nan
    bad = SimpleNamespace(**{**vars(net), "points_um": points})
    with pytest.raises(InputError, match=r"Expected `network.points_um` to be finite.*\(4,\)"):
        fit_segments(bad, step_um=1.0)


def test_bad_points_raise():
    with pytest.raises(InputError, match=r"Expected `points` to have shape \(N, 2\), got \(4,\)"):
        fit_line_tls([1.0, 2.0, 3.0, 4.0])
    with pytest.raises(
        ValueError, match=r"Expected `points` to have shape \(\.\.\., 2\), got \(2, 3\)"
    ):
        split_polyline(np.zeros((2, 3)), 1.0)
    with pytest.raises(InputError, match="Expected `points` to hold at least 2 points, got 1"):
        fit_line_tls([[1.0, 2.0]])
    with pytest.raises(InputError, match="Expected `points` to hold at least 2 distinct points"):
        fit_line_tls([[1.0, 2.0], [1.0, 2.0]])
    with pytest.raises(TypeError, match="Expected `points` to be an array of numbers, got str"):
        fit_line_tls("abc")


def test_group_collinear_bad_input_raises():
    seg = fit_segments(network([digital_line(10.0, (0, 0), 20.0)]), step_um=1.0)
    with pytest.raises(SettingError, match="Expected `max_offset_um` to be a finite number > 0"):
        group_collinear(seg, max_offset_um=0.0)
    with pytest.raises(SettingError, match="Expected `n_sigma` to be a finite number > 0"):
        group_collinear(seg, max_offset_um=1.0, n_sigma=-2.0)
    with pytest.raises(InputError, match="Expected `segments` to have columns"):
        group_collinear({"grain_a": seg["grain_a"]}, max_offset_um=1.0)


def test_inputs_are_not_modified():
    net = network([digital_line(10.0, (0, 0), 20.0)], closed=[False])
    before = {k: np.array(v, copy=True) for k, v in vars(net).items()}
    seg = fit_segments(net, step_um=1.0)
    seg_before = {k: v.copy() for k, v in seg.items()}
    group_collinear(seg, max_offset_um=1.0)
    for k, v in vars(net).items():
        assert_array_equal(v, before[k])
    for k, v in seg.items():
        assert_array_equal(v, seg_before[k])


def test_blocks_of_chains_give_the_same_table(monkeypatch):
    import inclination.traces as traces

    rng = np.random.default_rng(8)
    chains = [np.cumsum(rng.normal(0, 1, (rng.integers(1, 30), 2)), axis=0) for _ in range(40)]
    closed = rng.random(40) < 0.2
    whole = fit_segments(network(chains, closed=closed), step_um=1.0)
    monkeypatch.setattr(traces, "_BLOCK_POINTS", 16)
    blocked = fit_segments(network(chains, closed=closed), step_um=1.0)
    for name in SEGMENT_COLUMNS:
        assert_array_equal(blocked[name], whole[name])


@given(
    st.lists(
        st.tuples(st.integers(0, 25), st.booleans(), st.integers(0, 2**31 - 1)),
        min_size=0,
        max_size=12,
    )
)
def test_any_network_gives_a_consistent_table(specs):
    # Invariants on arbitrary chains (random walks on the grid, repeated points, loops,
    # chains of 0 or 1 point): no failure, every chain with a point has a piece, angles
    # in [0, 180) or NaN for a piece without direction, lengths >= 0, ids in order.
    chains, closed = [], []
    for size, is_loop, seed in specs:
        steps = np.random.default_rng(seed).integers(-1, 2, (size, 2))
        chains.append(np.cumsum(steps, axis=0).astype(float) * 0.5)
        closed.append(is_loop)
    seg = fit_segments(network(chains, closed=closed), step_um=0.5)
    assert len({len(v) for v in seg.values()}) == 1
    with_points = [c for c, pts in enumerate(chains) if len(pts)]
    assert sorted(set(seg["chain_id"].tolist())) == with_points
    assert np.all(np.diff(seg["chain_id"]) >= 0)
    angle = seg["trace_angle_deg"]
    assert np.all(np.isnan(angle) | ((angle >= 0) & (angle < 180)))
    assert np.all(seg["length_um"] >= 0) and np.all(seg["n_edges"] >= 1)
    assert np.array_equal(np.isnan(angle), np.isnan(seg["trace_sigma_deg"]))


def test_sigma_model_bad_input_raises():
    with pytest.raises(SettingError, match="Expected `step_um` to be a finite number > 0"):
        trace_sigma_model_deg(10.0, -1.0, 0.0, 10)
    with pytest.raises(TypeError, match="Expected `length_um` to be an array of numbers"):
        trace_sigma_model_deg("long", 1.0, 0.0, 10)
    with pytest.raises(TypeError, match="Expected `angle_deg` to be an array of numbers"):
        trace_sigma_model_deg(10.0, 1.0, 0.0, 10, angle_deg={"a": 1})


def test_group_collinear_does_not_depend_on_row_order():
    # Invariant: the grouping is a partition of the segments, whatever their order.
    rng = np.random.default_rng(4)
    chains, pairs = [], []
    for k in range(30):
        angle = rng.choice([20.0, 75.0, 140.0])
        chains.append(digital_line(angle, (rng.integers(0, 3) * 7.0, 0.0), 25.0))
        pairs.append((1, 2 + k % 2))
    seg = fit_segments(network(chains, pairs=pairs), step_um=1.0)
    labels = group_collinear(seg, max_offset_um=1.5)
    perm = rng.permutation(len(labels))
    shuffled = group_collinear({k: v[perm] for k, v in seg.items()}, max_offset_um=1.5)
    same = labels[:, None] == labels[None, :]
    assert_array_equal(shuffled[:, None] == shuffled[None, :], same[np.ix_(perm, perm)])
    assert 1 < labels.max() + 1 < len(labels)
