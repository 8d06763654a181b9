"""Load logger exports into the store: one transaction per file, every row accounted for.

:func:`ingest_paths` takes a site config and files or folders; :func:`ingest_file` loads one
file. The rules (docs/config.md "Ingest rules"):

* **Atomic per file.** A file is read and written inside one transaction; any error rolls it
  back and the store is as before the file. The ``failed`` batch row with the message is
  written afterwards in a transaction of its own.
* **Idempotent.** A file whose SHA-256 matches a loaded batch of the same site is not read
  again; a batch row with status ``unchanged`` records the attempt.
* **Last file loaded wins.** Readings are upserted on ``(channel_id, ts_s)``. Where stored
  data overlaps the file, incoming values are compared with what is stored: equal values
  count as ``values_duplicate`` (and are not rewritten), different ones as ``values_conflict``
  (overwritten). A fresh load with no overlap skips the comparison.
* **Row accounting.** ``rows_read == rows_loaded + rows_duplicate + rows_rejected``:
  - *rejected*: the row's timestamp is bad (does not parse, does not exist in local time,
    ambiguous under ``ambiguous = "reject"``, interval length unknown), the line has the wrong
    number of fields, it repeats an interval already in the same file with different values,
    or it has no usable value (all missing or all rejected);
  - *loaded*: at least one good value is new or changed; bad values of the row are counted in
    ``values_rejected`` and kept in ``rejected_row`` with their column;
  - *duplicate*: every good value equals what is stored (or an earlier identical row of the file).
  Every rejected row or value is stored in ``rejected_row`` with line, column, reason and text.
* **Counters.** ``e_ac_total_kwh`` columns are stored as read and also turned into interval
  energy ``e_ac_kwh`` (:mod:`ingest.counters`); derived values are counted in the notes,
  not in the ``values_*`` counts, which count values read from the file.
"""

from __future__ import annotations

import fnmatch
import hashlib
import os
import time
from collections import Counter
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import sqlalchemy as sa

from db import ingest_log, readings
from db.engine import is_busy
from db.registry import register_site
from ingest.config import SiteConfig, Source, normalise_unit
from ingest.counters import CounterEvents, counter_resolution, interval_energy, is_coarse
from ingest.errors import IngestError, Rejected
from ingest.readers.csv_export import Chunk, _split, read_export
from ingest.timestamps import NAT, TimestampConverter, describe_intervals, infer_intervals
from ingest.units import POWER_MAX_FACTOR, implausible, to_stored

CONTEXT = 3  # labels of the neighbouring chunks used to infer intervals at chunk edges


@dataclass
class BatchResult:
    """What happened to one file (also the row written to ``ingest_batch``)."""

    path: str
    site_id: str
    source_name: str | None
    status: str  # loaded | unchanged | failed
    batch_id: int | None = None
    message: str | None = None
    counts: dict = field(default_factory=dict)
    ts_first_s: int | None = None
    ts_last_s: int | None = None
    interval_s: str | None = None
    notes: dict = field(default_factory=dict)
    touched: tuple[int, int] | None = None  # min/max ts_s of readings written (for recompute)

    @property
    def file_name(self) -> str:
        return os.path.basename(self.path)


def file_sha256(path: str | os.PathLike) -> tuple[str, int]:
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as f:
        while block := f.read(1 << 20):
            h.update(block)
            size += len(block)
    return h.hexdigest(), size


def match_source(cfg: SiteConfig, path: str | os.PathLike) -> Source | None:
    """The first source whose ``pattern`` matches the file name (or its path relative to the config)."""
    p = Path(path)
    for src in cfg.sources:
        try:
            if fnmatch.fnmatch(p.name, Path(src.pattern).name) or p.match(src.pattern):
                return src
        except ValueError:  # a pattern pathlib cannot match (the config check rejects these)
            continue
    return None


def search_folder(cfg: SiteConfig, src: Source) -> tuple[Path, bool]:
    """The folder a source's pattern is searched in, and whether it was configured explicitly
    (``folder``: absolute, or relative to the config's folder). Default: the config's folder."""
    base = Path(cfg.path).parent if cfg.path else Path(".")
    if src.folder:
        return (base / Path(src.folder).expanduser()), True
    return base, False


def _inside(f: Path, root: Path) -> bool:
    """Whether ``f`` (symlinks resolved) lies inside ``root`` (resolved)."""
    try:
        return f.resolve().is_relative_to(root.resolve())
    except (OSError, RuntimeError):
        return False


