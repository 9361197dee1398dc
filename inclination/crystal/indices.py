"""Miller and Miller–Bravais indices: parsing, writing, integer helpers, low-index enumeration.

Owns everything about index tuples that does not need a cell (conventions §4): the
:class:`Indices` record and :func:`parse_indices`, the writers :func:`format_indices` and
:func:`format_indices_latex`, the checks that turn user indices into three-index arrays
(:func:`integer_indices`, :func:`three_index_array`), the conversion back to four indices
(:func:`to_bravais`), the ± choice of a plane (:func:`canonical_sign`) and the one
enumeration of low-index planes and directions (:func:`low_indices`). Four-index planes
(hkil) drop i; four-index directions [UVTW] become [U − T, V − T, W].
"""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass

import numpy as np

from .._validation import as_float_array, check_finite, check_one_of
from ..errors import SettingError

__all__ = [
    "KINDS",
    "Indices",
    "parse_indices",
    "format_indices",
    "format_indices_latex",
    "integer_indices",
    "three_index_array",
    "to_bravais",
    "canonical_sign",
    "low_indices",
]

_BRACKETS = {"(": (")", "plane", False), "{": ("}", "plane", True)}
_BRACKETS |= {"[": ("]", "direction", False), "<": (">", "direction", True)}
#: The two kinds of index: planes (hkl) and directions [uvw].
KINDS = ("plane", "direction")
_INTEGER_TOKEN = re.compile(r"[+-]?\d+")
_COMPACT = re.compile(r"(?:-?\d)+")


@dataclass(frozen=True)
class Indices:
    """Parsed Miller or Miller–Bravais indices.

    Attributes
    ----------
    kind : {"plane", "direction"}
    family : bool
        True for ``{hkl}`` and ``<uvw>`` (all symmetric equivalents).
    values : tuple of int
        Three indices, or four (Miller–Bravais).

    Examples
    --------
    >>> idx = parse_indices("{10-12}")
    >>> idx.kind, idx.family, idx.values, idx.bravais, str(idx)
    ('plane', True, (1, 0, -1, 2), True, '{1 0 -1 2}')
    """

    kind: str
    family: bool
    values: tuple[int, ...]

    def __post_init__(self):
        check_one_of(self.kind, "kind", KINDS)
        object.__setattr__(self, "family", bool(self.family))
        values = integer_indices(self.values, "values")
        if not any(values):
            raise SettingError(f"Expected `values` to be not all zero, got {values}.")
        _check_bravais(values, self.kind, values)
        object.__setattr__(self, "values", values)

    @property
    def bravais(self) -> bool:
        """True for four-index (Miller–Bravais) notation."""
        return len(self.values) == 4

    @property
    def three_index(self) -> tuple[int, int, int]:
        """The same plane or direction in three-index form (hkil → hkl, UVTW → uvw).

        Examples
        --------
        >>> parse_indices("[2 -1 -1 0]").three_index
        (3, 0, 0)
        """
        v = self.values
        if len(v) == 3:
            return v
        if self.kind == "plane":
            return (v[0], v[1], v[3])
        return (v[0] - v[2], v[1] - v[2], v[3])

    def __str__(self) -> str:
        return format_indices(self.values, self.kind, family=self.family)


def _check_bravais(values, kind: str, text) -> None:
    if len(values) != 4:
        return
    if kind == "plane" and values[2] != -(values[0] + values[1]):
        raise SettingError(
            f"Expected a four-index plane (h k i l) with i = -(h + k), got {text!r} "
            f"(i = {values[2]}, -(h + k) = {-(values[0] + values[1])})."
        )
    if kind == "direction" and values[2] != -(values[0] + values[1]):
        raise SettingError(
            f"Expected a four-index direction [U V T W] with T = -(U + V), got {text!r} "
            f"(T = {values[2]}, -(U + V) = {-(values[0] + values[1])})."
        )


