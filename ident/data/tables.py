"""CSV and Parquet logs.

Default table convention (no profile needed): a column ``time`` in seconds and, per joint,
``<joint>.q`` (rad or m), ``<joint>.dq`` (optional), ``<joint>.ddq`` (optional) and ``<joint>.tau``
(N m or N).
"""

from __future__ import annotations

import csv
import io
import queue
import re
import threading
from pathlib import Path

import numpy as np

from ..errors import DataError, first_line
from .dataset import CHANNELS
from .profile import TIME_UNITS, LogProfile
from .rawlog import RawLog, channel_factor, channel_spec, check_magnitude, check_times, convert_channel, joint_map

TABLE_SUFFIXES = {".csv": "csv", ".txt": "csv", ".parquet": "parquet", ".pq": "parquet"}


def _table_columns(path: Path, fmt: str) -> list[str]:
    try:
        if fmt == "parquet":
            import pyarrow.parquet as pq

            return list(pq.read_schema(path).names)
        with open(path, newline="", encoding="utf-8") as fh:
            header = next(csv.reader(fh), None)
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise DataError(f"{path}: cannot read the header ({first_line(exc)})") from None
    except Exception as exc:  # pyarrow raises its own types for files that are not Parquet
        raise DataError(f"{path}: not a readable {fmt} file ({first_line(exc)})") from None
    if not header:
        raise DataError(f"{path}: empty file, no header row")
    return [h.strip() for h in header]


def _available_joints(columns: list[str], pattern: str) -> list[str]:
    rx = re.compile("^" + re.escape(pattern).replace(re.escape("{name}"), "(.+)") + "$")
    return [m.group(1) for c in columns if (m := rx.match(c))]


class TablePlan:
    """Which table column feeds each channel of each joint, with its unit conversion.

    Built once per file from the header (:func:`table_plan`); :meth:`convert` turns the columns of
    the whole table or of one block of rows into validated SI arrays.
    """

    def __init__(self, path: Path, model, wanted, tcol, need, limit, specs, factors, warns, rate):
        self.path, self.joint_names, self.wanted, self.time_column = path, model, wanted, tcol
        self.columns, self.limit, self.specs, self.factors, self.warnings, self.rate = need, limit, specs, factors, warns, rate
        self.time_scale = 1.0

    def convert(self, get, m: int, offset: int = 0) -> tuple[np.ndarray, dict]:
        """Time (m,) s and channel arrays {q, dq, ddq, tau: (m, n) or None} of `m` rows starting
        at data row ``offset + 1`` (`get(column)` gives a pyarrow column); errors name the row."""
        path, n = self.path, len(self.joint_names)
        if self.rate is None:
            t = _numeric(get(self.time_column), path, self.time_column, offset) * self.time_scale
        else:
            t = np.arange(offset, offset + m, dtype=float) / self.rate
        arrays = {}
        for ch in CHANNELS:
            if self.wanted[ch][0] is None:
                arrays[ch] = None
                continue
            a = np.empty((m, n), order="F")  # column-major: each column is written and filtered contiguously
            for k, col in enumerate(self.wanted[ch]):
                a[:, k] = _numeric(get(col), path, col, offset)
                convert_channel(a[:, k], self.specs[ch][k], self.factors[ch][k])
                check_magnitude(a[:, k], ch, f"{path}: column '{col}'", "row", offset)
            arrays[ch] = a
        return t, arrays


