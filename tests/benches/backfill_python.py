"""Calibration for the backfill benchmark: a careful single-threaded pipeline written with
Python's standard library only (hashlib, csv, sqlite3), over the same export files.

The host this project is measured on changes speed by a factor of up to two through the
day, so a files/s figure alone says little. Run this and `cargo bench --bench backfill`
one after the other, alternately, on the files the bench keeps:

    TURNBOOK_BENCH_EXPORTS=/tmp/bx cargo bench --bench backfill   # writes the files once
    python3 tests/benches/backfill_python.py /tmp/bx

It does less than turnbook (no audit chain, no provenance rows, no quarantine, no
profile beyond the bench's one layout), so it is a floor for the work, not a rival: it
reads, hashes and parses every file, refuses a content seen before with a unique index,
and stores one file row and one cycle row a file, 1,000 files a transaction, in WAL mode.
"""

import csv
import hashlib
import os
import sqlite3
import sys
import tempfile
import time

SCHEMA = """
CREATE TABLE files (
    id INTEGER PRIMARY KEY, sha256 TEXT NOT NULL UNIQUE, path TEXT NOT NULL,
    size INTEGER NOT NULL, mtime REAL NOT NULL, seen_at REAL NOT NULL);
CREATE TABLE cycles (
    batch_id TEXT PRIMARY KEY, lot TEXT, cycle_no INTEGER, started_at TEXT,
    duration_s REAL, temperature_k REAL, conversion REAL,
    file_id INTEGER NOT NULL REFERENCES files(id));
CREATE INDEX cycles_lot ON cycles(lot);
"""

# The bench's header cells and the factor (and offset) to the canonical unit.
COLUMNS = {
    "Batch": ("batch_id", None),
    "Lot": ("lot", None),
    "Cycle": ("cycle_no", int),
    "Started": ("started_at", None),
    "Time (min)": ("duration_s", lambda v: float(v) * 60.0),
    "T (degC)": ("temperature_k", lambda v: float(v) + 273.15),
    "Conversion (%)": ("conversion", lambda v: float(v) / 100.0),
}


def files_under(root):
    out = []
    for folder, _dirs, names in os.walk(root):
        out.extend(os.path.join(folder, n) for n in names)
    out.sort()
    return out


def main():
    root = sys.argv[1] if len(sys.argv) > 1 else "/tmp/bx"
    paths = files_under(root)
    with tempfile.TemporaryDirectory() as tmp:
        db = sqlite3.connect(os.path.join(tmp, "calibration.db"), isolation_level=None)
        db.execute("PRAGMA journal_mode=WAL")
        db.execute("PRAGMA synchronous=NORMAL")
        db.executescript(SCHEMA)
        start = time.perf_counter()
        stored = rejected = 0
        insert_file = "INSERT INTO files(id, sha256, path, size, mtime, seen_at) VALUES (?,?,?,?,?,?)"
        insert_cycle = "INSERT INTO cycles VALUES (?,?,?,?,?,?,?,?)"
        layouts = {}
        for first in range(0, len(paths), 1000):
            db.execute("BEGIN")
            for file_id, path in enumerate(paths[first:first + 1000], start=first + 1):
                with open(path, "rb") as f:
                    st = os.fstat(f.fileno())
                    data = f.read()
                sha = hashlib.sha256(data).hexdigest()
                try:
                    rows = csv.reader(data.decode("utf-8").splitlines())
                    header = tuple(next(rows))
                    names = layouts.get(header)
                    if names is None:
                        names = layouts[header] = [COLUMNS[h] for h in header]
                    db.execute(insert_file, (file_id, sha, path, len(data), st.st_mtime, time.time()))
                    out = []
                    for row in rows:
                        rec = {name: (conv(cell) if conv else cell) for (name, conv), cell in zip(names, row)}
                        out.append((rec["batch_id"], rec["lot"], rec["cycle_no"], rec["started_at"],
                                    rec["duration_s"], rec["temperature_k"], rec["conversion"], file_id))
                    db.executemany(insert_cycle, out)
                    stored += 1
                except (sqlite3.IntegrityError, KeyError, ValueError, StopIteration, UnicodeError):
                    rejected += 1
            db.execute("COMMIT")
        secs = time.perf_counter() - start
        db.close()
    print(
        f"python calibration: {len(paths)} files ({stored} stored, {rejected} refused) "
        f"in {secs:.2f} s = {len(paths) / secs:.0f} files/s"
    )


if __name__ == "__main__":
    main()
