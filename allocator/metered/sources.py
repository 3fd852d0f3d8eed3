"""Open a metered file and stream it as Arrow record batches with file line numbers.

CSV (plain or gzip) goes through ``pyarrow.csv.open_csv`` and Parquet through
``pyarrow.parquet.ParquetFile.iter_batches``; either way the rows arrive in batches of a
fixed size, so memory does not grow with the file.  Every row carries its line as the user
sees it (header = line 1; for Parquet the record number + 1):

* a CSV line that holds nothing (or only separators) is a row of blanks, counted as a line
  and dropped by the caller, as a spreadsheet user expects;
* a CSV line with the wrong number of fields is reported (``shape`` listing) and skipped.
  pyarrow knows the physical line of such a row only when it parses on one thread, so the
  first pass parses on several threads and, if it meets such a line, the read starts again
  on one thread (the file is wrong anyway; the second read names every line).
"""

from __future__ import annotations

import codecs
import contextlib
import csv
import gzip
import queue
import sys
import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import numpy as np
import pyarrow as pa
import pyarrow.csv as pcsv
import pyarrow.parquet as pq

from ..errors import Collector
from .listing import Listing

#: bytes of CSV text parsed per batch
CSV_BLOCK_BYTES = 16 << 20
#: cells (rows × columns) per Parquet batch, and per wide-file batch of either kind
BATCH_CELLS = 1 << 21
#: longest header line read (a wide file of 20,000 feeders has a header of ~200 kB)
MAX_HEADER_BYTES = 64 << 20
DICT = pa.dictionary(pa.int32(), pa.string())


class RestartExact(Exception):
    """A CSV line had the wrong number of fields: read again on one thread."""


def kind_of(p: Path) -> str | None:
    name = p.name.lower()
    if name.endswith(".csv") or name.endswith(".csv.gz"):
        return "csv"
    if name.endswith(".parquet"):
        return "parquet"
    return None


@dataclass
class Source:
    path: Path
    kind: str  # "csv" | "parquet"
    raw_names: list[str]
    sep: str = ","
    types: list[pa.DataType] = field(default_factory=list)  # Parquet column types

    @property
    def names(self) -> list[str]:
        """Header names stripped of white space."""
        return [str(n).strip() for n in self.raw_names]

    @property
    def decimal_comma(self) -> bool:
        return self.sep == ";"


def open_source(p: Path, col: Collector) -> Source:
    """Check the path and read the header; problems go to ``col`` and end the read."""
    if not p.exists():
        col.add("metered file not found")
    elif p.is_dir():
        col.add("is a folder, expected a .csv, .csv.gz or .parquet file")
    elif kind_of(p) is None:
        col.add("unknown file type: expected a .csv, .csv.gz or .parquet file")
    col.raise_if_any()
    return _open_parquet(p, col) if kind_of(p) == "parquet" else _open_csv(p, col)


def _cannot(col: Collector, what: str, exc: BaseException) -> None:
    col.add(f"cannot read the file as {what}: {str(exc).strip() or type(exc).__name__}")
    col.raise_if_any()


def _open_parquet(p: Path, col: Collector) -> Source:
    try:
        sch = pq.ParquetFile(str(p)).schema_arrow
    except (pa.ArrowException, OSError, ValueError) as exc:
        msg = str(exc).strip()
        if not msg.startswith("Could not open"):
            msg = f"Could not open Parquet input source '{p}': {msg}"
        _cannot(col, "Parquet", RuntimeError(msg))
    return Source(p, "parquet", list(sch.names), types=list(sch.types))


def _header_line(p: Path) -> bytes:
    opener = gzip.open if p.name.lower().endswith(".gz") else open
    with opener(p, "rb") as fh:
        return fh.readline(MAX_HEADER_BYTES)


def _open_csv(p: Path, col: Collector) -> Source:
    try:
        head = _header_line(p).decode("utf-8-sig").rstrip("\r\n")
    except (OSError, EOFError, UnicodeDecodeError, ValueError) as exc:
        _cannot(col, "CSV", exc)
    if not head.strip():
        _cannot(col, "CSV", ValueError("No columns to parse from file"))
    sep = ";" if ";" in head and "," not in head else ","
    names = next(csv.reader([head], delimiter=sep))
    return Source(p, "csv", names, sep=sep)


@dataclass
class Batch:
    """Columns of one batch (by column index) and the file line of each row."""

    arrays: dict[int, pa.Array]
    line: np.ndarray  # int64
    n: int


def batches(src: Source, columns: list[int], dict_cols: set[int], col: Collector,
            shape: Listing, exact: bool, wide: bool = False) -> Iterator[Batch]:
    """Stream the chosen columns.  CSV: every column as text (``dict_cols`` dictionary-
    encoded); wide files read blank cells as nulls.  Raises RestartExact (CSV, not exact)
    when a line has the wrong number of fields.  The next batch is parsed on a thread of
    its own while the caller works on this one (pyarrow parses without the GIL)."""
    if src.kind == "parquet":
        gen = _parquet_batches(src, columns, dict_cols, col, wide)
    else:
        gen = _csv_batches(src, columns, dict_cols, col, shape, exact, wide)
    yield from prefetched(gen)


