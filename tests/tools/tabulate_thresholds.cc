// tabulate_thresholds: writes detectors/threshold_tables.inc, the simulated
// (ARL0 -> threshold) tables behind PageHinkleyLambdaFor and BocpdThresholdFor
// (see detectors/calibration.h). Deterministic for a given command line: each
// run has its own generator seeded from (seed, design, run index), and the
// per-thread sums are integers, so the output does not depend on --threads.
//
// Method. For one design, every run feeds i.i.d. N(0, 1) readings to a
// detector whose own threshold is out of reach, and records, for each level
// of a fine grid of thresholds, the first reading at which the detector's
// statistic (Alarm::statistic) exceeds that level: that is exactly the run
// length the detector would have with that level as its threshold, since the
// statistic does not depend on the threshold until the first alarm. A run
// stops once the top level is crossed, so one set of runs gives the ARL0 of
// every level, and the ARL0 is monotone in the level by construction. The
// threshold for each target ARL0 is then read off by linear interpolation in
// log(ARL0) between neighbouring levels.
//
// Usage: tabulate_thresholds [--runs N] [--bocpd-runs N] [--seed S]
//                            [--threads T] [--output FILE]
// Runtime with the defaults: a few minutes on two cores.
#include <algorithm>
#include <cinttypes>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <functional>
#include <limits>
#include <memory>
#include <string>
#include <thread>
#include <vector>

#include "detectors/bocpd.h"
#include "detectors/calibration.h"
#include "detectors/page_hinkley.h"
#include "detectors/random.h"

