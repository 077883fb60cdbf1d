#!/usr/bin/env python3
"""Write an invented plant's history for load benchmarks: LOTS catalyst lots of CYCLES
cycles each, one export file per batch (standard library only, seeded, the same files on
every run), a lot sheet, and a configuration that serves the web view.

    python3 tests/benches/plant_generator.py DIR [LOTS] [CYCLES] [LISTEN]

Then `turnbook --config DIR/turnbook.toml ingest DIR/exports` loads it, and
`turnbook --config DIR/turnbook.toml watch` serves it at LISTEN (default 127.0.0.1:8471).
"""
import math
import os
import random
import sys

CONFIG = """# An invented plant for load benchmarks (written by plant_generator.py).
database = "turnbook.db"
quarantine = "quarantine"

[profiles.reactor]
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
datetime_format = "%Y-%m-%dT%H:%M:%S"
columns.batch_id = {{ header = "Batch" }}
columns.lot = {{ header = "Lot" }}
columns.cycle_no = {{ header = "Cycle" }}
columns.started_at = {{ header = "Started" }}
columns.duration = {{ header = "Time", unit = "from-header" }}
columns.temperature = {{ header = "T", unit = "from-header" }}
columns.conversion = {{ header = "Conversion", unit = "from-header" }}
columns.selectivity = {{ header = "Selectivity", unit = "from-header" }}
columns.substrate = {{ header = "Substrate", unit = "from-header" }}
columns.catalyst_mass = {{ header = "Catalyst", unit = "from-header" }}
columns.product_mass = {{ header = "Product", unit = "from-header" }}

[profiles.sheet]
kind = "lots"
delimiter = ","
decimal = "."
encoding = "utf-8"
columns.lot = {{ header = "lot" }}
columns.catalyst = {{ header = "catalyst" }}
columns.metal = {{ header = "metal" }}
columns.loading = {{ header = "loading", unit = "from-header" }}
columns.charged_mass = {{ header = "charged mass", unit = "from-header" }}

[[folders]]
path = "exports/batches"
profile = "reactor"
mode = "poll"
recursive = true

[[folders]]
path = "exports/lots"
profile = "sheet"
mode = "poll"

[web]
listen = "{listen}"
"""


def main() -> None:
    out = sys.argv[1]
    lots = int(sys.argv[2]) if len(sys.argv) > 2 else 1000
    cycles = int(sys.argv[3]) if len(sys.argv) > 3 else 40
    listen = sys.argv[4] if len(sys.argv) > 4 else "127.0.0.1:8471"
    rng = random.Random(2027)
    os.makedirs(os.path.join(out, "exports", "lots"), exist_ok=True)
    with open(os.path.join(out, "turnbook.toml"), "w") as f:
        f.write(CONFIG.format(listen=listen))
    sheet = ["lot,catalyst,metal,loading (%),charged mass (g)"]
    for lot in range(lots):
        sheet.append(f"L{lot:05d},5 % Pd/C,Pd,5.0,10.0")
    with open(os.path.join(out, "exports", "lots", "sheet.csv"), "w") as f:
        f.write("\n".join(sheet) + "\n")
    for lot in range(lots):
        folder = os.path.join(out, "exports", "batches", f"L{lot:05d}")
        os.makedirs(folder, exist_ok=True)
        kd = rng.uniform(0.0, 0.03)
        for n in range(1, cycles + 1):
            k = 1.2 * math.exp(-kd * n) * (1.0 + rng.gauss(0.0, 0.02))
            conv = 100.0 * (1.0 - math.exp(-k * 2.0))
            day = 1 + (lot * cycles + n) // 12
            started = f"20{16 + day // 365:02d}-{1 + (day % 365) // 31:02d}-{1 + day % 28:02d}T08:00:00"
            text = (
                "Batch,Lot,Cycle,Started,Time (min),T (degC),Conversion (%),Selectivity (%),"
                "Substrate (mol),Catalyst (g),Product (g)\n"
                f"B{lot:05d}-{n:03d},L{lot:05d},{n},{started},120,60.0,{conv:.2f},98.5,"
                f"1.2,10.0,{1.2 * conv / 100 * 0.985 * 137.1:.1f}\n"
            )
            with open(os.path.join(folder, f"B{lot:05d}-{n:03d}.csv"), "w") as f:
                f.write(text)


if __name__ == "__main__":
    main()
