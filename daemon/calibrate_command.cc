// `plumbline calibrate`: prints detector thresholds for a target in-control
// average run length and the smallest shift worth catching, with their
// predicted run lengths. Runs once on the calling thread.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <memory>
#include <sstream>
#include <string>
#include <vector>

#include "daemon/command_line.h"
#include "daemon/subcommands.h"
#include "detectors/bocpd.h"
#include "detectors/calibration.h"
#include "detectors/cusum.h"
#include "detectors/ewma.h"
#include "detectors/page_hinkley.h"
#include "detectors/profile.h"

namespace plumbline {
namespace {

constexpr char kUsage[] =
    "usage: plumbline calibrate --arl0 N --shift D [--detectors LIST] [--agree N]\n"
    "\n"
    "Prints thresholds for each detector so that false alarms come no more often than\n"
    "once every N readings on average (in-control average run length, ARL0), tuned to\n"
    "catch a shift of D residual standard deviations, with the predicted run lengths.\n"
    "Assumes standardised residuals that are independent and normal when in control.\n"
    "\n"
    "options:\n";

// Simulation settings for the detection delays of Page-Hinkley and BOCPD.
constexpr int kShiftRuns = 2000;            // runs per simulated estimate
constexpr int kBocpdShiftRuns = 200;        // BOCPD updates cost ~100 times more
constexpr std::int64_t kChangeAfter = 100;  // in-control readings before the shift
constexpr std::uint64_t kSimulationSeed = 20260301;

// Readings after the change a simulated run may wait before it is stopped
// (counted as censored): 20 / shift^2, within [500, 5000]. A CUSUM tuned to
// the shift needs a few / shift^2 readings, so this only cuts off misses.
std::int64_t DelayHorizon(double shift) {
  return static_cast<std::int64_t>(std::clamp(20.0 / (shift * shift), 500.0, 5000.0));
}

std::vector<OptionSpec> Specs() {
  return {
      {"arl0", true, false, "target in-control ARL in readings, 10 to 1e7 (required)",
       "N"},
      {"shift", true, false,
       "smallest shift worth catching in residual sd, (0, 10] (required)", "D"},
      {"detectors", true, false,
       "comma-separated from cusum, page-hinkley, bocpd, ewma (default "
       "cusum,page-hinkley)",
       "LIST"},
      {"agree", true, false, "detectors that must fire to raise an alert (default 1)",
       "N"},
  };
}

int UsageError(const std::string& message) {
  std::fprintf(stderr, "plumbline calibrate: %s\n(see plumbline calibrate --help)\n",
               message.c_str());
  return 2;
}

bool ParseNumber(const std::string& text, double* value) {
  if (text.empty()) return false;
  char* end = nullptr;
  *value = std::strtod(text.c_str(), &end);
  return end == text.c_str() + text.size() && std::isfinite(*value);
}

std::string Format(double value, int digits = 4) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, "%.*g", digits, value);
  return buffer;
}

std::string FormatArl(double value) {
  char buffer[64];
  if (value >= 1000.0) {
    std::snprintf(buffer, sizeof buffer, "%.0f", value);
  } else {
    std::snprintf(buffer, sizeof buffer, "%.4g", value);
  }
  return buffer;
}

void PrintRow(const std::string& label, const std::string& value) {
  std::printf("  %-20s %s\n", label.c_str(), value.c_str());
}

void PrintSimulatedDelay(const std::string& label,
                         const StatusOr<RunLengthEstimate>& estimate,
                         std::int64_t horizon) {
  if (!estimate.ok()) {
    PrintRow(label, "not available: " + estimate.status().message());
    return;
  }
  const bool censored = estimate->censored > 0;
  PrintRow(label, "mean " + std::string(censored ? ">= " : "") +
                      FormatArl(estimate->mean) + " +/- " +
                      Format(estimate->standard_error, 2) + ", median " +
                      FormatArl(estimate->median) + " readings after the change");
  PrintRow("", "(simulated, " + std::to_string(estimate->runs) +
                   " runs, change after reading " + std::to_string(kChangeAfter) +
                   (censored ? ";" : ")"));
  if (censored) {
    PrintRow("", " " + std::to_string(estimate->censored) + " runs had not fired " +
                     std::to_string(horizon) + " readings after the change)");
  }
}

}  // namespace

