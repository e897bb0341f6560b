// Annotations: what the people running a stream know in advance. A planned
// change (a new defrost schedule, a price change) at a time T, and a
// maintenance window [from, to). Pure data, checked by IsValid; SeriesMonitor
// acts on them (series_monitor.h, "Annotations"). Not thread-safe; copied into
// each series they match.
#pragma once

#include <string>
#include <string_view>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/status.h"

namespace plumbline {

enum class AnnotationKind { kPlannedChange, kMaintenance };
std::string_view ToString(AnnotationKind kind);
// "planned-change" | "maintenance"; nullopt-like: returns false when unknown.
bool AnnotationKindFromString(std::string_view text, AnnotationKind* kind);

struct Annotation {
  std::string id;  // names it in the alerts it explains or holds back; non-empty
  AnnotationKind kind = AnnotationKind::kPlannedChange;
  std::string match = "**";                // glob over series names
  EventTime at = 0;                        // planned change: when it takes effect
  Direction direction = Direction::kNone;  // planned change: expected way; none = either
  EventTime within = kMicrosPerHour;       // planned change: an alert whose change_at is
                                           // this close to `at` is explained by it, > 0
  EventTime from = 0, to = 0;              // maintenance: [from, to), from < to
  bool learn = true;  // maintenance: whether its readings teach the model
  std::string note;   // free text for people

  bool IsValid(std::string* why) const;
};

}  // namespace plumbline