def prefetched(gen: Iterator, depth: int = 2) -> Iterator:
    """Items of ``gen`` produced on a worker thread, at most ``depth`` ahead; an exception
    in ``gen`` is raised here; closing this generator stops the worker."""
    q: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()
    done = object()

    def put(item) -> bool:
        while not stop.is_set():
            try:
                q.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            for item in gen:
                if not put((True, item)):
                    return
            put((True, done))
        except BaseException as exc:  # handed to the consumer
            put((False, exc))
        finally:
            gen.close()  # the reader's own clean-up runs on this thread

    th = threading.Thread(target=work, name="metered-reader", daemon=True)
    th.start()
    try:
        while True:
            ok, item = q.get()
            if not ok:
                raise item
            if item is done:
                return
            yield item
    finally:
        stop.set()
        while th.is_alive():
            try:
                q.get_nowait()
            except queue.Empty:
                th.join(0.05)


def _parquet_batches(src, columns, dict_cols, col, wide) -> Iterator[Batch]:
    names = [src.raw_names[i] for i in columns]
    strings = [src.raw_names[i] for i in dict_cols if pa.types.is_string(src.types[i])
               or pa.types.is_large_string(src.types[i])]
    rows = max(1, BATCH_CELLS // max(len(columns), 1)) if wide else BATCH_CELLS // 2
    k = 0
    try:
        pf = pq.ParquetFile(str(src.path), read_dictionary=strings or None)
        for rb in pf.iter_batches(batch_size=rows, columns=names, use_threads=True):
            n = rb.num_rows
            yield Batch(dict(zip(columns, rb.columns)),
                        np.arange(k + 2, k + 2 + n, dtype=np.int64), n)
            k += n
    except (pa.ArrowException, OSError, ValueError) as exc:
        _cannot(col, "Parquet", exc)


def _csv_input(src: Source):
    if src.path.name.lower().endswith(".gz"):
        return pa.CompressedInputStream(pa.OSFile(str(src.path)), "gzip")
    return str(src.path)


def _csv_reader(src, columns, dict_cols, exact, wide, on_bad):
    n = len(src.raw_names)
    cn = [f"c{i}" for i in range(n)]
    types = {cn[i]: (DICT if i in dict_cols else pa.string()) for i in columns}
    return pcsv.open_csv(
        _csv_input(src),
        read_options=pcsv.ReadOptions(column_names=cn, skip_rows=1, use_threads=not exact,
                                      block_size=CSV_BLOCK_BYTES),
        parse_options=pcsv.ParseOptions(delimiter=src.sep, ignore_empty_lines=False,
                                        invalid_row_handler=on_bad),
        convert_options=pcsv.ConvertOptions(
            column_types=types, include_columns=[cn[i] for i in columns],
            strings_can_be_null=wide, null_values=[""] if wide else [],
            quoted_strings_can_be_null=False))


def _csv_batches(src, columns, dict_cols, col, shape, exact, wide) -> Iterator[Batch]:
    skips: list[int] = []
    seen_bad = []

    def on_bad(row) -> str:
        if not exact:
            seen_bad.append(1)
            return "error"
        skips.append(int(row.number))
        shape.add_one(int(row.number), f"{row.actual_columns} field"
                      f"{'s' if row.actual_columns != 1 else ''} on this line, the header "
                      f"has {row.expected_columns}; each line needs one value per column")
        return "skip"

    k = 0
    with _row_text_errors() as undecodable:
        try:
            for rb in _csv_reader(src, columns, dict_cols, exact, wide, on_bad):
                n = rb.num_rows
                ks = np.arange(k, k + n, dtype=np.int64)
                adj = np.asarray(skips, dtype=np.int64) - np.arange(len(skips)) - 2
                line = ks + 2 + np.searchsorted(adj, ks, side="right")
                yield Batch(dict(zip(columns, rb.columns)), line, n)
                k += n
        except (pa.ArrowException, OSError, EOFError, ValueError) as exc:
            if seen_bad and not undecodable:
                raise RestartExact() from None
            if undecodable or "UTF8" in str(exc) or "UTF-8" in str(exc):
                exc = _utf8_error(src) or exc
            _cannot(col, "CSV", exc)


@contextlib.contextmanager
def _row_text_errors():
    """pyarrow decodes a malformed line as UTF-8 before it calls the handler and, when that
    fails, prints the error and stops the read: the file is not UTF-8, which is reported as
    such.  The list it yields is non-empty when that happened."""
    seen: list[int] = []
    old = sys.unraisablehook

    def hook(u) -> None:
        if isinstance(u.exc_value, UnicodeDecodeError):
            seen.append(1)
        else:
            old(u)

    sys.unraisablehook = hook
    try:
        yield seen
    finally:
        sys.unraisablehook = old


def _utf8_error(src: Source) -> UnicodeDecodeError | ValueError | None:
    """The first invalid UTF-8 byte of the (decompressed) file, as Python words it."""
    dec = codecs.getincrementaldecoder("utf-8")()
    opener = gzip.open if src.path.name.lower().endswith(".gz") else open
    offset = 0
    with opener(src.path, "rb") as fh:
        while chunk := fh.read(1 << 24):
            pending = len(dec.getstate()[0])
            try:
                dec.decode(chunk)
            except UnicodeDecodeError as e:
                a = offset - pending + e.start
                b = offset - pending + e.end
                where = (f"byte 0x{e.object[e.start]:02x} in position {a}" if b - a == 1
                         else f"bytes in position {a}-{b - 1}")
                return ValueError(f"'utf-8' codec can't decode {where}: {e.reason}")
            offset += len(chunk)
    return None
