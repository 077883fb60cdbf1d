#!/usr/bin/env bash
# Reads, one file's ingest and the idle service on a generated plant, timed alternately for
# two builds of turnbook (the previous version and this one). Figures go to
# tests/benches/README.md.
#
#   tests/benches/decade.sh build DIR LOTS CYCLES BASE_BIN NEW_BIN
#       write the plant once (plant_generator.py) and load it with BASE_BIN into
#       DIR/base; DIR/new is a copy that NEW_BIN upgrades. Slow: run once, reuse.
#   tests/benches/decade.sh reads DIR BASE_BIN NEW_BIN [ROUNDS]
#       lots --json, status --json, history, cycles, fit, digest, report LOT --out
#       (after a recorded verify of each store): hyperfine blocks of
#       five runs, base and new alternating, ROUNDS (default 3) times; prints medians.
#   tests/benches/decade.sh one DIR BASE_BIN NEW_BIN [ROUNDS]
#       `ingest ONE_FILE` of a new batch (on a throw-away copy of each database).
#   tests/benches/decade.sh same DIR BASE_BIN NEW_BIN
#       the outputs of lots --json, lots and status --json of both builds, compared byte
#       for byte (status names each database's path: that line is left out).
#   tests/benches/decade.sh idle DIR BIN VARIANT [SECONDS]
#       start `watch` on DIR/VARIANT: time to the "watching" lines being done with the
#       catch-up, CPU ticks and RSS over SECONDS idle (default 20).
#
# Needs hyperfine (Debian package) and python3. Release builds only.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"

config_for() { # DIR VARIANT: a configuration whose database lives in DIR/VARIANT
    local dir=$1 variant=$2
    mkdir -p "$dir/$variant"
    sed -e "s|^database = .*|database = \"$dir/$variant/turnbook.db\"|" \
        -e "s|^quarantine = .*|quarantine = \"$dir/$variant/quarantine\"|" \
        -e "s|^path = \"exports/|path = \"$dir/exports/|" \
        -e "s|^listen = .*|listen = \"127.0.0.1:0\"|" \
        "$dir/turnbook.toml" > "$dir/$variant/turnbook.toml"
    # Plants written before the generator said so: the batch folder holds a folder a lot.
    grep -q '^recursive' "$dir/$variant/turnbook.toml" ||
        sed -i 's|^\(path = ".*/exports/batches"\)$|\1\nrecursive = true|' "$dir/$variant/turnbook.toml"
    printf '\n[mail]\ntransport = "file"\ndir = "%s"\nfrom = "bench@plant.example"\n' \
        "$dir/$variant/outbox" >> "$dir/$variant/turnbook.toml"
}

build() { # DIR LOTS CYCLES BASE_BIN NEW_BIN
    local dir=$1 lots=$2 cycles=$3 base=$4 new=$5
    [ -d "$dir/exports" ] || python3 "$here/plant_generator.py" "$dir" "$lots" "$cycles"
    config_for "$dir" base
    rm -f "$dir/base/turnbook.db"*
    /usr/bin/time -f "base ingest: %e s, %M KB" \
        "$base" --config "$dir/base/turnbook.toml" ingest "$dir/exports" > /dev/null
    rm -rf "$dir/new" && cp -a "$dir/base" "$dir/new"
    config_for "$dir" new
    # The first open of the writer upgrades the copy (migrations, and a version that
    # keeps lot states computes them) once, outside the timings.
    mkdir -p "$dir/empty"
    "$new" --config "$dir/new/turnbook.toml" ingest "$dir/empty" > /dev/null
}

median_of() { # hyperfine JSON file -> median seconds
    python3 -c 'import json,sys; print("%.4f" % json.load(open(sys.argv[1]))["results"][0]["median"])' "$1"
}

time_pair() { # DIR BASE NEW ROUNDS NAME ARGS...
    local dir=$1 base=$2 new=$3 rounds=$4 name=$5; shift 5
    local b=() n=() r v bin
    for r in $(seq "$rounds"); do
        for v in base new; do
            bin=$base; [ "$v" = new ] && bin=$new
            hyperfine -N -w 1 -r 5 --export-json "/tmp/decade-$$-$v.json" \
                "$bin --config $dir/$v/turnbook.toml $*" > /dev/null 2>&1
            if [ "$v" = base ]; then b+=("$(median_of /tmp/decade-$$-base.json)"); else n+=("$(median_of /tmp/decade-$$-new.json)"); fi
        done
    done
    rm -f "/tmp/decade-$$-base.json" "/tmp/decade-$$-new.json"
    printf '%-16s base %s   new %s  (s, medians of 5 runs, %s rounds)\n' \
        "$name" "${b[*]}" "${n[*]}" "$rounds"
}

