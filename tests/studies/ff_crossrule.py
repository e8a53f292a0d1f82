"""Candidate rules for the plateau verdict of formfactor_crosscheck.csv, recomputed offline
from the runs ff_crosscheck.sh kept (FF_KEEP=DIR), against the mock truth.

    python3 tests/studies/ff_crossrule.py DIR [DIR ...]

Each DIR is one kept study (s1/, s2/, ... with data/truth.yaml and run/). The estimators and
their jackknife samples are read from run/formfactor_samples.csv, so every difference and its
error is recomputed exactly as src/ratio/formfactor_check.rs computes them. First the shipped
rule is recomputed and compared with the written `biased` column (it must agree on every
plateau, else the script stops: the recomputation would not be measuring the shipped rule);
then every candidate is scored per DIR and over all DIRs together:

    detected   flagged among the plateaus more than 2 own errors from the truth ("off")
    near       flagged among the plateaus within 2 own errors of the truth
    fdr        the share of all flags that fall on those near plateaus

A candidate decides for each plateau from its own quantities; a plateau at a smaller tsep
than a flagged one is flagged too, and the trend rule (> TREND_SIGMA to the next larger tsep)
is kept, as in the shipped rule. Notation: p the plateau, sp its error, r the reference
(two-state, else summation), d = p - r and sd its error from the resamples,
sx = sqrt(max(sd^2 - sp^2, 0)) the part of sd that is not the plateau's own noise (the
reference's error when the two are uncorrelated), s the summation and ds = p - s.
"""
import csv
import math
import os
import sys
from statistics import NormalDist

import yaml
from mock_truth import shell_truth

# The shipped constants (src/ratio/formfactor_check.rs): keep in step.
BIAS_DISTANCE = 2.0
TREND_SIGMA = 2.0
PHI = NormalDist().cdf


def mean(x):
    return math.fsum(x) / len(x)


def jk_error(x):
    """Jackknife error (src/resample/value.rs: covariance_of)."""
    n = len(x)
    m = mean(x)
    return math.sqrt(math.fsum((v - m) ** 2 for v in x) * (n - 1) / n)


def sub(a, b):
    return (a[0] - b[0], [x - y for x, y in zip(a[1], b[1])])


def finite(v):
    return math.isfinite(v[0]) and all(math.isfinite(x) for x in v[1])


def plateaus_of(est, truth, written):
    """The plateau rows of one form factor at one shell, by increasing tsep."""
    ref = est.get("two_state") or est.get("summation")
    summ = est.get("summation")
    tseps = sorted(int(m[len("plateau_tsep"):]) for m in est if m.startswith("plateau_tsep"))
    rows = []
    for i, t in enumerate(tseps):
        p = est[f"plateau_tsep{t}"]
        sp = jk_error(p[1])
        f = {"t": t, "sp": sp, "off": abs(p[0] - truth) > 2 * sp, "written": written.get(t)}
        f["d"], f["sd"] = (sub(p, ref)[0], jk_error(sub(p, ref)[1])) if ref else (math.nan,) * 2
        f["ds"] = sub(p, summ)[0] if summ else math.nan
        f["trend"] = 0.0
        if i + 1 < len(tseps):
            q = sub(est[f"plateau_tsep{tseps[i + 1]}"], p)
            err = jk_error(q[1])
            size = abs(q[0])
            sigma = 0.0 if size == 0 else (size / err if err > 0 else math.inf)
            f["trend"] = sigma if (err > 0 or size > 0) else 0.0
        rows.append(f)
    return rows


