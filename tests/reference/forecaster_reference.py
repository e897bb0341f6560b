#!/usr/bin/python3
"""Batch weighted-least-squares reference for detectors/seasonal_forecaster.

What it computes
----------------
SeasonalForecaster fits y(t) = l + b (t - t_n)/U + sum_s sum_j a_sj cos(2 pi j
phase_s(t)) + c_sj sin(2 pi j phase_s(t)), phase_s(t) = (t mod P_s) / P_s with t
in integer microseconds, by recursive least squares with forgetting measured in
time. Its header states that after n readings the coefficients equal the batch
solution of

    argmin_theta  sum_i w_i (y_i - x_i' theta)^2
                + w_0 (A^-1 theta - theta_0)' (I / prior_variance) (A^-1 theta - theta_0)

    w_i = exp(-(t_n - t_i) / U),  w_0 = exp(-(t_n - t_1) / U),  U = memory,
    theta_0 = (y_1, 0, ..., 0),  A = I + e_l e_b' (t_n - t_1) / U,

written in the forecaster's own parametrisation at the final time (trend
regressor (t - t_n)/U). The prior is the one set at the first reading, so it
acts on the coefficients in the coordinates of t_1 (A^-1 theta; A^-1 theta_0 =
theta_0 because theta_0 has no trend). This script solves that problem in one
batch for every n, written differently from detectors/seasonal_forecaster.cc:
  * the regressors are built directly from exact integer phases with
    math.cos / math.sin of 2 pi j phase (no angle-addition recursion);
  * theta_n comes from numpy.linalg.lstsq (SVD) on the stacked weighted system
    [sqrt(w_i) x_i'; sqrt(w_0 / prior_variance) A^-1], not from a recursion,
    checked against a Householder QR solve, and P_n = (X'WX + w_0 A^-T A^-1 /
    prior_variance)^-1 from the QR triangular factor, R^-1 R^-T;
  * the one-step-ahead forecast of reading n+1 is x(t_{n+1})' theta_n and its
    parameter-variance factor x' P_n x / lambda, lambda = exp(-(t_{n+1} - t_n)/U).

The bounded-covariance guard of the forecaster holds each diagonal element of
P at or below prior_variance / max(w_0, 0.01). The exact fit has P_n <=
(w_0 R_0)^-1 (Loewner order), so the guard cannot act while w_0 >= 0.01; the
script checks that the series spans less than ln(100) = 4.6 memories and that
max_i P_n,ii / bound_n < 1 for every n >= 2 (it prints the largest ratio).

Series 1 (point readings): 400 readings whose gaps are drawn uniformly between
30 s and 3 h (numpy PCG64, fixed seed), starting 2026-03-01T00:00:00Z, from a
level with a trend, a daily season (two harmonics present), a weekly season
(one harmonic) and N(0, 0.5^2) noise. Model: daily season with 3 harmonics,
weekly with 2 (12 coefficients), memory 10 days, prior_variance 1e4. The same
fit with prior_variance 1e8 (the forecaster's default) is written too, at the
checkpoints only (see the header on the digits the covariance form loses).

Series 2 (interval means, as a meter spread over the time between readings):
150 consecutive intervals with lengths log-uniform between 10 min and 2 days;
each value is the mean of the signal over its interval plus noise. The
regressors are the interval means of x(t), computed here by composite
Gauss-Legendre quadrature (1 h panels, 16 nodes; checked against 8 nodes),
not by the closed form the forecaster uses.

Regenerate the committed numbers with
    /usr/bin/python3 tests/reference/forecaster_reference.py
(from the repository root; writes tests/reference/forecaster_reference.inc), or
verify that the committed file is what this script produces with
    /usr/bin/python3 tests/reference/forecaster_reference.py --check
which writes into a temporary directory and compares number by number.
Needs Debian's python3-numpy.
"""

import math
import os
import sys

import numpy as np

import regenerate  # tests/reference/regenerate.py

HERE = os.path.dirname(os.path.abspath(__file__))
OUTPUT = os.path.join(HERE, "forecaster_reference.inc")

SECOND = 10**6
HOUR = 3600 * SECOND
DAY = 24 * HOUR
WEEK = 7 * DAY
START = 1772323200 * SECOND  # 2026-03-01T00:00:00Z