reads() { # DIR BASE NEW [ROUNDS]
    local dir=$1 base=$2 new=$3 rounds=${4:-3}
    local lot
    lot=$(ls "$dir/exports/batches" | sort | tail -1)
    time_pair "$dir" "$base" "$new" "$rounds" "lots --json" lots --json
    time_pair "$dir" "$base" "$new" "$rounds" "status --json" status --json
    time_pair "$dir" "$base" "$new" "$rounds" "history LOT" history "$lot"
    time_pair "$dir" "$base" "$new" "$rounds" "cycles LOT" cycles "$lot"
    time_pair "$dir" "$base" "$new" "$rounds" "fit LOT" fit "$lot"
    time_pair "$dir" "$base" "$new" "$rounds" "digest" digest
    # A report shows the chain from the last recorded verification plus a check of the
    # events after it: both stores are verified once first, outside the timings.
    "$base" --config "$dir/base/turnbook.toml" verify > /dev/null
    "$new" --config "$dir/new/turnbook.toml" verify > /dev/null
    time_pair "$dir" "$base" "$new" "$rounds" "report LOT" report "$lot" --out "$dir/report.html"
}

one() { # DIR BASE NEW [ROUNDS]: ingest of one new batch file, on copies of each database
    local dir=$1 base=$2 new=$3 rounds=${4:-3}
    local lot file v bin r out=()
    lot=$(ls "$dir/exports/batches" | sort | tail -1)
    file=$dir/one-$lot.csv
    head -1 "$(ls "$dir/exports/batches/$lot"/*.csv | head -1)" > "$file"
    echo "B-ONE-999,$lot,999,2026-11-30T08:00:00,120,60.0,50.00,98.5,1.2,10.0,80.0" >> "$file"
    for r in $(seq "$rounds"); do
        for v in base new; do
            bin=$base; [ "$v" = new ] && bin=$new
            rm -rf "$dir/$v-one" && cp -a "$dir/$v" "$dir/$v-one"
            sed -i "s|$dir/$v/|$dir/$v-one/|g" "$dir/$v-one/turnbook.toml"
            sync  # the copy is on disk, so that the run's syncs write only its own pages
            local t0 t1
            t0=$(date +%s%N)
            "$bin" --config "$dir/$v-one/turnbook.toml" ingest --profile reactor "$file" > /dev/null 2>&1 || true
            t1=$(date +%s%N)
            out+=("$v $(echo "($t1 - $t0) / 1000000000" | bc -l | cut -c1-6)")
        done
    done
    rm -rf "$dir/base-one" "$dir/new-one" "$file"
    printf 'ingest ONE_FILE  %s\n' "${out[*]}"
}

same() { # DIR BASE NEW
    local dir=$1 base=$2 new=$3 args v bin differ=0
    for args in "lots --json" "lots" "status --json"; do
        for v in base new; do
            bin=$base; [ "$v" = new ] && bin=$new
            # shellcheck disable=SC2086
            "$bin" --config "$dir/$v/turnbook.toml" $args | grep -v '"database": ' > "/tmp/decade-$$-same-$v"
        done
        if cmp -s /tmp/decade-$$-same-base /tmp/decade-$$-same-new; then
            printf '%-14s identical (%s bytes)\n' "$args" "$(wc -c < /tmp/decade-$$-same-new)"
        else
            printf '%-14s DIFFER\n' "$args"; differ=1
        fi
    done
    rm -f /tmp/decade-$$-same-base /tmp/decade-$$-same-new
    return "$differ"
}

ticks_of() { awk '{print $14+$15}' "/proc/$1/stat"; }

idle() { # DIR BIN VARIANT [SECONDS]
    local dir=$1 bin=$2 variant=$3 secs=${4:-20}
    local log=$dir/$variant/watch.log pid t0 t ready=timeout a b rss hz
    hz=$(getconf CLK_TCK)
    t0=$(date +%s%N)
    "$bin" --config "$dir/$variant/turnbook.toml" watch > "$log" 2>&1 &
    pid=$!
    # Start-up is over at the first half second in which the service used under 2 % of
    # a core (one tick at 100 Hz) after its first log line; waited for up to 120 s.
    for _ in $(seq 240); do
        a=$(ticks_of "$pid"); sleep 0.5; b=$(ticks_of "$pid")
        if [ -s "$log" ] && [ $((b - a)) -le $((hz / 100)) ]; then
            t=$(date +%s%N); ready=$(echo "($t - $t0) / 1000000000 - 0.5" | bc -l); break
        fi
    done
    a=$(ticks_of "$pid"); sleep "$secs"; b=$(ticks_of "$pid")
    rss=$(awk '/VmRSS/{print $2}' "/proc/$pid/status")
    kill -TERM "$pid"; wait "$pid" || true
    printf 'idle %s: start-up over after %.2f s; then %s CPU ticks in %s s (%.2f %% of a core); RSS %s KB\n' \
        "$variant" "$ready" "$((b - a))" "$secs" "$(echo "($b - $a) / $hz / $secs * 100" | bc -l)" "$rss"
}

cmd=${1:-}; shift || true
case "$cmd" in
    build) build "$@" ;;
    reads) reads "$@" ;;
    one) one "$@" ;;
    same) same "$@" ;;
    idle) idle "$@" ;;
    *) sed -n '2,22p' "$0"; exit 2 ;;
esac
