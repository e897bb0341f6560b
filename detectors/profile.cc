#include "detectors/profile.h"

#include <algorithm>
#include <cmath>

namespace plumbline {

std::string_view ToString(SeriesKind kind) {
  switch (kind) {
    case SeriesKind::kGauge: return "gauge";
    case SeriesKind::kCount: return "count";
    case SeriesKind::kMeter: return "meter";
  }
  return "gauge";
}

std::string_view ToString(GapPolicy gaps) {
  switch (gaps) {
    case GapPolicy::kSkip: return "skip";
    case GapPolicy::kZero: return "zero";
    case GapPolicy::kHold: return "hold";
  }
  return "skip";
}

std::string_view ToString(DetectorKind detector) {
  switch (detector) {
    case DetectorKind::kCusum: return "cusum";
    case DetectorKind::kPageHinkley: return "page-hinkley";
    case DetectorKind::kBocpd: return "bocpd";
    case DetectorKind::kEwma: return "ewma";
  }
  return "cusum";
}

std::optional<SeriesKind> SeriesKindFromString(std::string_view text) {
  for (SeriesKind k : {SeriesKind::kGauge, SeriesKind::kCount, SeriesKind::kMeter}) {
    if (ToString(k) == text) return k;
  }
  return std::nullopt;
}

std::optional<GapPolicy> GapPolicyFromString(std::string_view text) {
  for (GapPolicy g : {GapPolicy::kSkip, GapPolicy::kZero, GapPolicy::kHold}) {
    if (ToString(g) == text) return g;
  }
  return std::nullopt;
}

std::optional<DetectorKind> DetectorKindFromString(std::string_view text) {
  for (DetectorKind d : {DetectorKind::kCusum, DetectorKind::kPageHinkley,
                         DetectorKind::kBocpd, DetectorKind::kEwma}) {
    if (ToString(d) == text) return d;
  }
  return std::nullopt;
}

std::string_view ToString(CountChart chart) {
  switch (chart) {
    case CountChart::kAuto: return "auto";
    case CountChart::kPoisson: return "poisson";
    case CountChart::kNormal: return "normal";
  }
  return "auto";
}

std::optional<CountChart> CountChartFromString(std::string_view text) {
  for (CountChart c : {CountChart::kAuto, CountChart::kPoisson, CountChart::kNormal}) {
    if (ToString(c) == text) return c;
  }
  return std::nullopt;
}

std::string_view CountChartChoices() { return "auto | poisson | normal"; }

std::string_view SeriesKindChoices() { return "gauge | count | meter"; }
std::string_view GapPolicyChoices() { return "skip | zero | hold"; }
std::string_view DetectorKindChoices() { return "cusum | page-hinkley | bocpd | ewma"; }

bool ProfileOptions::IsValid(std::string* why) const {
  auto fail = [why](std::string message) {
    if (why) *why = std::move(message);
    return false;
  };
  if (match.empty()) return fail("match must be a non-empty glob");
  for (EventTime period : seasons) {
    if (period <= 0) return fail("seasons must be positive durations");
  }
  if (!harmonics.empty() && harmonics.size() != seasons.size()) {
    return fail("harmonics must give one count per season (seasons lists " +
                std::to_string(seasons.size()) + ")");
  }
  for (int h : harmonics) {
    if (h < 1 || h > 24) return fail("harmonics must each be in [1, 24]");
  }
  if (warmup < 4 || warmup > 1000000) return fail("warmup must be in [4, 1000000] readings");
  if (!(arl0 >= 10 && arl0 <= 1e7)) return fail("arl0 must be in [10, 10000000] readings");
  if (!(shift > 0 && shift <= 10)) return fail("shift must be in (0, 10] standard deviations");
  if (detectors.empty()) return fail("detectors must name at least one of " +
                                     std::string(DetectorKindChoices()));
  for (size_t i = 0; i < detectors.size(); ++i) {
    if (std::count(detectors.begin(), detectors.end(), detectors[i]) > 1) {
      return fail("detectors must not repeat '" + std::string(ToString(detectors[i])) + "'");
    }
  }
  if (agree < 1 || agree > static_cast<int>(detectors.size())) {
    return fail("agree must be in [1, " + std::to_string(detectors.size()) +
                "] (the number of detectors)");
  }
  if (silence_after && *silence_after <= 0) return fail("silence_after must be positive");
  if (every && *every <= 0) return fail("every must be a positive duration");
  if (memory && *memory <= 0) return fail("memory must be a positive duration");
  if (!(level_noise >= 0 && level_noise <= 1000)) {
    return fail("level_noise must be off, auto, or a number in [0, 1000]");
  }
  if (lateness < 0) return fail("lateness must be zero or a positive duration");
  if (agree_within < 1 || agree_within > 1000) return fail("agree_within must be in [1, 1000] readings");
  if (cooldown < 0 || cooldown > 1000000) return fail("cooldown must be in [0, 1000000] readings");
  if (covariates.size() > 16) return fail("covariates must name at most 16 series");
  for (size_t i = 0; i < covariates.size(); ++i) {
    const std::string& name = covariates[i];
    if (name.empty() || name.size() > 256) {
      return fail("covariates must be series names of 1 to 256 bytes");
    }
    for (size_t j = 0; j < i; ++j) {
      if (covariates[j] == name) return fail("covariates must not repeat '" + name + "'");
    }
  }
  if (covariate_max_age <= 0) return fail("covariate_max_age must be a positive duration");
  return true;
}

}  // namespace plumbline
