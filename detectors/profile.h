// A profile: how Plumbline models and watches every series whose name matches
// its glob. Profiles come from the `series:` list of the config (config/ maps the
// YAML onto this struct; the first profile whose glob matches a series wins).
// Plain value type; thread-compatible.
#pragma once

#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "detectors/event_time.h"

namespace plumbline {

// What a reading's value means, which decides how readings are combined in time.
enum class SeriesKind {
  kGauge,  // a level at an instant (temperature, power); averaged over time
  kCount,  // an amount that happened (pallets, door openings); summed
  kMeter,  // a monotone running total (energy meter); differenced, spread over its interval
};

// What an interval with no readings means.
enum class GapPolicy {
  kSkip,  // unknown: nothing is inferred, the model just waits
  kZero,  // nothing happened: empty buckets count as zero (counts)
  kHold,  // the last value still holds (gauges that report on change)
};

enum class DetectorKind { kCusum, kPageHinkley, kBocpd, kEwma };

// Which chart plays the CUSUM's part on a count series (kind: count).
enum class CountChart {
  kAuto,     // the count CUSUM when the mean over the warmup is below kLowCountMean
  kPoisson,  // always the count CUSUM (detectors/poisson_cusum.h)
  kNormal,   // always the CUSUM on standardised residuals
};
// Below this mean count per reading the normal approximation to a Poisson
// count is poor (skew 1/sqrt(mean) above 0.3; common practice, no source).
inline constexpr double kLowCountMean = 10.0;

std::string_view ToString(SeriesKind kind);
std::string_view ToString(GapPolicy gaps);
std::string_view ToString(DetectorKind detector);
std::string_view ToString(CountChart chart);
std::optional<CountChart> CountChartFromString(std::string_view text);
std::string_view CountChartChoices();  // "auto | poisson | normal"
std::optional<SeriesKind> SeriesKindFromString(std::string_view text);
std::optional<GapPolicy> GapPolicyFromString(std::string_view text);
std::optional<DetectorKind> DetectorKindFromString(std::string_view text);
// The valid spellings, for error messages: "gauge | count | meter".
std::string_view SeriesKindChoices();
std::string_view GapPolicyChoices();
std::string_view DetectorKindChoices();

struct ProfileOptions {
  // --- keys guaranteed by DESIGN.md ---
  std::string match = "**";  // glob over series names (see detectors/glob.h); ** = all
  SeriesKind kind = SeriesKind::kGauge;
  std::vector<EventTime> seasons = {kMicrosPerDay, 7 * kMicrosPerDay};  // periods; {} for none
  GapPolicy gaps = GapPolicy::kSkip;
  int warmup = 48;        // readings before the detectors may arm (Model), >= 4
  double arl0 = 5000;     // target in-control average run length, in readings, [10, 1e7]
  double shift = 1.0;     // smallest shift worth catching, in residual sd, (0, 10]
  std::vector<DetectorKind> detectors = {DetectorKind::kCusum, DetectorKind::kPageHinkley};
  int agree = 1;          // detectors that must fire within agree_within readings, [1, #detectors]
  std::optional<EventTime> silence_after;  // unset: an adaptive multiple of the typical interval

  // --- further keys, all optional ---
  std::vector<int> harmonics;        // Fourier pairs per season; {} = defaults; else one per season, [1, 24]
  std::optional<EventTime> every;    // bucket width; unset = each reading at its own time
  std::optional<EventTime> memory;   // forgetting timescale; unset = derived from seasons and spacing
  bool trend = true;                 // include a local linear trend term
  // Does the level wander (a random walk under the noise)? 0 = no (the
  // default); q > 0: its variance per mean spacing is q noise variances, [0, 1000];
  // level_noise_auto: chosen from the warmup's forecasts (series_monitor.h).
  double level_noise = 0.0;
  bool level_noise_auto = false;
  EventTime lateness = 0;            // readings up to this much out of order are reordered
  int agree_within = 5;              // readings within which `agree` detectors must fire, [1, 1000]
  int cooldown = 0;  // readings after a level alert before the next; 0 = SeriesMonitor::DefaultCooldown
  // Other series whose values are extra regressors (detectors/covariate.h),
  // at most 16, each a series name; joined as of each observation's time when
  // at most covariate_max_age old (> 0).
  std::vector<std::string> covariates;
  EventTime covariate_max_age = 6 * kMicrosPerHour;
  CountChart count_chart = CountChart::kAuto;  // only for kind: count
  // Re-fit the level CUSUM's decision interval on the series' own first
  // residuals after warmup (bounded; detectors/series_monitor.h).
  bool adapt_thresholds = false;

  // One-line rules; on failure *why names the key and its valid range.
  bool IsValid(std::string* why) const;
};

}  // namespace plumbline
