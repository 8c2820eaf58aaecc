"""HDF5 trajectory records: one self-contained file per run, crash-safe, resumable.

Layout (format ``isodrum-record``, version 1)::

    /                      attributes: format, format_version, kind (e.g. "continuation"),
                           config (verbatim TOML text), source, seed, started (ISO-8601 UTC),
                           versions (JSON {package: version}), conventions (text),
                           meta (JSON object of anything else the writer wants to keep)
    /<table>/<column>      growable datasets, first axis = row; every table has an int64
                           ``step`` column. Column attributes: ``labels`` (JSON list naming
                           the entries of the last axis, when it has names) and ``doc``.

Tables are declared up front (:class:`Column` specs) because the file is written in HDF5's
single-writer/multiple-reader (SWMR) mode: after every row each dataset is flushed in a fixed
order (all columns, then ``step``), so the file on disk is consistent after every flush and a
run killed at any moment (even SIGKILL) leaves a file holding every completed row. The number
of committed rows of a table is the length of its shortest column. A file whose writer was
killed is still marked "open for writing"; :func:`read_record` opens it in SWMR-read mode
(other HDF5 tools need ``h5clear -s FILE`` first).

Conventional tables of a search: ``steps`` (accepted results only), ``rejected`` (attempts that
failed, with their status, never results) and ``events`` (free-text messages: stops, summaries).

Writers are injected context managers (:func:`open_writer`); resuming re-creates the file with
the committed rows of the old one and keeps appending (:func:`open_writer` ``initial=``).
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import platform
from contextlib import contextmanager
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import Any, Iterator, Mapping, NamedTuple

import h5py
import numpy as np

from .errors import ConfigError

FORMAT = "isodrum-record"
FORMAT_VERSION = 1
CHUNK_ROWS = 64
MESSAGE_BYTES = 2048

CONVENTIONS = (
    "curves counter-clockwise, parameter t in [0, 2pi); s arclength, N inward normal, "
    "kappa = det(g', g'')/|g'|^3 > 0 on convex curves; billiard phase space (s, p) with "
    "p = cos(angle to the positive tangent); Laplacian -Delta u = lambda u, Neumann spectra "
    "include 0; float64 throughout; statuses stored as objectives.status.Status values "
    "(names in the status_names attribute)"
)
VERSIONED_PACKAGES = ("isodrum", "jax", "jaxlib", "optax", "numpy", "scipy", "h5py")


class Column(NamedTuple):
    """A per-row dataset: ``shape`` of one row, numpy ``dtype`` string, entry ``labels``."""

    shape: tuple[int, ...] = ()
    dtype: str = "f8"
    labels: tuple[str, ...] = ()
    doc: str = ""


def message_column(doc: str = "UTF-8 text") -> Column:
    return Column((), f"S{MESSAGE_BYTES}", (), doc)


EVENT_COLUMNS: dict[str, Column] = {
    "step": Column((), "i8", (), "step at which the event happened"),
    "kind": Column((), "S32", (), "event kind (stop, summary, note, …)"),
    "message": message_column("event text (JSON for summaries)"),
}


def package_versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for name in VERSIONED_PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def provenance(kind: str, config_text: str, source: str, seed: int,
               meta: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Root attributes every record carries (``meta`` must be JSON-serializable)."""
    from objectives.status import Status

    meta = dict(meta or {})
    meta.setdefault("status_names", {int(s): s.name for s in Status})
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "kind": kind,
        "config": config_text,
        "source": source,
        "seed": int(seed),
        "started": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "versions": json.dumps(package_versions()),
        "conventions": CONVENTIONS,
        "meta": json.dumps(meta),
    }


def _encode(value: Any, column: Column) -> np.ndarray:
    if column.dtype.startswith("S"):
        text = value if isinstance(value, str) else json.dumps(value)
        raw = text.encode("utf-8")[: int(column.dtype[1:])]
        return np.asarray(raw, dtype=column.dtype)
    arr = np.asarray(value, dtype=column.dtype)
    if arr.shape != tuple(column.shape):
        raise ValueError(f"column expects shape {column.shape}, got {arr.shape}")
    return arr


class RecordWriter:
    """Appends rows to declared tables; every :meth:`append` is flushed before it returns."""

    def __init__(self, handle: h5py.File, tables: Mapping[str, Mapping[str, Column]]):
        self._file = handle
        self.tables = {name: dict(cols) for name, cols in tables.items()}
        self.rows = {name: _committed(handle[name]) for name in self.tables}

    def append(self, table: str, row: Mapping[str, Any]) -> None:
        """Write one row (every declared column) and flush; ``step`` goes last."""
        columns = self.tables[table]
        missing = set(columns) - set(row)
        extra = set(row) - set(columns)
        if missing or extra:
            raise ValueError(f"{table}: row columns differ from the declaration "
                             f"(missing {sorted(missing)}, unknown {sorted(extra)})")
        encoded = {name: _encode(row[name], col) for name, col in columns.items()}
        group, n = self._file[table], self.rows[table]
        order = [c for c in columns if c != "step"] + ["step"]
        for name in order:
            ds = group[name]
            ds.resize(n + 1, axis=0)
            ds[n] = encoded[name]
            ds.flush()
        self.rows[table] = n + 1

    def event(self, step: int, kind: str, message: Any) -> None:
        self.append("events", {"step": step, "kind": kind, "message": message})


