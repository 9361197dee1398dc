"""The map's text export writes the bytes of Python's ``%`` operator, row by row.

The oracle is the writer as it was before it was encoded column-wise
(:func:`inclination.io.writers.write_csv`, conventions §2–§3 for the declared frame):
each row formatted by Python's ``%`` operator (the outside reference) with ``%.6f``
coordinates, ``%.5f`` angles, ``%d`` phase and ``%.7g`` quality channels. The maps hold
the values that break fast paths: angles at decimal ties of the fifth decimal, 0, 360-ε,
-0.0, tiny negatives, NaN at non-indexed points; quality channels with 1e-7, 1e16, NaN,
±inf, integers, huge and tiny values, ties at the seventh significant digit and values
next to powers of ten; coordinates at ties of the sixth decimal.
"""

from __future__ import annotations

import numpy as np
import pytest

from inclination.frames import DeclaredAxes
from inclination.io.writers import write_csv
from inclination.maps import OrientationMap
from inclination.report.columns import Column
from inclination.report.streams import encode_rows

DELIMITERS = [",", "\t", ";", " ", "|", "\0", "é", "→"]


def _old_write_csv_bytes(omap, delimiter=","):
    """The writer before the column-wise encoder, kept here as the oracle."""
    xy = omap.positions_declared_um().reshape(-1, 2)
    euler = omap.euler_deg_declared().reshape(-1, 3)
    columns = [xy[:, 0], xy[:, 1], euler[:, 0], euler[:, 1], euler[:, 2]]
    columns += [np.asarray(q, dtype=np.float64).ravel() for q in omap.quality.values()]
    header = ["x_um", "y_um", "phi1_deg", "Phi_deg", "phi2_deg", "phase", *omap.quality]
    phase = np.asarray(omap.phase).ravel()
    n_float = len(columns)
    fmt_row = delimiter.join(["%.6f"] * 2 + ["%.5f"] * 3 + ["%d"] + ["%.7g"] * (n_float - 5))
    fmt_row += "\n"
    table = np.column_stack(columns)
    out = [(delimiter.join(header) + "\n").encode("utf-8")]
    rows = table.tolist()
    ids = phase.tolist()
    out.append("".join(fmt_row % (*r[:5], p, *r[5:]) for r, p in zip(rows, ids, strict=True)))
    return out[0] + out[1].encode("utf-8")


def _tricky_angles(rng, n):
    e = np.stack([rng.uniform(0, 360, n), rng.uniform(0, 180, n), rng.uniform(0, 360, n)], axis=-1)
    special = np.array(
        [0.0, -0.0, 360 - 1e-9, 360 - 1e-6, 359.999995, 180.0, 0.000005, -0.000004, 1e-12,
         12.345675, 0.125, 2.675, 90.000015, 1 / 3]
    )  # fmt: skip
    pick = rng.random(e.shape) < 0.3
    e[pick] = rng.choice(special, pick.sum())
    ties = rng.random(e.shape) < 0.15  # multiples of 0.000005: exact or near ties at 5 decimals
    e[ties] = rng.integers(0, 72_000_000, ties.sum()) * 0.000005
    return e


def _tricky_quality(rng, n):
    q = rng.standard_normal(n) * 10.0 ** rng.integers(-12, 20, n)
    special = np.array(
        [np.nan, np.inf, -np.inf, 0.0, -0.0, 1e-7, 1e16, -1e16, 1e300, -1e-300, 5e-324, 1.0,
         255.0, 65535.0, 1e7, 9999999.5, 9999999.4, 999999.95, 1234567.5, 0.0001, 0.00009999999,
         0.000099999995, 12345675.0, 2**53 + 2.0, 1e22, 1e23, 123456789012.0, 1 / 3]
    )  # fmt: skip
    pick = rng.random(n) < 0.3
    q[pick] = rng.choice(special, pick.sum())
    ints = rng.random(n) < 0.1
    q[ints] = rng.integers(-(10**9), 10**9, ints.sum())
    ties = rng.random(n) < 0.1  # 7-digit mantissas ending in 5 at the eighth digit: ties
    q[ties] = (rng.integers(10**7, 10**8, ties.sum()) // 10 * 10 + 5) * 10.0 ** rng.integers(
        -14, 10, ties.sum()
    )
    return q


