// Throughput of the reading parser (lines/s and bytes/s) on realistic CSV and
// JSON lines, fed in 64 KiB chunks as a socket or file reader would, and of
// the time text functions on their own. Run by hand:
//   build/tests/benchmarks/parser_benchmark --benchmark_counters_tabular=true
#include <benchmark/benchmark.h>

#include <cstdio>
#include <string>
#include <vector>

#include "daemon/reading_parser.h"
#include "detectors/random.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

constexpr int kLines = 200000;
constexpr std::size_t kChunkBytes = 64 * 1024;

enum class Form { kCsvRfc3339, kCsvEpoch, kJson };

// Demo-scenario series (DESIGN.md), 20 sites each, readings about a minute apart.
std::string MakeInput(Form form) {
  const char* const kKinds[] = {"freezer-%d/temp_c", "compressor-%d/power_kw",
                                "dock-%d/door_openings", "main-%d/energy_kwh",
                                "orders-%d/pallets_shipped"};
  Random random(2026);
  std::string out;
  EventTime time = *ParseTime("2026-03-01T00:00:00Z");
  char series[64], line[256];
  for (int i = 0; i < kLines; ++i) {
    time +=
        60 * kMicrosPerSecond / 5 + static_cast<EventTime>(random.NextU64() % 2000000);
    if (i % 4 != 0) time -= time % kMicrosPerSecond;  // most stamps are whole seconds
    std::snprintf(series, sizeof series, kKinds[i % 5],
                  static_cast<int>(random.NextU64() % 20));
    const double value = -18.0 + 4.0 * random.Normal();
    const std::string stamp = FormatRfc3339(time);
    switch (form) {
      case Form::kCsvRfc3339:
        std::snprintf(line, sizeof line, "%s,coldstore/%s,%.3f\n", stamp.c_str(), series,
                      value);
        break;
      case Form::kCsvEpoch:
        std::snprintf(line, sizeof line, "%lld.%03lld,coldstore/%s,%.3f\n",
                      static_cast<long long>(time / kMicrosPerSecond),
                      static_cast<long long>(time % kMicrosPerSecond / 1000), series,
                      value);
        break;
      case Form::kJson:
        std::snprintf(
            line, sizeof line,
            "{\"time\": \"%s\", \"series\": \"coldstore/%s\", \"value\": %.3f}\n",
            stamp.c_str(), series, value);
        break;
    }
    out += line;
  }
  return out;
}

void BM_ParseLines(benchmark::State& state, Form form) {
  const std::string input = MakeInput(form);
  double checksum = 0.0;
  ReadingParser parser({}, [&](const Reading& r) {
    checksum += r.value + static_cast<double>(r.series.size());
  });
  std::uint64_t lines = 0;
  for (auto _ : state) {
    for (std::size_t i = 0; i < input.size(); i += kChunkBytes) {
      parser.Feed(std::string_view(input).substr(i, kChunkBytes));
    }
    parser.Finish();
    lines += kLines;
  }
  benchmark::DoNotOptimize(checksum);
  if (parser.counters().rejected != 0)
    state.SkipWithError("benchmark input was rejected");
  state.SetBytesProcessed(static_cast<std::int64_t>(input.size()) * state.iterations());
  state.counters["lines/s"] =
      benchmark::Counter(static_cast<double>(lines), benchmark::Counter::kIsRate);
  state.counters["bytes/line"] = static_cast<double>(input.size()) / kLines;
}
BENCHMARK_CAPTURE(BM_ParseLines, csv_rfc3339, Form::kCsvRfc3339)
    ->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_ParseLines, csv_epoch, Form::kCsvEpoch)
    ->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_ParseLines, json, Form::kJson)->Unit(benchmark::kMillisecond);

void BM_ParseTime(benchmark::State& state, const char* text) {
  EventTime t = 0;
  for (auto _ : state) {
    benchmark::DoNotOptimize(ParseTimeInto(text, &t));
    benchmark::DoNotOptimize(t);
  }
}
BENCHMARK_CAPTURE(BM_ParseTime, rfc3339, "2026-03-01T12:00:00Z");
BENCHMARK_CAPTURE(BM_ParseTime, rfc3339_offset_fraction,
                  "2026-03-01T12:00:00.123456+02:00");
BENCHMARK_CAPTURE(BM_ParseTime, epoch_fraction, "1772366400.25");

void BM_FormatRfc3339(benchmark::State& state) {
  std::string out;
  EventTime t = *ParseTime("2026-03-01T12:00:00.25Z");
  for (auto _ : state) {
    out.clear();
    AppendRfc3339(t, &out);
    benchmark::DoNotOptimize(out.data());
    t += 1000;
  }
}
BENCHMARK(BM_FormatRfc3339);

}  // namespace
}  // namespace plumbline
