"""Recompute the final values of kept coverage runs under candidate rules (issue 13).

    python3 tests/studies/final_rules.py DIR [DIR ...]

DIR is an `FF_KEEP` directory of final_coverage.sh whose runs made the late two-state fit
(`excited_states.two_state_late: true`), so every rule below can be evaluated on the same runs.
For each quantity final_coverage.py counts (G_E, G_M at the shells, G_E(0), G_M(0), kappa,
r_E, r_M) the value and total error are rebuilt from formfactor_samples.csv and
derived_samples.csv as src/error_budget.rs does (reference estimator per Q² model, models
averaged with equal weights, the model spread as the Q² model error, statistical error from the
jackknife resamples of the combination); the script first checks that the shipped rule
reproduces the written final.csv (value to 1e-9, total error to 1e-6 relative) and prints how
often it does (either the current rule or that of the binaries before December 3, cov13b).
Rules (value; excited-state error), `d = M_all − M_late`, `σ_d` its resampled error:
  default    two-state; excess of the summation − two-state difference over its noise
             (with `two_state_late: false`)
  late_stat  late; none (the late fit's statistical error alone)
  late_excess late; sqrt(max(0, d² − σ_d²)) (the shift beyond its noise; with `tq` the
             shipped default since December 3)
  late_full  late; |d|                (the opt-in rule before December 3)
  late_max   late; max(|d|, σ_d)
  late_quad  late; sqrt(d² + σ_d²)
each with the statistical error as resampled (`run`), scaled to the analytic inflation of an
AR(1) chain with ρ = 0.3 in the run's bins (`analytic`: `analytic_factor` over the run's own;
a diagnostic for the heavy mock, whose data are exactly that), or multiplied by a Student-t
factor for ν = bins − 1 degrees of freedom: `tq` = t_ν⁻¹(Φ(2)) / 2 (±2σ a 95.45 % interval),
`tv` = sqrt(ν / (ν − 2)) (unit pull variance). Printed per rule: the share within 1 and 2σ
and the pull rms, each with its standard error from resampling whole seeds, and the mean pull.
Jackknife runs only. Needs python3 with numpy and PyYAML.
"""
import csv
import glob
import math
import os
import random
import sys
from functools import lru_cache

import numpy as np
import yaml

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from final_coverage import truth_values  # noqa: E402

RHO = 0.3  # the mocks' autocorrelation (tests/studies/*.mock.yaml, demo-data/nucleon.mock.yaml)


def analytic_factor(b, rho=RHO):
    """sqrt(2 tau_int) of a stationary AR(1) chain with coefficient rho in bins of b (docs/methods.md
    §7): bin variance [b(1+ρ)/(1−ρ) − 2ρ(1−ρ^b)/(1−ρ)²]/b², lag-k bin covariance
    ρ^{b(k−1)+1}(1−ρ^b)²/((1−ρ)² b²); bins of 2 give 1/(1−ρ), i.e. tau_int 0.714 at ρ = 0.3."""
    var = (b * (1 + rho) / (1 - rho) - 2 * rho * (1 - rho ** b) / (1 - rho) ** 2) / b ** 2
    lag1 = rho * (1 - rho ** b) ** 2 / ((1 - rho) ** 2 * b ** 2) / var
    return math.sqrt(2 * (0.5 + lag1 / (1 - rho ** b)))


RULES = ['default', 'late_stat', 'late_excess', 'late_full', 'late_max', 'late_quad']
SCALINGS = ['run', 'analytic', 'tq', 'tv']


def t_pdf(x, nu):
    return math.exp(math.lgamma((nu + 1) / 2) - math.lgamma(nu / 2)) / math.sqrt(nu * math.pi) \
        * (1 + x * x / nu) ** (-(nu + 1) / 2)


def t_within(k, nu, steps=4000):
    """P(|t_nu| < k) by Simpson's rule on the density."""
    h = k / steps
    s = t_pdf(0, nu) + t_pdf(k, nu)
    for i in range(1, steps):
        s += (4 if i % 2 else 2) * t_pdf(i * h, nu)
    return 2 * s * h / 3


@lru_cache(None)
def t_factor(nu, kind):
    if kind == 'tv':
        return math.sqrt(nu / (nu - 2))
    p, lo, hi = math.erf(math.sqrt(2)), 0.0, 10.0  # P(|z| < 2)
    for _ in range(60):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if t_within(mid, nu) < p else (lo, mid)
    return lo / 2


def load(path, derived):
    """(quantity, nq2 or None) -> (method, model) -> [central, samples]."""
    out = {}
    with open(path) as f:
        for r in csv.DictReader(f):
            parts = r['quantity'].split('|')
            if derived:
                method, model, q = parts
                key = (q, None)
            else:
                method, ff, shell = parts
                if 'nf2=0 ' not in shell:
                    continue
                key, model = (ff, int(shell.split('nq2=')[1])), ''
            entry = out.setdefault(key, {}).setdefault((method, model), [float(r['central']), []])
            entry[1].append(float(r['value']))
    return out


def jk_err(xs):
    xs = np.asarray(xs)
    n = len(xs)
    return math.sqrt((n - 1) / n * ((xs - xs.mean()) ** 2).sum())


def finite(v):
    return math.isfinite(v[0]) and all(math.isfinite(x) for x in v[1])


