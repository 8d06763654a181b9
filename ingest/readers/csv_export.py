"""Logger exports as delimited text (CSV, ``;`` or tab separated), optionally gzip-compressed.

``read_export(path, source)`` yields :class:`Chunk` objects of at most ``chunk_rows`` data
rows; memory stays bounded whatever the file size. The file layout comes from the site
config's ``[[sources]]`` entry: ``encoding`` (UTF-8 with or without BOM, UTF-16, Latin-1, ...),
``delimiter``, ``decimal``, ``skip_lines`` before the header line, an optional ``unit_row``
after it, and ``missing_values`` tokens. Gzip is recognised by its magic bytes, not the name.

Line numbers are physical lines of the file (1-based, ending at LF), so an error points at
the line a user sees in an editor. One record per line: quoted fields may hold the delimiter
but not a line break; a quote that does not close within its line, a carriage return inside a
line or a field longer than the csv module's limit rejects that line alone. Blank lines
(white space only, including form feed and no-break space) are not rows; they are counted.
Every physical line is accounted for: ``data_line`` lines before the data, then rows
(loaded, duplicate or rejected) and blank lines.

Timestamps are returned as text; :mod:`ingest.timestamps` interprets them (whether the logger
stamps the interval start or end is the source's ``timestamp.label``).

Parsing: each chunk is first parsed by pandas' C parser straight to float64 (the fast path).
If that fails (a value that is not a number, a line with the wrong number of fields) the
chunk is parsed again cell by cell with the :mod:`csv` module, so every bad cell is reported
with its line and column and the good cells of the same row are kept.
"""

from __future__ import annotations

import codecs
import csv
import gzip
import io
import os
import re
import zlib
from collections.abc import Iterator
from dataclasses import dataclass, field
from itertools import islice
from typing import Any, TextIO

import numpy as np
import pandas as pd

from ingest.config import QUANTITY_UNITS, ColumnMap, Source, normalise_unit
from ingest.errors import IngestError

#: Values per chunk (rows x mapped columns): bounds memory whatever the file's width or length.
CHUNK_VALUES = 400_000
_GZIP_MAGIC = b"\x1f\x8b"


@dataclass
class ExportMeta:
    path: str
    header: list[str]
    header_line: int
    ts_index: int
    columns: list[ColumnMap]  # mapped columns present in this file, in value order
    col_index: list[int]  # their positions in the header
    missing: list[str] = field(default_factory=list)  # configured headers absent from the file
    ignored: list[str] = field(default_factory=list)
    units_seen: dict[str, str] = field(default_factory=dict)  # header -> unit-row text
    compressed: bool = False
    encoding: str = "utf-8"
    long_index: dict[str, int] = field(default_factory=dict)  # long layout: role -> position
    data_line: int = 0  # physical lines before the first data line (skipped, header, unit row)
    lines_read: int = 0  # physical lines read so far
    blank_lines: int = 0  # blank (white-space only) data lines: not rows


@dataclass
class Chunk:
    line: np.ndarray  # int64 physical line number of each row
    ts_raw: np.ndarray  # object: timestamp text
    values: np.ndarray  # float64 (rows, columns) in the file's units; NaN = missing or bad
    bad_cells: list[tuple[int, int, str, str]]  # (row, column position in values, raw, reason)
    bad_rows: dict[int, str]  # row -> reason (whole row unusable, e.g. wrong field count)
    text: Any  # the raw line of each row, text[i] (for rejected rows)
    pos_bytes: int = 0  # bytes of the (compressed) file consumed so far
    long: dict[str, np.ndarray] | None = None  # long layout: "device", "quantity", "unit"


