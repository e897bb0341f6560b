#include "daemon/replay_report.h"

#include <cmath>

#include "daemon/text.h"
#include "detectors/glob.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

std::string_view Trim(std::string_view text) {
  while (!text.empty() && (text.front() == ' ' || text.front() == '\t'))
    text.remove_prefix(1);
  while (!text.empty() &&
         (text.back() == ' ' || text.back() == '\t' || text.back() == '\r')) {
    text.remove_suffix(1);
  }
  return text;
}

// Splits off the next comma-separated field (the whole rest when `last`).
std::string_view NextField(std::string_view* line, bool last = false) {
  const std::size_t comma = last ? std::string_view::npos : line->find(',');
  const std::string_view field = line->substr(0, comma);
  *line = comma == std::string_view::npos ? std::string_view() : line->substr(comma + 1);
  return Trim(field);
}

Status ParseTruthLine(std::string_view line, TruthLabel* label) {
  label->series = std::string(NextField(&line));
  const std::string_view kind = NextField(&line);
  const std::string_view at = NextField(&line);
  const std::string_view from = NextField(&line);
  const std::string_view to = NextField(&line);
  label->label = std::string(NextField(&line, true));
  if (label->series.empty()) return Status::InvalidArgument("no series");
  if (kind != "any") {
    label->kind = AlertKindFromString(kind);
    if (!label->kind) {
      return Status::InvalidArgument(
          "kind must be level, variance, rate, silence or any");
    }
  }
  StatusOr<EventTime> when = ParseTime(at);
  if (!when.ok()) return Status::InvalidArgument("at: " + when.status().message());
  label->at = *when;
  label->from = label->at - kTruthDefaultWindow;
  label->to = label->at + kTruthDefaultWindow;
  for (auto [text, out] : {std::pair{from, &label->from}, std::pair{to, &label->to}}) {
    if (text.empty()) continue;
    StatusOr<EventTime> bound = ParseTime(text);
    if (!bound.ok())
      return Status::InvalidArgument("from/to: " + bound.status().message());
    *out = *bound;
  }
  if (label->from > label->to) return Status::InvalidArgument("from is after to");
  if (label->label.empty()) label->label = label->series + " " + std::string(kind);
  return Status::Ok();
}

bool Hits(const TruthLabel& label, const Alert& alert) {
  return alert.series == label.series && (!label.kind || *label.kind == alert.kind) &&
         alert.change_at >= label.from && alert.change_at <= label.to;
}

void AppendKey(std::string_view key, std::string* out) {
  AppendJsonString(key, out);
  out->push_back(':');
}

void AppendTimeString(EventTime time, std::string* out) {
  out->push_back('"');
  AppendRfc3339(time, out);
  out->push_back('"');
}

void AppendPoints(const std::vector<TracePoint>& points, std::string* out) {
  out->push_back('[');
  for (std::size_t i = 0; i < points.size(); ++i) {
    const TracePoint& p = points[i];
    if (i) out->push_back(',');
    *out += '[' + std::to_string(p.time / 1000) + ',';
    AppendJsonNumber(p.value, out);
    out->push_back(',');
    AppendJsonNumber(p.has_forecast() ? p.forecast : NAN, out);
    out->push_back(',');
    AppendJsonNumber(p.has_forecast() ? p.band : NAN, out);
    out->push_back(']');
  }
  out->push_back(']');
}

void AppendAnnotations(const Config& config, const std::string& series,
                       std::string* out) {
  out->push_back('[');
  bool first = true;
  for (const Annotation& a : config.annotations) {
    if (!GlobMatch(a.match, series)) continue;
    if (!first) out->push_back(',');
    first = false;
    const bool planned = a.kind == AnnotationKind::kPlannedChange;
    *out += "{\"id\":";
    AppendJsonString(a.id, out);
    *out += ",\"kind\":";
    AppendJsonString(ToString(a.kind), out);
    *out += ",\"from\":";
    AppendTimeString(planned ? a.at - a.within : a.from, out);
    *out += ",\"to\":";
    AppendTimeString(planned ? a.at + a.within : a.to, out);
    *out += ",\"note\":";
    AppendJsonString(a.note, out);
    out->push_back('}');
  }
  out->push_back(']');
}

void AppendTruth(const TruthOutcome& truth, std::string_view path, std::string* out) {
  *out += "{\"file\":";
  AppendJsonString(path, out);
  *out += ",\"hits\":" + std::to_string(truth.hits()) +
          ",\"misses\":" + std::to_string(truth.labels.size() - truth.hits()) +
          ",\"labels\":[";
  for (std::size_t i = 0; i < truth.labels.size(); ++i) {
    const TruthOutcome::Scored& s = truth.labels[i];
    if (i) out->push_back(',');
    *out += "{\"label\":";
    AppendJsonString(s.label.label, out);
    *out += ",\"series\":";
    AppendJsonString(s.label.series, out);
    *out += ",\"kind\":";
    AppendJsonString(s.label.kind ? ToString(*s.label.kind) : "any", out);
    *out += ",\"at\":";
    AppendTimeString(s.label.at, out);
    *out += ",\"outcome\":";
    AppendJsonString(s.hit ? "hit" : "miss", out);
    if (s.hit) {
      *out += ",\"detected_at\":";
      AppendTimeString(s.hit->detected_at, out);
      *out += ",\"delay_seconds\":";
      AppendJsonNumber(static_cast<double>(s.hit->detected_at - s.label.at) / 1e6, out);
    }
    out->push_back('}');
  }
  *out += "],\"false_alarms\":[";
  for (std::size_t i = 0; i < truth.false_alarms.size(); ++i) {
    if (i) out->push_back(',');
    *out += AlertToJson(truth.false_alarms[i]);
  }
  *out += "]}";
}

}  // namespace

