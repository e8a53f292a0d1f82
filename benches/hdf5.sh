#!/usr/bin/env bash
# HDF5 input benchmark: packing per-configuration files (µs of CPU per dataset, one pass, each
# file opened once), reading the packed file against `cat` of the same file, and a whole run
# from the packed file against the same run from CSV. Every timing gives wall and CPU (user +
# system) seconds side by side, with a warm page cache; CPU is what to compare on a shared
# machine. Reading is timed as `formfactory inspect` of the packed file (read + a short
# summary) and `check` of the pipeline (read + data rules), each the mean of REPEAT runs;
# `pack` is compared with libhdf5's per-dataset minimum (benches/hdf5_minimum.c).
#
# Usage: benches/hdf5.sh [CONFIGS] [BINARY]
#   CONFIGS  configurations of the mock ensemble (default 200)
#   BINARY   a formfactory built with `--features hdf5` (default target/release/formfactory)
# Environment: REPEAT (default 3) runs per short measurement, the best one reported.
# Needs python3 with h5py and numpy (see demo-data/csv_to_hdf5.py). Run from the repository
# root. The ensemble is the nucleon demo spec with every momentum of each shell
# (`representatives: false`) and CONFIGS configurations; all files live in a temporary
# directory that is removed at the end.
set -euo pipefail
N=${1:-200}
BIN=$(realpath "${2:-target/release/formfactory}")
PY=${PYTHON:-python3}
ROOT=$(pwd)
WORK=$(mktemp -d)
trap 'rm -rf "$WORK"' EXIT

sed -e "s/configs: 100/configs: $N/" -e "s/representatives: true/representatives: false/" \
    demo-data/nucleon.mock.yaml > "$WORK/mock.yaml"
"$BIN" mock "$WORK/mock.yaml" --out "$WORK/csv" > /dev/null
"$PY" demo-data/csv_to_hdf5.py "$WORK/csv" "$WORK/h5"

# The nucleon-vector pipeline on this ensemble, from CSV, per-configuration HDF5 and packed.
sed -e "s|../demo-data/nucleon/|$WORK/csv/|" -e "s|dir: .*|dir: $WORK/run-csv|" \
    pipelines/nucleon-vector.yaml > "$WORK/csv.yaml"
data_hdf5() {
    awk -v repl="$1" '
        /^data:/ { print "data:"; print repl; skip = 1; next }
        skip && /^  / { next }
        { skip = 0; print }' "$WORK/csv.yaml" | sed -e "s|dir: .*|dir: $WORK/run-$2|"
}
data_hdf5 "  hdf5:
    files: $WORK/h5/cfg{config}.h5
    twopt: /c2pt_p{px}_{py}_{pz}
    threept: /c3pt_dt{tsep}_{current}_{projector}_pf{pfx}_{pfy}_{pfz}_q{qx}_{qy}_{qz}" h5 > "$WORK/h5.yaml"
data_hdf5 "  hdf5:
    packed: $WORK/packed.h5" packed > "$WORK/packed.yaml"

echo "ensemble: $N configurations; CSV $(du -sh "$WORK/csv" | cut -f1), per-configuration HDF5 $(du -sh "$WORK/h5" | cut -f1) in $(ls "$WORK/h5" | wc -l) files"
REPEAT=${REPEAT:-5}
# `timed LABEL CMD...`: wall and CPU (user + system) seconds of CMD, the mean of REPEAT runs
# timed together (so that /usr/bin/time's 10 ms resolution does not hide short commands);
# sets WALL and CPU for ratios.
timed() {
    local label=$1 f w u s
    shift
    f=$(mktemp)
    /usr/bin/time -f "%e %U %S" -o "$f" \
        bash -c 'for _ in $(seq "$0"); do "$@" > /dev/null; done' "$REPEAT" "$@"
    read -r w u s < "$f"
    rm -f "$f"
    WALL=$(echo "scale=4; $w / $REPEAT" | bc -l)
    CPU=$(echo "scale=4; ($u + $s) / $REPEAT" | bc -l)
    printf "%-48s %8.3f s wall %8.3f s CPU\n" "$label" "$WALL" "$CPU"
}
ratio() {
    if [ "$(echo "$2 > 0" | bc -l)" = 1 ]; then echo "scale=1; $1 / $2" | bc -l; else echo "n/a "; fi
}

