#!/usr/bin/python3
"""A numpy reference of Plumbline's per-reading path, for a speed ratio (a
measurement, not a test): on the same CSV input as `plumbline replay`, per
series the seasonal forecaster's recursion (level, trend, Fourier terms of
seasons 1d and 7d with HARMONICS pairs each, recursive least squares with
forgetting in time and the trend re-centred at each reading), the residual
divided by a running scale, and a two-sided CUSUM and Page-Hinkley test on it.
It leaves out what SeriesMonitor adds around these (intake, residual profile,
whitening, robust scale, variance CUSUM, arrival model, alert records), so the
ratio it gives flatters numpy.

numpy is fast only over arrays, so the readings are taken a time step at a
time over every series at once (the input of make_load_data.py has one reading
per series per step); the CSV is parsed first and not timed.

usage: numpy_pipeline.py DIR/readings.csv [--harmonics 3]
Prints readings, wall and CPU seconds of the timed loop, and readings per CPU
second (the figure to compare on a shared machine).
"""

import argparse
import time

import numpy as np

DAY = 86400.0


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("readings")
    parser.add_argument("--harmonics", type=int, default=3)
    args = parser.parse_args()

    data = np.loadtxt(args.readings, delimiter=",", dtype=str)
    names, series = np.unique(data[:, 1], return_inverse=True)
    times = data[:, 0].astype(np.float64)
    values = data[:, 2].astype(np.float64)
    s_count = names.size
    steps = times.size // s_count
    order = np.lexsort((series, np.arange(times.size) // s_count))
    times = times[order].reshape(steps, s_count)
    values = values[order].reshape(steps, s_count)

    periods = np.array([DAY, 7 * DAY])
    j = np.arange(1, args.harmonics + 1)
    n = 2 + 2 * periods.size * args.harmonics
    memory = 4 * 7 * DAY
    theta = np.zeros((s_count, n))
    cov = np.tile(np.eye(n) * 1e4, (s_count, 1, 1))
    t_ref = times[0].copy()
    theta[:, 0] = values[0]
    scale2 = np.ones(s_count)
    k_ref, h = 0.5, 5.0
    up = np.zeros(s_count)
    down = np.zeros(s_count)
    ph_sum = np.zeros(s_count)
    ph_min = np.zeros(s_count)
    ph_max = np.zeros(s_count)
    ph_mean = np.zeros(s_count)
    alarms = 0

    started = time.perf_counter()
    started_cpu = time.process_time()
    for k in range(1, steps):
        t, y = times[k], values[k]
        dt = t - t_ref
        c = dt / memory
        # Re-centre the trend at t: theta_l += b c; P = A P A', A = I + c e_l e_b'.
        theta[:, 0] += theta[:, 1] * c
        row_b = cov[:, 1, :].copy()
        cov[:, 0, :] += c[:, None] * row_b
        cov[:, :, 0] += c[:, None] * cov[:, :, 1]
        cov /= np.exp(-c)[:, None, None]
        t_ref = t
        phase = 2 * np.pi * (t[:, None] % periods) / periods  # (S, seasons)
        angles = (phase[:, :, None] * j).reshape(s_count, -1)
        x = np.empty((s_count, n))
        x[:, 0] = 1.0
        x[:, 1] = 0.0
        x[:, 2::2] = np.cos(angles)
        x[:, 3::2] = np.sin(angles)
        px = np.einsum("sij,sj->si", cov, x)
        xpx = np.einsum("si,si->s", x, px)
        error = y - np.einsum("si,si->s", x, theta)
        denominator = 1.0 + xpx
        theta += px * (error / denominator)[:, None]
        cov -= np.einsum("si,sj->sij", px, px) / denominator[:, None, None]
        z = error / np.sqrt(scale2 * denominator)
        scale2 += 0.01 * (np.minimum(z * z, 9.0) - 1.0) * scale2
        # Two-sided CUSUM.
        up = np.maximum(0.0, up + z - k_ref)
        down = np.maximum(0.0, down - z - k_ref)
        fired = (up > h) | (down > h)
        up[fired] = 0.0
        down[fired] = 0.0
        # Page-Hinkley, both directions, delta = k_ref, lambda = 2 h.
        ph_mean += (z - ph_mean) / (k + 1)
        ph_sum += z - ph_mean
        ph_min = np.minimum(ph_min, ph_sum)
        ph_max = np.maximum(ph_max, ph_sum)
        ph_fired = (ph_sum - ph_min > 2 * h) | (ph_max - ph_sum > 2 * h)
        ph_sum[ph_fired] = ph_min[ph_fired] = ph_max[ph_fired] = 0.0
        alarms += int(fired.sum() + ph_fired.sum())
    seconds = time.perf_counter() - started
    cpu_seconds = time.process_time() - started_cpu

    readings = (steps - 1) * s_count
    print("readings %d seconds %.3f cpu_seconds %.3f readings_per_cpu_second %.0f alarms %d"
          % (readings, seconds, cpu_seconds, readings / cpu_seconds, alarms))


if __name__ == "__main__":
    main()