def load(work):
    """Every (form factor, shell) of every seed of one kept study: its plateau rows."""
    out = []
    for seed in sorted(os.listdir(work)):
        run = os.path.join(work, seed, "run")
        table = os.path.join(run, "formfactor_crosscheck.csv")
        if not os.path.exists(table):
            continue
        with open(os.path.join(work, seed, "data", "truth.yaml")) as f:
            want = shell_truth(yaml.safe_load(f))
        samples = {}
        with open(os.path.join(run, "formfactor_samples.csv")) as f:
            for r in csv.DictReader(f):
                if r["scheme"] != "jackknife":
                    sys.exit(f"{run}: only jackknife samples are handled")
                method, ff, shell = r["quantity"].split("|")
                key = (ff, int(shell.split("nq2=")[1]))
                v = samples.setdefault(key, {}).setdefault(method, [float(r["central"]), {}])
                v[1][int(r["sample"])] = float(r["value"])
        written = {}
        with open(table) as f:
            for r in csv.DictReader(f):
                if r["comparison"] == "reference" and r["method"].startswith("plateau"):
                    key = (r["form_factor"], int(r["shell"].split("nq2=")[1]))
                    tsep = int(r["method"][len("plateau_tsep"):])
                    written.setdefault(key, {})[tsep] = r["biased"] == "yes"
        for key, methods in samples.items():
            if key not in want:
                continue
            est = {m: (c, [s[i] for i in sorted(s)]) for m, (c, s) in methods.items()}
            est = {m: v for m, v in est.items() if finite(v)}
            out.append(plateaus_of(est, want[key], written.get(key, {})))
    return out


def verdicts(rows, own):
    """Flags of one shell's plateaus: the candidate's own test or the trend, carried to
    smaller tsep."""
    flags = [bool(own(f)) or f["trend"] > TREND_SIGMA for f in rows]
    larger = False
    for i in reversed(range(len(rows))):
        flags[i] = flags[i] or larger
        larger = flags[i]
    return flags


def sx(f):
    return math.sqrt(max(f["sd"] ** 2 - f["sp"] ** 2, 0.0))


def p_off(f, scale):
    """Probability that the plateau lies more than 2 own errors from the truth, taking the
    truth as normal about the reference with standard deviation `scale`."""
    a = abs(f["d"])
    if not scale > 0:
        return float(a > 2 * f["sp"])
    return PHI((a - 2 * f["sp"]) / scale) + PHI((-a - 2 * f["sp"]) / scale)


def distance(f):
    return abs(f["d"]) / f["sp"] if f["sp"] > 0 else math.nan


CANDIDATES = [("shipped: |d| > 2 sp", lambda f: distance(f) > BIAS_DISTANCE)]
for D in (1.8, 1.6, 1.4):
    CANDIDATES.append((f"|d| > {D} sp", lambda f, D=D: distance(f) > D))
for D, S in ((2.0, 2.5), (2.0, 2.0), (1.5, 2.5)):
    CANDIDATES.append((f"|d| > {D} sp or |ds| > {S} sp",
                       lambda f, D=D, S=S: distance(f) > D or abs(f["ds"]) > S * f["sp"]))
CANDIDATES.append(("|d| > (2 - 0.6 sx/sp) sp", lambda f: abs(f["d"]) > 2 * f["sp"] - 0.6 * sx(f)))
for pi in (0.3, 0.35, 0.4, 0.5):
    CANDIDATES.append((f"P(off | sx) > {pi}", lambda f, pi=pi: p_off(f, sx(f)) > pi))
CANDIDATES.append(("P(off | sd) > 0.4", lambda f: p_off(f, f["sd"]) > 0.4))


def score(shells, own):
    det = off = fa = near = 0
    for rows in shells:
        for f, flag in zip(rows, verdicts(rows, own)):
            if f["off"]:
                off += 1
                det += flag
            else:
                near += 1
                fa += flag
    ratio = lambda a, b: a / b if b else math.nan
    return ratio(det, off), ratio(fa, near), ratio(fa, det + fa)


def main():
    dirs = sys.argv[1:]
    if not dirs:
        print(__doc__)
        return 2
    data = {d: load(d) for d in dirs}
    for d, shells in data.items():
        n = agree = 0
        for rows in shells:
            for f, flag in zip(rows, verdicts(rows, CANDIDATES[0][1])):
                n += 1
                agree += f["written"] == flag
        print(f"{d}: shipped rule recomputed on {agree}/{n} plateaus as written")
        if agree != n:
            return 1
    names = [os.path.basename(os.path.normpath(d)) for d in dirs] + ["all"]
    print("detected / near flagged / flags on near (fdr)")
    print(f"{'rule':<30}" + "".join(f"{n:>20}" for n in names))
    pooled = sum(data.values(), [])
    for name, own in CANDIDATES:
        cells = [score(data[d], own) for d in dirs] + [score(pooled, own)]
        print(f"{name:<30}" + "".join(f"{a:8.3f}/{b:.2f}/{c:.3f}" for a, b, c in cells))
    return 0


if __name__ == "__main__":
    sys.exit(main())
