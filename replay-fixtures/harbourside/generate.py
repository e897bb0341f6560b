#!/usr/bin/python3
"""Generates the Harbourside Cold Store demo readings and their truth file.

    /usr/bin/python3 replay-fixtures/harbourside/generate.py --out replay-fixtures/harbourside

writes OUT/readings.csv (all five streams interleaved, sorted by time, header
`time,series,value`) and OUT/expect.json (the truth: every scripted event with
its series, kind, direction, change time, planned flag and notes, in the
fixture schema of replay-fixtures/README.md).

Harbourside Cold Store is fictional (DESIGN.md "Demo scenario"). EVERY NUMBER
BELOW IS INVENTED FOR THE DEMO ONLY: set points, loads, noise levels, event
times and sizes describe no real site, machine or measurement.

Determinism: one numpy SeedSequence (SEED) spawns an independent PCG64 stream
per component, so the output is byte-identical on every run with Debian's
numpy 1.24. Transcendental functions go through Python's `math` (glibc
libm), not numpy's SIMD loops, so the rounded values do not depend on the CPU.
Time zone: the store's clock is UTC (no daylight saving); no public holidays.
"""

import argparse
import json
import math
import os
from datetime import datetime, timedelta, timezone

import numpy as np

SEED = 20260301

# ----------------------------------------------------------------------------
# Calendar (all UTC). 2026-03-01 is a Sunday.
# ----------------------------------------------------------------------------
UTC = timezone.utc
START = datetime(2026, 3, 1, tzinfo=UTC)
END = datetime(2026, 5, 1, tzinfo=UTC)  # exclusive
MINUTES = int((END - START).total_seconds()) // 60  # 87840 one-minute steps


def at(text):
    """Seconds since START for an RFC 3339 UTC time."""
    t = datetime.strptime(text, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=UTC)
    return int((t - START).total_seconds())


def rfc3339(seconds):
    """RFC 3339 UTC text for integer seconds since START."""
    return (START + timedelta(seconds=int(seconds))).strftime("%Y-%m-%dT%H:%M:%SZ")


# ----------------------------------------------------------------------------
# The story (times in UTC). Invented for the demo.
# ----------------------------------------------------------------------------
SEAL_FAILS = at("2026-03-18T14:20:00Z")          # Wed: freezer door seal fails
METER_REPLACED = at("2026-03-24T11:05:00Z")      # Tue: energy meter swapped, new one starts at 0
DEFROST_CHANGED = at("2026-04-01T00:00:00Z")     # Wed: defrost every 8 h -> every 6 h (planned)
DROPOUT_FROM = at("2026-04-09T21:40:00Z")        # Thu: freezer sensor silent for 12 h
DROPOUT_TO = at("2026-04-10T09:40:00Z")
COMPRESSOR_WEARS = at("2026-04-15T06:00:00Z")    # Wed: compressor power noise sd doubles
METER_UNREAD_FROM = at("2026-04-13T10:00:00Z")   # Mon: no hand readings for two weeks
METER_UNREAD_TO = at("2026-04-27T10:00:00Z")

# Defrost: heater on for DEFROST_HEAT minutes starting at these hours (UTC).
DEFROST_HOURS_BEFORE = (2, 10, 18)     # every 8 h
DEFROST_HOURS_AFTER = (0, 6, 12, 18)   # every 6 h
DEFROST_HEAT = 12                      # minutes with the heater on, compressor off
DEFROST_TAIL = 45                      # minutes of recovery modelled after the heater

# Freezer temperature (degrees C).
FREEZER_SETPOINT = -20.0
FREEZER_DAILY_AMPLITUDE = 0.15         # ambient effect, peak at 15:00
FREEZER_DEFROST_PEAK = 4.5             # warm bump at the end of the heater period
FREEZER_DEFROST_DECAY = 6.0            # minutes, exponential recovery after the heater
FREEZER_WHITE_SD = 0.15                # sensor noise per reading
FREEZER_AR_SD = 0.10                   # marginal sd of the slow AR(1) wander
FREEZER_AR_PHI = 0.9                   # per minute
FREEZER_SEAL_STEP = 0.45               # ~2.5 residual sd (residual sd = hypot(0.15, 0.10) = 0.18)
SEAL_TAU = 20.0                        # minutes: both steps approach their size like 1 - exp(-t/tau)