SEED = 20260301
SEASONS = [(DAY, 3), (WEEK, 2)]  # (period in microseconds, harmonics)
MEMORY = 10 * DAY
PRIOR_VARIANCE = 1e4
DEFAULT_PRIOR_VARIANCE = 1e8
PRIOR_WEIGHT_FLOOR = 0.01  # the forecaster's guard floor
LENGTH = 400
CHECKPOINTS = [12, 50, 100, 200, 400]
INTERVALS = 150
INTERVAL_CHECKPOINTS = [50, 100, 150]
DIM = 2 + sum(2 * h for _, h in SEASONS)


def signal(t):
    """The noiseless series at integer time t (microseconds)."""
    d = 2.0 * math.pi * (t % DAY) / DAY
    w = 2.0 * math.pi * (t % WEEK) / WEEK
    return (20.0 + 0.3 * (t - START) / DAY + 3.0 * math.cos(d) + 1.0 * math.sin(2.0 * d)
            + 1.5 * math.sin(w) - 0.5 * math.cos(w))


def make_point_series(rng):
    gaps = rng.integers(30 * SECOND, 3 * HOUR, size=LENGTH - 1, endpoint=True)
    times = [START] + [START + int(g) for g in np.cumsum(gaps)]
    values = [signal(t) + 0.5 * float(e) for t, e in zip(times, rng.standard_normal(LENGTH))]
    return times, values


def regressors(t, t_end):
    """x(t) in the parametrisation at t_end: [1, (t - t_end)/U, cos, sin, ...]."""
    row = [1.0, (t - t_end) / MEMORY]
    for period, harmonics in SEASONS:
        within = t % period  # exact integer phase
        for j in range(1, harmonics + 1):
            angle = 2.0 * math.pi * j * within / period
            row += [math.cos(angle), math.sin(angle)]
    return np.array(row)


# Composite Gauss-Legendre quadrature for interval means of the regressors.
def interval_regressors(a, b, t_end, nodes=16):
    if b <= a:
        return regressors(b, t_end)
    xi, wi = np.polynomial.legendre.leggauss(nodes)
    panels = max(1, int(math.ceil((b - a) / HOUR)))
    total = np.zeros(DIM)
    width = (b - a) / panels
    for p in range(panels):
        lo = p * width  # offset from a, in microseconds (float)
        for x, w in zip(xi, wi):
            offset = lo + 0.5 * width * (x + 1.0)
            row = [1.0, (a - t_end + offset) / MEMORY]
            for period, harmonics in SEASONS:
                phase = ((a % period) + offset) / period
                for j in range(1, harmonics + 1):
                    angle = 2.0 * math.pi * j * phase
                    row += [math.cos(angle), math.sin(angle)]
            total += 0.5 * width * w * np.array(row)
    return total / (b - a)


def make_interval_series(rng):
    lengths = np.exp(rng.uniform(math.log(10 * 60), math.log(2 * 86400), size=INTERVALS))
    edges = [START]
    for length in lengths:
        edges.append(edges[-1] + int(round(length)) * SECOND)
    means = []
    for a, b in zip(edges[:-1], edges[1:]):
        # The noiseless mean by quadrature of signal() on 10-minute panels.
        xi, wi = np.polynomial.legendre.leggauss(16)
        panels = max(1, int(math.ceil((b - a) / (600 * SECOND))))
        width = (b - a) / panels
        acc = 0.0
        for p in range(panels):
            for x, w in zip(xi, wi):
                acc += 0.5 * width * w * signal(int(round(a + p * width + 0.5 * width * (x + 1.0))))
        means.append(acc / (b - a))
    means = [m + 0.2 * float(e) for m, e in zip(means, rng.standard_normal(INTERVALS))]
    return edges[:-1], edges[1:], means


def solve(rows, ends, values, n, prior_variance):
    """Batch fit after n observations. rows(i, t_end) gives regressor i."""
    t_end = ends[n - 1]
    x = np.array([rows(i, t_end) for i in range(n)])
    w = np.array([math.exp(-(t_end - ends[i]) / MEMORY) for i in range(n)])
    w0 = math.exp(-(t_end - ends[0]) / MEMORY)
    a_inv = np.eye(DIM)
    a_inv[0, 1] = -(t_end - ends[0]) / MEMORY
    theta0 = np.zeros(DIM)
    theta0[0] = values[0]
    r = math.sqrt(w0 / prior_variance)
    m = np.vstack([x * np.sqrt(w)[:, None], r * a_inv])
    rhs = np.concatenate([np.array(values[:n]) * np.sqrt(w), r * theta0])
    theta = np.linalg.lstsq(m, rhs, rcond=None)[0]
    # Self-check: a Householder QR solve of the same system agrees, and
    # P = (M'M)^-1 = R^-1 R^-T from its triangular factor (no squared condition).
    q, r = np.linalg.qr(m)
    theta_qr = np.linalg.solve(r, q.T @ rhs)
    assert np.max(np.abs(theta_qr - theta)) <= 1e-9 * max(1.0, np.max(np.abs(theta))), n
    r_inv = np.linalg.inv(r)
    p = r_inv @ r_inv.T
    bound = prior_variance / max(w0, PRIOR_WEIGHT_FLOOR)
    return theta, p, float(np.max(np.diag(p)) / bound)