def parse_indices(text) -> Indices:
    """Parse an index string such as ``{1 1 1}``, ``(1 -1 0)``, ``<1 1 -2 0>``, ``{10-12}``.

    Brackets give the kind: ``( )`` a plane, ``{ }`` a family of planes,
    ``[ ]`` a direction, ``< >`` a family of directions. Indices are integers
    separated by spaces or commas, or written together as single digits with
    minus signs (``10-12`` is 1, 0, -1, 2). The minus sign may be "-" or "−".
    Three indices, or four for Miller–Bravais notation, where the third must be
    minus the sum of the first two.

    Parameters
    ----------
    text : str

    Returns
    -------
    Indices

    Raises
    ------
    TypeError
        If ``text`` is not a string.
    ValueError
        For empty text, unknown or mismatched brackets, non-integers, a count
        other than 3 or 4, all-zero indices, or an inconsistent fourth index.

    Examples
    --------
    >>> parse_indices("(1 -1 0)")
    Indices(kind='plane', family=False, values=(1, -1, 0))
    >>> parse_indices("<1 1 -2 0>").values
    (1, 1, -2, 0)
    """
    if not isinstance(text, str):
        raise SettingError(f"Expected `text` to be a string, got {type(text).__name__}.")
    s = text.strip().replace("\u2212", "-")
    if len(s) < 2 or s[0] not in _BRACKETS:
        raise SettingError(
            "Expected `text` to be indices in (), {}, [] or <>, such as '{1 1 1}', "
            f"got {text!r}."
        )
    closing, kind, family = _BRACKETS[s[0]]
    if s[-1] != closing:
        raise SettingError(
            f"Expected `text` opened with {s[0]!r} to close with {closing!r}, got {text!r}."
        )
    inner = s[1:-1].strip()
    if not inner:
        raise SettingError(f"Expected `text` to hold 3 or 4 integer indices, got {text!r}.")
    if re.search(r"[\s,]", inner):
        tokens = [t for t in re.split(r"[\s,]+", inner) if t]
        if not all(_INTEGER_TOKEN.fullmatch(t) for t in tokens):
            raise SettingError(f"Expected `text` to hold only integer indices, got {text!r}.")
        values = tuple(int(t) for t in tokens)
    elif _COMPACT.fullmatch(inner):
        values = tuple(int(t) for t in re.findall(r"-?\d", inner))
    else:
        raise SettingError(f"Expected `text` to hold only integer indices, got {text!r}.")
    if len(values) not in (3, 4):
        raise SettingError(
            f"Expected `text` to hold 3 or 4 integer indices, got {len(values)} in {text!r}."
        )
    if not any(values):
        raise SettingError(f"Expected `text` to hold indices that are not all zero, got {text!r}.")
    _check_bravais(values, kind, text)
    return Indices(kind=kind, family=family, values=values)


def integer_indices(values, name: str = "values") -> tuple[int, ...]:
    """Three or four whole-number indices as a tuple of int.

    Parameters
    ----------
    values : array_like, shape (3,) or (4,)
        Numbers that are integers (``2.0`` passes, ``2.5`` does not).
    name : str, default "values"
        The parameter named in the error.

    Returns
    -------
    tuple of int

    Raises
    ------
    SettingError
        For another shape or a non-integer entry.

    Examples
    --------
    >>> integer_indices([1.0, -1, 0])
    (1, -1, 0)
    """
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.shape[0] not in (3, 4):
        raise SettingError(f"Expected `{name}` to have shape (3,) or (4,), got {arr.shape}.")
    if not np.issubdtype(arr.dtype, np.number) or np.any(arr != np.round(arr)):
        raise SettingError(f"Expected `{name}` to hold integers, got {arr.tolist()}.")
    return tuple(int(v) for v in arr)


def format_indices(values, kind: str, *, family: bool = False) -> str:
    """Write indices as the tables do: ``(1 1 -1)``, ``{1 1 1}``, ``[1 1 0]``, ``<1 1 -2 0>``.

    Parameters
    ----------
    values : sequence of int, length 3 or 4
    kind : {"plane", "direction"}
    family : bool, default False

    Returns
    -------
    str

    Examples
    --------
    >>> format_indices((1, 1, -1), "plane")
    '(1 1 -1)'
    >>> format_indices([1, 1, -2, 0], "direction", family=True)
    '<1 1 -2 0>'
    """
    v = integer_indices(values, "values")
    check_one_of(kind, "kind", KINDS)
    opening, closing = {
        ("plane", False): "()",
        ("plane", True): "{}",
        ("direction", False): "[]",
        ("direction", True): "<>",
    }[(kind, bool(family))]
    return opening + " ".join(str(x) for x in v) + closing


