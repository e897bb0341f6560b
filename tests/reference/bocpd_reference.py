#!/usr/bin/python3
"""Dense reference for Bayesian online change-point detection (BOCPD).

What it computes
----------------
The exact run-length posterior P(r_t = j | x_1:t) of Adams & MacKay (2007),
"Bayesian Online Changepoint Detection", arXiv:0710.3742, Algorithm 1, for a
Gaussian stream with unknown mean and precision (Normal-Gamma prior, Student-t
predictive) and a constant hazard H. Convention (REFERENCES.md 5.3): r_t = 0 is
the fresh-prior state that has seen no data; r_t = j >= 1 means the current run
holds the last j readings.

It is deliberately written differently from detectors/bocpd.cc, so that the two
can check each other:
  * dense: every run length is kept, nothing is pruned;
  * the sufficient statistics of each run are recomputed from the raw readings
    of that run with the batch Normal-Gamma formulas (two-pass sums), not by
    the one-step recursive update;
  * the predictive density comes from scipy.stats.t.logpdf (nu = 2 alpha,
    loc = mu, scale^2 = beta (kappa + 1) / (alpha kappa));
  * the recursion runs on log probabilities with scipy.special.logsumexp.

Two runs over the same committed series (120 readings from numpy's PCG64 with
a fixed seed: 50 from N(0, 1), then a mean change to N(2, 1) for 35 readings,
then a variance change to N(2, 3^2) for 35 readings):
  1. unbounded: run lengths 0..t at step t (Algorithm 1 as published);
  2. capped at R = 30 with the convention of detectors/bocpd.h: the state r = R
     stands for "a run of at least R readings" and predicts from the most
     recent R readings; at each step the growth of r = R - 1 and of r = R both
     land on r = R and their masses add.
For each step it writes the whole posterior, the log evidence log p(x_1:t),
the MAP run length (the smallest j at the maximum) and the change probability
P(1 <= r_t <= w) for window w = 5.

As a self-check it first reproduces the worked example of REFERENCES.md 5.3
(table to 1e-6, log evidence -13.21674169 to 1e-8) and the Normal-Gamma
predictive of 5.2 (0.2774839712).

Regenerate the committed numbers with
    /usr/bin/python3 tests/reference/bocpd_reference.py
(from the repository root; writes tests/reference/bocpd_reference.inc), or
verify that the committed file is what this script produces with
    /usr/bin/python3 tests/reference/bocpd_reference.py --check
which writes into a temporary directory and compares number by number.
Needs Debian's python3-numpy and python3-scipy.
"""

import math
import os
import sys

import numpy as np
from scipy import stats
from scipy.special import logsumexp

import regenerate  # tests/reference/regenerate.py

HERE = os.path.dirname(os.path.abspath(__file__))
OUTPUT = os.path.join(HERE, "bocpd_reference.inc")

SEED = 20071003
PRIOR = dict(mu0=0.0, kappa0=1.0, alpha0=3.0, beta0=2.0)
HAZARD = 1.0 / 250.0
WINDOW = 5
CAP = 30


def make_series():
    rng = np.random.default_rng(SEED)
    a = rng.standard_normal(50)
    b = 2.0 + rng.standard_normal(35)
    c = 2.0 + 3.0 * rng.standard_normal(35)
    return np.concatenate([a, b, c])


def batch_posterior(data, mu0, kappa0, alpha0, beta0):
    """Normal-Gamma posterior after the readings `data`, in one batch."""
    n = len(data)
    if n == 0:
        return mu0, kappa0, alpha0, beta0
    mean = float(np.mean(data))
    ss = float(np.sum((data - mean) ** 2))
    kappa = kappa0 + n
    mu = (kappa0 * mu0 + n * mean) / kappa
    alpha = alpha0 + n / 2.0
    beta = beta0 + 0.5 * ss + kappa0 * n * (mean - mu0) ** 2 / (2.0 * kappa)
    return mu, kappa, alpha, beta


def log_predictive(x, mu, kappa, alpha, beta):
    scale = math.sqrt(beta * (kappa + 1.0) / (alpha * kappa))
    return float(stats.t.logpdf(x, df=2.0 * alpha, loc=mu, scale=scale))


