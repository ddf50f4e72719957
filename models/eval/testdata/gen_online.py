#!/usr/bin/python3
"""Reference values for the online-experiment statistics of models/eval.

Run with Debian's packages (python3-scipy, python3-statsmodels, python3-numpy):

    /usr/bin/python3 models/eval/testdata/gen_online.py > models/eval/testdata/online_reference.json

The output is committed; the Go tests read it and need no Python.

- Wilson score intervals: scipy.stats.binomtest(k, n).proportion_ci(0.95, method="wilson").
- Two-proportion z-test (pooled, two-sided): statsmodels.stats.proportion.proportions_ztest.
- Sample size per arm for 80 % power at 5 % two-sided: the normal-approximation formula
  n = (z_{.975} sqrt(2 pbar qbar) + z_{.80} sqrt(p1 q1 + p2 q2))^2 / (p1 - p2)^2 with the
  quantiles from scipy.stats.norm.ppf, rounded up.
- Sign test: scipy.stats.binomtest(k, n, 0.5).pvalue (two-sided).
- Off-policy estimates: IPS, SNIPS, their normal and delta-method intervals and the effective
  sample size, computed with numpy on seeded random logs.
"""
import json
import math

import numpy as np
import scipy
import scipy.stats
import statsmodels
from statsmodels.stats.proportion import proportions_ztest

out = {"versions": {"scipy": scipy.__version__, "statsmodels": statsmodels.__version__, "numpy": np.__version__}}

out["wilson"] = []
for k, n in [(0, 10), (1, 10), (5, 10), (10, 10), (37, 1000), (412, 10000), (3, 250000)]:
    ci = scipy.stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    out["wilson"].append({"k": k, "n": n, "low": ci.low, "high": ci.high})

z80, z975 = scipy.stats.norm.ppf(0.80), scipy.stats.norm.ppf(0.975)
out["ztest"] = []
for x1, n1, x2, n2 in [(120, 2000, 90, 2000), (45, 1000, 52, 1100), (3010, 60000, 2890, 60000), (7, 50, 1, 60)]:
    z, p = proportions_ztest([x1, x2], [n1, n2])
    p1, p2 = x1 / n1, x2 / n2
    pbar = (p1 + p2) / 2
    need = math.ceil((z975 * math.sqrt(2 * pbar * (1 - pbar)) + z80 * math.sqrt(p1 * (1 - p1) + p2 * (1 - p2))) ** 2 / (p1 - p2) ** 2)
    out["ztest"].append({"x1": x1, "n1": n1, "x2": x2, "n2": n2, "z": float(z), "p": float(p), "needed_per_arm": need})

out["sign"] = []
for k, n in [(0, 1), (3, 10), (5, 10), (9, 10), (60, 100), (530, 1000), (5200, 10000)]:
    out["sign"].append({"k": k, "n": n, "p": scipy.stats.binomtest(k, n, 0.5).pvalue})

out["offpolicy"] = []
rng = np.random.default_rng(20261204)
for case in range(3):
    m = [400, 2000, 60][case]
    logged = rng.choice([1.0, 0.5, 0.1, 0.02], size=m, p=[0.6, 0.2, 0.15, 0.05])
    target = (rng.random(m) < [0.7, 0.4, 0.05][case]).astype(float)
    reward = (rng.random(m) < 0.08 + 0.1 * target).astype(float)
    w = target / logged
    n = float(m)
    ips = float(np.sum(w * reward) / n)
    v = float(np.var(w * reward, ddof=1))
    h = float(z975 * math.sqrt(v / n))
    sw = float(np.sum(w))
    snips = float(np.sum(w * reward) / sw)
    hs = float(z975 * math.sqrt(np.sum(w * w * (reward - snips) ** 2)) / sw)
    ess = float(sw * sw / np.sum(w * w))
    out["offpolicy"].append({
        "logged": logged.tolist(), "target": target.tolist(), "reward": reward.tolist(),
        "ips": ips, "ips_low": ips - h, "ips_high": ips + h,
        "snips": snips, "snips_low": snips - hs, "snips_high": snips + hs, "ess": ess,
    })

json.dump(out, __import__("sys").stdout, indent=1)
print()
