// Severity: how urgently a person should hear of an event. Three levels, from
// the least to the most urgent:
//
//   record   kept in the alert log and the API; nobody needs to act now
//   notify   worth a look during working hours
//   page     worth interrupting someone for
//
// The rule (common practice, no source; the thresholds are ours):
//
//   not an alert (resume, retrain, meter reset, held back by maintenance) -> record
//   explained by an annotation (a planned change near change_at)          -> record
//   silence (a stream that stops often means a dead machine)              -> page
//   level shift: n level detectors agreed, |m| = magnitude_sd
//       |m| >= kPageAlone, or (n >= 2 and |m| >= kPageAgreed)             -> page
//       otherwise                                                         -> notify
//   variance: spread grew by a factor >= kPageSpreadRatio                 -> page
//       otherwise (smaller growth, or a narrower spread)                  -> notify
//   rate (readings come faster or slower)                                 -> notify
//
// Why: a detector's threshold is set for one false alarm per arl0 readings,
// so any alert is worth recording; independent detectors that agree, and a
// shift several residual standard deviations large, are each much less likely
// under the old regime, so together they justify waking someone. A change
// people announced in advance never pages. Pure computation; thread-compatible.
#pragma once

#include <optional>
#include <string_view>

#include "detectors/series_monitor.h"

namespace plumbline {

enum class Severity { kRecord = 0, kNotify = 1, kPage = 2 };

std::string_view ToString(Severity severity);
std::optional<Severity> SeverityFromString(std::string_view text);
std::string_view SeverityChoices();  // "record | notify | page"

// Shift sizes (in residual standard deviations) and spread ratio of the rule.
inline constexpr double kPageAgreed = 3.0;
inline constexpr double kPageAlone = 6.0;
inline constexpr double kPageSpreadRatio = 2.0;

// The severity of one event by the rule above.
Severity SeverityOf(const SeriesEvent& event);

}  // namespace plumbline
