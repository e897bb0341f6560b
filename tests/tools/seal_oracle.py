#!/usr/bin/python3
"""How soon could the demo compressor's door-seal step be found? An oracle beside Plumbline.

The Harbourside demo's compressor (replay-fixtures/harbourside/generate.py) is a known
pattern plus noise that is an AR(1) wander (phi 0.97 a minute, sd 0.35 kW) plus white
read noise (sd 0.45 kW); at 14:20 on 18 March its power steps up by 1.5 kW. An oracle
that knows the pattern and the noise's law exactly whitens the residual with the
noise's own Kalman filter (an AR(1) plus white noise is the state-space model of Harvey
1989, "Forecasting, Structural Time Series Models and the Kalman Filter", ch. 3; from
memory) and runs a one-sided CUSUM, k = 0.5, on the standardised innovations from the
step on, to the threshold given. No detector fed the same readings can do much better,
so the oracle's delay bounds what the model and its residual handling may lose.

For each seed this regenerates the draw's compressor noise with generate.py's own
random streams and prints the oracle's delay in hours. Variants show what costs time:

  --phi P --signal-share C
                   whiten with an AR(1) of persistence P (per reading) plus white
                   noise, the AR(1) a share C of the variance, instead of the true law
                   (Plumbline's ResidualWhitener reports its own)
  --misfit SD      white residual the model cannot explain, added to the noise (kW)
  --absorb F       the share of the step the baseline has learned away before the
                   detector sees it (taken at once: a crude upper bound on the harm)
  --plumbline BIN  also replay each draw and print when Plumbline's level alert on
                   the compressor came (generate.py --seed, then `plumbline replay`)

  /usr/bin/python3 tests/tools/seal_oracle.py --first 13 --seeds 48 --with-committed \\
      --plumbline build/daemon/plumbline

The default threshold, 12.15, is the committed demo's CUSUM threshold on the compressor
(`plumbline replay --trace`, column cusum_threshold). Synthetic data, invented for the
demo; a diagnostic, not part of the default test run.
"""
import argparse
import datetime
import importlib.util
import json
import math
import os
import shutil
import statistics
import subprocess
import sys
import tempfile

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
FIXTURE = os.path.join(ROOT, "replay-fixtures", "harbourside")
COMPRESSOR = "coldstore/compressor-2/power_kw"


def load_generator():
    spec = importlib.util.spec_from_file_location("generate", os.path.join(FIXTURE, "generate.py"))
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def steady_kalman(phi, signal_share):
    """Steady-state gain and innovation variance (fractions of the noise variance) of
    the filter for s_t = phi s_{t-1} + e_t observed with white noise, var(s) = c."""
    c = signal_share
    variance = c
    for _ in range(1000):
        predicted = phi * phi * variance + c * (1.0 - phi * phi)
        spread = predicted + (1.0 - c)
        gain = predicted / spread
        variance = predicted * (1.0 - gain)
    return gain, spread


def compressor_noise(g, seed):
    """The draw's compressor noise per minute, AR(1) wander plus white, as generate.py
    draws it (its random streams are independent, one per purpose)."""
    streams = [np.random.Generator(np.random.PCG64(s))
               for s in np.random.SeedSequence(seed).spawn(8)]
    rng = streams[1]
    wander = g.ar1(rng, g.MINUTES, g.COMPRESSOR_AR_PHI, g.COMPRESSOR_AR_SD)
    white = rng.standard_normal(g.MINUTES) * g.COMPRESSOR_WHITE_SD
    return wander + white


