# Shared by the mock studies (final_coverage.sh, ff_crosscheck.sh, zexp_coverage.sh), sourced
# after they set `root`, `bin`, `n`, `configs` ("-" keeps the spec's count), `spec`,
# `pipeline`, `base`, `prefix` (of the temporary directory) and `edit` (a sed expression applied
# to the spec, may be empty). For each seed i = 1..n it makes a mock ensemble from `spec` with
# seed base + i and analyses it with `pipeline` into $work/s<i>/{data,run}.
# Environment: FF_KEEP=DIR keeps every seed's data and run in DIR (a directory an earlier study
# made, or a new or empty one: anything else is refused, never deleted), else a temporary
# directory is removed at the end; FF_SET="key=value ..." adds `--set` overrides to every run.
# Leaves `work` set.
if [ -n "${FF_KEEP:-}" ]; then
    work=$FF_KEEP
    if [ -f "$work/.ff-study" ]; then
        rm -rf "$work"
    elif [ -d "$work" ] && [ -n "$(ls -A "$work")" ]; then
        echo "FF_KEEP=$work is not empty and was not made by a study: refused" >&2
        exit 2
    fi
    mkdir -p "$work"
    : >"$work/.ff-study"
else
    work=$(mktemp -d "/tmp/$prefix.XXXXXX")
    trap 'rm -rf "$work"' EXIT
fi
extra=""
for s in ${FF_SET:-}; do
    extra="$extra --set $s"
done
size=""
if [ "$configs" != "-" ]; then
    size="s/^  configs: .*/  configs: $configs/"
fi

seed=1
while [ "$seed" -le "$n" ]; do
    d="$work/s$seed"
    mkdir -p "$d"
    sed -e "s/^seed: .*/seed: $((base + seed))/" -e "$size" -e "$edit" "$spec" >"$d/spec.yaml"
    "$bin" mock "$d/spec.yaml" --out "$d/data" >/dev/null
    # shellcheck disable=SC2086 # $extra is a list of arguments
    if "$bin" run "$pipeline" --out "$d/run" --quiet \
        --set "data.twopt=$d/data/twopt.csv" --set "data.threept=$d/data/threept.csv" \
        --set "output.plots=[]" $extra >/dev/null 2>"$d/err"; then
        :
    else
        echo "seed $((base + seed)): run failed: $(head -c 300 "$d/err")" >&2
    fi
    seed=$((seed + 1))
done