def _committed(group: h5py.Group) -> int:
    return min((group[name].shape[0] for name in group), default=0)


@contextmanager
def open_writer(path: str | Path, attrs: Mapping[str, Any],
                tables: Mapping[str, Mapping[str, Column]],
                initial: Mapping[str, Mapping[str, np.ndarray]] | None = None,
                ) -> Iterator[RecordWriter]:
    """Create the record at ``path`` (replacing any old one only once the new one is ready).

    ``tables`` declares every table's columns (each must include ``step``; an ``events``
    table is added). ``initial`` holds rows to start with (used to resume). The file is
    closed on every exit path; rows written before an exception stay in it.
    """
    path = Path(path)
    tables = {**{name: dict(cols) for name, cols in tables.items()}, "events": EVENT_COLUMNS}
    for name, cols in tables.items():
        if "step" not in cols:
            raise ValueError(f"table {name!r} needs a 'step' column")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ConfigError(f"{path}: cannot create the output directory ({err.strerror})") from None
    partial = path.with_name(path.name + ".partial")
    try:
        handle = h5py.File(partial, "w", libver="latest")
    except OSError as err:
        raise ConfigError(f"{path}: cannot write the record ({err})") from None
    try:
        for key, value in attrs.items():
            handle.attrs[key] = value
        for name, cols in tables.items():
            group = handle.create_group(name)
            start = (initial or {}).get(name, {})
            count = min((len(v) for v in start.values()), default=0) if start else 0
            for cname, col in cols.items():
                data = np.asarray(start[cname][:count], dtype=col.dtype) if start else None
                ds = group.create_dataset(
                    cname, shape=(count, *col.shape), maxshape=(None, *col.shape),
                    chunks=(CHUNK_ROWS, *col.shape), dtype=col.dtype)
                if data is not None and count:
                    ds[...] = data
                ds.attrs["labels"] = json.dumps(list(col.labels))
                ds.attrs["doc"] = col.doc
        handle.swmr_mode = True
        handle.flush()
        os.replace(partial, path)
        yield RecordWriter(handle, tables)
    finally:
        handle.close()
        if partial.exists():
            partial.unlink()


@dataclass(frozen=True)
class Record:
    """A record read back: root attributes and, per table, committed rows as arrays."""

    path: str
    attrs: dict[str, Any]
    tables: dict[str, dict[str, np.ndarray]]
    labels: dict[str, dict[str, tuple[str, ...]]]

    @property
    def config_text(self) -> str:
        return str(self.attrs.get("config", ""))

    @property
    def meta(self) -> dict[str, Any]:
        return json.loads(self.attrs.get("meta", "{}"))

    @property
    def versions(self) -> dict[str, str]:
        return json.loads(self.attrs.get("versions", "{}"))

    def table(self, name: str) -> dict[str, np.ndarray]:
        return self.tables.get(name, {})

    def rows(self, name: str) -> int:
        return min((len(v) for v in self.table(name).values()), default=0)

    def events(self) -> list[tuple[int, str, str]]:
        ev = self.table("events")
        return [(int(s), k.decode(), m.decode("utf-8", "replace"))
                for s, k, m in zip(ev.get("step", ()), ev.get("kind", ()), ev.get("message", ()))]


def _open_for_reading(path: Path) -> h5py.File:
    try:
        return h5py.File(path, "r")
    except OSError:
        pass
    try:  # a writer was killed (or is still running): SWMR-read sees every flushed row
        return h5py.File(path, "r", swmr=True, libver="latest")
    except OSError as err:
        raise ConfigError(f"{path}: not a readable HDF5 record ({err})") from None


def read_record(path: str | Path) -> Record:
    """Read a record; tables are truncated to their committed rows."""
    path = Path(path)
    if not path.exists():
        raise ConfigError(f"{path}: no such record file")
    with _open_for_reading(path) as handle:
        attrs = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in handle.attrs.items()}
        attrs = {k: (v.item() if isinstance(v, np.generic) else v) for k, v in attrs.items()}
        if attrs.get("format") != FORMAT:
            raise ConfigError(f"{path}: not an {FORMAT} file (format attribute is "
                              f"{attrs.get('format')!r})")
        tables, labels = {}, {}
        for name, group in handle.items():
            if not isinstance(group, h5py.Group):
                continue
            n = _committed(group)
            tables[name] = {c: group[c][:n] for c in group}
            labels[name] = {c: tuple(json.loads(group[c].attrs.get("labels", "[]")))
                            for c in group}
    return Record(str(path), attrs, tables, labels)


def resume_rows(record: Record, last_step: int | None = None) -> dict[str, dict[str, np.ndarray]]:
    """Committed rows of every table, optionally cut to rows with ``step <= last_step``."""
    out = {}
    for name, cols in record.tables.items():
        if last_step is None or "step" not in cols:
            out[name] = dict(cols)
            continue
        keep = cols["step"] <= last_step
        out[name] = {c: v[keep] for c, v in cols.items()}
    return out
