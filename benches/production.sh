#!/usr/bin/env bash
# Production-scale benchmark: generate the mock ensemble of benches/production.mock.yaml into a
# scratch directory (never into the repository), run the pipeline once per stage prefix
# (`stop_after`), and print per-stage wall and CPU time, read throughput and peak RSS.
#
#   benches/production.sh [CONFIGS] [JOBS]      (defaults: 1000 configurations, 2 threads)
#
# SIZE=full uses benches/production-full.mock.yaml instead (every current under every
# projector: 3105 three-point channels, 2.44 GB of CSV at 1000 configurations, the size of
# issue 14's measurements; the default spec has 705 channels and 0.7 GB).
#
# Environment: FORMFACTORY (binary; default target/release/formfactory, build it first with
# `cargo build --release`), SCRATCH (default /tmp/formfactory-production), SOURCE (`csv`, the
# default, or `packed`: the tables packed once with `formfactory pack` into
# SCRATCH/data-CONFIGS/ensemble.packed.h5 and the runs read that; needs a binary built with
# `--features hdf5`; the script then also times `inspect` of the packed file, which reads every
# channel, against `cat` of it). The generated data
# are kept in SCRATCH and reused by later runs of the same size. CPU time is user + system time
# of the whole process; per-stage figures are differences between consecutive prefixes, so
# they are noisy on a loaded machine: compare before/after runs made side by side.
set -euo pipefail
configs=${1:-1000}
jobs=${2:-2}
root=$(cd "$(dirname "$0")/.." && pwd)
bin=${FORMFACTORY:-$root/target/release/formfactory}
scratch=${SCRATCH:-/tmp/formfactory-production}
size=${SIZE:-standard}
case $size in
    standard) spec=$root/benches/production.mock.yaml; currents="V1, V4"; tag=$configs ;;
    full) spec=$root/benches/production-full.mock.yaml; currents="V1, V2, V3, V4"; tag=full-$configs ;;
    *) echo "SIZE must be standard or full, not $size" >&2; exit 1 ;;
esac
data=$scratch/data-$tag
mkdir -p "$scratch"
if [ ! -x "$bin" ]; then
    echo "no binary at $bin; run cargo build --release first" >&2
    exit 1
fi
if [ ! -f "$data/threept.csv" ]; then
    sed "s/^  configs: 1000$/  configs: $configs/" "$spec" > "$scratch/spec-$tag.yaml"
    "$bin" mock "$scratch/spec-$tag.yaml" --out "$data" > /dev/null
fi
source=${SOURCE:-csv}
case $source in
    csv) data_section="  twopt: $data/twopt.csv
  threept: $data/threept.csv" ;;
    packed)
        if [ ! -f "$data/ensemble.packed.h5" ]; then
            "$bin" pack "$data" --out "$data/ensemble.packed.h5" --quiet > /dev/null
        fi
        data_section="  hdf5:
    packed: $data/ensemble.packed.h5" ;;
    *) echo "SOURCE must be csv or packed, not $source" >&2; exit 1 ;;
esac
pipeline=$scratch/production-$tag-$source.yaml
cat > "$pipeline" <<YAML
ensemble:
  label: production-scale mock
  L: 32
  T: 64
  spacing_fm: 0.09
  pion_mass: 0.14
  hadron: spin1half
data:
$data_section
resampling:
  method: jackknife
  bin_size: 1
spectrum:
  t_min: {from: 3, to: 6}
  t_max: 14
  n_states: {from: 1, to: 2}
ratio:
  tsep: [8, 10, 12, 14, 16]
  currents: [$currents]
excited_states:
  methods: [plateau, summation, two_state]
  tau_cut: 2
  final_method: two_state
renormalization:
  vector: {value: 1.0, error: 0.0}
decomposition:
  energies: fit
  weights: diagonal
q2_fits:
  form_factors:
    GE:
      - {model: dipole}
    GM:
      - {model: dipole}
output:
  dir: $scratch/run
  plots: []
YAML
bytes=$(( $(stat -c %s "$data/twopt.csv") + $(stat -c %s "$data/threept.csv") ))
rows=$(( $(wc -l < "$data/twopt.csv") + $(wc -l < "$data/threept.csv") - 2 ))
echo "data: $configs configurations, $rows rows, $((bytes / 1000000)) MB of CSV; --jobs $jobs; read from $source"
if [ "$source" = packed ]; then
    echo "packed file: $(( $(stat -c %s "$data/ensemble.packed.h5") / 1000000 )) MB"
fi
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
printf "%-14s %9s %9s %9s %9s %10s\n" stage "wall s" "CPU s" "cum wall" "cum CPU" "peak RSS"
prev_wall=0
prev_cpu=0
for stage in data spectrum ratio decomposition q2_fits report; do
    set_args=(--set "stop_after=$stage")
    if [ "$stage" = report ]; then
        set_args=()
    fi
    out=$scratch/time-$stage
    /usr/bin/time -f "%e %U %S %M" -o "$out" "$bin" run "$pipeline" --out "$scratch/run-$stage" \
        --force --quiet --jobs "$jobs" "${set_args[@]}" > /dev/null
    read -r wall user sys rss < "$out"
    cpu=$(echo "$user + $sys" | bc)
    printf "%-14s %9.2f %9.2f %9.2f %9.2f %7d MB\n" "$stage" \
        "$(echo "$wall - $prev_wall" | bc)" "$(echo "$cpu - $prev_cpu" | bc)" \
        "$wall" "$cpu" $((rss / 1024))
    if [ "$stage" = data ]; then
        read_wall=$wall
        read_cpu=$cpu
    fi
    prev_wall=$wall
    prev_cpu=$cpu
done
echo "end to end: ${prev_wall} s wall, ${prev_cpu} s CPU"
echo "data stage (read, bin, resample, including process start): " \
    "$(echo "scale=1; $bytes / 1000000 / $read_wall" | bc) MB/s and" \
    "$(echo "scale=2; $rows / 1000000 / $read_wall" | bc) M rows/s per wall second," \
    "$(echo "scale=1; $bytes / 1000000 / $read_cpu" | bc) MB/s per CPU second"
if [ "$source" = packed ]; then
    # Reading the packed file against `cat` of it (page cache warm): `inspect` reads every
    # channel's values into one reused buffer; the mean of five runs of each, side by side.
    packed_file=$data/ensemble.packed.h5
    t=$scratch/time-read
    /usr/bin/time -f "%e" -o "$t" bash -c 'for _ in 1 2 3 4 5; do cat "$0" > /dev/null; done' "$packed_file"
    cat_s=$(echo "scale=4; $(cat "$t") / 5" | bc)
    /usr/bin/time -f "%e" -o "$t" bash -c 'for _ in 1 2 3 4 5; do "$1" inspect "$0" > /dev/null; done' "$packed_file" "$bin"
    inspect_s=$(echo "scale=4; $(cat "$t") / 5" | bc)
    echo "reading the packed file: inspect $inspect_s s, cat $cat_s s (mean of 5 each)"
fi
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
