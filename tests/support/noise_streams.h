// Seeded null streams that are not textbook (autocorrelated, heavy-tailed,
// low counts) on a daily season with jittered timestamps, for the false-alarm
// and delay checks. Invented data: for tests only. Not thread-safe.
#pragma once

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <numbers>
#include <optional>

#include "detectors/event_time.h"
#include "detectors/profile.h"
#include "detectors/random.h"
#include "detectors/series_monitor.h"

namespace plumbline::noise_streams {

enum class Noise { kGaussian, kAutoregressive, kStudentT, kPoisson };

inline const char* Name(Noise noise) {
  switch (noise) {
    case Noise::kGaussian: return "Gaussian";
    case Noise::kAutoregressive: return "AR(1) phi 0.5";
    case Noise::kStudentT: return "Student-t 3 d.f.";
    case Noise::kPoisson: return "Poisson mean 2";
  }
  return "";
}

// Unit-variance noise of each family (the t and AR(1) are scaled to sd 1).
class NoiseSource {
 public:
  NoiseSource(Noise noise, std::uint64_t seed) : noise_(noise), rng_(seed) {}
  double Next(double mean) {
    switch (noise_) {
      case Noise::kGaussian: return mean + rng_.Normal();
      case Noise::kAutoregressive:
        ar_ = 0.5 * ar_ + std::sqrt(0.75) * rng_.Normal();
        return mean + ar_;
      case Noise::kStudentT: {
        double chi2 = 0;
        for (int i = 0; i < 3; ++i) {
          const double g = rng_.Normal();
          chi2 += g * g;
        }
        return mean + rng_.Normal() / std::sqrt(chi2 / 3.0) / std::sqrt(3.0);
      }
      case Noise::kPoisson: return static_cast<double>(rng_.Poisson(std::max(mean, 0.0)));
    }
    return mean;
  }
  double Uniform() { return rng_.Uniform(); }

 private:
  Noise noise_;
  Random rng_;
  double ar_ = 0.0;
};

inline ProfileOptions ProfileFor(Noise noise) {
  ProfileOptions p;
  p.seasons = {kMicrosPerDay};
  p.arl0 = 5000;
  p.kind = noise == Noise::kPoisson ? SeriesKind::kCount : SeriesKind::kGauge;
  return p;
}

// Seasonal mean: gauges around 10 +/- 3, counts around 2 +/- 1.
inline double Mean(Noise noise, EventTime t) {
  const double phase = 2 * std::numbers::pi * static_cast<double>(t % kMicrosPerDay) /
                       static_cast<double>(kMicrosPerDay);
  return noise == Noise::kPoisson ? 2.0 * (1 + 0.5 * std::sin(phase)) : 10 + 3 * std::sin(phase);
}

inline constexpr EventTime kStart = 1'772'323'200LL * kMicrosPerSecond;  // 2026-03-01

inline EventTime NextTime(NoiseSource& source, EventTime t) {
  return t + 10 * kMicrosPerMinute +
         static_cast<EventTime>((source.Uniform() - 0.5) * 4.0 * kMicrosPerMinute);
}

// The first upward level alert on a stream of `noise` (seed) whose mean steps
// up by `step` at reading `change`, looked for through `after` readings past
// it; delay counts readings from the first shifted one, inclusive.
struct StepAlert {
  int delay = 0;
  SeriesEvent event;
};
inline std::optional<StepAlert> FirstAlertAfterStep(const ProfileDesign& design,
                                                    Noise noise, std::uint64_t seed,
                                                    int change, double step, int after) {
  SeriesMonitor monitor(&design);
  NoiseSource source(noise, seed);
  EventTime t = kStart;
  std::vector<SeriesEvent> events;
  for (int i = 0; i < change + after; ++i) {
    t = NextTime(source, t);
    events.clear();
    monitor.Observe(t, source.Next(Mean(noise, t) + (i >= change ? step : 0.0)), &events);
    for (const SeriesEvent& e : events) {
      if (i >= change && e.type == EventType::kAlert && e.kind == AlertKind::kLevel &&
          e.direction == Direction::kUp) {
        return StepAlert{i - change + 1, e};
      }
    }
  }
  return std::nullopt;
}

}  // namespace plumbline::noise_streams
