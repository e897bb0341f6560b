// Per-update cost of Bocpd (Bayesian online change-point detection) on
// standardised readings, and the average number of run-length states it holds.
// Run: build-*/tests/benchmarks/bocpd_benchmark
//
// Each benchmark first feeds 3 R readings so the posterior has reached the
// cap, then times Update over a pre-drawn ring of readings (drawing them is
// not timed). Counter "live" is the mean number of states held per update;
// time per update / live is the cost per state.
#include <benchmark/benchmark.h>

#include <vector>

#include "detectors/bocpd.h"
#include "detectors/random.h"

namespace plumbline {
namespace {

// level_every = 0: N(0, 1) throughout. Otherwise the mean alternates between 0
// and 3 every level_every readings (a change that makes pruning work).
std::vector<double> Readings(int level_every) {
  Random random(42);
  std::vector<double> x(1 << 16);
  for (std::size_t i = 0; i < x.size(); ++i) {
    const bool high = level_every > 0 && (static_cast<int>(i) / level_every) % 2 == 1;
    x[i] = random.Normal() + (high ? 3.0 : 0.0);
  }
  return x;
}

void RunUpdates(benchmark::State& state, const BocpdOptions& options, int level_every) {
  const std::vector<double> x = Readings(level_every);
  const std::size_t mask = x.size() - 1;
  Bocpd bocpd(options);
  std::size_t i = 0;
  for (int k = 0; k < 3 * options.max_run_length; ++k, ++i) {
    benchmark::DoNotOptimize(bocpd.Update(x[i & mask], static_cast<EventTime>(i)));
  }
  double live = 0.0;
  for (auto _ : state) {
    benchmark::DoNotOptimize(bocpd.Update(x[i & mask], static_cast<EventTime>(i)));
    live += bocpd.live_hypotheses();
    ++i;
  }
  state.counters["live"] = benchmark::Counter(live, benchmark::Counter::kAvgIterations);
}

// Default options (pruning at 1e-10) with the cap R = range(0), N(0, 1).
void BM_BocpdUpdate(benchmark::State& state) {
  BocpdOptions options;
  options.max_run_length = static_cast<int>(state.range(0));
  RunUpdates(state, options, 0);
}
BENCHMARK(BM_BocpdUpdate)->Arg(100)->Arg(300)->Arg(1000);

// The same without pruning, for comparison.
void BM_BocpdUpdateNoPruning(benchmark::State& state) {
  BocpdOptions options;
  options.max_run_length = static_cast<int>(state.range(0));
  options.prune_tolerance = 0.0;
  RunUpdates(state, options, 0);
}
BENCHMARK(BM_BocpdUpdateNoPruning)->Arg(300);

// A 3-sigma level change every 500 readings: pruning, gaps and the sliding cap.
void BM_BocpdUpdateWithChanges(benchmark::State& state) {
  BocpdOptions options;
  options.max_run_length = static_cast<int>(state.range(0));
  RunUpdates(state, options, 500);
}
BENCHMARK(BM_BocpdUpdateWithChanges)->Arg(300);

// The run-length posterior alone, default options with the cap R = range(0),
// N(0, 1), on the instruction set range(1) of the update loop (0 portable, 1
// AVX2, 2 AVX-512; skipped where the processor lacks it). BM_BocpdUpdate runs
// on the widest one.
void BM_RunLengthPosteriorUpdate(benchmark::State& state) {
  const auto isa = static_cast<bocpd_internal::Isa>(state.range(1));
  if (!bocpd_internal::Supported(isa)) {
    state.SkipWithError("instruction set not supported here");
    return;
  }
  BocpdOptions options;
  options.max_run_length = static_cast<int>(state.range(0));
  const std::vector<double> x = Readings(0);
  const std::size_t mask = x.size() - 1;
  RunLengthPosterior posterior(options, isa);
  std::size_t i = 0;
  for (int k = 0; k < 3 * options.max_run_length; ++k, ++i) posterior.Update(x[i & mask]);
  for (auto _ : state) {
    posterior.Update(x[i & mask]);
    benchmark::DoNotOptimize(posterior.last_log_predictive());
    ++i;
  }
}
BENCHMARK(BM_RunLengthPosteriorUpdate)->ArgsProduct({{100, 300, 1000}, {0, 1, 2}});

}  // namespace
}  // namespace plumbline