def read_export(path: str | os.PathLike, source: Source, chunk_rows: int | None = None
                ) -> tuple[ExportMeta, Iterator[Chunk]]:
    """Open an export and validate its header; return its meta and an iterator of chunks.

    ``chunk_rows`` defaults to :data:`CHUNK_VALUES` / (mapped columns), between 500 and 50 000.

    Raises :class:`IngestError` for a header that does not match the source, a decode error
    (with a hint naming the right ``encoding``) or an unreadable file.
    """
    path = os.fspath(path)
    try:
        fb = open(path, "rb")
    except OSError as exc:
        raise IngestError(path, None, None, f"cannot be read: {exc.strerror}") from None
    magic = fb.read(2)
    fb.seek(0)
    compressed = magic == _GZIP_MAGIC
    binary = gzip.GzipFile(fileobj=fb, mode="rb") if compressed else fb
    encoding = _python_encoding(source.encoding)
    if _ascii_compatible(encoding):
        text = _BinaryLines(binary, encoding)  # decodes line by line: exact error lines
    else:  # UTF-16/32: line breaks are not single bytes
        text = io.TextIOWrapper(binary, encoding=encoding, newline="\n")  # lines end at LF only
    meta, chunks = _parse(text, source, path, chunk_rows=chunk_rows,
                          position=fb.tell, on_close=fb.close, sniff=_sniff(path, compressed))
    meta.compressed = compressed
    return meta, chunks


def _python_encoding(name: str) -> str:
    n = codecs.lookup(name).name
    return "utf-8-sig" if n == "utf-8" else n  # tolerate a UTF-8 byte-order mark


def _ascii_compatible(encoding: str) -> bool:
    try:
        base = "utf-8" if encoding == "utf-8-sig" else encoding
        return "\n,;\t".encode(base) == b"\n,;\t"
    except (LookupError, UnicodeError):
        return False


class _BinaryLines:
    """Text lines from a binary stream, decoded one by one; ``n`` counts lines returned."""

    def __init__(self, binary, encoding: str):
        self.binary = binary
        self.first = encoding  # may be utf-8-sig: only the first line carries a BOM
        self.encoding = "utf-8" if encoding == "utf-8-sig" else encoding
        self.n = 0

    def readline(self) -> str:
        raw = self.binary.readline()
        if not raw:
            return ""
        s = raw.decode(self.first if self.n == 0 else self.encoding)
        self.n += 1
        return s

    def read_block(self, n: int) -> tuple[str, int]:
        """Up to ``n`` lines as one string (decoded at once; line by line to locate an error)."""
        raw = list(islice(self.binary, n))
        if not raw:
            return "", 0
        try:
            text = b"".join(raw).decode(self.encoding)
        except UnicodeDecodeError:
            for line in raw:
                line.decode(self.encoding)  # raises for the first bad line
                self.n += 1
            raise
        self.n += len(raw)
        return text, len(raw)


def _sniff(path: str, compressed: bool) -> bytes:
    try:
        with (gzip.open if compressed else open)(path, "rb") as f:
            return f.read(4)
    except (OSError, EOFError, zlib.error):  # damaged gzip: reading the file reports it
        return b""


def _decode_error(path: str, line: int, source: Source, exc: UnicodeError, sniff: bytes,
                  exact: bool = True) -> IngestError:
    if isinstance(exc, UnicodeDecodeError):
        what = (f"cannot be decoded as {source.encoding} ({exc.reason}, byte "
                f"{exc.object[exc.start:exc.start + 1]!r})" + ("" if exact else " at or after this line"))
    else:  # e.g. "UTF-16 stream does not start with BOM"
        what = f"cannot be decoded as {source.encoding}: {exc}"
    hint = _decode_hint(source, sniff)
    if "BOM" in str(exc):
        hint = ('the file has no byte-order mark: set encoding = "utf-16-le" (or "utf-16-be") '
                "in its [[sources]] entry")
    return IngestError(path, line, None, what, hint)


def _decode_hint(source: Source, head: bytes) -> str:
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        return 'the file starts with a UTF-16 byte-order mark: set encoding = "utf-16" in its [[sources]] entry'
    if source.encoding.lower().replace("-", "") in ("utf8", "utf8sig"):
        return ('set encoding = "latin-1" (or the logger\'s code page, e.g. "cp1252") '
                "in its [[sources]] entry")
    return "set encoding in its [[sources]] entry to the encoding the logger writes"


def _why(exc: BaseException) -> str:
    text = str(exc) or type(exc).__name__
    if isinstance(exc, EOFError):
        return f"the file ends early ({text})"
    return text