def budget(variants, rule, scale=1.0, t=None):
    """(value, total error) of one quantity under `rule`, or None."""
    vals, samples, exc2 = [], [], []
    for model in sorted({mo for (_, mo) in variants}):
        def get(m):
            v = variants.get((m, model))
            return v if v and finite(v) else None
        late, ts, su = get('two_state_late'), get('two_state'), get('summation')
        ref = (ts or su) if rule == 'default' else (late or ts or su)
        if ref is None:
            continue
        s = np.asarray(ref[1])
        if ref is late:
            if ts is None:
                e = 0.0
            else:
                d = ts[0] - late[0]
                sd = jk_err(np.asarray(ts[1]) - s) * scale
                e = {'late_full': abs(d), 'late_max': max(abs(d), sd),
                     'late_quad': math.hypot(d, sd), 'late_stat': 0.0,
                     'late_excess': math.sqrt(max(0.0, d * d - sd * sd))}[rule]
        else:
            others = [o for o in (ts, su) if o is not None and o is not ref]
            e = max((math.sqrt(max(0.0, (o[0] - ref[0]) ** 2
                                   - (jk_err(np.asarray(o[1]) - s) * scale) ** 2))
                     for o in others), default=0.0)
        vals.append(ref[0])
        samples.append(s)
        exc2.append(e * e)
    if not vals:
        return None
    stat = jk_err(sum(samples) / len(samples)) * scale
    if t:
        stat *= t_factor(len(samples[0]) - 1, t)
    q2 = float(np.std(vals)) if len(vals) > 1 else 0.0
    return sum(vals) / len(vals), math.sqrt(stat ** 2 + sum(exc2) / len(exc2) + q2 ** 2)


def inflation(run):
    """The run's inflation factor and its bin size."""
    with open(run + 'autocorrelation.csv') as f:
        for r in csv.DictReader(f):
            if 'inflated by' in r['note']:
                return float(r['note'].split('inflated by ')[1].split(';')[0]), int(r['bin_size'])
    return None, None


def report(name, pulls):
    if not pulls:
        return
    p = np.array([x for x, _ in pulls])
    seeds = np.array([s for _, s in pulls])
    groups = [np.where(seeds == s)[0] for s in np.unique(seeds)]
    rng = random.Random(1)
    b1, b2, br = [], [], []
    for _ in range(1000):
        pick = np.concatenate([groups[rng.randrange(len(groups))] for _ in groups])
        b1.append(np.mean(np.abs(p[pick]) < 1))
        b2.append(np.mean(np.abs(p[pick]) < 2))
        br.append(math.sqrt(np.mean(p[pick] ** 2)))
    print(f'{name} n {len(p):5d}  1σ {100 * np.mean(np.abs(p) < 1):5.1f} ± {100 * np.std(b1):.1f}  '
          f'2σ {100 * np.mean(np.abs(p) < 2):5.1f} ± {100 * np.std(b2):.1f}  '
          f'rms {math.sqrt(np.mean(p * p)):.2f} ± {np.std(br):.2f}  mean {p.mean():+.2f}')


def main():
    pulls = {(r, s): [] for r in RULES for s in SCALINGS}
    reproduced, compared, factors = 0, 0, []
    seed_dirs = sorted(p for w in sys.argv[1:] for p in glob.glob(os.path.join(w, 's*/')))
    for seed, d in enumerate(seed_dirs):
        run = d + 'run/'
        if not os.path.exists(run + 'final.csv'):
            continue
        with open(d + 'data/truth.yaml') as f, open(d + 'spec.yaml') as g:
            want = truth_values(yaml.safe_load(f), yaml.safe_load(g))
        data = load(run + 'formfactor_samples.csv', False)
        data.update(load(run + 'derived_samples.csv', True))
        factor, bin_size = inflation(run)
        factors.append((factor or 1.0, analytic_factor(bin_size) if bin_size else 1.0))
        written = {}
        with open(run + 'final.csv') as f:
            for r in csv.DictReader(f):
                key = (r['quantity'], int(r['shell'].split('nq2=')[1]) if r['shell'] else None)
                written[key] = (float(r['value']), float(r['error_total']), r['rule'])
        for key, truth in want.items():
            if key not in data or key not in written:
                continue
            # The shipped rule: since December 3 (cov13b) the late value with the excess shift
            # and Student-t statistical errors; runs of older binaries used the full shift
            # (late fit asked for) or no late fit, without the t factor. Either counts.
            late = 'smallest' in written[key][2]
            shipped = [budget(data[key], rule, 1.0, t) for rule, t in
                       ([('late_excess', 'tq'), ('late_full', None)] if late
                        else [('default', 'tq'), ('default', None)])]
            if shipped[0]:
                compared += 1
                value, total, _ = written[key]
                reproduced += any(abs(b[0] - value) <= 1e-9 * max(1.0, abs(value))
                                  and abs(b[1] - total) <= 1e-6 * total for b in shipped if b)
            for rule, scaling in pulls:
                scale = analytic_factor(bin_size) / factor if scaling == 'analytic' and factor else 1.0
                b = budget(data[key], rule, scale, scaling if scaling in ('tq', 'tv') else None)
                if b and b[1] > 0:
                    pulls[(rule, scaling)].append(((b[0] - truth) / b[1], seed))
    print(f'{len(seed_dirs)} seeds; the shipped rule reproduces final.csv on {reproduced}/{compared}'
          f' quantities; inflation factor mean {np.mean([f for f, _ in factors]):.4f} '
          f'(AR(1) analytic {np.mean([a for _, a in factors]):.4f})')
    for (rule, scaling), ps in pulls.items():
        report(f'{rule:<10} {scaling:<8}', ps)
    return 0 if compared else 1


if __name__ == '__main__':
    sys.exit(main())
