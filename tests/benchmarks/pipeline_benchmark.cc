// Cost of the whole per-reading path: one SeriesMonitor (intake, forecaster,
// residual profile, whitening, scale, level and variance detectors, arrival
// model) fed jittered seasonal readings, for the default profile and with BOCPD
// added; and of the seasonal forecaster's update alone. Readings are generated
// outside the timed loop.
#include <benchmark/benchmark.h>

#include <vector>

#include "detectors/seasonal_forecaster.h"
#include "detectors/series_monitor.h"
#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

void RunPipeline(benchmark::State& state, std::vector<DetectorKind> detectors) {
  ProfileOptions profile;  // seasons [1d, 7d]
  profile.detectors = std::move(detectors);
  auto design = ProfileDesign::Make(profile);
  if (!design.ok()) {
    state.SkipWithError(design.status().ToString().c_str());
    return;
  }
  synthetic::SyntheticStreamOptions options;
  options.spacing = kMicrosPerMinute;
  options.jitter = 5 * kMicrosPerSecond;
  const auto readings = synthetic::MakeSyntheticStream(options, 400'000, 3);
  SeriesMonitor monitor(&*design);
  std::vector<SeriesEvent> events;
  size_t i = 0;
  // Warm the model up first, so the timed loop measures the steady state.
  for (; i < 100'000; ++i) monitor.Observe(readings[i].time, readings[i].value, &events);
  for (auto _ : state) {
    if (i == readings.size()) {
      state.PauseTiming();
      i = 100'000;
      monitor = SeriesMonitor(&*design);
      for (size_t j = 0; j < i; ++j)
        monitor.Observe(readings[j].time, readings[j].value, &events);
      state.ResumeTiming();
    }
    events.clear();
    benchmark::DoNotOptimize(
        monitor.Observe(readings[i].time, readings[i].value, &events));
    ++i;
  }
  state.SetItemsProcessed(state.iterations());
}

void BM_PipelineDefaultProfile(benchmark::State& state) {
  RunPipeline(state, {DetectorKind::kCusum, DetectorKind::kPageHinkley});
}
BENCHMARK(BM_PipelineDefaultProfile);

void BM_PipelineWithBocpd(benchmark::State& state) {
  RunPipeline(state,
              {DetectorKind::kCusum, DetectorKind::kPageHinkley, DetectorKind::kBocpd});
}
BENCHMARK(BM_PipelineWithBocpd);

// SeasonalForecaster::Update alone, seasons [1d, 7d] with their default
// harmonics (the default profile's model), on the same readings.
void BM_SeasonalForecasterUpdate(benchmark::State& state) {
  SeasonalForecasterOptions options;
  options.seasons = {kMicrosPerDay, 7 * kMicrosPerDay};
  for (EventTime period : options.seasons) {
    options.harmonics.push_back(SeasonalForecasterOptions::DefaultHarmonics(period));
  }
  synthetic::SyntheticStreamOptions stream;
  stream.spacing = kMicrosPerMinute;
  stream.jitter = 5 * kMicrosPerSecond;
  stream.gap_probability = 0.0;
  const auto readings = synthetic::MakeSyntheticStream(stream, 400'000, 3);
  SeasonalForecaster forecaster(options);
  size_t i = 0;
  for (; i < 100'000; ++i) (void)forecaster.Update(readings[i].time, readings[i].value);
  for (auto _ : state) {
    if (i == readings.size()) {
      state.PauseTiming();
      forecaster = SeasonalForecaster(options);
      for (i = 0; i < 100'000; ++i)
        (void)forecaster.Update(readings[i].time, readings[i].value);
      state.ResumeTiming();
    }
    benchmark::DoNotOptimize(forecaster.Update(readings[i].time, readings[i].value));
    ++i;
  }
  state.SetItemsProcessed(state.iterations());
  state.counters["coefficients"] = forecaster.dimension();
}
BENCHMARK(BM_SeasonalForecasterUpdate);

}  // namespace
}  // namespace plumbline
