#!/usr/bin/env bash
# Issue 11's small-survey comparison in one command: a pair of GeoPackage surveys of about
# 64,000 buildings each (8 m squares), tiemark and the plain numpy/scipy prototype
# (prototype.py) on it, each RUNS times (default 3, alternating), their wall and CPU times,
# peak memory and the ratio, and both answers checked against the truth (compare.py).
#
# Usage: bash tests/bench/prototype/run.sh [LANDMARKS_PER_SURVEY]   (default 64000)
#
# The surveys are the end-to-end benchmark's (tests/bench/end_to_end.rs: a jittered 20 m grid
# in EPSG:32633, 25 % missing and 10 % new on each side, 0.2 m noise, a 0.3 deg / 800 ppm /
# 15 m error), written as points by `cargo bench --bench end_to_end -- N` (which also builds
# the release binary and times it on the points), then turned into 8 m squares centred on the
# points by ogr2ogr (SQLite dialect, SpatiaLite's BuildMbr), layer `buildings`, field `id`.
# Each square's area-weighted centroid is its point, so the truth is the benchmark's.
#
# Python: a venv at $PROTOTYPE_VENV (default $CARGO_TARGET_DIR/prototype-venv) with the pinned
# packages of requirements.txt from PyPI (numpy, scipy, and pyogrio + shapely to read the
# GeoPackages: pyogrio's wheel brings its own GDAL). The test suite never needs Python.
# Everything is written under $CARGO_TARGET_DIR (default target/): bench-end-to-end/ (the
# points) and bench-prototype/ (squares, outputs, times).
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
repo=$(cd "$here/../../.." && pwd)
export CARGO_TARGET_DIR=${CARGO_TARGET_DIR:-$repo/target}
n=${1:-64000}
runs=${RUNS:-3}
seed=20261102 # SEED of tests/bench/end_to_end.rs
points=$CARGO_TARGET_DIR/bench-end-to-end
work=$CARGO_TARGET_DIR/bench-prototype
venv=${PROTOTYPE_VENV:-$CARGO_TARGET_DIR/prototype-venv}
mkdir -p "$work"
for tool in /usr/bin/time:time ogr2ogr:gdal-bin ogrinfo:gdal-bin python3:python3-venv; do
    if ! command -v "${tool%%:*}" >/dev/null; then
        echo "run.sh: ${tool%%:*} is missing; install Debian's ${tool#*:} package (apt-get install ${tool#*:})" >&2
        exit 2
    fi
done

if [ ! -x "$venv/bin/python" ]; then
    python3 -m venv "$venv"
fi
if ! cmp -s "$here/requirements.txt" "$venv/requirements.installed"; then
    "$venv/bin/pip" install --quiet -r "$here/requirements.txt"
    cp "$here/requirements.txt" "$venv/requirements.installed"
fi

cd "$repo"
if [ -e "$points/reference-$n-$seed.gpkg" ] && [ -e "$points/target-$n-$seed.gpkg" ]; then
    cargo bench --quiet --bench end_to_end --no-run
else
    cargo bench --quiet --bench end_to_end -- "$n"
fi
tiemark=$CARGO_TARGET_DIR/release/tiemark

for s in reference target; do
    squares=$work/$s-$n-squares.gpkg
    if [ ! -e "$squares" ]; then
        ogr2ogr -f GPKG "$work/$s-$n-partial.gpkg" "$points/$s-$n-$seed.gpkg" -nln buildings \
            -nlt POLYGON -a_srs EPSG:32633 -dialect SQLite -sql \
            "SELECT id, BuildMbr(ST_X(geom) - 4, ST_Y(geom) - 4, ST_X(geom) + 4, ST_Y(geom) + 4, 32633) AS geom FROM landmarks"
        mv "$work/$s-$n-partial.gpkg" "$squares"
    fi
done
ref=$work/reference-$n-squares.gpkg
tgt=$work/target-$n-squares.gpkg
count() { ogrinfo -so "$1" buildings | sed -n 's/^Feature Count: //p'; }
echo "surveys: $(count "$ref") + $(count "$tgt") squares of 8 m"

times=$work/times-$n.txt
: >"$times"
timed() { # tool command...
    local tool=$1
    shift
    /usr/bin/time -f "$tool %e %U %S %M" -a -o "$times" "$@" >"$work/$tool.log"
}
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
for i in $(seq "$runs"); do
    rm -rf "$work/tiemark-out" "$work/prototype-out"
    timed tiemark "$tiemark" --quiet match "$ref" "$tgt" --out "$work/tiemark-out" \
        --reference-id id --target-id id
    timed prototype "$venv/bin/python" "$here/prototype.py" "$ref" "$tgt" \
        --out "$work/prototype-out" --reference-id id --target-id id
done
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
cat "$work/prototype.log"
"$venv/bin/python" "$here/compare.py" "$times" "$work/tiemark-out" "$work/prototype-out"
