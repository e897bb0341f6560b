#include "detectors/severity.h"

#include <bit>
#include <cmath>

namespace plumbline {

std::string_view ToString(Severity severity) {
  switch (severity) {
    case Severity::kRecord:
      return "record";
    case Severity::kNotify:
      return "notify";
    case Severity::kPage:
      return "page";
  }
  return "record";
}

std::optional<Severity> SeverityFromString(std::string_view text) {
  for (Severity s : {Severity::kRecord, Severity::kNotify, Severity::kPage}) {
    if (ToString(s) == text) return s;
  }
  return std::nullopt;
}

std::string_view SeverityChoices() { return "record | notify | page"; }

Severity SeverityOf(const SeriesEvent& e) {
  if (e.type != EventType::kAlert || !e.annotation.empty()) return Severity::kRecord;
  switch (e.kind) {
    case AlertKind::kSilence:
      return Severity::kPage;
    case AlertKind::kRate:
      return Severity::kNotify;
    case AlertKind::kVariance:
      return e.magnitude >= kPageSpreadRatio ? Severity::kPage : Severity::kNotify;
    case AlertKind::kLevel: {
      const int agreeing = std::popcount(e.detectors);
      const double size = std::abs(e.magnitude_sd);
      if (size >= kPageAlone || (agreeing >= 2 && size >= kPageAgreed)) {
        return Severity::kPage;
      }
      return Severity::kNotify;
    }
  }
  return Severity::kNotify;
}

}  // namespace plumbline
