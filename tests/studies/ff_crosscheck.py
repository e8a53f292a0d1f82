"""Detection and false alarms of the plateau verdict of formfactor_crosscheck.csv against the
mock truth, per seed directory (see ff_crosscheck.sh).

A plateau form factor is "off" when |value - truth| > 2 own_error (its statistical error);
the truth at a shell is the value at the truth point with p_f = 0 and |q|^2 = nq2 of the
shell label. Printed per tsep and overall: detection (flagged among the off ones), the false
alarms among the plateaus within 2 sigma, and the share of all flags that fall on those;
for comparison also the significance of the difference from the reference alone
(flag above2sigma) and the median ratio of the difference's error to the plateau's.
"""
import csv
import os
import statistics
import sys

import yaml
from mock_truth import shell_truth


def truth_values(path):
    with open(path) as f:
        return shell_truth(yaml.safe_load(f))


def rows(work):
    """(tsep, off, biased, above2sigma, error / own_error, oracle) per plateau form factor."""
    out = []
    bias = {}  # (form factor, nq2, tsep) -> value - truth over the seeds
    for seed_dir in sorted(os.listdir(work)):
        d = os.path.join(work, seed_dir)
        table = os.path.join(d, "run", "formfactor_crosscheck.csv")
        if not os.path.exists(table):
            continue
        want = truth_values(os.path.join(d, "data", "truth.yaml"))
        with open(table) as f:
            for r in csv.DictReader(f):
                if r["comparison"] != "reference" or not r["method"].startswith("plateau"):
                    continue
                key = (r["form_factor"], int(r["shell"].split("nq2=")[1]))
                if key not in want:
                    continue
                own = float(r["own_error"])
                if not own > 0:
                    continue
                off = abs(float(r["value"]) - want[key]) > 2 * own
                tsep = int(r["method"][len("plateau_tsep"):])
                bias.setdefault(key + (tsep,), []).append(float(r["value"]) - want[key])
                out.append([tsep, off, r["biased"] == "yes", r["flag"] == "above2sigma",
                            float(r["error"]) / own, key + (tsep,), own])
    for r in out:
        mean_bias = statistics.fmean(bias[r[5]])
        r[5] = abs(mean_bias) > 2 * r[6]
    return out


def line(label, rs, pick):
    off = [r for r in rs if r[1]]
    ok = [r for r in rs if not r[1]]
    det = sum(pick(r) for r in off)
    fa = sum(pick(r) for r in ok)
    flags = det + fa
    frac = lambda a, b: f"{a / b:.2f}" if b else "  - "
    return (f"  {label:<8} n {len(rs):4d}  off {len(off):4d}  detected {det:4d} "
            f"({frac(det, len(off))})  false {fa:3d}/{len(ok):3d} ({frac(fa, len(ok))})  "
            f"flags on good {fa:3d}/{flags:3d} ({frac(fa, flags)})")


def main():
    work = sys.argv[1]
    rs = rows(work)
    if not rs:
        print("no plateau rows")
        return 1
    tseps = sorted({r[0] for r in rs})
    for name, pick in (("biased (the verdict)", lambda r: r[2]),
                       ("above2sigma against the reference alone", lambda r: r[3]),
                       ("oracle: mean bias over the seeds > 2 own errors", lambda r: r[5])):
        print(name)
        for t in tseps:
            print(line(f"tsep {t}", [r for r in rs if r[0] == t], pick))
        print(line("all", rs, pick))
    print("the verdict by the error of the difference over the plateau's own error")
    for lo, hi in ((0.0, 1.5), (1.5, 3.0), (3.0, float("inf"))):
        print(line(f"{lo:g}-{hi:g}", [r for r in rs if lo <= r[4] < hi], lambda r: r[2]))
    print("median error of the difference / own error, per tsep: " + ", ".join(
        f"{t}: {statistics.median(r[4] for r in rs if r[0] == t):.2f}" for t in tseps))
    return 0


if __name__ == "__main__":
    sys.exit(main())