def _map(seed, shape, grid="square", *, n_quality=3, step_um=0.5, axes=None):
    rng = np.random.default_rng(seed)
    h, w = shape
    e = np.stack(
        [rng.uniform(0, 360, (h, w)), rng.uniform(0, 180, (h, w)), rng.uniform(0, 360, (h, w))],
        axis=-1,
    )
    phase = rng.integers(0, 4, (h, w))
    e[phase == 0] = np.nan
    # The record keeps quality channels as float32 (maps.OrientationMap): within its range.
    quality = {
        f"q{k}": np.clip(_tricky_quality(rng, h * w), -3e38, 3e38).reshape(h, w)
        for k in range(n_quality)
    }
    if n_quality:
        quality["phase_2"] = rng.integers(0, 300, (h, w))  # an integer channel
    return OrientationMap.from_euler_deg(
        e, phase, grid=grid, step_x_um=step_um, axes=axes, quality=quality
    )


def _plant_angles(monkeypatch, omap, seed):
    """Angles at the ties and edges the float path must hand to Python, NaN where not indexed.

    Euler angles reach the file through quaternions (which cannot carry a planted
    decimal tie), so the declared angles the writer asks for are replaced; the oracle
    asks the same method.
    """
    rng = np.random.default_rng(seed)
    planted = _tricky_angles(rng, omap.shape[0] * omap.shape[1]).reshape(*omap.shape, 3)
    planted[~np.asarray(omap.valid)] = np.nan
    monkeypatch.setattr(OrientationMap, "euler_deg_declared", lambda self: planted)


@pytest.mark.parametrize("delimiter", DELIMITERS)
def test_write_csv_writes_the_bytes_of_the_percent_operator(tmp_path, monkeypatch, delimiter):
    omap = _map(1, (60, 70))
    _plant_angles(monkeypatch, omap, 2)
    got = write_csv(tmp_path / "m.csv", omap, delimiter=delimiter).read_bytes()
    assert got == _old_write_csv_bytes(omap, delimiter)


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
@pytest.mark.parametrize("seed", [3, 4])
def test_write_csv_bytes_on_declared_axes_and_grids(tmp_path, grid, seed):
    # Coordinates at ties of the sixth decimal: a step of 2.5e-6 µm, an origin off the grid.
    axes = DeclaredAxes("left", "up", origin_um=(0.0000005, -3.0000025))
    omap = _map(seed, (41, 37), grid, step_um=2.5e-6, axes=axes)
    got = write_csv(tmp_path / "m.csv", omap, delimiter="\t").read_bytes()
    assert got == _old_write_csv_bytes(omap, "\t")
    # And real angles, through the quaternions, at an ordinary step.
    omap = _map(seed, (30, 20), grid, step_um=0.35)
    assert write_csv(tmp_path / "r.csv", omap).read_bytes() == _old_write_csv_bytes(omap)


@pytest.mark.parametrize("shape", [(1, 1), (1, 3), (2, 1), (0, 4), (3, 0)])
@pytest.mark.parametrize("n_quality", [0, 1])
def test_tiny_and_empty_maps(tmp_path, monkeypatch, shape, n_quality):
    omap = _map(5, shape, n_quality=n_quality)
    _plant_angles(monkeypatch, omap, 6)
    for delimiter in (",", "\0"):
        got = write_csv(tmp_path / "t.csv", omap, delimiter=delimiter).read_bytes()
        assert got == _old_write_csv_bytes(omap, delimiter)


@pytest.mark.parametrize("digits", [1, 3, 7, 12])
@pytest.mark.parametrize("block_rows", [1, 7, 16_384])
def test_printf_style_is_the_percent_operator(digits, block_rows):
    # The engine on its own, each rule against % cell by cell, other precisions than the map's.
    rng = np.random.default_rng(digits)
    n = 4000
    t = {
        "f0": _tricky_quality(rng, n),
        "f3": _tricky_quality(rng, n),
        "f5": _tricky_angles(rng, n)[:, 0],
        "g": _tricky_quality(rng, n),
        "d": rng.integers(-(10**15), 10**15, n),
    }
    t["d"][:3] = [np.iinfo(np.int64).min, 0, -1]
    cols = [
        Column("f0", "float", 0),
        Column("f3", "float", 3),
        Column("f5", "float", 5),
        Column("g", "general", digits),
        Column("d", "int"),
    ]
    got = b"".join(encode_rows(t, cols, style="printf", delimiter=";", block_rows=block_rows))
    fmt = f"%.0f;%.3f;%.5f;%.{digits}g;%d\n"
    lists = [t[c.name].tolist() for c in cols]
    want = "".join(fmt % row for row in zip(*lists, strict=True)).encode()
    assert got == want