def point_fits(times, values, prior_variance):
    rows = lambda i, t_end: regressors(times[i], t_end)
    fits = []
    for n in range(1, LENGTH + 1):
        fits.append(solve(rows, times, values, n, prior_variance))
    return fits


def one_step(fits, times):
    """Forecast of reading n+1 (and of t_n + 1 h after the last) from fit n."""
    values, factors = [], []
    for n in range(1, LENGTH + 1):
        t_next = times[n] if n < LENGTH else times[-1] + HOUR
        theta, p, _ = fits[n - 1]
        x = regressors(t_next, times[n - 1])
        lam = math.exp(-(t_next - times[n - 1]) / MEMORY)
        values.append(float(x @ theta))
        factors.append(float(x @ p @ x / lam))
    return values, factors


def fmt(values, per_line, spec):
    out = []
    for i in range(0, len(values), per_line):
        out.append("    " + " ".join(format(v, spec) + "," for v in values[i:i + per_line]))
    return "\n".join(out)


def render():
    rng = np.random.default_rng(SEED)
    times, values = make_point_series(rng)
    span_memories = (times[-1] - times[0]) / MEMORY
    assert span_memories < -math.log(PRIOR_WEIGHT_FLOOR), span_memories
    fits = point_fits(times, values, PRIOR_VARIANCE)
    worst_ratio = max(f[2] for f in fits[1:])
    assert worst_ratio < 1.0, worst_ratio
    forecasts, factors = one_step(fits, times)
    default_fits = [solve(lambda i, t_end: regressors(times[i], t_end), times, values, n,
                          DEFAULT_PRIOR_VARIANCE) for n in CHECKPOINTS]

    froms, tos, means = make_interval_series(rng)
    span_i = (tos[-1] - tos[0]) / MEMORY
    assert span_i < -math.log(PRIOR_WEIGHT_FLOOR), span_i
    # Quadrature convergence: 8 nodes per panel against 16.
    worst_quad = max(
        float(np.max(np.abs(interval_regressors(a, b, tos[-1], 8)
                            - interval_regressors(a, b, tos[-1], 16))))
        for a, b in zip(froms, tos))
    assert worst_quad < 1e-12, worst_quad
    interval_rows = lambda i, t_end: interval_regressors(froms[i], tos[i], t_end)
    interval_fits = [solve(interval_rows, tos, means, n, PRIOR_VARIANCE)
                     for n in INTERVAL_CHECKPOINTS]
    worst_ratio_i = max(f[2] for f in interval_fits)
    assert worst_ratio_i < 1.0, worst_ratio_i
    interval_forecasts = []
    for n, (theta, _, _) in zip(INTERVAL_CHECKPOINTS, interval_fits):
        # The mean over the next interval (after the last: a 1-day interval).
        a, b = (froms[n], tos[n]) if n < INTERVALS else (tos[-1], tos[-1] + DAY)
        interval_forecasts.append(float(interval_regressors(a, b, tos[n - 1]) @ theta))

    def matrix_rows(fit_list, index):
        flat = []
        for f in fit_list:
            flat += [float(v) for v in np.ravel(f[index])]
        return flat

    checkpoint_fits = [fits[n - 1] for n in CHECKPOINTS]
    lines = [
        "// Generated by tests/reference/forecaster_reference.py; do not edit.",
        "// Regenerate: /usr/bin/python3 tests/reference/forecaster_reference.py",
        "// Batch weighted least squares with numpy (see the script for the problem).",
        "#pragma once",
        "",
        "#include <cstdint>",
        "",
        "namespace plumbline::forecaster_reference {",
        "",
        "inline constexpr std::int64_t kDay = %d;" % DAY,
        "inline constexpr std::int64_t kWeek = %d;" % WEEK,
        "inline constexpr int kDailyHarmonics = %d;" % SEASONS[0][1],
        "inline constexpr int kWeeklyHarmonics = %d;" % SEASONS[1][1],
        "inline constexpr std::int64_t kMemory = %d;  // microseconds" % MEMORY,
        "inline constexpr double kPriorVariance = %r;" % PRIOR_VARIANCE,
        "inline constexpr double kDefaultPriorVariance = %r;" % DEFAULT_PRIOR_VARIANCE,
        "inline constexpr int kDimension = %d;" % DIM,
        "// Span of each series in memories (guard inactive below ln 100 = 4.6) and the",
        "// largest max_i P_ii / bound over the fits n >= 2 (guard inactive below 1).",
        "inline constexpr double kSpanMemories = %.6f;" % span_memories,
        "inline constexpr double kLargestBoundRatio = %.12e;" % worst_ratio,
        "",
        "// Series 1: point readings (numpy PCG64, seed %d), exact to the last bit." % SEED,
        "inline constexpr int kLength = %d;" % LENGTH,
        "inline constexpr std::int64_t kTimes[kLength] = {",
        fmt(times, 4, "d"),
        "};",
        "inline constexpr double kValues[kLength] = {",
        fmt(values, 4, ".17g"),
        "};",
        "inline constexpr int kCheckpointCount = %d;" % len(CHECKPOINTS),
        "inline constexpr int kCheckpoints[kCheckpointCount] = {%s};"
        % ", ".join(str(n) for n in CHECKPOINTS),
        "// theta_n at each checkpoint (kDimension values per checkpoint).",
        "inline constexpr double kCoefficients[kCheckpointCount * kDimension] = {",
        fmt(matrix_rows(checkpoint_fits, 0), 4, ".16e"),
        "};",
        "// P_n at each checkpoint, row-major (kDimension^2 values per checkpoint).",
        "inline constexpr double kCovariance[kCheckpointCount * kDimension * kDimension] = {",
        fmt(matrix_rows(checkpoint_fits, 1), 4, ".16e"),
        "};",
        "// One-step-ahead forecast from fit n of reading n+1 (n = 1..kLength; for",
        "// n = kLength, of time kTimes[kLength - 1] + 1 h) and its variance factor.",
        "inline constexpr double kForecast[kLength] = {",
        fmt(forecasts, 4, ".16e"),
        "};",
        "inline constexpr double kForecastVarianceFactor[kLength] = {",
        fmt(factors, 4, ".16e"),
        "};",
        "// theta_n at each checkpoint with prior_variance = kDefaultPriorVariance.",
        "inline constexpr double kDefaultPriorCoefficients[kCheckpointCount * kDimension] = {",
        fmt(matrix_rows(default_fits, 0), 4, ".16e"),
        "};",
        "",
        "// Series 2: interval means [kFrom[i], kTo[i]] (same generator, continued).",
        "inline constexpr int kIntervals = %d;" % INTERVALS,
        "inline constexpr std::int64_t kFrom[kIntervals] = {",
        fmt(froms, 4, "d"),
        "};",
        "inline constexpr std::int64_t kTo[kIntervals] = {",
        fmt(tos, 4, "d"),
        "};",
        "inline constexpr double kMeans[kIntervals] = {",
        fmt(means, 4, ".17g"),
        "};",
        "inline constexpr int kIntervalCheckpointCount = %d;" % len(INTERVAL_CHECKPOINTS),
        "inline constexpr int kIntervalCheckpoints[kIntervalCheckpointCount] = {%s};"
        % ", ".join(str(n) for n in INTERVAL_CHECKPOINTS),
        "inline constexpr double kIntervalCoefficients[kIntervalCheckpointCount * kDimension] = {",
        fmt(matrix_rows(interval_fits, 0), 4, ".16e"),
        "};",
        "// Forecast from fit n of the mean over interval n+1 (for the last checkpoint,",
        "// over [kTo[kIntervals - 1], kTo[kIntervals - 1] + 1 day]).",
        "inline constexpr double kIntervalForecast[kIntervalCheckpointCount] = {",
        fmt(interval_forecasts, 4, ".16e"),
        "};",
        "",
        "}  // namespace plumbline::forecaster_reference",
        "",
    ]
    print("forecaster_reference: series spans %.3f memories (points), %.3f (intervals); "
          "largest P_ii / bound %.6f (points), %.3e (intervals); quadrature 8 vs 16 "
          "nodes differ by %.2e" % (span_memories, span_i, worst_ratio, worst_ratio_i,
                                    worst_quad))
    return "\n".join(lines)


def main():
    return regenerate.main("forecaster_reference", __doc__.split("\n")[0], OUTPUT, render, 1e-10)


if __name__ == "__main__":
    sys.exit(main())