namespace plumbline {
namespace {

// The ARL0 grid: 10^1 .. 10^5, four points per decade, for Page-Hinkley;
// BOCPD stops at kBocpdTopArl0 (its updates cost ~100 times more). Beyond the
// grid the look-ups extrapolate linearly in log ARL0 (see calibration.h).
constexpr int kPointsPerDecade = 4;
constexpr double kTopArl0 = 1e5;
constexpr double kBocpdTopArl0 = 2e4;
// Page-Hinkley rows: delta = shift / 2 for shifts 0.05 .. 6 sd. Larger
// deltas are never needed: DesignDetectors caps delta at half the Shewhart
// limit z(ARL0), which stays below 3 for every ARL0 up to 4e7.
constexpr double kShifts[] = {0.05, 0.1, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0};
constexpr int kLevels = 4000;  // threshold levels per design
// BOCPD levels, on the logit scale of the change probability (see Main).
constexpr double kBocpdLowestLogit = -8.0;
constexpr double kBocpdHighestLogit = 16.0;
constexpr int kPilotRuns = 100;         // runs of the BOCPD pilot that sets the top level
constexpr double kPilotCapFactor = 10;  // pilot runs stop at 10 x the top ARL0
constexpr std::int64_t kCapFactor =
    50;  // a run longer than 50 x the top ARL0 is an error

// Returns the detector's decision statistic after each reading.
using StatisticStep = std::function<double(double x, EventTime time)>;

struct LevelSums {
  std::vector<std::int64_t> sum;          // sum over runs of first-passage times
  std::vector<std::int64_t> sum_squares;  // and of their squares
  std::int64_t censored = 0;
};

void RunRange(const std::function<StatisticStep()>& make,
              const std::vector<double>& levels, std::uint64_t seed, int first_run,
              int runs, int stride, std::int64_t cap, LevelSums* sums) {
  const int n = static_cast<int>(levels.size());
  sums->sum.assign(n, 0);
  sums->sum_squares.assign(n, 0);
  for (int run = first_run; run < runs; run += stride) {
    Random random(seed + 0x9E3779B97F4A7C15ULL * static_cast<std::uint64_t>(run + 1));
    StatisticStep step = make();
    int next = 0;
    std::int64_t t = 1;
    for (; t <= cap && next < n; ++t) {
      const double statistic = step(random.Normal(), t * kMicrosPerSecond);
      while (next < n && statistic > levels[next]) {
        sums->sum[next] += t;
        sums->sum_squares[next] += t * t;
        ++next;
      }
    }
    if (next < n) {
      ++sums->censored;
      for (; next < n; ++next) {
        sums->sum[next] += cap;
        sums->sum_squares[next] += cap * cap;
      }
    }
  }
}

// Mean first-passage time of each level over `runs` runs capped at `cap`
// readings (censored runs count as the cap).
std::vector<double> PilotArl(const std::function<StatisticStep()>& make,
                             const std::vector<double>& levels, int runs,
                             std::uint64_t seed, int threads, std::int64_t cap) {
  std::vector<LevelSums> parts(threads);
  std::vector<std::thread> workers;
  for (int i = 0; i < threads; ++i) {
    workers.emplace_back(RunRange, std::cref(make), std::cref(levels), seed, i, runs,
                         threads, cap, &parts[i]);
  }
  for (std::thread& worker : workers) worker.join();
  std::vector<double> arl(levels.size());
  for (size_t j = 0; j < levels.size(); ++j) {
    std::int64_t sum = 0;
    for (const LevelSums& part : parts) sum += part.sum[j];
    arl[j] = static_cast<double>(sum) / runs;
  }
  return arl;
}

struct Tabulated {
  std::vector<double> threshold;       // per target ARL0
  std::vector<double> relative_error;  // SE / ARL at that threshold
  double top_level_arl = 0.0;          // ARL0 of the highest level simulated
  std::int64_t censored = 0;
};

// `make` returns steppers whose statistic is compared against `levels`
// (increasing); thresholds come back on the same scale.
Tabulated Tabulate(const std::string& name, const std::function<StatisticStep()>& make,
                   const std::vector<double>& levels, const std::vector<double>& targets,
                   int runs, std::uint64_t seed, int threads) {
  const double top_level = levels.back();
  const std::int64_t cap = static_cast<std::int64_t>(kCapFactor * targets.back());
  std::vector<LevelSums> parts(threads);
  std::vector<std::thread> workers;
  for (int i = 0; i < threads; ++i) {
    workers.emplace_back(RunRange, std::cref(make), std::cref(levels), seed, i, runs,
                         threads, cap, &parts[i]);
  }
  for (std::thread& worker : workers) worker.join();
  const int level_count = static_cast<int>(levels.size());
  std::vector<double> arl(level_count), relative_error(level_count);
  Tabulated out;
  for (int j = 0; j < level_count; ++j) {
    std::int64_t sum = 0, sum_squares = 0;
    for (const LevelSums& part : parts) {
      sum += part.sum[j];
      sum_squares += part.sum_squares[j];
    }
    const double mean = static_cast<double>(sum) / runs;
    const double variance = std::max(
        0.0, (static_cast<double>(sum_squares) - runs * mean * mean) / (runs - 1));
    arl[j] = mean;
    relative_error[j] = std::sqrt(variance / runs) / mean;
  }
  for (const LevelSums& part : parts) out.censored += part.censored;
  out.top_level_arl = arl.back();
  if (out.top_level_arl < targets.back()) {
    std::fprintf(stderr, "%s: top level %g reaches ARL0 %g only, below %g\n",
                 name.c_str(), top_level, out.top_level_arl, targets.back());
    std::exit(1);
  }
  if (out.censored > 0) {
    std::fprintf(stderr, "%s: %" PRId64 " runs censored at %" PRId64 " readings\n",
                 name.c_str(), out.censored, cap);
    std::exit(1);
  }
  for (double target : targets) {
    int j = 0;
    while (arl[j] < target) ++j;  // arl is non-decreasing in j; arl.back() >= target
    if (j == 0) {
      // Even the lowest level has a longer ARL0 than the target: no threshold
      // reaches it. NaN here, written as 0, which the look-ups refuse.
      out.threshold.push_back(std::numeric_limits<double>::quiet_NaN());
      out.relative_error.push_back(0.0);
      continue;
    }
    // Linear in log ARL0 between levels j-1 and j (equal ARLs: take level j).
    const double lo = std::log(arl[j - 1]), hi = std::log(arl[j]);
    const double t = hi > lo ? (std::log(target) - lo) / (hi - lo) : 1.0;
    out.threshold.push_back(levels[j - 1] + t * (levels[j] - levels[j - 1]));
    out.relative_error.push_back(relative_error[j - 1] +
                                 t * (relative_error[j] - relative_error[j - 1]));
  }
  std::fprintf(stderr, "%s: done, top level %g has ARL0 %.0f\n", name.c_str(), top_level,
               out.top_level_arl);
  return out;
}

std::string Format(double value) {
  if (std::isnan(value)) return "0";  // an unreachable table cell
  char buffer[40];
  std::snprintf(buffer, sizeof buffer, "%.6g", value);
  return buffer;
}

std::string Row(const std::vector<double>& values) {
  std::string out = "{";
  for (size_t i = 0; i < values.size(); ++i) {
    out += (i ? ", " : "") + Format(values[i]);
  }
  return out + "}";
}

double MaxOf(const std::vector<double>& values) {
  return *std::max_element(values.begin(), values.end());
}

int Main(int argc, char** argv) {
  int runs = 4000;
  int bocpd_runs = 2000;
  std::uint64_t seed = 20260301;
  int threads = 2;
  std::string output;
  std::string command = "tabulate_thresholds";
  for (int i = 1; i < argc; ++i) {
    const std::string word = argv[i];
    const bool has_value = i + 1 < argc;
    if (word == "--runs" && has_value)
      runs = std::atoi(argv[++i]);
    else if (word == "--bocpd-runs" && has_value)
      bocpd_runs = std::atoi(argv[++i]);
    else if (word == "--seed" && has_value)
      seed = std::strtoull(argv[++i], nullptr, 10);
    else if (word == "--threads" && has_value)
      threads = std::atoi(argv[++i]);
    else if (word == "--output" && has_value)
      output = argv[++i];
    else {
      std::fprintf(stderr,
                   "usage: tabulate_thresholds [--runs N] [--bocpd-runs N] [--seed S] "
                   "[--threads T] [--output FILE]\n");
      return 2;
    }
    if (word != "--output") command += " " + word + " " + argv[i];
  }
  if (runs < 100 || bocpd_runs < 100 || threads < 1) {
    std::fprintf(
        stderr,
        "tabulate_thresholds: need --runs, --bocpd-runs >= 100, --threads >= 1\n");
    return 2;
  }

  std::vector<double> targets, bocpd_targets;
  for (int i = 0;; ++i) {
    const double arl0 = std::pow(10.0, 1.0 + static_cast<double>(i) / kPointsPerDecade);
    if (arl0 > kTopArl0 * 1.0001) break;
    targets.push_back(std::round(arl0 * 10.0) / 10.0);
    if (arl0 <= kBocpdTopArl0 * 1.0001) bocpd_targets.push_back(targets.back());
  }
  if (bocpd_targets.back() < kBocpdTopArl0) bocpd_targets.push_back(kBocpdTopArl0);

  // ---- Page-Hinkley: defaults, delta = shift / 2 ----
  std::vector<double> deltas;
  std::vector<Tabulated> page_hinkley;
  std::uint64_t design_seed = seed;
  for (double shift : kShifts) {
    const double delta = 0.5 * shift;
    deltas.push_back(delta);
    PageHinkleyOptions options;
    options.delta = delta;
    options.lambda = 1e300;  // never fires: the statistic is read directly
    const auto make = [options]() -> StatisticStep {
      auto detector = std::make_shared<PageHinkley>(options);
      return [detector](double x, EventTime time) {
        return detector->Update(x, time)->statistic;
      };
    };
    // Top level: the known-mean CUSUM's h for twice the top ARL0 (the
    // running-mean test's ARL0 is within a few % of the CUSUM's at the same
    // threshold; Tabulate checks that the top level reaches the top ARL0).
    // Runs stop at the top level, so it sets the cost.
    const double h = CalibrateCusumH(2.0 * targets.back(), delta).value();
    std::vector<double> levels(kLevels);
    for (int j = 0; j < kLevels; ++j) levels[j] = h * (j + 1) / kLevels;
    page_hinkley.push_back(Tabulate("page-hinkley delta " + Format(delta), make, levels,
                                    targets, runs, ++design_seed, threads));
  }

  // ---- BOCPD: defaults ----
  // The statistic C_t lives in (0, 1 - H]; it is tabulated on the logit scale
  // g = log(C / (1 - H - C)) (the scale the look-ups interpolate on), which
  // spreads the levels near 1 - H where long ARL0s live. Before the detector
  // arms (min_readings) no level can be crossed. The statistic does not
  // depend on the threshold, and Bocpd does not restart after an alarm, so
  // the default threshold is kept.
  const BocpdOptions bocpd_defaults;
  const double top = 1.0 - bocpd_defaults.hazard;
  const auto bocpd_make = [bocpd_defaults, top]() -> StatisticStep {
    auto detector = std::make_shared<Bocpd>(bocpd_defaults);
    return [detector, top](double x, EventTime time) {
      const double c = detector->Update(x, time)->statistic;
      if (!detector->armed()) return -std::numeric_limits<double>::infinity();
      return c >= top ? std::numeric_limits<double>::infinity() : std::log(c / (top - c));
    };
  };
  // A pilot over a wide range of levels finds the top level worth simulating
  // (runs stop there, so it sets the cost): the first with a pilot ARL0 of at
  // least 2 x the top target (censored pilot runs count as the cap, which
  // can only raise that level). Every pilot run goes to the cap, so few runs.
  std::vector<double> wide(kLevels);
  for (int j = 0; j < kLevels; ++j) {
    wide[j] =
        kBocpdLowestLogit + (kBocpdHighestLogit - kBocpdLowestLogit) * j / (kLevels - 1);
  }
  const std::vector<double> pilot =
      PilotArl(bocpd_make, wide, kPilotRuns, seed + 1000, threads,
               static_cast<std::int64_t>(kPilotCapFactor * bocpd_targets.back()));
  int top_index = 0;
  while (top_index < kLevels - 1 && pilot[top_index] < 2.0 * bocpd_targets.back())
    ++top_index;
  std::fprintf(stderr, "bocpd: pilot top level logit %g (pilot ARL0 %.0f)\n",
               wide[top_index], pilot[top_index]);
  std::vector<double> bocpd_levels(kLevels);
  for (int j = 0; j < kLevels; ++j) {
    bocpd_levels[j] =
        kBocpdLowestLogit + (wide[top_index] - kBocpdLowestLogit) * j / (kLevels - 1);
  }
  Tabulated bocpd = Tabulate("bocpd", bocpd_make, bocpd_levels, bocpd_targets, bocpd_runs,
                             ++design_seed, threads);
  for (double& level : bocpd.threshold) level = top / (1.0 + std::exp(-level));

  // ---- write ----
  std::string text;
  text += "// detectors/threshold_tables.inc: GENERATED, do not edit. Regenerate with\n";
  text += "//   " + command + " --output detectors/threshold_tables.inc\n";
  text += "// (build target tabulate_thresholds, tests/tools/tabulate_thresholds.cc).\n";
  text += "//\n";
  text +=
      "// Seeded Monte Carlo on i.i.d. N(0, 1) readings: every run records the first\n";
  text += "// reading at which the detector's statistic exceeds each of " +
          std::to_string(kLevels) + " threshold levels,\n";
  text +=
      "// so one set of runs gives the in-control ARL of every level; thresholds for "
      "the\n";
  text +=
      "// target ARL0s below are interpolated linearly in log(ARL0) between levels.\n";
  text += "// Seed " + std::to_string(seed) + " (design i uses seed + i), " +
          std::to_string(runs) + " runs per Page-Hinkley design, " +
          std::to_string(bocpd_runs) + " runs for BOCPD; no run was censored.\n";
  std::vector<double> all_errors;
  for (const Tabulated& t : page_hinkley) all_errors.push_back(MaxOf(t.relative_error));
  text += "// Standard error of each tabulated ARL0 (relative): Page-Hinkley at most " +
          Format(100.0 * MaxOf(all_errors)) + "%,\n";
  text += "// BOCPD at most " + Format(100.0 * MaxOf(bocpd.relative_error)) +
          "% (per point in the *RelativeError arrays).\n";
  text += "// Page-Hinkley: PageHinkleyOptions defaults (running mean, alpha = " +
          Format(PageHinkleyOptions{}.alpha) + ") with delta = shift / 2 per row.\n";
  text += "// BOCPD: BocpdOptions defaults (hazard " + Format(bocpd_defaults.hazard) +
          ", prior NG(" + Format(bocpd_defaults.mu0) + ", " +
          Format(bocpd_defaults.kappa0) + ", " + Format(bocpd_defaults.alpha0) + ", " +
          Format(bocpd_defaults.beta0) + "), max_run_length " +
          std::to_string(bocpd_defaults.max_run_length) + ", prune_tolerance " +
          Format(bocpd_defaults.prune_tolerance) + ", window " +
          std::to_string(bocpd_defaults.window) + ", min_readings " +
          std::to_string(bocpd_defaults.min_readings) + ");\n";
  text += "// its thresholds were found on the logit scale log(C / (1 - hazard - C)).\n";
  text += "\n";
  text += "constexpr int kTableArl0Count = " + std::to_string(targets.size()) + ";\n";
  text += "constexpr double kTableArl0[kTableArl0Count] = " + Row(targets) + ";\n";
  text +=
      "constexpr int kPageHinkleyDeltaCount = " + std::to_string(deltas.size()) + ";\n";
  text += "constexpr double kPageHinkleyDelta[kPageHinkleyDeltaCount] = " + Row(deltas) +
          ";\n";
  text +=
      "// kPageHinkleyLambda[d][a]: lambda giving ARL0 kTableArl0[a] at delta "
      "kPageHinkleyDelta[d].\n";
  text +=
      "constexpr double kPageHinkleyLambda[kPageHinkleyDeltaCount][kTableArl0Count] = "
      "{\n";
  for (const Tabulated& t : page_hinkley) text += "    " + Row(t.threshold) + ",\n";
  text += "};\n";
  text +=
      "constexpr double "
      "kPageHinkleyRelativeError[kPageHinkleyDeltaCount][kTableArl0Count] = {\n";
  for (const Tabulated& t : page_hinkley) text += "    " + Row(t.relative_error) + ",\n";
  text += "};\n";
  text += "constexpr bool kTablePageHinkleyRunningMean = " +
          std::string(PageHinkleyOptions{}.use_running_mean ? "true" : "false") + ";\n";
  text +=
      "constexpr double kTablePageHinkleyAlpha = " + Format(PageHinkleyOptions{}.alpha) +
      ";\n";
  text +=
      "constexpr int kBocpdArl0Count = " + std::to_string(bocpd_targets.size()) + ";\n";
  text += "constexpr double kBocpdArl0[kBocpdArl0Count] = " + Row(bocpd_targets) + ";\n";
  text += "constexpr double kBocpdThreshold[kBocpdArl0Count] = " + Row(bocpd.threshold) +
          ";\n";
  text += "constexpr double kBocpdRelativeError[kBocpdArl0Count] = " +
          Row(bocpd.relative_error) + ";\n";
  text += "constexpr double kTableBocpdMu0 = " + Format(bocpd_defaults.mu0) + ";\n";
  text += "constexpr double kTableBocpdKappa0 = " + Format(bocpd_defaults.kappa0) + ";\n";
  text += "constexpr double kTableBocpdAlpha0 = " + Format(bocpd_defaults.alpha0) + ";\n";
  text += "constexpr double kTableBocpdBeta0 = " + Format(bocpd_defaults.beta0) + ";\n";
  text += "constexpr double kTableBocpdHazard = " + Format(bocpd_defaults.hazard) + ";\n";
  text += "constexpr int kTableBocpdMaxRunLength = " +
          std::to_string(bocpd_defaults.max_run_length) + ";\n";
  text += "constexpr double kTableBocpdPruneTolerance = " +
          Format(bocpd_defaults.prune_tolerance) + ";\n";
  text += "constexpr int kTableBocpdWindow = " + std::to_string(bocpd_defaults.window) +
          ";\n";
  text += "constexpr int kTableBocpdMinReadings = " +
          std::to_string(bocpd_defaults.min_readings) + ";\n";

  if (output.empty()) {
    std::fputs(text.c_str(), stdout);
    return 0;
  }
  std::FILE* file = std::fopen(output.c_str(), "w");
  if (file == nullptr || std::fputs(text.c_str(), file) < 0 || std::fclose(file) != 0) {
    std::fprintf(stderr, "tabulate_thresholds: cannot write %s\n", output.c_str());
    return 1;
  }
  return 0;
}

}  // namespace
}  // namespace plumbline

int main(int argc, char** argv) { return plumbline::Main(argc, argv); }