# Compressor electrical power (kW).
COMPRESSOR_BASE = 15.0
COMPRESSOR_DAILY_AMPLITUDE = 1.2       # ambient effect, peak at 15:00
COMPRESSOR_WEEKDAY_LOAD = 1.5          # Mon-Fri 06:00-18:00 (dock busy)
COMPRESSOR_SATURDAY_LOAD = 0.8         # Sat 07:00-12:00
COMPRESSOR_IDLE_DURING_DEFROST = 1.5   # fans only while the heater runs
COMPRESSOR_PULLDOWN = 7.0              # extra kW right after the heater, decaying
COMPRESSOR_PULLDOWN_DECAY = 10.0       # minutes
COMPRESSOR_WHITE_SD = 0.45
COMPRESSOR_AR_SD = 0.35
COMPRESSOR_AR_PHI = 0.97               # per minute
COMPRESSOR_SEAL_STEP = 1.5             # ~2.6 residual sd (residual sd = hypot(0.45, 0.35) = 0.57)
COMPRESSOR_WEAR_FACTOR = 2.0           # residual sd doubles
COMPRESSOR_EVERY = 5                   # minutes between logged readings

# Other site load on the main meter (kW), besides the compressor.
SITE_LOAD_WEEKDAY_DAY = 4.0            # lights, offices, dock, Mon-Fri 06:00-18:00
SITE_LOAD_SATURDAY_DAY = 2.0           # Sat 07:00-12:00
SITE_LOAD_NIGHT = 1.2
DEFROST_HEATER_KW = 9.0
METER_START_KWH = 183402.6             # old meter's total at START
METER_NEW_FIRST_READ = at("2026-03-24T11:12:00Z")
METER_OLD_LAST_READ = at("2026-03-24T11:02:00Z")
METER_SILENCE_AFTER = 4 * 86400        # silence_after of the meter in plumbline.yaml

# Pallets shipped per hour (expected), by hour of day; Sunday: none.
PALLETS_WEEKDAY = {6: 2, 7: 4, 8: 5, 9: 5, 10: 4, 11: 3, 12: 3, 13: 4, 14: 4, 15: 3, 16: 2, 17: 1}
PALLETS_SATURDAY = {7: 2, 8: 3, 9: 3, 10: 2, 11: 1}
PALLETS_DAY_SD = 0.10                  # log-normal day-to-day factor

# Door openings per hour: staff traffic plus DOOR_PER_PALLET per pallet shipped.
DOOR_PER_PALLET = 1.5
DOOR_STAFF_WEEKDAY_DAY = 2.5           # Mon-Fri 06:00-18:00
DOOR_STAFF_SATURDAY_DAY = 1.2          # Sat 07:00-12:00
DOOR_STAFF_OTHER = 0.4

SERIES_FREEZER = "coldstore/freezer-1/temp_c"
SERIES_COMPRESSOR = "coldstore/compressor-2/power_kw"
SERIES_DOOR = "coldstore/dock/door_openings"
SERIES_METER = "coldstore/main/energy_kwh"
SERIES_PALLETS = "coldstore/orders/pallets_shipped"
SERIES_ORDER = [SERIES_FREEZER, SERIES_COMPRESSOR, SERIES_DOOR, SERIES_METER, SERIES_PALLETS]

# Warmups of the demo config (plumbline.yaml), repeated here so that the truth
# file can say from which reading each series is armed. The validator checks
# that both agree.
WARMUP = {SERIES_FREEZER: 4320, SERIES_COMPRESSOR: 4032, SERIES_DOOR: 336,
          SERIES_METER: 30, SERIES_PALLETS: 336}