cat "$WORK"/h5/* > /dev/null   # warm the page cache: measure the library, not the disk
"$BIN" pack "$WORK/h5.yaml" --out "$WORK/packed.h5" --quiet
f=$(mktemp)
/usr/bin/time -f "%e %U %S" -o "$f" "$BIN" pack "$WORK/h5.yaml" --out "$WORK/packed.h5" --force > "$WORK/pack.out"
read -r w u s < "$f"
rm -f "$f"
cat "$WORK/pack.out"
datasets=$(sed -n 's/^read \([0-9]*\) datasets.*/\1/p' "$WORK/pack.out")
cpu=$(echo "$u + $s" | bc -l)
echo "pack: $datasets datasets in $w s wall, $cpu s CPU = $(echo "scale=1; $cpu * 1000000 / $datasets" | bc -l) µs CPU per dataset (whole process)"
# libhdf5's per-dataset minimum on the same files (benches/hdf5_minimum.c: open, type, shape,
# read, close; each file opened once), when a C compiler and the library's headers are here.
if cc -O2 "$ROOT/benches/hdf5_minimum.c" -o "$WORK/hdf5_minimum" $(pkg-config --cflags --libs hdf5) 2> /dev/null; then
    f=$(mktemp)
    /usr/bin/time -f "%e %U %S" -o "$f" "$WORK/hdf5_minimum" "$WORK"/h5/*.h5 > /dev/null
    read -r w u s < "$f"
    rm -f "$f"
    cpu=$(echo "$u + $s" | bc -l)
    echo "libhdf5 minimum: $w s wall, $cpu s CPU = $(echo "scale=1; $cpu * 1000000 / $datasets" | bc -l) µs CPU per dataset"
else
    echo "libhdf5 minimum: not measured (needs cc and pkg-config hdf5)"
fi
echo "packed file: $(stat -c %s "$WORK/packed.h5") bytes"

cat "$WORK/packed.h5" > /dev/null
timed "cat of the packed file" cat "$WORK/packed.h5"
cat_cpu=$CPU cat_wall=$WALL
timed "inspect of the packed file (read + summary)" "$BIN" inspect "$WORK/packed.h5"
echo "  inspect / cat: $(ratio "$CPU" "$cat_cpu")x CPU, $(ratio "$WALL" "$cat_wall")x wall"
# The read's cost is the page faults of its fresh memory; glibc's transparent-huge-page
# malloc (glibc >= 2.35) takes most of them away (DEVELOPERS.md, HDF5).
GLIBC_TUNABLES=glibc.malloc.hugetlb=1 timed "  the same, GLIBC_TUNABLES=glibc.malloc.hugetlb=1" \
    "$BIN" inspect "$WORK/packed.h5"
echo "  inspect / cat: $(ratio "$CPU" "$cat_cpu")x CPU, $(ratio "$WALL" "$cat_wall")x wall"
timed "check from the packed file (read + data rules)" "$BIN" check "$WORK/packed.yaml"
echo "  check / cat: $(ratio "$CPU" "$cat_cpu")x CPU, $(ratio "$WALL" "$cat_wall")x wall"
timed "check from CSV" "$BIN" check "$WORK/csv.yaml"
REPEAT=1
timed "whole run from the packed file" "$BIN" run "$WORK/packed.yaml" --quiet --force
packed_cpu=$CPU packed_wall=$WALL
timed "whole run from CSV" "$BIN" run "$WORK/csv.yaml" --quiet --force
echo "  CSV / packed: $(ratio "$CPU" "$packed_cpu")x CPU, $(ratio "$WALL" "$packed_wall")x wall"
for r in csv packed; do
    grep -o '"read[^}]*' "$WORK/run-$r/manifest.json" | head -1 | sed "s/^/  $r manifest: /"
done
cmp "$WORK/run-csv/formfactors.csv" "$WORK/run-packed/formfactors.csv" \
    && echo "form factors from the packed file equal those from CSV (byte for byte)"
cd "$ROOT"