def format_indices_latex(values, kind: str, *, family: bool = False) -> str:
    """Write indices for LaTeX, negatives with overbars: ``$(11\\bar{1})$``.

    Indices run together as the trade prints them; when any index has two or
    more digits they are separated by thin spaces so they stay readable.

    Parameters
    ----------
    values : sequence of int, length 3 or 4
    kind : {"plane", "direction"}
    family : bool, default False

    Returns
    -------
    str
        Inline math, including the ``$`` delimiters.

    Examples
    --------
    >>> print(format_indices_latex((1, 0, -1, 2), "plane", family=True))
    $\\{10\\bar{1}2\\}$
    >>> print(format_indices_latex((1, 1, 0), "direction", family=True))
    $\\langle 110\\rangle$
    >>> print(format_indices_latex((12, -1, 0), "plane"))
    $(12\\,\\bar{1}\\,0)$
    """
    v = integer_indices(values, "values")
    check_one_of(kind, "kind", KINDS)
    parts = [rf"\bar{{{-x}}}" if x < 0 else str(x) for x in v]
    sep = r"\," if any(abs(x) > 9 for x in v) else ""
    body = sep.join(parts)
    opening, closing = {
        ("plane", False): ("(", ")"),
        ("plane", True): (r"\{", r"\}"),
        ("direction", False): ("[", "]"),
        ("direction", True): (r"\langle ", r"\rangle"),
    }[(kind, bool(family))]
    return f"${opening}{body}{closing}$"


# --------------------------------------------------------------------------- arrays


def three_index_array(values, name: str, kind: str) -> np.ndarray:
    """Indices in three-index form as floats, from three- or four-index input (conventions §4).

    Parameters
    ----------
    values : array_like, shape (..., 3) or (..., 4), or Indices
        Planes (hkl)/(hkil) or directions [uvw]/[UVTW]; four-index input must have
        i = -(h + k) (planes) or T = -(U + V) (directions).
    name : str
        The parameter named in errors.
    kind : {"plane", "direction"}
        (hkil) becomes (hkl); [UVTW] becomes [U - T, V - T, W].

    Returns
    -------
    ndarray, shape (..., 3) float64

    Raises
    ------
    SettingError
        For a string, another last axis, non-finite values, an inconsistent third
        index or an all-zero row.

    Examples
    --------
    >>> three_index_array([[1, 0, -1, 2], [0, 0, 0, 1]], "hkl", "plane").tolist()
    [[1.0, 0.0, 2.0], [0.0, 0.0, 1.0]]
    >>> three_index_array([2, -1, -1, 0], "uvw", "direction").tolist()
    [3.0, 0.0, 0.0]
    """
    if isinstance(values, Indices):
        values = values.values
    if isinstance(values, str):
        raise SettingError(
            f"Expected `{name}` to be an array of indices or an Indices, got the string "
            f"{values!r}: read it with parse_indices first."
        )
    arr = as_float_array(values, name)
    if arr.ndim == 0 or arr.shape[-1] not in (3, 4):
        raise SettingError(
            f"Expected `{name}` to have shape (..., 3) or (..., 4), got {arr.shape}."
        )
    check_finite(arr, name)
    if arr.shape[-1] == 4:
        third = -(arr[..., 0] + arr[..., 1])
        if not np.allclose(arr[..., 2], third, rtol=0, atol=1e-9):
            bad = np.argwhere(~np.isclose(arr[..., 2], third, rtol=0, atol=1e-9))[0]
            letter = "i = -(h + k)" if kind == "plane" else "T = -(U + V)"
            raise SettingError(
                f"Expected `{name}` in four-index form to have {letter}, "
                f"got {arr[tuple(bad)].tolist()} at index {tuple(int(i) for i in bad)}."
            )
        if kind == "plane":
            arr = arr[..., [0, 1, 3]]
        else:
            arr = np.stack(
                [arr[..., 0] - arr[..., 2], arr[..., 1] - arr[..., 2], arr[..., 3]], axis=-1
            )
    zero = np.all(arr == 0, axis=-1)
    if np.any(zero):
        where = "" if arr.ndim == 1 else f" at index {tuple(int(i) for i in np.argwhere(zero)[0])}"
        raise SettingError(f"Expected `{name}` to be non-zero, got all-zero indices{where}.")
    return arr