# Bucket widths (`every`, seconds) of the bucketed series in plumbline.yaml: their
# warmup counts buckets, not readings.
EVERY = {SERIES_DOOR: 3600}


def weekday(minute):
    """0 = Monday ... 6 = Sunday, for a minute index."""
    return (START + timedelta(minutes=minute)).weekday()


def hour_of_day(minute):
    return (minute // 60) % 24


def weekday_day(minute):
    return weekday(minute) < 5 and 6 <= hour_of_day(minute) < 18


def saturday_day(minute):
    return weekday(minute) == 5 and 7 <= hour_of_day(minute) < 12


def defrost_phase(minute):
    """Minutes since the start of the latest defrost, or None if none within the tail."""
    for back in range(DEFROST_HEAT + DEFROST_TAIL):
        m = minute - back
        if m < 0:
            break
        hours = DEFROST_HOURS_AFTER if m * 60 >= DEFROST_CHANGED else DEFROST_HOURS_BEFORE
        if m % 60 == 0 and hour_of_day(m) in hours:
            return back
    return None


def defrost_starts():
    """Start times (seconds since START) of every defrost in the demo."""
    return [m * 60 for m in range(MINUTES) if defrost_phase(m) == 0]


def ambient(minute):
    """Daily ambient cycle in [-1, 1], peak at 15:00 UTC."""
    return math.sin(2.0 * math.pi * ((minute % 1440) / 60.0 - 9.0) / 24.0)


def ramp(minute, onset_seconds):
    """0 before onset, then 1 - exp(-t / SEAL_TAU)."""
    dt = minute - onset_seconds / 60.0
    return 0.0 if dt < 0 else 1.0 - math.exp(-dt / SEAL_TAU)


def ar1(rng, n, phi, marginal_sd):
    """Stationary AR(1) with the given marginal sd, started from its stationary law."""
    innov = rng.standard_normal(n) * marginal_sd * math.sqrt(1.0 - phi * phi)
    x = np.empty(n)
    prev = rng.standard_normal() * marginal_sd
    for i in range(n):
        prev = phi * prev + innov[i]
        x[i] = prev
    return x


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--out", required=True, help="output directory")
    parser.add_argument("--seed", type=int, default=SEED,
                        help="another realisation of the same story (default: the "
                             "committed fixture's seed); tests/tools/harbourside_seeds.py "
                             "counts false alarms over many")
    args = parser.parse_args()
    seed = args.seed

    streams = [np.random.Generator(np.random.PCG64(s))
               for s in np.random.SeedSequence(seed).spawn(8)]
    rng_freezer, rng_compressor, rng_pallets, rng_door, rng_meter, rng_jitter = streams[:6]

    phase = [defrost_phase(m) for m in range(MINUTES)]

    # --- freezer temperature, latent per minute (without sensor noise) -----------
    freezer_ar = ar1(rng_freezer, MINUTES, FREEZER_AR_PHI, FREEZER_AR_SD)
    freezer_white = rng_freezer.standard_normal(MINUTES) * FREEZER_WHITE_SD
    freezer_mean = np.empty(MINUTES)  # noise-free: pattern + defrost + seal step
    for m in range(MINUTES):
        v = FREEZER_SETPOINT + FREEZER_DAILY_AMPLITUDE * ambient(m)
        p = phase[m]
        if p is not None:
            if p < DEFROST_HEAT:
                v += FREEZER_DEFROST_PEAK * (p + 1) / DEFROST_HEAT
            else:
                v += FREEZER_DEFROST_PEAK * math.exp(-(p + 1 - DEFROST_HEAT) / FREEZER_DEFROST_DECAY)
        v += FREEZER_SEAL_STEP * ramp(m, SEAL_FAILS)
        freezer_mean[m] = v

    # --- compressor power, latent per minute ------------------------------------
    comp_ar = ar1(rng_compressor, MINUTES, COMPRESSOR_AR_PHI, COMPRESSOR_AR_SD)
    comp_white = rng_compressor.standard_normal(MINUTES) * COMPRESSOR_WHITE_SD
    comp_mean = np.empty(MINUTES)
    comp_scale = np.empty(MINUTES)   # multiplies the noise: 1, then 2 after the wear
    for m in range(MINUTES):
        p = phase[m]
        if p is not None and p < DEFROST_HEAT:
            v = COMPRESSOR_IDLE_DURING_DEFROST
            scale = 0.2
        else:
            v = COMPRESSOR_BASE + COMPRESSOR_DAILY_AMPLITUDE * ambient(m)
            if weekday_day(m):
                v += COMPRESSOR_WEEKDAY_LOAD
            elif saturday_day(m):
                v += COMPRESSOR_SATURDAY_LOAD
            if p is not None:
                v += COMPRESSOR_PULLDOWN * math.exp(-(p - DEFROST_HEAT) / COMPRESSOR_PULLDOWN_DECAY)
            v += COMPRESSOR_SEAL_STEP * ramp(m, SEAL_FAILS)
            scale = 1.0
        if m * 60 >= COMPRESSOR_WEARS:
            scale *= COMPRESSOR_WEAR_FACTOR
        comp_mean[m] = v
        comp_scale[m] = scale

    readings = []  # (seconds since START, series, value text)

    # --- freezer readings: one a minute, 0-6 s late, 12 h dropout ----------------
    jitter = rng_jitter.integers(0, 7, MINUTES)
    freezer_times = []
    for m in range(MINUTES):
        if DROPOUT_FROM <= m * 60 < DROPOUT_TO:
            continue
        t = m * 60 + int(jitter[m])
        v = freezer_mean[m] + freezer_ar[m] + freezer_white[m]
        readings.append((t, SERIES_FREEZER, f"{v:.2f}"))
        freezer_times.append(t)

    # --- compressor readings: every 5 min, logged 0-2 s late ---------------------
    comp_jitter = rng_jitter.integers(0, 3, MINUTES // COMPRESSOR_EVERY)
    for i, m in enumerate(range(0, MINUTES, COMPRESSOR_EVERY)):
        v = comp_mean[m] + comp_scale[m] * (comp_ar[m] + comp_white[m])
        readings.append((m * 60 + int(comp_jitter[i]), SERIES_COMPRESSOR, f"{v:.2f}"))

    # --- pallets shipped: hourly totals, stamped at the end of the hour ----------
    hours = MINUTES // 60
    days = hours // 24
    day_factor = [math.exp(PALLETS_DAY_SD * z) for z in rng_pallets.standard_normal(days)]
    pallets = []
    for h in range(hours):
        m = h * 60
        dow, hod = weekday(m), hod_of(h)
        if dow < 5:
            lam = PALLETS_WEEKDAY.get(hod, 0)
        elif dow == 5:
            lam = PALLETS_SATURDAY.get(hod, 0)
        else:
            lam = 0
        n = int(rng_pallets.poisson(lam * day_factor[h // 24])) if lam > 0 else 0
        pallets.append(n)
        readings.append(((h + 1) * 3600, SERIES_PALLETS, str(n)))

    # --- door openings: one reading per opening (merged if in the same second) ---
    door_events = {}
    for h in range(hours):
        m = h * 60
        if weekday_day(m):
            staff = DOOR_STAFF_WEEKDAY_DAY
        elif saturday_day(m):
            staff = DOOR_STAFF_SATURDAY_DAY
        else:
            staff = DOOR_STAFF_OTHER
        n = int(rng_door.poisson(staff + DOOR_PER_PALLET * pallets[h]))
        for s in rng_door.integers(0, 3600, n):
            t = h * 3600 + int(s)
            door_events[t] = door_events.get(t, 0) + 1
    for t, n in door_events.items():
        readings.append((t, SERIES_DOOR, str(n)))

    # --- main energy meter: integral of site power, read by hand ------------------
    site_kw = np.empty(MINUTES)
    for m in range(MINUTES):
        p = phase[m]
        if weekday_day(m):
            other = SITE_LOAD_WEEKDAY_DAY
        elif saturday_day(m):
            other = SITE_LOAD_SATURDAY_DAY
        else:
            other = SITE_LOAD_NIGHT
        if p is not None and p < DEFROST_HEAT:
            other += DEFROST_HEATER_KW
        # The meter sees the true compressor draw (its slow wander), not the logger noise.
        site_kw[m] = comp_mean[m] + comp_scale[m] * comp_ar[m] + other
    energy = np.concatenate([[0.0], np.cumsum(site_kw / 60.0)])  # kWh at each minute boundary

    def energy_at(t):
        m = min(t // 60, MINUTES - 1)
        return energy[m] + (energy[m + 1] - energy[m]) * ((t - 60 * m) / 60.0)

    def meter_text(kwh):
        tenths = int(math.floor(kwh * 10.0 + 1e-9))  # the display truncates to 0.1 kWh
        return f"{tenths // 10}.{tenths % 10}"

    meter_times = []
    new_meter_zero = energy_at(METER_REPLACED)
    for day in range(days):
        d0 = day * 86400
        dow = (START + timedelta(days=day)).weekday()
        if dow < 5:
            rounds = [(7, 45), (12, 30), (16, 45)]
        elif dow == 5:
            rounds = [(9, 0)]
        else:
            rounds = []
        for hh, mm in rounds:
            skip = rng_meter.random() < (0.3 if dow == 5 else 0.1)
            offset = max(-45.0, min(45.0, rng_meter.standard_normal() * 15.0))
            if skip:
                continue
            t = d0 + hh * 3600 + int(round(mm + offset)) * 60  # logged to the minute
            if METER_UNREAD_FROM <= t < METER_UNREAD_TO:
                continue
            if METER_OLD_LAST_READ - 3 * 3600 < t < METER_NEW_FIRST_READ + 3 * 3600:
                continue  # the replacement visit takes the place of that round
            meter_times.append(t)
    meter_times += [METER_OLD_LAST_READ, METER_NEW_FIRST_READ]
    meter_times.sort()
    meter_values = []
    for t in meter_times:
        if t < METER_REPLACED:
            kwh = METER_START_KWH + energy_at(t)
        else:
            kwh = energy_at(t) - new_meter_zero
        meter_values.append(kwh)
        readings.append((t, SERIES_METER, meter_text(kwh)))

    readings.sort(key=lambda r: (r[0], SERIES_ORDER.index(r[1])))
    os.makedirs(args.out, exist_ok=True)
    with open(os.path.join(args.out, "readings.csv"), "w", newline="\n") as f:
        f.write("time,series,value\n")
        for t, s, v in readings:
            f.write(f"{rfc3339(t)},{s},{v}\n")

    # ------------------------------------------------------------------------
    # Truth file
    # ------------------------------------------------------------------------
    per_series = {s: sorted(t for t, name, _ in readings if name == s) for s in SERIES_ORDER}
    last_before_dropout = max(t for t in freezer_times if t < DROPOUT_FROM)
    first_after_dropout = min(t for t in freezer_times if t >= DROPOUT_TO)
    last_before_unread = max(t for t in meter_times if t < METER_UNREAD_FROM)
    first_after_unread = min(t for t in meter_times if t >= METER_UNREAD_TO)
    first_new_defrost = min(t for t in defrost_starts() if t >= DEFROST_CHANGED)
    hour, minute, day = 3600, 60, 86400
    end_s = int((END - START).total_seconds())

    def window(a, b):
        return {"from": rfc3339(a), "to": rfc3339(b)}

    def armed_seconds(series):
        if series in EVERY:
            # The end of bucket warmup + 2: the first bucket, not covered from
            # its start, is dropped (detectors/intake.h).
            width = EVERY[series]
            first = per_series[series][0]
            return first - first % width + (WARMUP[series] + 2) * width
        return per_series[series][WARMUP[series]]

    def armed_at(series):
        return rfc3339(armed_seconds(series))

    # Residual sd actually realised before the seal fails (reading minus the
    # noise-free pattern), to document the step sizes in sd units.
    pre = slice(0, SEAL_FAILS // 60)
    freezer_sd = float(np.std(freezer_ar[pre] + freezer_white[pre]))
    comp_minutes = np.arange(0, SEAL_FAILS // 60, COMPRESSOR_EVERY)
    comp_sd = float(np.std(comp_scale[comp_minutes] * (comp_ar[comp_minutes] + comp_white[comp_minutes])))

    invented = "All numbers are invented for the demo (fictional site)."
    expected = [
        {
            "id": "door-seal-fails-freezer",
            "series": SERIES_FREEZER, "kind": "level", "direction": "up",
            "change_at": rfc3339(SEAL_FAILS),
            "change_at_window": window(SEAL_FAILS - 30 * minute, SEAL_FAILS + hour),
            "detected_by": rfc3339(SEAL_FAILS + 6 * hour),
            "required": True, "planned": False, "max_count": 1,
            "basis": "scripted in generate.py (SEAL_FAILS, FREEZER_SEAL_STEP)",
            "notes": (f"Door seal fails: temperature steps up by {FREEZER_SEAL_STEP} C "
                      f"(= {FREEZER_SEAL_STEP / freezer_sd:.2f} residual sd; realised residual sd "
                      f"before the step {freezer_sd:.3f} C), approached as 1 - exp(-t / {SEAL_TAU:g} min). "
                      "Not repaired within the demo. " + invented),
        },
        {
            "id": "door-seal-fails-compressor",
            "series": SERIES_COMPRESSOR, "kind": "level", "direction": "up",
            "change_at": rfc3339(SEAL_FAILS),
            "change_at_window": window(SEAL_FAILS - 30 * minute, SEAL_FAILS + hour),
            "detected_by": rfc3339(SEAL_FAILS + 6 * hour),
            "required": True, "planned": False, "max_count": 1,
            "basis": "scripted in generate.py (SEAL_FAILS, COMPRESSOR_SEAL_STEP)",
            "notes": (f"Same door seal failure: compressor power steps up by {COMPRESSOR_SEAL_STEP} kW "
                      f"(= {COMPRESSOR_SEAL_STEP / comp_sd:.2f} residual sd; realised residual sd "
                      f"before the step {comp_sd:.3f} kW). " + invented),
        },
        {
            "id": "door-seal-fails-meter",
            "series": SERIES_METER, "kind": "level", "direction": "up",
            "change_at": rfc3339(SEAL_FAILS),
            "change_at_window": window(SEAL_FAILS - day, SEAL_FAILS + 2 * day),
            "required": False, "planned": False,
            "basis": "consequence of the compressor step (the meter integrates site power)",
            "notes": (f"Site consumption rises by {COMPRESSOR_SEAL_STEP} kW "
                      f"({COMPRESSOR_SEAL_STEP * 24:.0f} kWh/day) from the seal failure. Hand readings "
                      "are few and coarse, so an alert here is welcome but not required. " + invented),
        },
        {
            "id": "meter-replaced",
            "series": SERIES_METER, "kind": "none", "direction": "none",
            "quiet_window": window(METER_OLD_LAST_READ, METER_NEW_FIRST_READ + 3 * day),
            "required": True, "planned": False,
            "basis": "scripted in generate.py (METER_REPLACED)",
            "notes": (f"Meter replaced at {rfc3339(METER_REPLACED)}: last old-meter reading "
                      f"{rfc3339(METER_OLD_LAST_READ)} ({meter_text(METER_START_KWH + energy_at(METER_OLD_LAST_READ))} kWh), "
                      f"first new-meter reading {rfc3339(METER_NEW_FIRST_READ)} "
                      f"({meter_text(energy_at(METER_NEW_FIRST_READ) - new_meter_zero)} kWh). "
                      "A meter reset, not a change in consumption: no alert. " + invented),
        },
        {
            "id": "defrost-schedule-changed-freezer",
            "series": SERIES_FREEZER, "kind": "level", "also_kinds": ["variance"], "direction": "any",
            "change_at": rfc3339(DEFROST_CHANGED),
            "change_at_window": window(DEFROST_CHANGED - hour, DEFROST_CHANGED + 2 * day),
            "required": False, "planned": True,
            "basis": "scripted in generate.py (DEFROST_CHANGED)",
            "notes": (f"Planned: defrost every 8 h (02:00, 10:00, 18:00) becomes every 6 h (00:00, 06:00, "
                      f"12:00, 18:00) from {rfc3339(DEFROST_CHANGED)}; first new-schedule defrost "
                      f"{rfc3339(first_new_defrost)}. Warm bumps appear where the model expects none "
                      "and vanish where it expects one. An annotated, expected change: with an "
                      "annotation it must not page; without one an alert here is tolerated. " + invented),
        },
        {
            "id": "defrost-schedule-changed-compressor",
            "series": SERIES_COMPRESSOR, "kind": "level", "also_kinds": ["variance"], "direction": "any",
            "change_at": rfc3339(DEFROST_CHANGED),
            "change_at_window": window(DEFROST_CHANGED - hour, DEFROST_CHANGED + 2 * day),
            "required": False, "planned": True,
            "basis": "scripted in generate.py (DEFROST_CHANGED)",
            "notes": ("Planned: the compressor idles during each defrost and pulls down hard afterwards, "
                      "so the schedule change moves its dips and peaks too. " + invented),
        },
        {
            "id": "freezer-sensor-drops-out",
            "series": SERIES_FREEZER, "kind": "silence", "direction": "none",
            "change_at": rfc3339(last_before_dropout),
            "change_at_window": window(last_before_dropout, last_before_dropout + 30 * minute + 1),
            "detected_by": rfc3339(last_before_dropout + 45 * minute),
            "required": True, "planned": False, "max_count": 1,
            "basis": "scripted in generate.py (DROPOUT_FROM, DROPOUT_TO)",
            "notes": (f"No freezer readings from {rfc3339(last_before_dropout)} (last reading) to "
                      f"{rfc3339(first_after_dropout)} (first reading after), "
                      f"{(first_after_dropout - last_before_dropout) / 3600:.2f} h; silence_after is 30m. "
                      "In replay the virtual clock keeps moving through the compressor's 5-minute readings. "
                      + invented),
        },
        {
            "id": "compressor-wears",
            "series": SERIES_COMPRESSOR, "kind": "variance", "direction": "up",
            "change_at": rfc3339(COMPRESSOR_WEARS),
            "change_at_window": window(COMPRESSOR_WEARS - 2 * hour, COMPRESSOR_WEARS + 12 * hour),
            "detected_by": rfc3339(COMPRESSOR_WEARS + day),
            "required": True, "planned": False, "max_count": 1,
            "basis": "scripted in generate.py (COMPRESSOR_WEARS, COMPRESSOR_WEAR_FACTOR)",
            "notes": (f"Compressor wears: the residual sd of its power doubles (x{COMPRESSOR_WEAR_FACTOR:g}) "
                      "from this time; the mean is unchanged. " + invented),
        },
        {
            "id": "meter-unread",
            "series": SERIES_METER, "kind": "none", "direction": "none",
            "quiet_window": window(last_before_unread, first_after_unread + 3 * day),
            "quiet_kinds": ["level", "variance", "rate"],
            "required": True, "planned": False,
            "basis": "scripted in generate.py (METER_UNREAD_FROM, METER_UNREAD_TO)",
            "notes": (f"Nobody reads the meter from {rfc3339(last_before_unread)} to "
                      f"{rfc3339(first_after_unread)} ({(first_after_unread - last_before_unread) / 86400:.1f} days): "
                      "a gap, not a change. The first reading after it carries two weeks of consumption, "
                      "which spread over its interval matches the usual rate. No level, variance or rate "
                      "alert; one silence alert is expected (entry meter-unread-silence). " + invented),
        },
        {
            "id": "meter-unread-silence",
            "series": SERIES_METER, "kind": "silence", "direction": "none",
            "change_at": rfc3339(last_before_unread),
            "change_at_window": window(last_before_unread, last_before_unread + METER_SILENCE_AFTER + 1),
            "detected_by": rfc3339(last_before_unread + METER_SILENCE_AFTER + hour),
            "required": True, "planned": False, "max_count": 1,
            "basis": "scripted in generate.py (METER_UNREAD_FROM, METER_UNREAD_TO); silence_after 4d in plumbline.yaml",
            "notes": ("The demo config sets silence_after: 4d for the meter (normal gaps reach ~3 days "
                      "over a weekend), so two weeks unread must raise one silence alert: nobody is "
                      "reading the meter. That is the only alert the gap may cause."),
        },
        {
            "id": "door-openings-steady",
            "series": SERIES_DOOR, "kind": "none", "direction": "none",
            "quiet_window": window(armed_seconds(SERIES_DOOR), end_s),
            "required": True, "planned": False,
            "basis": "scripted in generate.py (no change in the door process)",
            "notes": "Weekday daytime traffic follows pallets shipped; nights and Sundays are quiet. "
                     "The process never changes: no alert after warmup. " + invented,
        },
        {
            "id": "pallets-steady",
            "series": SERIES_PALLETS, "kind": "none", "direction": "none",
            "quiet_window": window(armed_seconds(SERIES_PALLETS), end_s),
            "required": True, "planned": False,
            "basis": "scripted in generate.py (no change in the order process)",
            "notes": "Hourly totals with a daily and weekly pattern (none on Sundays, little on "
                     "Saturdays), Poisson with a log-normal day factor. No alert after warmup. " + invented,
        },
    ]

    truth = {
        "schema": "plumbline.replay-fixture/1",
        "fixture": "harbourside",
        "description": ("Harbourside Cold Store demo (DESIGN.md 'Demo scenario'): five streams over "
                        "2026-03-01 .. 2026-04-30, generated by generate.py with seed "
                        f"{seed}. Every number is invented for the demo only."),
        "inputs": ["readings.csv"],
        "config": "plumbline.yaml",
        "span": {"first": rfc3339(readings[0][0]), "last": rfc3339(readings[-1][0])},
        "series": [
            {"name": s, "readings": len(per_series[s]), "warmup": WARMUP[s], "armed_at": armed_at(s)}
            for s in SERIES_ORDER
        ],
        "unmatched_alerts": "forbidden",
        "expected": expected,
        "notes": [
            "Truth file: every scripted event of the demo story, with its exact time.",
            "Clock: UTC, no daylight saving, no public holidays; 2026-03-01 is a Sunday.",
            "Freezer: about one reading a minute, each 0-6 s after the minute; defrost bump "
            f"+{FREEZER_DEFROST_PEAK} C over {DEFROST_HEAT} min of heating, recovering with a "
            f"{FREEZER_DEFROST_DECAY:g}-min time constant (about 25-30 min visible).",
            "Compressor: a reading every 5 min, 0-2 s late; idles during defrost, pulls down after.",
            "Energy meter: total kWh truncated to 0.1 as a display would show it, logged to the "
            "minute; about three reads a weekday, one on most Saturdays, none on Sundays.",
            "Pallets: hourly totals, stamped at the end of the hour they count (zeros included).",
            "Door openings: one reading per opening, value 1 (2 when two fall in the same second).",
        ],
    }
    with open(os.path.join(args.out, "expect.json"), "w", newline="\n") as f:
        json.dump(truth, f, indent=2)
        f.write("\n")


def hod_of(hour_index):
    return hour_index % 24


if __name__ == "__main__":
    main()