def discover(cfg: SiteConfig, paths: Iterable[str | os.PathLike] | None = None
             ) -> list[tuple[Path, Source | None]]:
    """Files to load, in name order: given files, folders searched with each source's pattern;
    with no paths, each source's pattern in its search folder (:func:`search_folder`).

    A pattern never leads out of the folder it searches: a match that is (or goes through) a
    symbolic link to a file outside that folder is left out. Files named explicitly are
    taken as given."""
    found: dict[Path, Source | None] = {}
    paths = list(paths or [])

    def add(root: Path, hits: Iterable[Path], src: Source) -> None:
        for f in sorted(hits):
            if f.is_file() and _inside(f, root):
                found.setdefault(f, src)

    if not paths:
        for src in cfg.sources:
            root, _explicit = search_folder(cfg, src)
            add(root, _glob(root, src.pattern), src)
    for p in map(Path, paths):
        if p.is_dir():
            for src in cfg.sources:  # the pattern relative to the folder, else its file part
                hits = _glob(p, src.pattern) or _glob(p, Path(src.pattern).name)
                add(p, hits, src)
        else:
            found.setdefault(p, match_source(cfg, p))
    return sorted(found.items(), key=lambda kv: (kv[0].name, str(kv[0])))


def _glob(root: Path, pattern: str) -> list[Path]:
    try:
        return sorted(root.glob(pattern))
    except (ValueError, NotImplementedError, OSError):  # the config check rejects such patterns
        return []


def ingest_paths(engine: sa.Engine, cfg: SiteConfig, paths: Iterable | None = None, *,
                 progress: Callable[[int], None] | None = None,
                 on_file: Callable[[BatchResult], None] | None = None) -> list[BatchResult]:
    """Register the site from ``cfg`` and load every file; return one result per file."""
    channels = register_site(engine, cfg)
    results = []
    for path, src in discover(cfg, paths):
        if src is None:
            msg = IngestError(path, None, None, "matches no [[sources]] pattern of the site config "
                              f"({', '.join(repr(s.pattern) for s in cfg.sources)})").render()
            res = BatchResult(path=str(path), site_id=cfg.id, source_name=None, status="failed",
                              message=msg)
        else:
            res = ingest_file(engine, cfg, src, path, channels, progress=progress)
        results.append(res)
        if on_file:
            on_file(res)
    return results


def touched_ranges(results: Iterable[BatchResult]) -> dict[str, tuple[int, int]]:
    """Per site, min and max ``ts_s`` of the readings written by these batches."""
    out: dict[str, tuple[int, int]] = {}
    for r in results:
        if r.status == "loaded" and r.touched:
            lo, hi = out.get(r.site_id, r.touched)
            out[r.site_id] = (min(lo, r.touched[0]), max(hi, r.touched[1]))
    return out


def ingest_file(engine: sa.Engine, cfg: SiteConfig, source: Source, path: str | os.PathLike,
                channels: dict[tuple[str, str], int] | None = None, *,
                progress: Callable[[int], None] | None = None, chunk_rows: int | None = None
                ) -> BatchResult:
    """Load one file in one transaction (see the module docstring for the rules)."""
    path = str(path)
    if channels is None:
        channels = register_site(engine, cfg)
    try:
        sha, size = file_sha256(path)
    except OSError as exc:
        return BatchResult(path=path, site_id=cfg.id, source_name=source.name, status="failed",
                           message=IngestError(path, None, None,
                                               f"cannot be read: {exc.strerror}").render())
    fields = dict(site_id=cfg.id, source_name=source.name, file_name=os.path.basename(path),
                  file_path=os.path.abspath(path), sha256=sha, size_bytes=size)
    for attempt in range(BUSY_RETRIES + 1):
        try:
            return _load_once(engine, cfg, source, path, channels, fields, progress, chunk_rows)
        except sa.exc.OperationalError as exc:
            if not is_busy(exc) or attempt == BUSY_RETRIES:
                raise
            time.sleep(min(30.0, 0.5 * 2 ** attempt))  # another writer holds the store
    raise AssertionError("unreachable")


#: How often a file is tried again when another process holds SQLite's write lock longer
#: than the busy timeout (30 s each): about ten minutes in all.
BUSY_RETRIES = 12


def _load_once(engine, cfg, source, path, channels, fields, progress, chunk_rows) -> BatchResult:
    sha = fields["sha256"]
    try:
        with engine.begin() as conn:
            # The duplicate check runs inside the file's transaction, under a lock on the
            # file's content: two processes loading the same file at once load it once.
            ingest_log.lock_file(conn, cfg.id, sha)
            prev = ingest_log.loaded_batch_with_sha(conn, cfg.id, sha)
            if prev is not None:
                msg = f"same content (SHA-256) as batch {prev}; nothing to do"
                bid = ingest_log.start_batch(conn, status="unchanged", message=msg, **fields)
                ingest_log.finish_batch(conn, bid, status="unchanged", counts={},
                                        ts_first_s=None, ts_last_s=None, interval_s=None,
                                        notes={}, message=msg)
                if progress:
                    progress(fields["size_bytes"])
                return BatchResult(path=path, site_id=cfg.id, source_name=source.name,
                                   status="unchanged", batch_id=bid, message=msg)
            ingest_log.lock_site_readings(conn, cfg.id)
            bid = ingest_log.start_batch(conn, **fields)
            fl = _FileLoader(conn, cfg, source, path, channels, bid, progress)
            fl.run(chunk_rows)
            res = fl.result()
            ingest_log.add_rejected(conn, bid, fl.rejected)
            ingest_log.finish_batch(conn, bid, status="loaded", counts=res.counts,
                                    ts_first_s=res.ts_first_s, ts_last_s=res.ts_last_s,
                                    interval_s=res.interval_s, notes=res.notes)
        return res
    except IngestError as exc:
        msg = exc.render()
        bid = ingest_log.record_batch(engine, status="failed", message=msg, **fields)
        return BatchResult(path=path, site_id=cfg.id, source_name=source.name, status="failed",
                           batch_id=bid, message=msg)
    except sa.exc.SQLAlchemyError:
        raise  # the store failed (or is busy): the caller reports it; nothing was written
    except Exception as exc:  # a bug: record it and report it as this file's failure
        msg = (f"{os.path.basename(path)}: internal error {type(exc).__name__}: {exc} "
               "(a bug in heliaudit: please report it with this file)")
        bid = ingest_log.record_batch(engine, status="failed", message=msg, **fields)
        return BatchResult(path=path, site_id=cfg.id, source_name=source.name, status="failed",
                           batch_id=bid, message=msg)


