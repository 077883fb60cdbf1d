#!/usr/bin/env python3
"""Files landing on a running service: its ingest rate as lots grow long.

    python3 tests/benches/landing.py BIN DIR [LOTS] [CYCLES] [PER_SECOND]

Writes an invented plant of LOTS lots x CYCLES cycles (default 20 x 1,000: 20,000 files,
with plant_generator.py) into DIR/staging once, starts `BIN watch` on an empty database
with DIR/exports as a polled folder, registers the lots, then moves the batch files in,
cycle after cycle for every lot, at PER_SECOND files a second (default 1,000, faster than the
service stores them, so the rate measured is its own). Prints the service's rate over each
tenth of the files (from the files' recorded times) and the last tenth against the first.
Standard library only.
"""
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))


def prepare(dirname, lots, cycles):
    staging = os.path.join(dirname, "staging")
    if not os.path.isdir(staging):
        subprocess.run([sys.executable, os.path.join(HERE, "plant_generator.py"), staging,
                        str(lots), str(cycles)], check=True)
    for sub in ("exports", "db"):
        shutil.rmtree(os.path.join(dirname, sub), ignore_errors=True)
    os.makedirs(os.path.join(dirname, "exports", "batches"))
    os.makedirs(os.path.join(dirname, "exports", "lots"))
    os.makedirs(os.path.join(dirname, "db"))
    with open(os.path.join(staging, "turnbook.toml")) as f:
        cfg = f.read()
    cfg = cfg.replace('database = "turnbook.db"', f'database = "{dirname}/db/turnbook.db"')
    cfg = cfg.replace('quarantine = "quarantine"', f'quarantine = "{dirname}/db/quarantine"')
    cfg = cfg.replace('path = "exports/', f'path = "{dirname}/exports/')
    cfg = cfg.replace('mode = "poll"', 'mode = "poll"\npoll_interval = 1\nsettle = 200')
    cfg = cfg.split("[web]")[0]
    cfg += f'\n[mail]\ntransport = "file"\ndir = "{dirname}/db/outbox"\nfrom = "b@plant.example"\n'
    path = os.path.join(dirname, "db", "turnbook.toml")
    with open(path, "w") as f:
        f.write(cfg)
    return staging, path


def count(db):
    try:
        con = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=5)
        n = con.execute("SELECT COUNT(*) FROM source_files").fetchone()[0]
        con.close()
        return n
    except sqlite3.Error:
        return 0


def land(staging, dirname, lots, cycles, per_second):
    t0 = time.time()
    sent = 0
    for n in range(1, cycles + 1):
        for lot in range(lots):
            name = f"B{lot:05d}-{n:03d}.csv"
            src = os.path.join(staging, "exports", "batches", f"L{lot:05d}", name)
            dst = os.path.join(dirname, "exports", "batches", f"L{lot:05d}-{name}")
            shutil.copyfile(src, dst + ".part")
            os.rename(dst + ".part", dst)
            sent += 1
            ahead = sent / per_second - (time.time() - t0)
            if ahead > 0:
                time.sleep(ahead)
    return sent


def rates(db, total):
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    seen = [r[0] for r in con.execute(
        "SELECT seen_at FROM source_files WHERE path LIKE '%/batches/%' ORDER BY id")]
    con.close()
    from datetime import datetime
    ts = [datetime.strptime(s[:23], "%Y-%m-%dT%H:%M:%S.%f").timestamp() for s in seen]
    tenth = max(1, len(ts) // 10)
    out = []
    for i in range(0, len(ts) - tenth + 1, tenth):
        span = ts[i + tenth - 1] - ts[i]
        out.append(tenth / span if span > 0 else float("inf"))
    return len(ts), out


def main():
    binary, dirname = sys.argv[1], os.path.abspath(sys.argv[2])
    lots = int(sys.argv[3]) if len(sys.argv) > 3 else 20
    cycles = int(sys.argv[4]) if len(sys.argv) > 4 else 1000
    per_second = float(sys.argv[5]) if len(sys.argv) > 5 else 1000
    staging, cfg = prepare(dirname, lots, cycles)
    db = os.path.join(dirname, "db", "turnbook.db")
    log = open(os.path.join(dirname, "db", "watch.log"), "w")
    svc = subprocess.Popen([binary, "--config", cfg, "watch"], stdout=log, stderr=log)
    try:
        shutil.copyfile(os.path.join(staging, "exports", "lots", "sheet.csv"),
                        os.path.join(dirname, "exports", "lots", "sheet.csv"))
        time.sleep(3)
        total = land(staging, dirname, lots, cycles, per_second) + 1
        deadline = time.time() + 1800
        while count(db) < total and time.time() < deadline:
            time.sleep(1)
    finally:
        svc.send_signal(signal.SIGTERM)
        svc.wait(timeout=30)
    n, r = rates(db, total)
    print(f"{n} batch files; files/s by tenths: " + ", ".join(f"{x:.0f}" for x in r))
    if len(r) >= 2:
        print(f"last tenth / first tenth: {r[-1] / r[0]:.2f}")


if __name__ == "__main__":
    main()
