"""``thermowarden export``: the conditions history (the 5-minute report samples kept in the
service's SQLite store) as a table, one row per sample time and space.

The format follows the file name: ``.csv`` (RFC 4180, UTF-8, a header row; an index that
did not apply is an empty cell; numbers as stored) or ``.parquet`` (typed columns, nulls for
indices that did not apply; needs the optional ``parquet`` extra, pyarrow). The columns are
the time, the space and every entry the catalogue marks exported
(:func:`thermowarden.core.catalogue.exported`), under its index's name; the table below is
written from the catalogue.

A column a stored sample does not have (samples written by an older version) is empty.
"""

from __future__ import annotations

import csv
import datetime as dt
import pathlib
from collections.abc import Iterable, Iterator
from typing import Any, Final

from thermowarden.core import catalogue

COLUMNS: Final = tuple((e.name, e.kept, e.categories) for e in catalogue.exported())
"""(exported column, key in the stored sample, labels of a category) per column."""
BOOLEAN: Final = frozenset({"occupied"})
HEADER: Final = ("time_utc", "epoch_s", "space") + tuple(c for c, _, _ in COLUMNS)
_FIXED: Final = (("time_utc", "-", "ISO 8601, UTC"), ("epoch_s", "s", "the same time as epoch "
                 "seconds"), ("space", "-", "space id"))


def columns_table() -> str:
    """The columns as a reStructuredText table: name, unit, words."""
    rows = [*_FIXED, *((e.name, e.unit if e.unit not in ("", "1", "category") else "-",
                        e.label + (f" ({', '.join(e.categories)})" if e.categories else ""))
                       for e in catalogue.exported())]
    widths = [max(len(r[k]) for r in (*rows, ("column", "unit", "meaning"))) for k in range(3)]
    rule = "  ".join("=" * w for w in widths)
    line = "  ".join(f"{{:<{w}}}" for w in widths)
    body = [line.format(*r).rstrip() for r in rows]
    return "\n".join([rule, line.format("column", "unit", "meaning").rstrip(), rule, *body,
                      rule])


__doc__ = (__doc__ or "") + "\n" + columns_table() + "\n"
FORMATS: Final = (".csv", ".parquet")


class ExportError(Exception):
    """The export cannot be written (format, missing library, file)."""


def _iso(t: float) -> str:
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")


def rows(samples: Iterable[dict[str, Any]], spaces: set[str] | None = None
         ) -> Iterator[dict[str, Any]]:
    """One dict per sample time and space, keyed by :data:`HEADER`."""
    for s in samples:
        t = float(s["t"])
        for i, space in enumerate(s["spaces"]):
            if spaces is not None and space not in spaces:
                continue
            row: dict[str, Any] = {"time_utc": _iso(t), "epoch_s": t, "space": space}
            for name, key, labels in COLUMNS:
                values = s.get(key)
                v = values[i] if values is not None and i < len(values) else None
                if v is not None and labels is not None:
                    v = labels[int(v)]
                row[name] = v
            yield row


def format_of(path: str | pathlib.Path) -> str:
    """``csv`` or ``parquet`` from the file name; raises :class:`ExportError` otherwise."""
    suffix = pathlib.Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise ExportError(f"{path}: the file name must end in .csv or .parquet")
    return suffix[1:]


def write(samples: Iterable[dict[str, Any]], path: str | pathlib.Path,
          spaces: set[str] | None = None) -> int:
    """Write the table to ``path`` in the format its name says; returns the row count."""
    fmt = format_of(path)
    if fmt == "parquet":
        return _write_parquet(rows(samples, spaces), path)
    return _write_csv(rows(samples, spaces), path)


def _write_csv(table: Iterator[dict[str, Any]], path: str | pathlib.Path) -> int:
    n = 0
    with open(path, "w", encoding="utf-8", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=HEADER)
        writer.writeheader()
        for row in table:
            writer.writerow({k: ("" if v is None else v) for k, v in row.items()})
            n += 1
    return n


def _write_parquet(table: Iterator[dict[str, Any]], path: str | pathlib.Path) -> int:
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise ExportError("Parquet needs pyarrow: pip install 'thermowarden[parquet]' "
                          "(or export to a .csv file)") from None
    labelled = {name for name, _, labels in COLUMNS if labels is not None}
    fields = [pa.field("time_utc", pa.timestamp("s", tz="UTC")),
              pa.field("epoch_s", pa.float64()), pa.field("space", pa.string())]
    fields += [pa.field(name, pa.string() if name in labelled else
                        pa.bool_() if name in BOOLEAN else pa.float64())
               for name, _, _ in COLUMNS]
    schema = pa.schema(fields)
    data: dict[str, list[Any]] = {f.name: [] for f in fields}
    for row in table:
        for k, v in row.items():
            data[k].append(v)
    data["time_utc"] = [dt.datetime.fromtimestamp(t, dt.UTC) for t in data["epoch_s"]]
    pq.write_table(pa.table(data, schema=schema), str(path))
    return len(data["space"])
