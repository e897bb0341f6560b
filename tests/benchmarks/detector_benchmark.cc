// Per-update cost of the classic detectors (Cusum, OneSidedCusum, PageHinkley,
// Ewma) on pre-generated standardised readings. The data are drawn once,
// outside the timed loop, and cycled; every result goes through DoNotOptimize.
// The argument is the mean shift of the data in standard deviations: 0 is the
// in-control case (alarms are rare), 1 exercises the alarm and restart path.
// Run: build-*/tests/benchmarks/detector_benchmark
#include <benchmark/benchmark.h>

#include <cstddef>
#include <cstdint>
#include <vector>

#include "detectors/cusum.h"
#include "detectors/ewma.h"
#include "detectors/page_hinkley.h"
#include "detectors/poisson_cusum.h"
#include "detectors/random.h"

namespace plumbline {
namespace {

// 4096 doubles (32 KiB): small enough to stay in cache, long enough that the
// branch predictor cannot learn the alarm pattern.
constexpr std::size_t kReadings = 4096;

std::vector<double> MakeReadings(double shift) {
  Random random(20240601);
  std::vector<double> readings(kReadings);
  for (double& x : readings) x = random.Normal() + shift;
  return readings;
}

template <typename Detector>
void RunUpdates(benchmark::State& state, Detector& detector) {
  const std::vector<double> readings = MakeReadings(static_cast<double>(state.range(0)));
  std::size_t i = 0;
  EventTime time = 0;
  for (auto _ : state) {
    auto result = detector.Update(readings[i], time);
    benchmark::DoNotOptimize(result);
    i = (i + 1) & (kReadings - 1);
    time += kMicrosPerMinute;
  }
  state.SetItemsProcessed(state.iterations());
  state.counters["alarms_per_update"] = benchmark::Counter(
      static_cast<double>(detector.alarms()), benchmark::Counter::kAvgIterations);
}

void BM_CusumUpdate(benchmark::State& state) {
  Cusum cusum(CusumOptions{});
  RunUpdates(state, cusum);
}
BENCHMARK(BM_CusumUpdate)->Arg(0)->Arg(1);

void BM_OneSidedCusumUpdate(benchmark::State& state) {
  OneSidedCusum cusum(OneSidedCusumOptions{});
  RunUpdates(state, cusum);
}
BENCHMARK(BM_OneSidedCusumUpdate)->Arg(0)->Arg(1);

void BM_PageHinkleyUpdate(benchmark::State& state) {
  PageHinkley page_hinkley(PageHinkleyOptions{});
  RunUpdates(state, page_hinkley);
}
BENCHMARK(BM_PageHinkleyUpdate)->Arg(0)->Arg(1);

void BM_PageHinkleyKnownMeanUpdate(benchmark::State& state) {
  PageHinkleyOptions options;
  options.use_running_mean = false;
  PageHinkley page_hinkley(options);
  RunUpdates(state, page_hinkley);
}
BENCHMARK(BM_PageHinkleyKnownMeanUpdate)->Arg(0)->Arg(1);

void BM_EwmaUpdate(benchmark::State& state) {
  Ewma ewma(EwmaOptions{});
  RunUpdates(state, ewma);
}
BENCHMARK(BM_EwmaUpdate)->Arg(0)->Arg(1);

void BM_EwmaFixedLimitsUpdate(benchmark::State& state) {
  EwmaOptions options;
  options.exact_limits = false;
  Ewma ewma(options);
  RunUpdates(state, ewma);
}
BENCHMARK(BM_EwmaFixedLimitsUpdate)->Arg(0)->Arg(1);

// PoissonCusum (two-sided, mu0 = 2, k = 3, h = 6, k_down = 1) on pre-drawn
// Poisson counts. The argument is the mean of the counts: 2 is in control, 4 is
// the shift the upper side is tuned to (alarms every ~6 readings).
void BM_PoissonCusumUpdate(benchmark::State& state) {
  Random random(20240602);
  std::vector<double> counts(kReadings);
  for (double& count : counts) {
    count = static_cast<double>(random.Poisson(static_cast<double>(state.range(0))));
  }
  PoissonCusumOptions options;
  options.two_sided = true;
  PoissonCusum cusum(options);
  std::size_t i = 0;
  EventTime time = 0;
  for (auto _ : state) {
    auto result = cusum.Update(counts[i], time);
    benchmark::DoNotOptimize(result);
    i = (i + 1) & (kReadings - 1);
    time += kMicrosPerMinute;
  }
  state.SetItemsProcessed(state.iterations());
  state.counters["alarms_per_update"] = benchmark::Counter(
      static_cast<double>(cusum.alarms()), benchmark::Counter::kAvgIterations);
}
BENCHMARK(BM_PoissonCusumUpdate)->Arg(2)->Arg(4);

}  // namespace
}  // namespace plumbline
