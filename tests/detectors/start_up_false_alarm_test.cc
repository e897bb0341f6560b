// The false-alarm promise in the first weeks after warmup (issue 10's
// acceptance counts over 200,000 readings, where false_alarm_test passes; a
// user meets the first weeks first). Labelled pending: it fails today, and
// says by how much. Seeded synthetic streams (tests/support/noise_streams.h).
#include <cstdint>
#include <cstdio>
#include <vector>

#include <gtest/gtest.h>

#include "detectors/series_monitor.h"
#include "tests/support/noise_streams.h"

namespace plumbline {
namespace {

using namespace noise_streams;

struct StartUp {
  int alerts = 0;
  int variance = 0;
  long long readings = 0;
  double budget = 0;  // false alarms the promise allows: readings / arl0
};

// Readings from the end of warmup to 3,000 (three weeks of 10-minute
// readings) of 100 streams of one family, every alert kind counted.
StartUp StartUpAlerts(Noise noise) {
  auto design = ProfileDesign::Make(ProfileFor(noise));
  EXPECT_TRUE(design.ok());
  StartUp s;
  const int warmup = design->profile.warmup;
  for (std::uint64_t seed = 2000; seed < 2100; ++seed) {
    SeriesMonitor monitor(&*design);
    NoiseSource source(noise, seed);
    EventTime t = kStart;
    std::vector<SeriesEvent> events;
    for (int i = 0; i < 3000; ++i) {
      t = NextTime(source, t);
      events.clear();
      monitor.Observe(t, source.Next(Mean(noise, t)), &events);
      if (i < warmup) continue;
      ++s.readings;
      for (const SeriesEvent& e : events) {
        if (e.type != EventType::kAlert) continue;
        ++s.alerts;
        s.variance += e.kind == AlertKind::kVariance;
      }
    }
  }
  s.budget = static_cast<double>(s.readings) / design->profile.arl0;
  std::printf(
      "[figures] %s, readings %d-3000 of 100 streams: %d alerts = %.2f / arl0, "
      "%d of them variance\n",
      Name(noise), warmup, s.alerts, s.alerts / s.budget, s.variance);
  return s;
}

// On 4 December: Gaussian 0.27 / arl0; AR(1) 1.95, mostly level alerts while
// the whitener's correlation estimate, a mean over all residuals so far,
// still lags (0.30 on average over readings 100-300, against 0.5); Student-t
// 2.81, 125 of its 166 alerts from the variance chart, which is designed for
// normal residuals and fired on heavy tails until its re-fit on a full
// sample some 1,000 readings after warmup; Poisson 0.14. On 5 December, with
// interim re-fits of that chart (series_monitor.h): Student-t 1.44, 44 of its
// 85 alerts from the variance chart (22 allowed), most of them before its
// first interim re-fit; the others unchanged. A whitener whose moments weigh
// recent residuals more (weights growing linearly) brought AR(1) to 1.39, but
// on the demo's compressor, whose early residuals are the more correlated, it
// raised false level alerts at arming and was not kept. Measured the same
// day: these streams' residuals are as correlated (lag-1 0.48) from the
// moment the model settles as ever after; it is the 0.02-0.30 of the
// unsettled model's first 60 residuals that hold the running mean down.
// Teaching the whitener only from a settled model, with the scale re-learning
// from that moment, brought AR(1) to 1.22; but on the monthly series of
// forecast_coverage_test (48 to 444 readings learned each; why, not found),
// it cut the 95% interval coverage from 0.958 to 0.861 (0.889 with the
// whitener's part alone), and it was not kept.
TEST(StartUpFalseAlarmTest, TheFirstWeeksKeepTheFalseAlarmPromise) {
  for (Noise noise :
       {Noise::kGaussian, Noise::kAutoregressive, Noise::kStudentT, Noise::kPoisson}) {
    const StartUp s = StartUpAlerts(noise);
    EXPECT_LE(s.alerts, 1.5 * s.budget) << Name(noise);
    // The variance pair holds a quarter of the budget (series_monitor.cc).
    EXPECT_LE(s.variance, 1.5 * s.budget / 4.0) << Name(noise);
  }
}

}  // namespace
}  // namespace plumbline
