// Seeded synthetic readings for detection-quality tests: a daily and a weekly
// season, a slow trend, jittered timestamps, occasional gaps, Gaussian noise,
// and optional changes (level step, variance change) at a chosen reading.
// Invented data: for tests only. Not thread-safe.
#pragma once

#include <cmath>
#include <numbers>
#include <vector>

#include "detectors/event_time.h"
#include "detectors/random.h"

namespace plumbline::synthetic {

struct SyntheticStreamOptions {
  EventTime start = 1'772'323'200LL * kMicrosPerSecond;  // 2026-03-01T00:00:00Z
  EventTime spacing = 10 * kMicrosPerMinute;
  EventTime jitter = 2 * kMicrosPerMinute;       // uniform +/- jitter on each timestamp
  double gap_probability = 0.002;                 // chance that a reading starts a gap
  EventTime gap_length = 6 * kMicrosPerHour;      // length of such a gap
  double level = 20.0;
  double daily_amplitude = 3.0;                   // in noise sd
  double weekly_amplitude = 1.5;                  // in noise sd
  double trend_per_week = 0.2;                    // in noise sd
  double noise_sd = 1.0;
  // Changes, from reading index change_index on (-1: none).
  long long change_index = -1;
  double level_shift = 0.0;                       // in noise sd
  double sd_ratio = 1.0;                          // new sd / old sd
  // Arrivals stop after this reading (-1: never).
  long long stop_index = -1;
};

struct SyntheticReading {
  EventTime time;
  double value;
};

inline std::vector<SyntheticReading> MakeSyntheticStream(const SyntheticStreamOptions& o,
                                                         long long count,
                                                         std::uint64_t seed) {
  Random rng(seed);
  std::vector<SyntheticReading> out;
  out.reserve(static_cast<size_t>(count));
  EventTime nominal = o.start;
  const double day = static_cast<double>(kMicrosPerDay);
  for (long long i = 0; i < count; ++i) {
    if (o.stop_index >= 0 && i > o.stop_index) break;
    nominal += o.spacing;
    if (rng.Uniform() < o.gap_probability) nominal += o.gap_length;
    const EventTime t =
        nominal + static_cast<EventTime>((2.0 * rng.Uniform() - 1.0) * static_cast<double>(o.jitter));
    const double days = static_cast<double>(t - o.start) / day;
    double mean = o.level + o.noise_sd * (o.daily_amplitude * std::sin(2 * std::numbers::pi * days) +
                                          o.weekly_amplitude * std::cos(2 * std::numbers::pi * days / 7) +
                                          o.trend_per_week * days / 7);
    double sd = o.noise_sd;
    if (o.change_index >= 0 && i >= o.change_index) {
      mean += o.level_shift * o.noise_sd;
      sd *= o.sd_ratio;
    }
    out.push_back({t, mean + sd * rng.Normal()});
  }
  return out;
}

}  // namespace plumbline::synthetic