def run(series, hazard, prior, window, cap=None):
    """Algorithm 1, dense. Returns per-step posteriors and summaries."""
    log_h, log_1mh = math.log(hazard), math.log1p(-hazard)
    log_post = np.array([0.0])  # P(r_0 = 0) = 1
    log_evidence = 0.0
    posteriors, evidences, maps, changes = [], [], [], []
    for t in range(1, len(series) + 1):
        x = series[t - 1]
        # Predictive of x_t under each r_{t-1} = j: the run of the j readings
        # before x_t (for the cap state, the R most recent of them).
        log_pi = np.array([
            log_predictive(x, *batch_posterior(series[t - 1 - j:t - 1], **prior))
            for j in range(len(log_post))
        ])
        joint = log_post + log_pi
        log_step = logsumexp(joint)  # log p(x_t | x_1:t-1)
        log_evidence += log_step
        growth = joint + log_1mh
        if cap is not None and len(growth) > cap:
            # r = cap - 1 and r = cap both grow into the cap state.
            growth = np.concatenate([growth[:cap - 1], [logsumexp(growth[cap - 1:])]])
        new = np.concatenate([[log_step + log_h], growth])
        log_post = new - logsumexp(new)
        p = np.exp(log_post)
        posteriors.append(p)
        evidences.append(log_evidence)
        maps.append(int(np.argmax(p)))
        changes.append(float(np.sum(p[1:window + 1])))
    return posteriors, evidences, maps, changes


def self_check():
    """REFERENCES.md 5.2 and 5.3 (COMP values)."""
    pred = math.exp(log_predictive(1.1, 0.3, 2.0, 3.0, 1.5))
    assert abs(pred - 0.2774839712) < 1e-10, pred
    table = [
        [.010000, .990000],
        [.010000, .006942, .983058],
        [.010000, .005513, .005522, .978965],
        [.010000, .068479, .020855, .009778, .890888],
        [.010000, .006303, .140672, .032095, .011260, .799670],
        [.010000, .003521, .007045, .208542, .038915, .011443, .720535],
    ]
    posts, evid, maps, _ = run(np.array([0.1, -0.2, 0.05, 3.0, 3.2, 2.9]), 0.01,
                               dict(mu0=0.0, kappa0=1.0, alpha0=1.0, beta0=1.0), 1)
    for t, row in enumerate(table):
        assert np.max(np.abs(posts[t] - np.array(row))) < 5e-7, (t, posts[t])
        assert maps[t] == t + 1
    assert abs(evid[-1] - (-13.21674169)) < 1e-8, evid[-1]


def fmt(values, per_line, spec):
    out = []
    for i in range(0, len(values), per_line):
        out.append("    " + " ".join(format(v, spec) + "," for v in values[i:i + per_line]))
    return "\n".join(out)


def render(series):
    lines = [
        "// Generated by tests/reference/bocpd_reference.py; do not edit.",
        "// Regenerate: /usr/bin/python3 tests/reference/bocpd_reference.py",
        "// Dense Adams & MacKay (2007) Algorithm 1 with numpy/scipy (see the script).",
        "#pragma once",
        "",
        "namespace plumbline::bocpd_reference {",
        "",
        "inline constexpr double kMu0 = %r;" % PRIOR["mu0"],
        "inline constexpr double kKappa0 = %r;" % PRIOR["kappa0"],
        "inline constexpr double kAlpha0 = %r;" % PRIOR["alpha0"],
        "inline constexpr double kBeta0 = %r;" % PRIOR["beta0"],
        "inline constexpr double kHazard = %r;" % HAZARD,
        "inline constexpr int kWindow = %d;" % WINDOW,
        "inline constexpr int kCap = %d;  // run-length cap of the capped run" % CAP,
        "inline constexpr int kLength = %d;" % len(series),
        "",
        "// The readings (numpy PCG64, seed %d), exact to the last bit." % SEED,
        "inline constexpr double kSeries[kLength] = {",
        fmt([float(v) for v in series], 4, ".17g"),
        "};",
    ]
    for name, cap in (("Unbounded", None), ("Capped", CAP)):
        posts, evid, maps, changes = run(series, HAZARD, PRIOR, WINDOW, cap)
        flat = np.concatenate(posts)
        lines += [
            "",
            "// %s run%s. Posterior P(r_t = j | x_1:t) for j = 0..%s, t = 1..kLength,"
            % (name.lower(), "" if cap is None else " (cap kCap)",
               "t" if cap is None else "min(t, kCap)"),
            "// concatenated step after step.",
            "inline constexpr double k%sPosterior[%d] = {" % (name, len(flat)),
            fmt([float(v) for v in flat], 5, ".13g"),
            "};",
            "// log p(x_1:t).",
            "inline constexpr double k%sLogEvidence[kLength] = {" % name,
            fmt(evid, 4, ".17g"),
            "};",
            "// MAP run length (smallest j at the maximum).",
            "inline constexpr int k%sMapRunLength[kLength] = {" % name,
            fmt(maps, 12, "d"),
            "};",
            "// P(1 <= r_t <= kWindow | x_1:t).",
            "inline constexpr double k%sChangeProbability[kLength] = {" % name,
            fmt(changes, 5, ".13g"),
            "};",
        ]
    lines += ["", "}  // namespace plumbline::bocpd_reference", ""]
    return "\n".join(lines)


def main():
    return regenerate.main("bocpd_reference", __doc__.split("\n")[0], OUTPUT, lambda: (self_check(), render(make_series()))[1], 1e-11)


if __name__ == "__main__":
    sys.exit(main())
