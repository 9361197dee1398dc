"""The tables of a run as Python objects: what the CSV files hold, with ``to_pandas()``.

Owns :class:`RunTable` and :func:`run_tables`. A run's tables stay what the
library passes around, a dict of equal-length 1-D arrays (style guide §7):
:class:`RunTable` is a read-only :class:`~collections.abc.Mapping` of column name ->
read-only array, in the CSV's column order and frame (the declared axes,
conventions §2), so ``dict(table)`` and ``table["length_um"]`` work as before;
it only adds the column definitions and :meth:`RunTable.to_pandas`. pandas is
the optional extra ``pandas``, imported only in that method.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping

import numpy as np

__all__ = ["RunTable", "aligned_columns", "rows_by_id", "run_tables"]

# Column kind (inclination.report.columns.Column.kind) -> pandas dtype. Nullable integer and
# string dtypes keep the CSV's empty cells as missing values instead of made-up numbers.
_PANDAS_DTYPES = {"int": "Int64", "float": "float64", "str": "string", "bool": "bool"}


def rows_by_id(wanted_ids, table_ids) -> np.ndarray:
    """Row of each wanted id in a table's id column, -1 where the table has none.

    The run's tables share ids (``segment_id``, ``grain_id``) but not row order; this is
    the one lookup between them (ids unique within a table).

    Parameters
    ----------
    wanted_ids, table_ids : array_like of int
        The ids looked up, and the table's id column.

    Returns
    -------
    ndarray of int64, shape of ``wanted_ids``

    Examples
    --------
    >>> rows_by_id([7, 3, 9], [3, 5, 7]).tolist()
    [2, 0, -1]
    >>> rows_by_id([1], []).tolist()
    [-1]
    """
    wanted = np.asarray(wanted_ids, np.int64)
    ids = np.asarray(table_ids, np.int64)
    rows = np.full(wanted.shape, -1, np.int64)
    if ids.size == 0 or wanted.size == 0:
        return rows
    order = np.argsort(ids, kind="stable")
    pos = np.minimum(np.searchsorted(ids[order], wanted), ids.size - 1)
    hit = ids[order][pos] == wanted
    rows[hit] = order[pos[hit]]
    return rows


def aligned_columns(table, wanted_ids, id_column: str = "segment_id"):
    """A getter of ``table``'s columns in the order of ``wanted_ids`` (rows looked up once).

    ``column(name, fill)`` returns the column (object dtype for a text ``fill``, float
    otherwise) with ``fill`` where an id is absent from the table; ``table`` may be None.

    Examples
    --------
    >>> column = aligned_columns({"segment_id": [3, 5], "dip": [10.0, 20.0]}, [5, 4])
    >>> column("dip", np.nan).tolist()
    [20.0, nan]
    """
    rows = rows_by_id(wanted_ids, [] if table is None else table[id_column])
    found = rows >= 0

    def column(name, fill):
        out = np.full(len(rows), fill, dtype=object if isinstance(fill, str) else float)
        if found.any():
            out[found] = np.asarray(table[name])[rows[found]]
        return out

    return column


class RunTable(Mapping):
    """One output table: column name -> read-only 1-D array, as its CSV file holds it.

    Parameters
    ----------
    table : mapping of str -> array_like
        Columns of equal length (extra columns are left out).
    columns : sequence of inclination.report.columns.Column
        Order, kind and meaning of the CSV's columns.
    name : str
        The table's file stem, e.g. ``"boundaries"``.

    Examples
    --------
    >>> from inclination.report.columns import Column
    >>> t = RunTable({"a": [1, -1], "b": [0.5, np.nan]},
    ...              [Column("a", "int"), Column("b", "float", 2)], name="t")
    >>> list(t), len(t), t["a"].tolist()
    (['a', 'b'], 2, [1, -1])
    """

    def __init__(self, table: Mapping, columns, *, name: str):
        data = {}
        for c in columns:
            arr = np.array(table[c.name])
            arr.flags.writeable = False
            data[c.name] = arr
        lengths = {len(v) for v in data.values()}
        if len(lengths) > 1:
            raise ValueError(f"Expected columns of equal length, got lengths {sorted(lengths)}.")
        self._data = data
        self._columns = tuple(columns)
        self._name = name

    def __getitem__(self, key: str) -> np.ndarray:
        return self._data[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._data)

    def __len__(self) -> int:
        return len(self._data)

    def __repr__(self) -> str:
        n = len(next(iter(self._data.values()), ()))
        return f"RunTable({self._name!r}, {n} rows, columns {list(self._data)})"

    @property
    def name(self) -> str:
        """The table's file stem (``boundaries`` for boundaries.csv)."""
        return self._name

    @property
    def columns(self) -> tuple:
        """The column definitions, in CSV order."""
        return self._columns

    @property
    def n_rows(self) -> int:
        """Number of rows."""
        return len(next(iter(self._data.values()), ()))

    def to_pandas(self):
        """The table as a ``pandas.DataFrame`` with the CSV's columns, in its order.

        Integer columns are ``Int64`` and text columns ``string`` (both nullable:
        what the CSV writes as an empty cell is ``<NA>``), floats ``float64``
        (empty: NaN) at full precision, booleans ``bool``. Needs the optional
        extra ``pandas``.

        Examples
        --------
        >>> import pytest
        >>> _ = pytest.importorskip("pandas", reason="needs the optional extra 'pandas'")
        >>> from inclination.report.columns import Column
        >>> t = RunTable({"a": [1, -1], "s": ["x", ""]},
        ...              [Column("a", "int"), Column("s", "str")], name="t")
        >>> df = t.to_pandas()
        >>> [str(d) for d in df.dtypes], df["a"].isna().tolist(), df["s"].isna().tolist()
        (['Int64', 'string'], [False, True], [False, True])
        """
        try:
            import pandas as pd
        except ImportError:
            raise ImportError(
                "Expected pandas for to_pandas(), got none installed; "
                "install the extra: pip install 'inclination[pandas]'."
            ) from None
        out = {}
        for c in self._columns:
            values = self._data[c.name]
            if c.kind == "int":
                ints = values.astype(np.int64)
                # The CSV's "absent" for ids and counts is a negative number (report.tables).
                out[c.name] = pd.Series(ints, dtype="Int64").mask(ints < 0)
            elif c.kind == "str":
                text = [None if v is None or str(v) == "" else str(v) for v in values.tolist()]
                out[c.name] = pd.array(text, dtype="string")
            else:
                out[c.name] = values.astype(_PANDAS_DTYPES[c.kind])
        return pd.DataFrame(out, columns=[c.name for c in self._columns])