StatusOr<std::vector<TruthLabel>> ParseTruth(std::string_view text) {
  std::vector<TruthLabel> labels;
  std::size_t number = 0;
  while (!text.empty()) {
    const std::size_t end = text.find('\n');
    std::string_view line = text.substr(0, end);
    text = end == std::string_view::npos ? std::string_view() : text.substr(end + 1);
    ++number;
    if (const std::size_t hash = line.find('#'); hash != std::string_view::npos) {
      line = line.substr(0, hash);
    }
    line = Trim(line);
    if (line.empty() || line.starts_with("series,")) continue;
    TruthLabel label;
    if (Status status = ParseTruthLine(line, &label); !status.ok()) {
      return Status::InvalidArgument(std::to_string(number) + ": " + status.message());
    }
    labels.push_back(std::move(label));
  }
  return labels;
}

std::size_t TruthOutcome::hits() const {
  std::size_t n = 0;
  for (const Scored& s : labels) n += s.hit ? 1 : 0;
  return n;
}

TruthOutcome ScoreTruth(const std::vector<TruthLabel>& labels,
                        const std::vector<Alert>& alerts) {
  TruthOutcome outcome;
  for (const TruthLabel& label : labels) {
    TruthOutcome::Scored scored{label, std::nullopt};
    for (const Alert& alert : alerts) {
      if (Hits(label, alert)) {
        scored.hit = alert;
        break;
      }
    }
    outcome.labels.push_back(std::move(scored));
  }
  for (const Alert& alert : alerts) {
    if (!alert.annotation.empty()) continue;
    bool labelled = false;
    for (const TruthLabel& label : labels) labelled = labelled || Hits(label, alert);
    if (!labelled) outcome.false_alarms.push_back(alert);
  }
  return outcome;
}

void ReplayRecorder::AddPoint(std::string_view series, const TracePoint& point) {
  auto it = series_.find(series);
  if (it == series_.end()) it = series_.emplace(std::string(series), Series{}).first;
  it->second.points.push_back(point);
}

void ReplayRecorder::AddAlert(const Alert& alert) {
  auto it = series_.find(alert.series);
  if (it == series_.end()) it = series_.emplace(alert.series, Series{}).first;
  it->second.alerts.push_back(alert);
}

std::string ReplayRecorder::ToJson(const Config& config,
                                   const std::vector<std::string>& inputs,
                                   std::string_view config_path, std::uint64_t readings,
                                   const TruthOutcome* truth,
                                   std::string_view truth_path) const {
  std::size_t alerts = 0;
  for (const auto& [name, s] : series_) alerts += s.alerts.size();
  std::string out = "{";
  AppendKey("inputs", &out);
  out.push_back('[');
  for (std::size_t i = 0; i < inputs.size(); ++i) {
    if (i) out.push_back(',');
    AppendJsonString(inputs[i], &out);
  }
  out += "],";
  AppendKey("config", &out);
  AppendJsonString(config_path, &out);
  out += ",\"readings\":" + std::to_string(readings) +
         ",\"alerts\":" + std::to_string(alerts) + ",\"series\":[";
  bool first = true;
  for (const auto& [name, s] : series_) {
    if (!first) out.push_back(',');
    first = false;
    const std::vector<TracePoint> drawn = Decimate(s.points, kMaxDrawnPoints);
    out += "{\"name\":";
    AppendJsonString(name, &out);
    out += ",\"kind\":";
    const ProfileOptions* profile = MatchProfile(config, name);
    AppendJsonString(profile ? ToString(profile->kind) : "", &out);
    out += ",\"readings\":" + std::to_string(s.points.size()) +
           ",\"shown\":" + std::to_string(drawn.size()) + ",\"points\":";
    AppendPoints(drawn, &out);
    out += ",\"alerts\":[";
    for (std::size_t i = 0; i < s.alerts.size(); ++i) {
      if (i) out.push_back(',');
      out += AlertToJson(s.alerts[i]);
    }
    out += "],\"annotations\":";
    AppendAnnotations(config, name, &out);
    out.push_back('}');
  }
  out += "],\"truth\":";
  if (truth) {
    AppendTruth(*truth, truth_path, &out);
  } else {
    out += "null";
  }
  out.push_back('}');
  return out;
}

}  // namespace plumbline