int RunCalibrate(const Args& args) {
  const std::vector<OptionSpec> specs = Specs();
  StatusOr<ParsedArgs> parsed = ParseArgs(args, specs);
  if (!parsed.ok()) return UsageError(parsed.status().message());
  if (parsed->Has("help")) {
    std::printf("%s%s", kUsage, FormatOptions(specs).c_str());
    return 0;
  }
  double arl0 = 0.0, shift = 0.0, agree_value = 1.0;
  if (!parsed->Has("arl0")) return UsageError("--arl0 is required");
  if (!parsed->Has("shift")) return UsageError("--shift is required");
  if (!ParseNumber(*parsed->Get("arl0"), &arl0)) {
    return UsageError("--arl0 must be a number; got '" + *parsed->Get("arl0") + "'");
  }
  if (!ParseNumber(*parsed->Get("shift"), &shift)) {
    return UsageError("--shift must be a number; got '" + *parsed->Get("shift") + "'");
  }
  if (parsed->Has("agree") && (!ParseNumber(*parsed->Get("agree"), &agree_value) ||
                               agree_value != std::floor(agree_value))) {
    return UsageError("--agree must be a whole number; got '" + *parsed->Get("agree") +
                      "'");
  }
  std::vector<DetectorKind> detectors = ProfileOptions{}.detectors;
  if (parsed->Has("detectors")) {
    detectors.clear();
    std::stringstream list(*parsed->Get("detectors"));
    std::string name;
    while (std::getline(list, name, ',')) {
      std::optional<DetectorKind> kind = DetectorKindFromString(name);
      if (!kind) {
        return UsageError("unknown detector '" + name + "' in --detectors; choose from " +
                          std::string(DetectorKindChoices()));
      }
      detectors.push_back(*kind);
    }
  }
  if (agree_value < 1.0 || agree_value > 1000.0) {
    return UsageError("--agree must be in [1, number of detectors]");
  }
  StatusOr<DetectorDesign> design =
      DesignDetectors(arl0, shift, detectors, static_cast<int>(agree_value));
  if (!design.ok()) {
    // Out-of-range arguments are usage errors; a target a detector cannot
    // reach (for example BOCPD below its arming delay) is too.
    return UsageError(design.status().message());
  }

  const DetectorDesign& d = *design;
  std::printf("Target: at most one false alarm per %s readings on average (ARL0),\n",
              FormatArl(arl0).c_str());
  std::printf("tuned to catch a shift of %s residual sd.\n", Format(shift).c_str());
  std::string names;
  for (DetectorKind kind : detectors) {
    names += (names.empty() ? "" : ", ") + std::string(ToString(kind));
  }
  std::printf("Detectors: %s; agree = %d.\n", names.c_str(), d.agree);
  if (detectors.size() > 1 && d.agree == 1) {
    std::printf(
        "Each is calibrated to ARL0 = %zu x %s = %s (union bound: an alert fires when\n"
        "any one does, so the alert rate is at most the sum of their alarm rates).\n",
        detectors.size(), FormatArl(arl0).c_str(),
        FormatArl(d.per_detector_arl0).c_str());
  } else if (detectors.size() > 1) {
    std::printf(
        "Each is calibrated to ARL0 = %zu / %d x %s = %s (an alert needs alarms from %d\n"
        "detectors, so the alert rate is at most the sum of their alarm rates / %d).\n",
        detectors.size(), d.agree, FormatArl(arl0).c_str(),
        FormatArl(d.per_detector_arl0).c_str(), d.agree, d.agree);
  }
  const std::string at_shift = "at shift " + Format(shift);
  const auto chain = [](const StatusOr<double>& arl, const char* what) {
    return arl.ok() ? FormatArl(*arl) + " readings (" + what + ")"
                    : arl.status().message();
  };
  const auto table = [](const StatusOr<TableLookup>& arl) {
    if (!arl.ok()) return arl.status().message();
    return FormatArl(arl->value) + " readings (simulation table, +/- " +
           Format(100.0 * arl->relative_error, 2) + "%" +
           (arl->extrapolated ? ", extrapolated beyond it" : "") + ")";
  };
  const std::int64_t horizon = DelayHorizon(shift);
  const std::int64_t cap = kChangeAfter + horizon;

  for (DetectorKind kind : detectors) {
    std::printf("\n");
    switch (kind) {
      case DetectorKind::kCusum: {
        const CusumOptions& o = d.cusum;
        std::printf("cusum: two-sided tabular CUSUM\n");
        PrintRow("thresholds", "k = " + Format(o.k) + ", h = " + Format(o.h, 6) +
                                   ", headstart = " + Format(o.headstart));
        PrintRow("in-control ARL", chain(CusumArl(o.k, o.h, 0.0), "Markov chain"));
        PrintRow("ARL " + at_shift,
                 chain(CusumArl(o.k, o.h, shift), "Markov chain, shift from reading 1"));
        break;
      }
      case DetectorKind::kEwma: {
        const EwmaOptions& o = d.ewma;
        std::printf("ewma: EWMA chart with fixed asymptotic limits\n");
        PrintRow("thresholds", "lambda = " + Format(o.lambda) + ", L = " +
                                   Format(o.width, 6) + ", exact_limits = false");
        PrintRow("in-control ARL",
                 chain(EwmaArl(o.lambda, o.width, 0.0), "Markov chain"));
        PrintRow("ARL " + at_shift, chain(EwmaArl(o.lambda, o.width, shift),
                                          "Markov chain, shift from reading 1"));
        break;
      }
      case DetectorKind::kPageHinkley: {
        const PageHinkleyOptions& o = d.page_hinkley;
        std::printf("page-hinkley: Page-Hinkley test with a running mean\n");
        PrintRow("thresholds",
                 "delta = " + Format(o.delta) + ", lambda = " + Format(o.lambda, 6));
        PrintRow("in-control ARL", table(PageHinkleyArl0For(o.lambda, o.delta)));
        const auto make = [o]() -> RunLengthStep {
          auto test = std::make_shared<PageHinkley>(o);
          return
              [test](double x, EventTime time) { return test->Update(x, time)->fired; };
        };
        PrintSimulatedDelay("delay " + at_shift,
                            SimulateRunLength(make, shift, kShiftRuns, kSimulationSeed,
                                              cap, kChangeAfter),
                            horizon);
        break;
      }
      case DetectorKind::kBocpd: {
        const BocpdOptions& o = d.bocpd;
        std::printf(
            "bocpd: Bayesian online change-point detection (other options default)\n");
        PrintRow("thresholds", "threshold = " + Format(o.threshold, 6) +
                                   " on P(run began in "
                                   "the last " +
                                   std::to_string(o.window) + " readings)");
        PrintRow("in-control ARL", table(BocpdArl0For(o.threshold)));
        const auto make = [o]() -> RunLengthStep {
          auto detector = std::make_shared<Bocpd>(o);
          return [detector](double x, EventTime time) {
            return detector->Update(x, time)->fired;
          };
        };
        PrintSimulatedDelay("delay " + at_shift,
                            SimulateRunLength(make, shift, kBocpdShiftRuns,
                                              kSimulationSeed, cap, kChangeAfter),
                            horizon);
        break;
      }
    }
  }
  std::printf(
      "\nMarkov-chain ARLs count readings from the first, with the shift present from\n"
      "the start. Simulated delays count readings after a change at reading %lld, among\n"
      "runs without a false alarm before it (a running mean absorbs a shift that is\n"
      "there from the first reading). In-control ARLs assume independent N(0, 1)\n"
      "residuals; correlated residuals give more false alarms.\n",
      static_cast<long long>(kChangeAfter));
  return 0;
}

}  // namespace plumbline
