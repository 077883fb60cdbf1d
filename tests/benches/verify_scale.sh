#!/usr/bin/env bash
# Time and peak RSS of `turnbook verify` (and of `report LOT`) at two plant sizes,
# alternating two builds on this noisy machine.
#
#   tests/benches/verify_scale.sh ROUNDS NAME=BINARY:CONFIG [NAME=BINARY:CONFIG ...]
#
# Each CONFIG is a plant written by plant_generator.py and loaded with that BINARY's
# `ingest` (each build on its own copy: a database is migrated by the newer build).
# Prints one line a run: name, command, seconds, peak RSS in MB, and events/s for verify.
set -euo pipefail
rounds=${1:?rounds}
shift
run() {
    local name=$1 bin=$2 cfg=$3
    shift 3
    local log
    log=$(mktemp)
    /usr/bin/time -v "$bin" --config "$cfg" "$@" >/dev/null 2>"$log" || true
    local secs rss
    secs=$(awk -F': ' '/Elapsed \(wall clock\)/ {n=split($2,a,":"); s=0; for(i=1;i<=n;i++) s=s*60+a[i]; print s}' "$log")
    rss=$(awk -F': ' '/Maximum resident set size/ {printf "%.1f", $2/1024}' "$log")
    local events
    events=$(sqlite3 "$(dirname "$cfg")/turnbook.db" 'SELECT MAX(seq) FROM events' 2>/dev/null || echo 0)
    printf '%s\t%s\t%s s\t%s MB\t%s events\t%.0f events/s\n' "$name" "$*" "$secs" "$rss" \
        "$events" "$(echo "$events / $secs" | bc -l)"
    rm -f "$log"
}
for _ in $(seq "$rounds"); do
    for spec in "$@"; do
        name=${spec%%=*}
        rest=${spec#*=}
        bin=${rest%%:*}
        cfg=${rest#*:}
        run "$name" "$bin" "$cfg" verify
        run "$name" "$bin" "$cfg" report L00050 --out /tmp/verify_scale_report.html
    done
done