def canonical_sign(rows: np.ndarray) -> np.ndarray:
    """Flip each row so that its first non-zero entry is positive (n and -n are one plane).

    Parameters
    ----------
    rows : ndarray, shape (M, K)
        Index rows, none all zero.

    Returns
    -------
    ndarray, shape (M, K)

    Examples
    --------
    >>> canonical_sign(np.array([[0, -1, 2], [1, -1, 0]])).tolist()
    [[0, 1, -2], [1, -1, 0]]
    """
    first = np.argmax(rows != 0, axis=-1)
    sign = np.sign(rows[np.arange(len(rows)), first])
    return rows * sign[:, None]


def to_bravais(rows: np.ndarray, kind: str) -> np.ndarray:
    """(M, 3) integer indices to (M, 4) Miller–Bravais indices (inverse of conventions §4).

    Parameters
    ----------
    rows : ndarray of int, shape (M, 3)
    kind : {"plane", "direction"}
        (hkl) becomes (h k -(h+k) l); [uvw] becomes [2u-v, 2v-u, -(u+v), 3w], divided
        by 3 when every entry allows it.

    Returns
    -------
    ndarray of int, shape (M, 4)

    Examples
    --------
    >>> to_bravais(np.array([[1, 0, 2]]), "plane").tolist()
    [[1, 0, -1, 2]]
    >>> to_bravais(np.array([[3, 0, 0]]), "direction").tolist()
    [[2, -1, -1, 0]]
    """
    if kind == "plane":
        h, k, l_ = rows.T
        return np.stack([h, k, -(h + k), l_], axis=-1)
    # [uvw] = [U - T, V - T, W] with T = -(U + V) inverts to U = (2u - v)/3, V = (2v - u)/3;
    # the images of an integer [UVTW] are integer again, so the division by 3 is exact.
    u, v, w = rows.T
    big_u, big_v = 2 * u - v, 2 * v - u
    out = np.stack([big_u, big_v, -(big_u + big_v), 3 * w], axis=-1)
    return out // 3 if np.all(out % 3 == 0) else out


def low_indices(max_index: int, *, kind: str = "plane") -> np.ndarray:
    """Every index triple with no common factor and entries up to ``max_index`` in size.

    The one enumeration of low-index planes and directions: the candidate list of
    the nearest low-index plane or axis, and the triples sorted into default
    families, all come from here.

    Parameters
    ----------
    max_index : int
        Largest |h|, |k|, |l| (>= 1).
    kind : {"plane", "direction"}, default "plane"
        Planes count (hkl) and (-h -k -l) once, first non-zero index positive;
        directions keep both senses.

    Returns
    -------
    ndarray of int64, shape (M, 3)
        Low indices first: sorted by the largest |index|, then the sum of
        |index|, then descending lexicographic order, so that ``argmax`` over
        the rows breaks ties in favour of the lower indices.

    Raises
    ------
    SettingError
        If ``max_index`` is not an integer >= 1.

    Examples
    --------
    >>> low_indices(1).tolist()[:4]
    [[1, 0, 0], [0, 1, 0], [0, 0, 1], [1, 1, 0]]
    >>> len(low_indices(1)), len(low_indices(1, kind="direction"))
    (13, 26)
    """
    if isinstance(max_index, bool) or not isinstance(max_index, int | np.integer) or max_index < 1:
        raise SettingError(f"Expected `max_index` to be an integer >= 1, got {max_index!r}.")
    check_one_of(kind, "kind", KINDS)
    n = int(max_index)
    rows = np.array(list(itertools.product(range(n, -n - 1, -1), repeat=3)), dtype=np.int64)
    rows = rows[np.any(rows != 0, axis=1)]
    rows = rows[np.gcd.reduce(np.abs(rows), axis=1) == 1]
    if kind == "plane":
        rows = rows[rows[np.arange(len(rows)), np.argmax(rows != 0, axis=1)] > 0]
    # itertools.product runs in descending lexicographic order and lexsort is stable,
    # so that order survives as the last key.
    size = np.abs(rows)
    return rows[np.lexsort((size.sum(axis=1), size.max(axis=1)))]