def oracle_delay(g, seed, threshold, misfit, absorb, phi=None, signal_share=None,
                 horizon_hours=24):
    noise = compressor_noise(g, seed)
    every = g.COMPRESSOR_EVERY
    wander_var = g.COMPRESSOR_AR_SD ** 2
    total_var = wander_var + g.COMPRESSOR_WHITE_SD ** 2 + misfit ** 2
    if phi is None:
        phi = g.COMPRESSOR_AR_PHI ** every
        signal_share = wander_var / total_var
    gain, spread = steady_kalman(phi, signal_share)
    innovation_sd = math.sqrt(spread * total_var)
    extra = np.random.default_rng(seed).standard_normal(g.MINUTES) * misfit
    step_at = g.SEAL_FAILS // 60
    start = step_at - 12 * 60  # twelve hours of filter before the step
    start -= start % every
    state = 0.0
    cusum = 0.0
    for minute in range(start, step_at + horizon_hours * 60, every):
        phase = g.defrost_phase(minute)
        residual = noise[minute] + extra[minute]
        if phase is None or phase >= g.DEFROST_HEAT:  # the compressor idles while defrosting
            residual += g.COMPRESSOR_SEAL_STEP * g.ramp(minute, g.SEAL_FAILS) * (1.0 - absorb)
        innovation = residual - phi * state
        state = phi * state + gain * innovation
        if minute < step_at:
            continue
        cusum = max(0.0, cusum + innovation / innovation_sd - 0.5)
        if cusum > threshold:
            return (minute - step_at) / 60.0
    return math.inf


def plumbline_delay(g, plumbline, seed, work):
    folder = os.path.join(work, f"seed-{seed}")
    os.makedirs(folder)
    try:
        subprocess.run([sys.executable, os.path.join(FIXTURE, "generate.py"), "--out", folder,
                        "--seed", str(seed)], check=True, stdout=subprocess.DEVNULL)
        alerts = os.path.join(folder, "alerts.jsonl")
        subprocess.run([plumbline, "replay", "--config", os.path.join(FIXTURE, "plumbline.yaml"),
                        "--input", os.path.join(folder, "readings.csv"), "--alerts", alerts,
                        "--quiet"], check=True, stdout=subprocess.DEVNULL,
                       stderr=subprocess.DEVNULL)
        step = datetime.datetime(2026, 3, 1, tzinfo=datetime.timezone.utc) + \
            datetime.timedelta(seconds=g.SEAL_FAILS)
        with open(alerts) as f:
            for line in f:
                alert = json.loads(line)
                if alert["series"] != COMPRESSOR or alert["kind"] != "level":
                    continue
                detected = datetime.datetime.fromisoformat(
                    alert["detected_at"].replace("Z", "+00:00"))
                if detected >= step:
                    return (detected - step).total_seconds() / 3600.0
        return math.inf
    finally:
        shutil.rmtree(folder)


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--seeds", type=int, default=20, help="how many realisations")
    parser.add_argument("--first", type=int, default=13, help="the first seed")
    parser.add_argument("--with-committed", action="store_true",
                        help="also the committed fixture's seed (generate.py's SEED)")
    parser.add_argument("--threshold", type=float, default=12.15)
    parser.add_argument("--phi", type=float)
    parser.add_argument("--signal-share", type=float, default=1.0)
    parser.add_argument("--misfit", type=float, default=0.0)
    parser.add_argument("--absorb", type=float, default=0.0)
    parser.add_argument("--deadline", type=float, default=6.0,
                        help="hours: the fixture's detected_by for the seal")
    parser.add_argument("--plumbline", help="the binary, to replay each draw beside the oracle")
    args = parser.parse_args()

    g = load_generator()
    seeds = ([g.SEED] if args.with_committed else []) + \
        list(range(args.first, args.first + args.seeds))
    oracle, ours = [], []
    work = tempfile.mkdtemp(prefix="seal-oracle-")
    try:
        for seed in seeds:
            o = oracle_delay(g, seed, args.threshold, args.misfit, args.absorb, args.phi,
                             args.signal_share)
            oracle.append(o)
            line = f"seed {seed:>9}  oracle {o:5.2f} h"
            if args.plumbline:
                p = plumbline_delay(g, args.plumbline, seed, work)
                ours.append(p)
                line += f"  plumbline {p:5.2f} h"
            print(line, flush=True)
    finally:
        shutil.rmtree(work)

    def summary(name, delays):
        late = sum(d > args.deadline for d in delays)
        print(f"{name}: median {statistics.median(delays):.2f} h, worst {max(delays):.2f} h, "
              f"later than {args.deadline:g} h in {late} of {len(delays)}")

    summary("oracle", oracle)
    if ours:
        summary("plumbline", ours)


if __name__ == "__main__":
    main()