@dataclass
class _VCol:
    """A value column: a header of a wide file, or a (device, quantity name) of a long file."""

    name: str
    device: str
    quantity: str
    unit: str
    channel: int
    p_ac_max_kw: float | None
    p_dc_kwp: float | None
    instant: bool = False  # an instantaneous sample: keyed by the label time itself
    input_id: str = ""  # an inverter input (MPPT / string group): DC limits from its own kWp
    group: int = 0  # clock-correction group (0: the corrections that apply to every column)


class _FileLoader:
    def __init__(self, conn: sa.Connection, cfg: SiteConfig, source: Source, path: str,
                 channels: dict, batch_id: int, progress):
        self.conn, self.cfg, self.source, self.path = conn, cfg, source, path
        self.channels, self.batch_id, self.progress = channels, batch_id, progress
        every = tuple(c for c in source.clock_corrections if getattr(c, "everywhere", True))
        self.conv = TimestampConverter(source.timestamp, cfg.timezone, every)
        # per-device corrections: one converter per set of corrections a column gets
        self.group_keys: dict[tuple[int, ...], int] = {(): 0}
        self.group_convs: list[TimestampConverter | None] = [None]
        # offsets or not: decided once per source (its earlier files), else at this file's first row
        self.source_offsets = (ingest_log.source_timestamp_offsets(conn, cfg.id, source.name)
                               if source.timestamp.format == "iso8601" else None)
        self._source_offsets(self.conv)
        self.counts = Counter()
        self.rejected: list[Rejected] = []
        self.intervals: list[np.ndarray] = []
        self.steps: Counter = Counter()  # steps between distinct labels: the file's nominal interval
        self.first = self.last = None
        self.written: tuple[int, int] | None = None
        self.stored: dict[int, tuple[int, int] | None] = {}  # channel -> stored (lo, hi), lazily
        self.counter_prev: dict[str, tuple[int, float] | None] = {}
        self.counter_events: dict[str, CounterEvents] = {}
        self.counter_res: dict[str, float | None] = {}  # measured counter resolution [kWh]
        self.counter_info: dict[str, dict] = {}
        self.derived = Counter()
        self.vcols: list[_VCol] = []
        self.vcol_index: dict[tuple[str, str], int] = {}
        self.pos = 0

    # ------------------------------------------------------------ set-up
    def _vcol(self, name: str, device: str, quantity: str, unit: str, sampling: str = "mean",
              input_id: str = "") -> int:
        k = (name, unit)
        if k not in self.vcol_index:
            inv = self.cfg.inverter(device) if self.cfg.device_kind(device) == "inverter" else None
            ch = self.channels.get((device, quantity, input_id) if input_id else (device, quantity))
            if ch is None:
                raise IngestError(self.path, None, name, f"no channel for device {device!r} "
                                  f"quantity {quantity}; the site config does not deliver it")
            self.vcol_index[k] = len(self.vcols)
            kwp = inv.p_dc_kwp if inv else None
            if inv and input_id:  # an input's DC limits from its own declared capacity (#11)
                kwp = next((a.p_dc_kwp for a in inv.arrays if str(a.id) == input_id), kwp)
            self.vcols.append(_VCol(name, device, quantity, unit, ch,
                                    inv.p_ac_max_kw if inv else None, kwp,
                                    instant=sampling == "instant", input_id=input_id,
                                    group=self._group(device, name)))
        return self.vcol_index[k]

    def _group(self, device: str, header: str) -> int:
        """The clock-correction group of a column: which device-specific corrections apply."""
        own = tuple(n for n, c in enumerate(self.source.clock_corrections)
                    if not getattr(c, "everywhere", True) and c.applies_to(device, header))
        if own not in self.group_keys:
            corr = self.source.clock_corrections
            self.group_keys[own] = len(self.group_convs)
            self.group_convs.append(self._source_offsets(TimestampConverter(
                self.source.timestamp, self.cfg.timezone,
                tuple(c for n, c in enumerate(corr) if getattr(c, "everywhere", True) or n in own))))
        return self.group_keys[own]

    def _source_offsets(self, conv: TimestampConverter) -> TimestampConverter:
        """Give a converter the source's offset / no-offset decision (iso8601; None: undecided)."""
        if getattr(self, "source_offsets", None) is not None:
            conv.offsets = self.source_offsets
            conv.offsets_from = "earlier files of this source"
        return conv

    def run(self, chunk_rows: int | None) -> None:
        kw = {"chunk_rows": chunk_rows} if chunk_rows else {}
        meta, chunks = read_export(self.path, self.source, **kw)
        self.meta = meta
        for c in meta.columns:
            self._vcol(c.header, c.device, c.quantity, c.unit, getattr(c, "sampling", "mean"),
                       getattr(c, "input", ""))
        it = ((ch, *self.conv.convert(ch.ts_raw)) for ch in chunks)
        cur = next(it, None)
        tail = np.empty(0, dtype=np.int64)
        while cur is not None:
            nxt = next(it, None)
            head = np.unique(nxt[1][nxt[1] != NAT])[:CONTEXT] if nxt else np.empty(0, np.int64)
            own = np.unique(cur[1][cur[1] != NAT])
            self._chunk(*cur, tail, head)
            tail = own[-CONTEXT:]
            if self.progress:
                self.progress(cur[0].pos_bytes - self.pos)
                self.pos = cur[0].pos_bytes
            cur = nxt
        read = self.counts["rows_read"]
        accounted = self.counts["rows_loaded"] + self.counts["rows_duplicate"] + self.counts["rows_rejected"]
        assert read == accounted, f"row accounting broken: {read} read, {accounted} accounted"
        lines = meta.data_line + read + meta.blank_lines
        assert lines == meta.lines_read, (f"line accounting broken: {meta.lines_read} lines, "
                                          f"{lines} accounted")
        self._counter_boundaries()

    # ------------------------------------------------------------ one chunk
    def _chunk(self, ch: Chunk, labels: np.ndarray, reasons: np.ndarray, tail, head) -> None:
        n = len(labels)
        self.counts["rows_read"] += n
        row_reason: dict[int, str] = dict(ch.bad_rows)
        for i in np.flatnonzero(reasons != None):  # noqa: E711 - object array compare
            row_reason.setdefault(int(i), reasons[i])
        ok = labels != NAT
        for r in row_reason:
            ok[r] = False
        # interval of each row, from the distinct labels with the neighbouring chunks' edges
        u = np.unique(np.concatenate([tail, labels[ok], head]))
        step = np.diff(u)
        self.steps.update(step[step > 0].tolist())
        nominal = float(max(self.steps.items(), key=lambda kv: (kv[1], -kv[0]))[0]) \
            if self.steps else None
        iv_u = infer_intervals(u, self.source.timestamp.label, nominal)
        own = np.unique(labels[ok])
        labels_unique = len(own) == int(ok.sum())  # no label repeats among the usable rows
        if len(own):
            self.intervals.append(iv_u[np.searchsorted(u, own)])
        iv = np.full(n, np.nan)
        iv[ok] = iv_u[np.searchsorted(u, labels[ok])]
        end_label = self.source.timestamp.label == "end"
        for r in np.flatnonzero(ok & np.isnan(iv)):
            if end_label:
                row_reason[int(r)] = ("cannot tell the interval length: no neighbouring "
                                      "timestamp (interval-end labels need at least two rows)")
                ok[r] = False
        ts = np.where(ok, labels - (np.nan_to_num(iv).astype(np.int64) if end_label else 0), NAT)
        for r in np.flatnonzero(ok & ((ts < 0) | (ts >= 1 << readings.TS_BITS))):
            row_reason[int(r)] = "timestamp outside the years 1970..2514"
            ok[r] = False

        # entries: one per value cell, in value-column-major order
        e_row, e_col, e_val, bad = self._entries(ch, ok, iv)
        e_ts, e_row, e_col, e_val = self._entry_times(ch, labels, ts, iv, e_row, e_col, e_val, bad)
        # in-chunk repeated intervals: identical -> duplicate, different -> reject the later row
        e_ch = np.array([self.vcols[j].channel for j in range(len(self.vcols))], dtype=np.int64)
        ekey = readings.key(e_ch[e_col], e_ts) if len(e_row) else np.empty(0, np.int64)
        status = np.zeros(len(e_row), dtype=np.int8)  # 0 new, 1 duplicate, 2 conflict
        shifted = any(vc.group for vc in self.vcols)  # per-device shifts may make keys collide
        unique_rows = ch.long is None and labels_unique and not shifted
        conflict_rows = {} if unique_rows else self._in_chunk_duplicates(
            ekey, e_row, e_val, status, ch.line, ts)
        for r, why in conflict_rows.items():
            row_reason.setdefault(r, why)
            ok[r] = False
        # compare with stored readings where they overlap this chunk
        derived = self._counters(ch, ok, e_ts, iv, e_row, e_col, e_val, ekey, status)
        d_key, d_val, d_row = derived
        all_key = np.concatenate([ekey, d_key])
        all_val = np.concatenate([e_val, d_val])
        all_row = np.concatenate([e_row, d_row])
        is_read = np.concatenate([np.ones(len(ekey), bool), np.zeros(len(d_key), bool)])
        all_status = np.concatenate([status, np.zeros(len(d_key), np.int8)])
        if len(all_key):
            lo, hi = int((all_key & ((1 << readings.TS_BITS) - 1)).min()), int(
                (all_key & ((1 << readings.TS_BITS) - 1)).max())
            chans = sorted(set((all_key >> readings.TS_BITS).tolist()))
            overlap = self._overlaps(chans, lo, hi)
            if overlap:
                conflict_rows |= self._compare(all_key, all_val, all_row, all_status, chans, lo, hi,
                                               ch.line)
        else:
            overlap = False
        for r, why in conflict_rows.items():
            row_reason.setdefault(r, why)
            ok[r] = False
        keep = ok[all_row] if len(all_row) else np.zeros(0, bool)
        # row outcomes
        read_keep = keep & is_read
        any_new = np.bincount(all_row[read_keep & (all_status != 1)], minlength=n) > 0
        any_val = np.bincount(all_row[read_keep], minlength=n) > 0
        rows_loaded = ok & any_new
        rows_dup = ok & any_val & ~any_new
        no_value = ok & ~any_val
        has_bad = np.zeros(n, bool)
        if bad:
            has_bad[np.array([b[0] for b in bad], dtype=np.int64)] = True
        for r in np.flatnonzero(no_value):
            if not has_bad[r]:
                row_reason[int(r)] = "no readings in this row (every mapped value is missing)"
            else:
                row_reason.setdefault(int(r), None)  # its bad values are listed one by one
        rejected_rows = set(row_reason)
        self.counts["rows_loaded"] += int(rows_loaded.sum())
        self.counts["rows_duplicate"] += int(rows_dup.sum())
        self.counts["rows_rejected"] += len(rejected_rows)
        for r, why in sorted(row_reason.items()):
            if why is not None:
                self.rejected.append(Rejected(int(ch.line[r]), None, why, ch.text[r]))
        for r, j, raw, why in bad:
            if r in rejected_rows and row_reason.get(r) is not None:
                continue  # the whole row is already rejected with its reason
            self.counts["values_rejected"] += 1
            self.rejected.append(Rejected(int(ch.line[r]), self._colname(j), why, raw))
        s_read = all_status[read_keep]
        self.counts["values_loaded"] += int((s_read != 1).sum())
        self.counts["values_duplicate"] += int((s_read == 1).sum())
        self.counts["values_conflict"] += int((s_read == 2).sum())
        d_keep = keep & ~is_read
        self.derived["e_ac_kwh_derived"] += int(d_keep.sum())
        self.derived["e_ac_kwh_derived_duplicate"] += int((d_keep & (all_status == 1)).sum())
        # write new and changed values, in key order
        w = keep & (all_status != 1)
        wk, wv = all_key[w], all_val[w]
        wi = iv[all_row[w]]  # each reading's interval, as inferred for its row
        order = np.argsort(wk, kind="stable")
        wk, wv, wi = wk[order], wv[order], wi[order]
        if len(wk):
            wts = wk & ((1 << readings.TS_BITS) - 1)
            readings.write_readings(self.conn, wk >> readings.TS_BITS, wts, wv, self.batch_id,
                                    upsert=overlap, interval_s=wi)
            lo, hi = int(wts.min()), int(wts.max())
            self.written = (lo, hi) if self.written is None else (
                min(lo, self.written[0]), max(hi, self.written[1]))
        acc = ts[rows_loaded | rows_dup]
        if len(acc):
            lo, hi = int(acc.min()), int(acc.max())
            self.first = lo if self.first is None else min(self.first, lo)
            self.last = hi if self.last is None else max(self.last, hi)

    def _entries(self, ch: Chunk, ok: np.ndarray, iv: np.ndarray):
        """Value cells of rows with a good timestamp: rows, value-columns, stored-unit values, bad list."""
        bad: list[tuple[int, int, str, str]] = []
        if ch.long is not None:
            cols = self._long_columns(ch, ok, bad)
        else:
            cols = list(range(len(self.vcols)))
            for r, j, raw, why in ch.bad_cells:
                if ok[r]:
                    bad.append((r, j, raw, why))
        rows_l, cols_l, vals_l = [], [], []
        for j, vc in enumerate(self.vcols):
            if ch.long is not None:
                sel = np.flatnonzero(cols == j)
                raw = ch.values[sel, 0]
            else:
                sel = np.arange(len(ok))
                raw = ch.values[:, j]
            if len(sel) == 0:
                continue
            v = to_stored(raw, vc.quantity, vc.unit)
            present = ~np.isnan(v) & ok[sel]
            inf = present & np.isinf(v)
            imp, why = implausible(np.where(inf, np.nan, v), vc.quantity, p_ac_max_kw=vc.p_ac_max_kw,
                                   p_dc_kwp=vc.p_dc_kwp, interval_h=iv[sel] / 3600.0,
                                   dc_label=(f"input {vc.input_id!r} nameplate" if vc.input_id
                                             else "nameplate"),
                                   rollover_kwh=self.source.counter_rollover_kwh)
            imp &= present & ~inf
            for k in np.flatnonzero(inf | imp):
                r = int(sel[k])
                text = self._cell_text(ch, r, vc)
                reason = (f"value {text!r} is not a finite number" if inf[k] else
                          f"value {text!r} ({vc.unit}) {why[k]}")
                bad.append((r, j, text, reason))
            good = present & ~inf & ~imp
            rows_l.append(sel[good])
            cols_l.append(np.full(int(good.sum()), j, dtype=np.int64))
            vals_l.append(v[good])
        if not rows_l:
            e = np.empty(0, dtype=np.int64)
            return e, e, np.empty(0), bad
        return (np.concatenate(rows_l).astype(np.int64), np.concatenate(cols_l),
                np.concatenate(vals_l), bad)

    def _entry_times(self, ch: Chunk, labels, ts, iv, e_row, e_col, e_val, bad):
        """Store key time of each entry: the row's interval start, or for an instantaneous
        column the label itself; a column with its own clock correction is converted with it.
        Entries whose corrected time does not exist locally become bad values."""
        e_ts = ts[e_row] if len(e_row) else np.empty(0, np.int64)
        if not len(e_row):
            return e_ts, e_row, e_col, e_val
        inst = np.array([vc.instant for vc in self.vcols], dtype=bool)
        grp = np.array([vc.group for vc in self.vcols], dtype=np.int64)
        if not inst.any() and not grp.any():
            return e_ts, e_row, e_col, e_val
        lab = labels[e_row].copy()
        why = np.full(len(e_row), None, dtype=object)
        for g in np.unique(grp[e_col]):
            if g == 0:
                continue
            lab_g, reasons_g = self.group_convs[g].convert(ch.ts_raw)
            m = grp[e_col] == g
            lab[m] = lab_g[e_row[m]]
            why[m] = reasons_g[e_row[m]]
        shift = 0 if self.source.timestamp.label != "end" else np.nan_to_num(iv[e_row]).astype(np.int64)
        e_ts = np.where(inst[e_col], lab, lab - shift)
        gone = lab == NAT
        if gone.any():
            for k in np.flatnonzero(gone):
                r, j = int(e_row[k]), int(e_col[k])
                bad.append((r, j, str(ch.ts_raw[r]), (why[k] or "no valid time") +
                            " (after this column's clock correction)"))
            keep = ~gone
            e_ts, e_row, e_col, e_val = e_ts[keep], e_row[keep], e_col[keep], e_val[keep]
        return e_ts, e_row, e_col, e_val

    def _colname(self, j: int) -> str:
        if self.meta.long_index:
            return self.source.long.value_column
        return self.vcols[j].name

    def _cell_text(self, ch: Chunk, r: int, vc: _VCol) -> str:
        cells = _split(ch.text[r], self.source.delimiter)
        pos = (self.meta.long_index["value"] if self.meta.long_index
               else self.meta.col_index[self.vcol_index[(vc.name, vc.unit)]])
        return cells[pos].strip() if pos < len(cells) else ""

    def _long_columns(self, ch: Chunk, ok: np.ndarray, bad: list) -> np.ndarray:
        """Map each long-layout row to a value column; unknown device/quantity is a bad value."""
        src = self.source
        dev = ch.long["device"]
        qn = ch.long["quantity"]
        unit = ch.long.get("unit")
        cols = np.full(len(dev), -1, dtype=np.int64)
        cache: dict[tuple, int | str] = {}
        known = self.cfg.device_ids()
        for r in range(len(dev)):
            if not ok[r]:
                continue
            d = str(dev[r]).strip()
            q = str(qn[r]).strip()
            u = str(unit[r]).strip() if unit is not None else None
            k = (d, q, u)
            if k not in cache:
                if d not in known:
                    cache[k] = f"unknown device {d!r} (not in the site config)"
                elif q not in src.quantity_names:
                    cache[k] = (f"unknown quantity name {q!r}; known: "
                                f"{', '.join(sorted(src.quantity_names))}")
                else:
                    quantity, cunit = src.quantity_names[q]
                    uu = normalise_unit(u) if u else cunit
                    inp = src.quantity_inputs.get(q, "")  # an inverter input's name (#11)
                    if ((d, quantity, inp) if inp else (d, quantity)) not in self.channels:
                        cache[k] = (f"device {d!r} has no {quantity} channel in the site config"
                                    if not inp else f"device {d!r} has no input {inp!r} "
                                    f"(quantity name {q!r}) in its [[inverters.arrays]]")
                    else:
                        try:
                            to_stored(np.empty(0), quantity, uu)
                            cache[k] = self._vcol(f"{d}/{q}", d, quantity, uu,
                                                  src.quantity_sampling.get(q, "mean"), inp)
                        except ValueError as exc:
                            cache[k] = str(exc)
            v = cache[k]
            if isinstance(v, str):
                bad.append((r, -1, f"{d};{q}", v))
            else:
                cols[r] = v
        for r, _j, raw, why in ch.bad_cells:
            if ok[r]:
                bad.append((r, int(cols[r]), raw, why))
        return cols

    def _in_chunk_duplicates(self, ekey, e_row, e_val, status, lines, ts) -> dict[int, str]:
        """Repeated (channel, ts) within the chunk: equal -> status duplicate; else reject the row."""
        out: dict[int, str] = {}
        if len(ekey) < 2:
            return out
        order = np.lexsort((e_row, ekey))
        k = ekey[order]
        rep = np.flatnonzero(k[1:] == k[:-1]) + 1
        if len(rep) == 0:
            return out
        first_of = np.maximum.accumulate(np.where(np.concatenate([[True], k[1:] != k[:-1]]),
                                                  np.arange(len(k)), 0))
        for p in rep:
            a, b = order[first_of[p]], order[p]
            if np.isclose(e_val[a], e_val[b], rtol=1e-9, atol=1e-9):
                status[b] = 1
            else:
                r = int(e_row[b])
                out.setdefault(r, f"duplicate timestamp: same interval as line {lines[e_row[a]]} "
                                  "with different values")
        return out

    def _counters(self, ch, ok, e_ts, iv, e_row, e_col, e_val, ekey, status):
        """Derived e_ac_kwh entries (keys, values, rows) from the chunk's counter readings.

        The counter's resolution is measured from its steps (:func:`ingest.counters.counter_resolution`);
        a coarse counter (:func:`ingest.counters.is_coarse`) of an inverter whose AC power is in
        the same file gets no interval energy: its intervals take energy from AC power, and
        its readings stay stored for the daily / monthly cross-check."""
        keys, vals, rows = [np.empty(0, np.int64)], [np.empty(0)], [np.empty(0, np.int64)]
        power_devs = {vc.device for vc in self.vcols if vc.quantity == "p_ac_kw"}
        for j, vc in enumerate(self.vcols):
            if vc.quantity != "e_ac_total_kwh":
                continue
            m = (e_col == j) & (status != 1) & ok[e_row]
            r = e_row[m]
            if len(r) == 0:
                continue
            t_r = e_ts[m]
            order = np.argsort(t_r, kind="stable")
            r, v, t_r = r[order], e_val[m][order], t_r[order]
            dev = vc.device
            if dev not in self.counter_prev:
                prev = readings.previous_reading(self.conn, vc.channel, int(t_r[0]))
                self.counter_prev[dev] = (prev[0] + int(iv[r[0]]), prev[1]) if prev else None
            ev = self.counter_events.setdefault(dev, CounterEvents())
            inv = self.cfg.inverter(dev)
            prev_v = self.counter_prev[dev][1] if self.counter_prev[dev] else np.nan
            steps = np.diff(np.concatenate([[prev_v], v]))
            res = counter_resolution(steps)
            if res is not None:
                self.counter_res[dev] = res
            res = self.counter_res.get(dev)
            tau = float(np.nanmedian(iv[r]))
            info = self.counter_info.setdefault(dev, {})
            if res is not None:
                coarse = is_coarse(res, inv.p_ac_max_kw, tau)
                step = res
            else:
                # too few steps yet to measure the resolution (a night, a short chunk): a step
                # beyond one interval's possible energy marks the counter coarse here
                pos = steps[np.isfinite(steps) & (steps > 1e-9)]
                coarse = bool(pos.size and pos.max() > POWER_MAX_FACTOR * inv.p_ac_max_kw
                              * tau / 3600.0)
                step = float(pos.min()) if coarse else 0.0
            from_power = coarse and dev in power_devs
            if res is not None or coarse:
                info.update(resolution_kwh=res, coarse=coarse,
                            interval_energy_from="p_ac_kw" if from_power else "counter")
            energy, self.counter_prev[dev] = interval_energy(
                t_r, iv[r], v, self.counter_prev[dev], p_ac_max_kw=inv.p_ac_max_kw,
                rollover_kwh=self.source.counter_rollover_kwh, events=ev,
                step_kwh=step if coarse else 0.0)
            if from_power:
                continue  # readings stored as read; interval energy comes from AC power
            good = ~np.isnan(energy)
            ch_e = self.channels[(dev, "e_ac_kwh")]
            keys.append(readings.key(np.full(int(good.sum()), ch_e), t_r[good]))
            vals.append(energy[good])
            rows.append(r[good])
        return np.concatenate(keys), np.concatenate(vals), np.concatenate(rows)

    def _counter_boundaries(self) -> None:
        """Interval energy of the stored counter reading right after this file's last one.

        Loaded in time order, a file's first derived interval energy comes from the stored
        reading before it. Loaded out of order (January after February), February's first
        interval energy could not be derived when February was loaded; it is derived now,
        so the store does not depend on load order. Only where no e_ac_kwh is stored yet.
        """
        nominal = (max(self.steps.items(), key=lambda kv: (kv[1], -kv[0]))[0]
                   if self.steps else None)
        for dev, prev in self.counter_prev.items():
            if prev is None or nominal is None:
                continue
            vc = next(v for v in self.vcols if v.device == dev and v.quantity == "e_ac_total_kwh")
            nxt = readings.next_reading(self.conn, vc.channel, prev[0] - 1)
            if nxt is None or nxt[0] != prev[0]:
                continue  # nothing stored right after this file (or a gap)
            ch_e = self.channels.get((dev, "e_ac_kwh"))
            if ch_e is None or readings.has_reading(self.conn, ch_e, nxt[0]):
                continue
            inv = self.cfg.inverter(dev)
            energy, _ = interval_energy(
                np.array([nxt[0]], dtype=np.int64), np.array([float(nominal)]),
                np.array([nxt[1]]), prev, p_ac_max_kw=inv.p_ac_max_kw,
                rollover_kwh=self.source.counter_rollover_kwh,
                events=self.counter_events.setdefault(dev, CounterEvents()))
            if np.isfinite(energy[0]):
                readings.write_readings(self.conn, np.array([ch_e]), np.array([nxt[0]]),
                                        energy, self.batch_id, upsert=True)
                self.derived["e_ac_kwh_derived_after_file"] += 1
                lo, hi = nxt[0], nxt[0]
                self.written = (lo, hi) if self.written is None else (
                    min(lo, self.written[0]), max(hi, self.written[1]))

    def _overlaps(self, chans: list[int], lo: int, hi: int) -> bool:
        if self.written and lo <= self.written[1] and hi >= self.written[0]:
            return True
        new = [c for c in chans if c not in self.stored]
        if new:
            found = readings.stored_range(self.conn, new)
            self.stored.update({c: found.get(c) for c in new})
        return any(self.stored[c] is not None and lo <= self.stored[c][1]
                   and hi >= self.stored[c][0] for c in chans)

    def _compare(self, key, val, row, status, chans, lo, hi, lines) -> dict[int, str]:
        sk, sv, sb = readings.stored_values(self.conn, chans, lo, hi)
        out: dict[int, str] = {}
        if len(sk) == 0:
            return out
        pos = np.minimum(np.searchsorted(sk, key), len(sk) - 1)
        found = (sk[pos] == key) & (status != 1)
        same = found & np.isclose(sv[pos], val, rtol=1e-9, atol=1e-9)
        own = found & (sb[pos] == self.batch_id)
        for k in np.flatnonzero(own & ~same):
            out.setdefault(int(row[k]), "duplicate timestamp: an earlier line of this file has "
                                        "the same interval with different values")
        status[same] = 1
        status[found & ~same & ~own] = 2
        return out

    # ------------------------------------------------------------ result
    def result(self) -> BatchResult:
        notes: dict = {}
        notes.update(self.conv.notes())
        for conv in self.group_convs[1:]:  # per-device corrections: rows shifted, by correction
            for n, (_lo, _hi, _s, c) in enumerate(conv._corr):
                if getattr(c, "everywhere", True) or not conv.corrected[n]:
                    continue
                notes.setdefault("clock_corrections", []).append(
                    {"start": c.start.isoformat(), "end": c.end.isoformat(),
                     "shift_minutes": c.shift_minutes, "note": c.note, "rows": conv.corrected[n],
                     "devices": list(c.devices), "columns": list(c.columns)})
        if self.meta.missing:
            notes["configured_columns_missing"] = self.meta.missing
        if self.meta.ignored:
            notes["ignored_columns"] = self.meta.ignored
        if self.meta.units_seen:
            notes["unit_row"] = self.meta.units_seen
        counters = {}
        for dev, ev in self.counter_events.items():
            counters.update(ev.as_notes(dev))
        for dev, info in self.counter_info.items():
            counters.setdefault(dev, {}).update(info)
        if counters:
            notes["counters"] = counters
        notes.update({k: v for k, v in self.derived.items() if v})
        notes["compressed"] = self.meta.compressed
        notes["lines"] = {"total": self.meta.lines_read, "before_data": self.meta.data_line,
                          "blank": self.meta.blank_lines}
        intervals = np.concatenate(self.intervals) if self.intervals else np.empty(0)
        return BatchResult(
            path=self.path, site_id=self.cfg.id, source_name=self.source.name, status="loaded",
            batch_id=self.batch_id,
            counts={f: int(self.counts.get(f, 0)) for f in ingest_log.COUNT_FIELDS}, ts_first_s=self.first,
            ts_last_s=self.last, interval_s=describe_intervals(intervals), notes=notes,
            touched=self.written)