def table_plan(path: Path, fmt: str, robot, prof: LogProfile) -> TablePlan:
    """Read the header of a CSV or Parquet log and map its columns to channels (errors name the column)."""
    columns = _table_columns(path, fmt)
    dup = sorted({c for c in columns if columns.count(c) > 1})
    if dup:
        raise DataError(f"{path}: column '{dup[0]}' appears more than once")
    colset = set(columns)
    model, log_names, warns = joint_map(_available_joints(columns, prof.patterns["q"]), robot, prof, str(path))
    n = len(model)
    # which column feeds each channel of each joint
    wanted: dict[str, list[str | None]] = {}
    for ch in CHANNELS:
        cols = []
        for j, ln in zip(model, log_names):
            spec = channel_spec(prof, j, ch)
            col = spec.column or prof.patterns[ch].format(name=ln)
            if col not in colset:
                if spec.explicit or ch in ("q", "tau"):
                    src = f"profile {prof.source}" if spec.explicit else "the column convention"
                    raise DataError(f"{path}: no column '{col}' for joint '{j}' ({ch}), as named by {src}")
                col = None
            cols.append(col)
        wanted[ch] = cols
    for ch in ("dq", "ddq"):
        if any(c is not None for c in wanted[ch]) and any(c is None for c in wanted[ch]):
            missing = [j for j, c in zip(model, wanted[ch]) if c is None]
            raise DataError(f"{path}: {ch} is logged for some joints but not for {', '.join(missing)}")
    tcol = prof.time_column
    if prof.rate is None and tcol not in colset:
        raise DataError(f"{path}: no time column '{tcol}' (name it in the profile: time: {{column: ...}}, or give time: {{rate: HZ}})")
    need = [c for ch in CHANNELS for c in wanted[ch] if c is not None]
    if prof.rate is None:
        need = [tcol] + need
    jt = robot.joint_type if robot is not None else [None] * n
    limit = np.full(n, np.inf)
    if robot is not None:
        limit[:] = robot.effort_limit
    specs, factors = {}, {}
    for ch in CHANNELS:
        specs[ch], factors[ch] = [], []
        for k, (j, col) in enumerate(zip(model, wanted[ch])):
            spec = channel_spec(prof, j, ch)
            specs[ch].append(spec)
            if col is None:
                factors[ch].append(1.0)
                continue
            factors[ch].append(channel_factor(spec, ch, prof, jt[k], f"{path}: column '{col}'"))
            if ch == "tau" and spec.limit is not None:
                limit[k] = spec.limit
    plan = TablePlan(path, model, wanted, tcol, need, limit, specs, factors, warns, prof.rate)
    plan.time_scale = TIME_UNITS[prof.time_unit]
    return plan


def read_table(path: Path, fmt: str, robot, prof: LogProfile) -> RawLog:
    plan = table_plan(path, fmt, robot, prof)
    get = _column_source(path, fmt, plan.columns)
    m = get.n_rows
    if m == 0:
        raise DataError(f"{path}: no data rows")
    t, arrays = plan.convert(get, m)
    del get
    raw = RawLog(str(path), plan.joint_names, t, arrays["q"], arrays["dq"], arrays["ddq"], arrays["tau"], plan.limit, plan.warnings)
    check_times(raw.t, str(path), "row")
    return raw


def table_rows(path: Path, fmt: str) -> int | None:
    """Data rows of a Parquet file from its footer (None for CSV: counting would mean reading it)."""
    if fmt != "parquet":
        return None
    try:
        import pyarrow.parquet as pq

        return int(pq.ParquetFile(path).metadata.num_rows)
    except Exception:  # noqa: BLE001 - a broken file is reported by the reader itself
        return None


#: Bytes of CSV text parsed at a time on the block path.
CSV_BLOCK_BYTES = 2 << 20


def _parquet_blocks(path: Path, cols: list[str], rows: int):
    """Record batches of at most `rows` rows, one row group read at a time (the batch iterator of
    pyarrow keeps what it has read allocated, so memory would grow with the file)."""
    import pyarrow.parquet as pq

    pf = pq.ParquetFile(path, pre_buffer=False)
    for g in range(pf.num_row_groups):
        tbl = pf.read_row_group(g, columns=cols)
        yield from tbl.to_batches(max_chunksize=rows)
        del tbl


#: CSV record batches parsed ahead of the one being conditioned (a few MB).
CSV_AHEAD = 4
_DONE = object()