def test_printf_style_refuses_text_and_other_styles_refuse_a_delimiter():
    t = {"s": np.array(["a"])}
    with pytest.raises(ValueError, match="printf column"):
        list(encode_rows(t, [Column("s", "str")], style="printf"))
    with pytest.raises(ValueError, match="delimiter"):
        list(encode_rows(t, [Column("s", "str")], style="csv", delimiter=";"))


def test_declared_euler_angles_do_not_depend_on_the_block(monkeypatch):
    # maps.OrientationMap.euler_deg_declared converts a block of points at a time
    # (conventions §2–§3); each point on its own, so a block of 7 gives the same bits.
    import inclination.maps as maps

    omap = _map(7, (23, 19), "hexagonal", axes=DeclaredAxes("down", "right"))
    whole = omap.euler_deg_declared()
    monkeypatch.setattr(maps, "_BLOCK", 7)
    assert np.array_equal(omap.euler_deg_declared(), whole, equal_nan=True)
    assert np.isnan(whole[~np.asarray(omap.valid)]).all()


def _edge_values():
    """Values at the edges of the printf fast paths, each next to its float neighbours."""
    powers = np.array([float(f"1e{k}") for k in range(-323, 309)])  # nearest float64 of 10^k
    rng = np.random.default_rng(11)
    with np.errstate(over="ignore"):
        near = [powers, np.nextafter(powers, 0), np.nextafter(powers, np.inf), powers * 9.99999995]
    subnormal = np.frombuffer(rng.integers(1, 2**52, 300).astype(np.int64).tobytes(), np.float64)
    ties = [
        (rng.integers(0, 10**7, 2000) + 0.5) * 10.0 ** -rng.integers(0, 10, 2000),  # x.5 at a digit
        rng.integers(-(10**9), 10**9, 2000) * 5e-6,  # ties at the fifth and sixth decimals
        (rng.integers(10**6, 10**7, 2000) * 10 + 5) * 10.0 ** rng.integers(-20, 20, 2000),
    ]
    big = [2.0**53 + rng.integers(-50, 50, 200), 2.0**50 + rng.integers(-50, 50, 200)]
    special = [0.0, -0.0, np.nan, -np.nan, np.inf, -np.inf, 1e-7, -1e-7, 1e16, -1e16, 5e-324,
               2.2250738585072014e-308, 1.7976931348623157e308, 0.0005, 0.125, 2.675]  # fmt: skip
    x = np.concatenate([*near, subnormal, -subnormal, *ties, *big, special])
    with np.errstate(over="ignore"):
        return np.concatenate([x, -x[::3], np.nextafter(x[: len(x) // 2], np.inf)])


@pytest.mark.parametrize("digits", [1, 2, 7, 12, 15, 16])
def test_printf_general_at_powers_of_ten_ties_and_subnormals(digits):
    # %g's decimal exponent is guessed from the float's binary exponent and checked; next to
    # every power of ten, at ties of the last digit and for subnormals, against % itself.
    x = _edge_values()
    got = b"".join(encode_rows({"g": x}, [Column("g", "general", digits)], style="printf"))
    assert got == "".join("%.*g\n" % (digits, v) for v in x.tolist()).encode()  # noqa: UP031


@pytest.mark.parametrize("decimals", [0, 1, 3, 5, 6, 9, 12])
def test_printf_fixed_at_ties_and_exact_limits(decimals):
    # The rounding of %.Nf is settled by two float products around |x|·10^N; at and next to
    # ties, 2^50 and 2^53, and for subnormals, against % itself.
    x = _edge_values()
    x = x[np.abs(x) < 1e200]  # %.12f of 1e300 is 313 digits: fine, but slow to compare
    got = b"".join(encode_rows({"f": x}, [Column("f", "float", decimals)], style="printf"))
    assert got == "".join("%.*f\n" % (decimals, v) for v in x.tolist()).encode()  # noqa: UP031