def run_tables(analysis) -> dict[str, RunTable]:
    """Every table a run writes as CSV, by file stem, in the declared axes (conventions §2).

    ``grains`` always; ``segments`` and ``subgrain_segments`` after the traces stage;
    ``boundaries`` after the planes stage; ``features`` when the job has them. The
    values are those of the CSV files before their rounding to the columns' decimals.
    """
    from .report.columns import BOUNDARY_COLUMNS, GRAIN_COLUMNS, SEGMENT_COLUMNS
    from .report.outputs import boundaries_table, grains_table, segments_table

    tables = {"grains": RunTable(grains_table(analysis), GRAIN_COLUMNS, name="grains")}
    if analysis.segments is not None:
        tables["segments"] = RunTable(
            segments_table(analysis), SEGMENT_COLUMNS, name="segments"
        )
    if analysis.subgrain_segments is not None:
        tables["subgrain_segments"] = RunTable(
            segments_table(analysis, analysis.subgrain_segments),
            SEGMENT_COLUMNS,
            name="subgrain_segments",
        )
    if analysis.identification is not None:
        tables["boundaries"] = RunTable(
            boundaries_table(analysis), BOUNDARY_COLUMNS, name="boundaries"
        )
    if getattr(analysis, "features", None) is not None:
        from .report.features import FEATURE_COLUMNS, features_table

        tables["features"] = RunTable(features_table(analysis), FEATURE_COLUMNS, name="features")
    return tables
