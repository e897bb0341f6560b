// What `plumbline replay` shows people: the labelled changes of a truth file
// scored against the alerts (hits, misses, delays, false alarms), and the
// self-contained HTML report (--report) with a chart per series. Not
// thread-safe; owned by the replay.
//
// Truth file (--truth): one labelled change a line, CSV, `#` starts a comment,
// an optional header line `series,kind,at,from,to,label`:
//
//   series  the series name
//   kind    level | variance | rate | silence | any
//   at      when the change really began (RFC 3339 or epoch seconds)
//   from,to the window an alert's change_at must fall in to count (either
//           may be empty: at -/+ 6 hours)
//   label   a name for people (optional; the rest of the line)
//
// Scoring: a label is hit by the first alert, in detection order, of its
// series and kind whose change_at lies in [from, to]; its delay is
// detected_at - at. A label no alert hits is a miss. An alert that hits no
// label and that no annotation explains is a false alarm (an annotated,
// expected alert is neither).
#pragma once

#include <cstdint>
#include <map>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "config/config.h"
#include "daemon/engine.h"
#include "daemon/series_trace.h"
#include "detectors/status.h"

namespace plumbline {

struct TruthLabel {
  std::string series;
  std::optional<AlertKind> kind;  // nullopt: any
  EventTime at = 0;
  EventTime from = 0;
  EventTime to = 0;
  std::string label;
};

// Window used when a label gives no from or to.
inline constexpr EventTime kTruthDefaultWindow = 6 * kMicrosPerHour;

// Parses a truth file's text; the first bad line fails with "LINE: reason".
StatusOr<std::vector<TruthLabel>> ParseTruth(std::string_view text);

struct TruthOutcome {
  struct Scored {
    TruthLabel label;
    std::optional<Alert> hit;  // the alert that hit it
  };
  std::vector<Scored> labels;  // in the file's order
  std::vector<Alert> false_alarms;
  std::size_t hits() const;
};

// Scores `alerts` (events of type alert, in detection order) against `labels`.
TruthOutcome ScoreTruth(const std::vector<TruthLabel>& labels,
                        const std::vector<Alert>& alerts);

// Collects what the report draws: every accepted reading with its forecast,
// and every alert, per series.
class ReplayRecorder {
 public:
  // Readings drawn per series at most (Decimate keeps the extremes).
  static constexpr std::size_t kMaxDrawnPoints = 3000;

  void AddPoint(std::string_view series, const TracePoint& point);
  void AddAlert(const Alert& alert);

  // The report's data (daemon/ui/report.html reads it): inputs, config path
  // and totals for the header, each series with its kind, readings (decimated),
  // alerts and annotations, and the truth outcome when there is one.
  std::string ToJson(const Config& config, const std::vector<std::string>& inputs,
                     std::string_view config_path, std::uint64_t readings,
                     const TruthOutcome* truth, std::string_view truth_path) const;

 private:
  struct Series {
    std::vector<TracePoint> points;
    std::vector<Alert> alerts;
  };
  std::map<std::string, Series, std::less<>> series_;
};

}  // namespace plumbline