def split_line(line: str, delimiter: str) -> tuple[list[str] | None, str | None]:
    """The fields of one physical line, or (None, why it cannot be split).

    A quoted field must close within the line: a record never continues on the next line,
    so a stray quote costs one rejected line, never the lines after it.
    """
    if '"' not in line and "\r" not in line:
        return line.split(delimiter), None
    try:
        return next(csv.reader([line], delimiter=delimiter, strict=True), []), None
    except csv.Error as exc:
        msg = str(exc)
        if "field larger than field limit" in msg:
            return None, f"a field is longer than {csv.field_size_limit()} characters"
        if "new-line character" in msg:
            return None, "a carriage return (CR) inside the line"
        if "unexpected end of data" in msg or "EOF" in msg:
            return None, "a quote (\") opens a field that does not close within the line"
        return None, f"the line cannot be split into fields ({msg})"


def _split(line: str, delimiter: str) -> list[str]:
    """Fields of a line; a line csv cannot split is split at every delimiter."""
    fields, _why_not = split_line(line, delimiter)
    return fields if fields is not None else line.split(delimiter)


def _parse(buf: TextIO, source: Source, path: str = "<buffer>", *, chunk_rows: int | None = None,
           position=None, on_close=None, sniff: bytes = b"") -> tuple[ExportMeta, Iterator[Chunk]]:
    """Parse a text buffer holding an export (tests feed :class:`io.StringIO`)."""
    lineno = 0

    def readline() -> str:
        nonlocal lineno
        try:
            s = buf.readline()
        except (EOFError, OSError, zlib.error) as exc:
            raise IngestError(path, lineno + 1, None, f"cannot be read: {_why(exc)}",
                              "the file may be truncated or damaged; export it again") from None
        except UnicodeError as exc:
            raise _decode_error(path, getattr(buf, "n", lineno) + 1, source, exc, sniff) from None
        if s:
            lineno += 1
        return s

    try:
        for _ in range(source.skip_lines):
            if not readline():
                raise IngestError(path, lineno, None,
                                  f"file ends within the {source.skip_lines} lines to skip "
                                  "before the header (skip_lines)")
        head = readline()
        while head and not head.strip():
            head = readline()
        if not head:
            raise IngestError(path, lineno or 1, None, "file is empty: expected a header line")
        header_line = lineno
        fields, why = split_line(head.rstrip("\r\n"), source.delimiter)
        if fields is None:
            raise IngestError(path, header_line, None, f"header line: {why}")
        header = [h.strip().lstrip("\ufeff") for h in fields]
        units_row: list[str] = []
        if source.unit_row:
            u = readline()
            units_row = [x.strip() for x in _split(u.rstrip("\r\n"), source.delimiter)]
        meta = _map_header(path, source, header, header_line, units_row, lineno)
    except BaseException:
        if on_close:
            on_close()
        raise
    meta.encoding = source.encoding
    meta.data_line = meta.lines_read = lineno
    if chunk_rows is None:
        chunk_rows = min(50_000, max(500, CHUNK_VALUES // max(1, len(meta.columns) or 1)))
    return meta, _chunks(buf, source, path, meta, lineno, chunk_rows, position, on_close, sniff)


def _map_header(path: str, source: Source, header: list[str], header_line: int,
                units_row: list[str], unit_line: int) -> ExportMeta:
    ts_col = source.timestamp.column
    dup = sorted({h for h in header if h and header.count(h) > 1})
    if dup:
        raise IngestError(path, header_line, None,
                          f"header names {', '.join(map(repr, dup))} more than once; "
                          "each column needs a distinct name")
    if ts_col not in header:
        raise IngestError(path, header_line, None,
                          f"no timestamp column {ts_col!r}; the header has: {_list(header)}",
                          "set timestamp.column in its [[sources]] entry (check delimiter too: "
                          f"{source.delimiter!r})")
    pos = {h: i for i, h in enumerate(header)}
    meta = ExportMeta(path=path, header=header, header_line=header_line, ts_index=pos[ts_col],
                      columns=[], col_index=[])
    if source.layout == "long":
        ls = source.long
        roles = {"device": ls.device_column, "quantity": ls.quantity_column,
                 "value": ls.value_column}
        if ls.unit_column:
            roles["unit"] = ls.unit_column
        absent = [c for c in roles.values() if c not in pos]
        if absent:
            raise IngestError(path, header_line, None,
                              f"long layout: missing columns {_list(absent)}; the header has: "
                              f"{_list(header)}", "set [sources.long] *_column names")
        meta.long_index = {r: pos[c] for r, c in roles.items()}
        return meta
    configured = {c.header for c in source.columns}
    meta.columns = [c for c in source.columns if c.header in pos]
    meta.col_index = [pos[c.header] for c in meta.columns]
    meta.missing = [c.header for c in source.columns if c.header not in pos]
    ignore = set(source.ignore_columns)
    meta.ignored = [h for h in header if h in ignore]
    unmapped = [h for h in header if h and h != ts_col and h not in configured and h not in ignore]
    if unmapped or not meta.columns:
        parts = []
        if unmapped:
            parts.append(f"unmapped columns: {_list(unmapped)}")
        if meta.missing:
            parts.append(f"configured but missing: {_list(meta.missing)}")
        raise IngestError(path, header_line, None,
                          "columns do not match the site config (" + "; ".join(parts) + ")",
                          "map each column in [[sources.columns]] (header, device, quantity, unit) "
                          "or list it in ignore_columns")
    if units_row:
        for c, i in zip(meta.columns, meta.col_index, strict=True):
            cell = units_row[i] if i < len(units_row) else ""
            meta.units_seen[c.header] = cell
            said = normalise_unit(re.sub(r"^[\[(]|[\])]$", "", cell))
            if said in QUANTITY_UNITS.get(c.quantity, ()) and said != c.unit:
                raise IngestError(path, unit_line, c.header,
                                  f"the unit row says {cell!r} but the site config says "
                                  f"unit = {c.unit!r}",
                                  "fix the unit of this column in [[sources.columns]]")
    return meta


def _list(names: list[str], limit: int = 12) -> str:
    shown = ", ".join(repr(n) for n in names[:limit])
    return shown + (f" and {len(names) - limit} more" if len(names) > limit else "")


#: A blank line: nothing but white space (str.isspace: spaces, tabs, CR, form feed, vertical
#: tab, no-break space, ...). Blank lines are not rows; they are counted (``meta.blank_lines``).
_BLANK = re.compile(r"^[^\S\n]*$", re.M)


class _Lines:
    """The raw lines of a block, split only when a rejected row needs its text."""

    def __init__(self, block: str | None = None, lines: list[str] | None = None):
        self._block, self._lines = block, lines

    def __getitem__(self, i: int) -> str:
        if self._lines is None:
            self._lines = self._block[:-1].split("\n")
        return self._lines[i].rstrip("\r\n")

    def __len__(self) -> int:
        return len(self._lines) if self._lines is not None else self._block.count("\n")


def _read_block(buf, n: int) -> tuple[str, int]:
    if hasattr(buf, "read_block"):
        return buf.read_block(n)
    lines = list(islice(buf, n))
    return "".join(lines), len(lines)


def _chunks(buf: TextIO, source: Source, path: str, meta: ExportMeta, lineno: int,
            chunk_rows: int, position, on_close, sniff: bytes) -> Iterator[Chunk]:
    ncols = len(meta.header)
    try:
        while True:
            try:
                block, nlines = _read_block(buf, chunk_rows)
            except (EOFError, OSError, zlib.error) as exc:
                raise IngestError(path, lineno + 1, None, f"cannot be read: {_why(exc)}",
                                  "the file may be truncated or damaged; export it again") from None
            except UnicodeError as exc:
                exact = getattr(buf, "n", None)
                raise _decode_error(path, (exact if exact is not None else lineno) + 1, source,
                                    exc, sniff, exact is not None) from None
            if not nlines:
                return
            first = lineno + 1
            lineno += nlines
            if not block.endswith("\n"):
                block += "\n"
            meta.lines_read = lineno
            if _BLANK.search(block[:-1]) is None:
                line_no = first + np.arange(nlines, dtype=np.int64)
                chunk = _fast(block, nlines, source, meta, ncols)
                lines = _Lines(block=block)
                if chunk is None:
                    chunk = _slow([lines[i] for i in range(nlines)], source, meta, ncols)
            else:  # blank lines are not rows: drop them, keep the physical line numbers
                raw = block[:-1].split("\n")
                keep = [i for i, x in enumerate(raw) if x.strip()]
                meta.blank_lines += len(raw) - len(keep)
                if not keep:
                    continue
                text = [raw[i].rstrip("\r") for i in keep]
                line_no = first + np.asarray(keep, dtype=np.int64)
                lines = _Lines(lines=text)
                chunk = _fast("\n".join(text) + "\n", len(text), source, meta, ncols)
                if chunk is None:
                    chunk = _slow(text, source, meta, ncols)
            chunk.line = line_no
            chunk.text = lines
            chunk.pos_bytes = position() if position else 0
            yield chunk
    finally:
        if on_close:
            on_close()


def _value_positions(meta: ExportMeta) -> list[int]:
    return [meta.long_index["value"]] if meta.long_index else meta.col_index


_NAN = re.compile(r"(?i)(?<![^\s,;|\"])[+-]?nan(?![^\s,;|\"])")
_EMPTY_FIELD = {d: re.compile(rf"(?:^|{re.escape(d)})[ ]*(?:{re.escape(d)}|\r?$)", re.M)
                for d in (",", ";", "\t", "|")}


def _nan_spellings(block: str, delimiter: str) -> set[str]:
    """Whole fields spelling NaN in any case (``nan``, ``NAN``, ``-nan``), as written."""
    if "n" not in block and "N" not in block:
        return set()
    return {m.group(0) for m in _NAN.finditer(block)}


def _fast(block: str, nlines: int, source: Source, meta: ExportMeta, ncols: int) -> Chunk | None:
    """pandas C parser straight to float64. Field counts: the total delimiter count must be
    (columns − 1) × lines, and pandas raises on a line with too many fields, so together no
    line can have too few. Anything unusual returns None (the caller parses cell by cell)."""
    d = source.delimiter
    if block.count(d) != (ncols - 1) * nlines:
        return None
    if _nan_spellings(block, d) - set(source.missing_values):
        return None  # a NaN spelling that is not a configured missing value: reject it cell by cell
    if "" not in source.missing_values and _EMPTY_FIELD[d].search(block):
        return None  # an empty field is not "missing" unless configured so
    vpos = _value_positions(meta)
    str_pos = [meta.ts_index] + [p for r, p in meta.long_index.items() if r != "value"]
    dtype = {p: "float64" for p in vpos} | {p: object for p in str_pos}
    try:
        df = pd.read_csv(io.StringIO(block), sep=d, header=None, usecols=str_pos + vpos,
                         dtype=dtype, na_values=list(source.missing_values),
                         keep_default_na=False, decimal=source.decimal, engine="c",
                         skip_blank_lines=False, quoting=csv.QUOTE_MINIMAL)
    except ValueError:  # a cell that is not a number: only its own column is coerced
        return _fast_by_column(block, nlines, source, meta, str_pos, vpos)
    except pd.errors.ParserError:
        return None
    if len(df) != nlines:
        return None
    values = df[vpos].to_numpy(dtype=np.float64) if vpos else np.empty((len(df), 0))
    ts = df[meta.ts_index].to_numpy(dtype=object)
    long = None
    if meta.long_index:
        long = {r: df[p].to_numpy(dtype=object) for r, p in meta.long_index.items() if r != "value"}
    return Chunk(line=np.empty(0), ts_raw=ts, values=values, bad_cells=[], bad_rows={}, text=[],
                 long=long)


def _fast_by_column(block: str, nlines: int, source: Source, meta: ExportMeta,
                    str_pos: list[int], vpos: list[int]) -> Chunk | None:
    """The C parser to text, then each value column to float64 on its own: a column whose
    cells all parse is converted at once, and only a column with a bad cell is coerced cell
    by cell (:func:`_coerce_column`) with each bad cell reported (issue #16: one bad cell
    sent its whole chunk to the Python parser)."""
    try:
        df = pd.read_csv(io.StringIO(block), sep=source.delimiter, header=None,
                         usecols=str_pos + vpos, dtype=object, na_filter=False,
                         engine="c", skip_blank_lines=False, quoting=csv.QUOTE_MINIMAL)
    except (ValueError, pd.errors.ParserError):
        return None
    if len(df) != nlines:
        return None
    values = np.full((nlines, len(vpos)), np.nan)
    bad_cells: list[tuple[int, int, str, str]] = []
    for j, p in enumerate(vpos):
        raw = df[p].to_numpy(dtype=object)
        txt = raw.astype(str)
        plain = True  # a '.' where ',' is the decimal separator is an error: coerce
        if source.decimal == ",":
            plain = not (np.char.find(txt, ".") >= 0).any()
            txt = np.char.replace(txt, ",", ".") if plain else txt
        if plain:
            try:
                values[:, j] = txt.astype(np.float64)
                continue
            except ValueError:
                pass
        values[:, j], bad = _coerce_column(raw, source)
        bad_cells += [(r, j, text, why) for r, text, why in bad]
    ts = df[meta.ts_index].to_numpy(dtype=object)
    long = None
    if meta.long_index:
        long = {r: df[p].to_numpy(dtype=object) for r, p in meta.long_index.items() if r != "value"}
    return Chunk(line=np.empty(0), ts_raw=ts, values=values, bad_cells=bad_cells, bad_rows={},
                 text=[], long=long)


def _coerce_column(raw: np.ndarray, source: Source, skip_rows=()) -> tuple[np.ndarray, list]:
    """One column of cell texts to float64: missing-value tokens -> NaN, anything else that
    is not a number (in the source's decimal separator) -> NaN and reported as
    ``(row, text, reason)``; rows in ``skip_rows`` are not reported."""
    missing = set(source.missing_values)
    dec = source.decimal
    stripped = np.array([s.strip() for s in raw], dtype=object)
    is_missing = np.array([s in missing for s in stripped], dtype=bool)
    norm = stripped
    if dec == ",":
        has_dot = np.array(["." in s for s in stripped], dtype=bool)
        norm = np.array([s.replace(",", ".") for s in stripped], dtype=object)
        norm[has_dot] = "x"  # a '.' where ',' is the decimal separator is an error
    num = pd.to_numeric(pd.Series(norm, dtype=object).where(~is_missing, None),
                        errors="coerce").to_numpy(dtype=np.float64, copy=True)
    bad = ~is_missing & np.isnan(num)  # NaN spellings count as missing only if configured
    for r in skip_rows:
        bad[r] = False
    num[bad] = np.nan
    tokens = ", ".join(repr(m) for m in [x for x in source.missing_values if x][:4])
    return num, [(int(r), str(raw[r]),
                  f"value {str(raw[r])!r} is not a number (expected decimal separator "
                  f"{dec!r}, or a missing-value token such as {tokens})")
                 for r in np.flatnonzero(bad)]


def _slow(text: list[str], source: Source, meta: ExportMeta, ncols: int) -> Chunk:
    vpos = _value_positions(meta)
    n = len(text)
    bad_rows: dict[int, str] = {}
    cells = np.full((n, ncols), "", dtype=object)
    for r, line in enumerate(text):  # one physical line at a time: nothing spans lines
        row, why = split_line(line, source.delimiter)
        if row is None:
            bad_rows[r] = why
        elif len(row) != ncols:
            bad_rows[r] = f"line has {len(row)} fields, the header has {ncols}"
        else:
            cells[r] = row
    values = np.full((n, len(vpos)), np.nan)
    bad_cells: list[tuple[int, int, str, str]] = []
    for j, p in enumerate(vpos):
        values[:, j], bad = _coerce_column(cells[:, p], source, skip_rows=bad_rows)
        bad_cells += [(r, j, text, why) for r, text, why in bad]
    long = None
    if meta.long_index:
        long = {r: cells[:, p].copy() for r, p in meta.long_index.items() if r != "value"}
    return Chunk(line=np.empty(0), ts_raw=cells[:, meta.ts_index].copy(), values=values,
                 bad_cells=bad_cells, bad_rows=bad_rows, text=[], long=long)
