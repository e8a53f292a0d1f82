#!/usr/bin/env bash
# HDF5 input benchmark: packing per-configuration files (µs per dataset, one pass, each file
# opened once), reading the packed file against `cat` of the same file, and a whole run from
# the packed file against the same run from CSV.
#
# Usage: benches/hdf5.sh [CONFIGS] [BINARY]
#   CONFIGS  configurations of the mock ensemble (default 200)
#   BINARY   a formfactory built with `--features hdf5` (default target/release/formfactory)
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
cat "$WORK"/h5/* > /dev/null   # warm the page cache: measure the library, not the disk
"$BIN" pack "$WORK/h5.yaml" --out "$WORK/packed.h5" --quiet
out=$("$BIN" pack "$WORK/h5.yaml" --out "$WORK/packed.h5" --force)
echo "$out"
datasets=$(echo "$out" | sed -n 's/^read \([0-9]*\) datasets.*/\1/p')
read_s=$(echo "$out" | sed -n 's/.*(read \([0-9.]*\) s.*/\1/p')
echo "pack: $datasets datasets read in $read_s s = $(echo "$read_s * 1000000 / $datasets" | bc -l | cut -c1-6) µs per dataset"
echo "packed file: $(du -h "$WORK/packed.h5" | cut -f1)"

t() { local s e; s=$(date +%s.%N); "$@" > /dev/null; e=$(date +%s.%N); echo "$e - $s" | bc -l | cut -c1-6; }
cat "$WORK/packed.h5" > /dev/null
echo "cat of the packed file: $(t cat "$WORK/packed.h5") s"
echo "check (read + data rules) from the packed file: $(t "$BIN" check "$WORK/packed.yaml") s"
echo "check from CSV: $(t "$BIN" check "$WORK/csv.yaml") s"
echo "whole run from the packed file: $(t "$BIN" run "$WORK/packed.yaml" --quiet --force) s"
echo "whole run from CSV: $(t "$BIN" run "$WORK/csv.yaml" --quiet --force) s"
for r in csv packed; do
    grep -o '"read[^}]*' "$WORK/run-$r/manifest.json" | head -1 | sed "s/^/  $r manifest: /"
done
cmp "$WORK/run-csv/formfactors.csv" "$WORK/run-packed/formfactors.csv" \
    && echo "form factors from the packed file equal those from CSV (byte for byte)"
cd "$ROOT"