def _read_ahead(batches, depth: int):
    """Iterate `batches` with a thread pulling up to `depth` items ahead.

    pyarrow parses without the GIL, so on a machine with a second core the text of the next
    blocks is parsed while the current one is converted and stored (the parse was a fifth of the
    block path's time). An error of the reader is raised here, at the item where it occurred; a caller
    that stops early (an error further on, or the generator closed) stops the thread too.
    """
    q: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(item) -> bool:
        while not stop.is_set():
            try:
                q.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def work():
        try:
            for b in batches:
                if not put(b):
                    return
        except BaseException as exc:  # noqa: BLE001 - handed over to the reading thread as is
            put(exc)
            return
        put(_DONE)

    th = threading.Thread(target=work, name="ident-csv-read-ahead", daemon=True)
    th.start()
    try:
        while True:
            item = q.get()
            if item is _DONE:
                return
            if isinstance(item, BaseException):
                raise item
            yield item
    finally:
        stop.set()
        th.join()


def iter_table_blocks(plan: TablePlan, fmt: str, rows: int):
    """Yield ``(offset, t, arrays)`` for consecutive blocks of about `rows` data rows of a table,
    validated as :meth:`TablePlan.convert` does (errors name file, column and data row); times
    must increase across block edges too. Parquet is read by record batches, CSV by pyarrow's
    streaming reader, so memory holds one block."""
    path = plan.path
    cols = plan.columns
    try:
        if fmt == "parquet":
            batches = _parquet_blocks(path, cols, int(rows))
        else:
            import pyarrow as pa
            import pyarrow.csv as pacsv

            # small parse blocks: the reader parses several ahead on its threads
            batches = pacsv.open_csv(path, read_options=pacsv.ReadOptions(block_size=CSV_BLOCK_BYTES),
                                     convert_options=pacsv.ConvertOptions(include_columns=cols, column_types={c: pa.float64() for c in cols},
                                                                          strings_can_be_null=True))
    except Exception as exc:  # noqa: BLE001 - pyarrow's own error types: name the file, keep one line
        detail = _diagnose_csv(path, cols) if fmt == "csv" else None
        raise DataError(detail or f"{path}: cannot read as {fmt} ({first_line(exc)})") from None
    offset, last = 0, None
    it = iter(batches) if fmt == "parquet" else _read_ahead(batches, CSV_AHEAD)
    while True:
        try:
            batch = next(it)
        except StopIteration:
            break
        except Exception as exc:  # noqa: BLE001 - as above, for a block further in
            detail = _diagnose_csv(path, cols) if fmt == "csv" else None
            raise DataError(detail or f"{path}: cannot read as {fmt} ({first_line(exc)})") from None
        if batch is None or batch.num_rows == 0:
            continue
        m = batch.num_rows
        names = batch.schema.names
        t, arrays = plan.convert(lambda c, b=batch, nm=names: b.column(nm.index(c)), m, offset)
        if last is not None:
            check_times(np.concatenate([[last], t[:2]]), str(path), "row", offset - 1)
        if m > 1:
            check_times(t, str(path), "row", offset)
        last = float(t[-1])
        yield offset, t, arrays
        offset += m
    if offset == 0:
        raise DataError(f"{path}: no data rows")
    if offset < 2:
        check_times(np.array([last]), str(path), "row")


#: Data rows between two entries of a CSV row index (:func:`csv_row_index`).
INDEX_ROWS = 1 << 12


class CsvIndex:
    """Byte offsets of a CSV log's rows: ``starts[j]`` is where data row ``j * every`` begins,
    ``header`` the header line's bytes, ``rows`` the data rows, ``size`` the file's bytes."""

    def __init__(self, header: bytes, starts: list[int], every: int, rows: int, size: int):
        self.header, self.starts, self.every, self.rows, self.size = header, starts, int(every), int(rows), int(size)


def csv_row_index(path: Path, every: int = INDEX_ROWS, read_bytes: int = 1 << 24) -> CsvIndex | str:
    """Scan a CSV log's bytes once for line ends and index every `every`-th data row, or say why
    its rows cannot be found by line ends alone (a quote character, which may hide a line break in
    a field, or an empty line, which the reader skips): then it is read whole."""
    import numpy as np

    starts, ends_seen, prev_end, pos, last = [], 0, -1, 0, b""
    with open(path, "rb") as fh:
        while True:
            buf = fh.read(read_bytes)
            if not buf:
                break
            if b'"' in buf:
                return "a quote character (a field may hold a line break)"
            raw = np.frombuffer(buf, dtype=np.uint8)
            ends = np.flatnonzero(raw == 10) + pos
            if ends.size:
                gaps = np.diff(np.concatenate([[prev_end], ends]))
                # an empty line: a line end right after another, or after one and a carriage return
                cr = np.array([(buf[e - pos - 1:e - pos] if e - 1 >= pos else last) == b"\r" for e in ends[gaps == 2]], bool)
                if np.any(gaps == 1) or cr.any():
                    return "an empty line"
                number = ends_seen + 1 + np.arange(ends.size)  # 1-based count of each line end
                # data row r starts after line end r + 1 (line end 1 closes the header)
                starts += [int(e) + 1 for e in ends[(number >= 2) & ((number - 1) % every == 0)]]
                ends_seen += ends.size
                prev_end = int(ends[-1])
            pos += len(buf)
            last = buf[-1:]
    if ends_seen == 0:
        return "no line end after the header"
    with open(path, "rb") as fh:
        header = fh.readline()
    rows = ends_seen - 1 + (last != b"\n")  # a last line without its line end is a row too
    starts = [len(header)] + [x for x in starts if x < pos][: max(0, (rows - 1) // every)]
    return CsvIndex(header, starts, every, rows, pos)


def read_table_rows(plan: TablePlan, fmt: str, a: int, b: int, index: CsvIndex | None = None):
    """Data rows ``a..b-1`` of a CSV or Parquet log, validated as :meth:`TablePlan.convert` does
    (errors name file, column and the file's own data row, times must increase): ``(t, arrays)``.

    Parquet reads only the row groups that overlap the range (from the file's footer); CSV reads
    only the bytes between the indexed rows around the range (`index` from :func:`csv_row_index`)."""
    path, cols = plan.path, plan.columns
    try:
        if fmt == "parquet":
            import pyarrow.parquet as pq

            pf = pq.ParquetFile(path, pre_buffer=False)
            md = pf.metadata
            first, groups, r0 = None, [], 0
            for g in range(md.num_row_groups):
                r1 = r0 + md.row_group(g).num_rows
                if r1 > a and r0 < b:
                    groups.append(g)
                    first = r0 if first is None else first
                r0 = r1
            tbl = pf.read_row_groups(groups, columns=cols).slice(a - first, b - a)
        else:
            import pyarrow as pa
            import pyarrow.csv as pacsv

            j0, j1 = a // index.every, -(-b // index.every)
            lo = index.starts[j0]
            hi = index.starts[j1] if j1 < len(index.starts) else index.size
            with open(path, "rb") as fh:
                fh.seek(lo)
                body = fh.read(hi - lo)
            try:
                tbl = pacsv.read_csv(io.BytesIO(index.header + body), convert_options=pacsv.ConvertOptions(
                    include_columns=cols, column_types={c: pa.float64() for c in cols}, strings_can_be_null=True))
            except Exception:  # the slow diagnosis names the row, in the file's numbering
                detail = _diagnose_csv(path, cols, (index.header + body).decode("utf-8", "replace"), j0 * index.every + 1)
                if detail:
                    raise DataError(detail) from None
                raise
            tbl = tbl.slice(a - j0 * index.every, b - a)
    except DataError:
        raise
    except Exception as exc:  # noqa: BLE001 - pyarrow's own error types: name the file, keep one line
        raise DataError(f"{path}: cannot read as {fmt} ({first_line(exc)})") from None
    if tbl.num_rows != b - a:
        raise DataError(f"{path}: expected data rows {a + 1}..{b}, found {tbl.num_rows} rows there")
    t, arrays = plan.convert(lambda c: tbl.column(c), b - a, a)
    check_times(t, str(path), "row", a)
    return t, arrays


class _column_source:
    """Reads named columns of a table one at a time (Parquet) or from one parse (CSV)."""

    def __init__(self, path: Path, fmt: str, columns: list[str]):
        self.path = path
        self.fmt = fmt
        try:
            if fmt == "parquet":
                import pyarrow.parquet as pq

                self._pf = pq.ParquetFile(path)
                self.n_rows = int(self._pf.metadata.num_rows)
                self._table = None
            else:
                import pyarrow as pa
                import pyarrow.csv as pacsv

                self._table = pacsv.read_csv(
                    path,
                    convert_options=pacsv.ConvertOptions(
                        include_columns=columns,
                        column_types={c: pa.float64() for c in columns},
                        strings_can_be_null=True,
                    ),
                )
                self.n_rows = self._table.num_rows
        except Exception as exc:  # pyarrow's ArrowInvalid & co: name the file, keep one line
            detail = _diagnose_csv(path, columns) if fmt == "csv" else None
            raise DataError(detail or f"{path}: cannot read as {fmt} ({first_line(exc)})") from None

    def __call__(self, column: str):
        try:
            if self._table is not None:
                col = self._table.column(column)
            else:
                col = self._pf.read(columns=[column]).column(0)
        except Exception as exc:
            raise DataError(f"{self.path}: cannot read column '{column}' ({first_line(exc)})") from None
        return col


def _diagnose_csv(path: Path, columns: list[str], text: str | None = None, first_row: int = 1) -> str | None:
    """After a failed fast parse, find the first offending row and column (slow, error path only).
    `text`: a header line and some data lines of the file to look at instead of the whole file,
    the first of them being data row `first_row`."""
    try:
        with (io.StringIO(text, newline="") if text is not None else open(path, newline="", encoding="utf-8")) as fh:
            rd = csv.reader(fh)
            header = [h.strip() for h in next(rd)]
            idx = {c: header.index(c) for c in columns if c in header}
            for row_no, row in enumerate(rd, start=first_row):
                if not row:
                    continue
                if len(row) != len(header):
                    return f"{path}: data row {row_no} has {len(row)} fields, the header has {len(header)}"
                for c, i in idx.items():
                    cell = row[i].strip()
                    if cell == "":
                        return f"{path}: column '{c}' has an empty value at data row {row_no}"
                    try:
                        float(cell)
                    except ValueError:
                        return f"{path}: column '{c}' has a non-numeric value {cell[:20]!r} at data row {row_no}"  # repr: a quoted cell may hold a line break
    except (OSError, UnicodeDecodeError, csv.Error, StopIteration) as exc:
        return f"{path}: cannot read as csv ({first_line(exc)})"
    return None


def _numeric(col, path: Path, name: str, offset: int = 0) -> np.ndarray:
    """A pyarrow column as float64 numpy; clear errors for text, nulls, NaN and inf."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if not (pa.types.is_floating(col.type) or pa.types.is_integer(col.type) or pa.types.is_decimal(col.type)):
        raise DataError(f"{path}: column '{name}' is not numeric (type {col.type})")
    if col.null_count:
        row = int(np.flatnonzero(pc.is_null(col).to_numpy(zero_copy_only=False))[0])
        # pyarrow's CSV reader turns empty cells and the texts NaN/NA/null alike into nulls
        raise DataError(f"{path}: column '{name}' has an empty or NaN value at data row {offset + row + 1}")
    a = col.to_numpy().astype(float, copy=False)
    if not np.all(np.isfinite(a)):
        row = int(np.flatnonzero(~np.isfinite(a))[0])
        raise DataError(f"{path}: column '{name}' has a non-finite value ({a[row]}) at data row {offset + row + 1}")
    return a
