#include "config/config.h"

#include <yaml-cpp/eventhandler.h>
#include <yaml-cpp/yaml.h>

#include <algorithm>
#include <cerrno>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <limits>
#include <map>
#include <optional>
#include <sstream>
#include <system_error>
#include <utility>

#include "detectors/glob.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

// A config larger than this is refused unread: no real profile list comes near.
constexpr std::size_t kMaxConfigBytes = 16u << 20;

// The profile that stands for "every series", used for an absent `match` and
// when the config has no profiles at all.
constexpr std::string_view kEverySeries = "**";

constexpr std::string_view kTopLevelKeys[] = {
    "series", "listeners", "shards",  "queue_batches",    "max_series", "storage",
    "inputs", "sinks",     "metrics", "shutdown_timeout", "annotations",
    "access", "max_time_ahead", "ingest_memory_bytes", "recent_points"};
// Sections that later versions add; named so the error says "not yet" rather
// than "unknown".
constexpr std::string_view kPlannedTopLevelKeys[] = {"covariates"};
constexpr std::string_view kAnnotationKeys[] = {
    "id", "kind", "match", "at", "direction", "within", "from", "to", "learn", "note"};

// The keys of the service sections (config/service_options.h).
constexpr std::string_view kListenerKeys[] = {"tcp", "http"};
constexpr std::string_view kTcpKeys[] = {
    "enabled",         "address",        "port", "idle_timeout",
    "max_connections", "max_line_bytes", "tls"};
constexpr std::string_view kHttpKeys[] = {"enabled", "address", "port", "max_body_bytes",
                                          "tls"};
constexpr std::string_view kTlsKeys[] = {"certificate_file", "key_file"};
constexpr std::string_view kStorageKeys[] = {"directory", "checkpoint_every", "http_ingest"};
constexpr std::string_view kInputKeys[] = {"files", "kafka", "mqtt"};
constexpr std::string_view kKafkaInputKeys[] = {
    "brokers",          "topic",    "group",          "state_topic",
    "state_directory", "checkpoint_every", "start_at", "session_timeout"};
constexpr std::string_view kMqttKeys[] = {"host",      "port",    "client_id",
                                          "topics",    "series",  "keepalive",
                                          "backoff",   "backoff_max"};
constexpr std::string_view kKafkaSinkKeys[] = {"brokers", "topic", "min_severity"};
constexpr std::string_view kFileKeys[] = {"path", "start_at", "poll_interval"};
constexpr std::string_view kSinkKeys[] = {"alert_log", "webhook", "stdout", "events",
                                          "kafka"};
constexpr std::string_view kAlertLogKeys[] = {"enabled", "path", "min_severity"};
constexpr std::string_view kWebhookKeys[] = {"url",     "attempts",    "backoff",
                                             "backoff_max", "timeout", "queue",
                                             "dead_letter", "min_severity"};
constexpr std::string_view kStdoutKeys[] = {"enabled", "min_severity"};
constexpr std::string_view kMetricsKeys[] = {"series_limit"};
constexpr std::string_view kAccessKeys[] = {"token_file", "token_env"};

constexpr std::string_view kProfileKeys[] = {
    "match",  "kind",      "seasons",  "gaps",          "warmup",    "arl0",
    "shift",  "detectors", "agree",    "silence_after", "harmonics", "every",
    "memory", "trend",     "lateness", "agree_within",  "cooldown",  "level_noise",
    "covariates", "covariate_max_age", "count_chart", "adapt_thresholds"};

// Documents looked at after the first: enough to see a second document and a
// parser that no longer advances.
constexpr int kDocumentsToScan = 4;

constexpr std::string_view kLevelNoiseHint =
    "off, auto, or a number of noise variances per mean spacing such as 0.3";
constexpr std::string_view kDurationHint =
    "a duration such as 15m (units ms, s, m, h, d, w)";

char Lower(char c) {
  return (c >= 'A' && c <= 'Z') ? static_cast<char>(c - 'A' + 'a') : c;
}

// Optimal string alignment distance (Levenshtein plus adjacent transpositions),
// ignoring ASCII case: "gague" -> "gauge" is 1, "warmpu" -> "warmup" is 1.
std::size_t EditDistance(std::string_view a, std::string_view b) {
  const std::size_t n = a.size(), m = b.size();
  std::vector<std::vector<std::size_t>> d(n + 1, std::vector<std::size_t>(m + 1));
  for (std::size_t i = 0; i <= n; ++i) d[i][0] = i;
  for (std::size_t j = 0; j <= m; ++j) d[0][j] = j;
  for (std::size_t i = 1; i <= n; ++i) {
    for (std::size_t j = 1; j <= m; ++j) {
      const std::size_t cost = Lower(a[i - 1]) == Lower(b[j - 1]) ? 0 : 1;
      d[i][j] = std::min({d[i - 1][j] + 1, d[i][j - 1] + 1, d[i - 1][j - 1] + cost});
      if (i > 1 && j > 1 && Lower(a[i - 1]) == Lower(b[j - 2]) &&
          Lower(a[i - 2]) == Lower(b[j - 1])) {
        d[i][j] = std::min(d[i][j], d[i - 2][j - 2] + 1);
      }
    }
  }
  return d[n][m];
}

// The closest choice to `word`, if it is close enough to be a likely typo: at
// most one edit for short names, two for names of five or more characters, and
// always fewer edits than the word has characters.
template <typename Choices>
std::optional<std::string_view> Closest(std::string_view word, const Choices& choices) {
  std::optional<std::string_view> best;
  std::size_t best_distance = std::numeric_limits<std::size_t>::max();
  for (std::string_view choice : choices) {
    const std::size_t distance = EditDistance(word, choice);
    const std::size_t allowed = choice.size() >= 5 ? 2 : 1;
    if (distance <= allowed && distance < word.size() && distance < best_distance) {
      best = choice;
      best_distance = distance;
    }
  }
  return best;
}

template <typename Choices>
std::string Join(const Choices& choices, std::string_view separator) {
  std::string out;
  for (std::string_view choice : choices) {
    if (!out.empty()) out += separator;
    out += choice;
  }
  return out;
}

// "gauge | count | meter" -> {"gauge", "count", "meter"}.
std::vector<std::string_view> SplitChoices(std::string_view choices) {
  std::vector<std::string_view> out;
  while (!choices.empty()) {
    const std::size_t bar = choices.find(" | ");
    out.push_back(choices.substr(0, bar));
    if (bar == std::string_view::npos) break;
    choices.remove_prefix(bar + 3);
  }
  return out;
}

// How a node that has the wrong type is named in a message.
std::string Describe(const YAML::Node& node) {
  switch (node.Type()) {
    case YAML::NodeType::Null:
      return "nothing";
    case YAML::NodeType::Sequence:
      return "a list";
    case YAML::NodeType::Map:
      return "a mapping";
    case YAML::NodeType::Scalar:
      return "'" + node.Scalar() + "'";
    default:
      return "an undefined value";
  }
}

// Shortest text that reads back to the same double; whole numbers without an
// exponent (500000, not 5e+05).
std::string FormatNumber(double value) {
  if (value == std::floor(value) && std::fabs(value) < 1e15) {
    return std::to_string(static_cast<long long>(value));
  }
  char buffer[64];
  const auto result = std::to_chars(buffer, buffer + sizeof(buffer), value);
  return std::string(buffer, result.ptr);
}

std::optional<long long> ParseWholeNumber(std::string_view text) {
  if (!text.empty() && text.front() == '+') text.remove_prefix(1);
  long long value = 0;
  const auto result = std::from_chars(text.data(), text.data() + text.size(), value);
  if (text.empty() || result.ec != std::errc() ||
      result.ptr != text.data() + text.size()) {
    return std::nullopt;
  }
  return value;
}

std::optional<double> ParseFiniteNumber(std::string_view text) {
  if (!text.empty() && text.front() == '+') text.remove_prefix(1);
  double value = 0;
  const auto result = std::from_chars(text.data(), text.data() + text.size(), value);
  if (text.empty() || result.ec != std::errc() ||
      result.ptr != text.data() + text.size() || !std::isfinite(value)) {
    return std::nullopt;
  }
  return value;
}

// A key and its value inside a mapping, or one element of a list (then `key`
// names the list and `where` is the element's position).
struct Field {
  std::string_view key;
  YAML::Mark key_mark;
  YAML::Node value;
  bool list_element = false;

  // Where a problem with the value is reported. yaml-cpp places an implicit
  // null (`key:` with nothing after it) at the next token, so those go to the key.
  YAML::Mark Where() const {
    return value.IsNull() || value.Mark().is_null() ? key_mark : value.Mark();
  }
};

// Records where each document starts and what its root is, from parser events.
class DocumentRecorder : public YAML::EventHandler {
 public:
  struct Document {
    YAML::Mark start;
    YAML::Mark root = YAML::Mark::null_mark();
    bool null_root = false;
  };
  std::vector<Document> documents;

  void OnDocumentStart(const YAML::Mark& mark) override {
    documents.push_back({mark});
    depth_ = 0;
  }
  void OnDocumentEnd() override {}
  void OnNull(const YAML::Mark& mark, YAML::anchor_t) override { Node(mark, true); }
  void OnAlias(const YAML::Mark& mark, YAML::anchor_t) override { Node(mark, false); }
  void OnScalar(const YAML::Mark& mark, const std::string&, YAML::anchor_t,
                const std::string&) override {
    Node(mark, false);
  }
  void OnSequenceStart(const YAML::Mark& mark, const std::string&, YAML::anchor_t,
                       YAML::EmitterStyle::value) override {
    Node(mark, false);
    ++depth_;
  }
  void OnSequenceEnd() override { --depth_; }
  void OnMapStart(const YAML::Mark& mark, const std::string&, YAML::anchor_t,
                  YAML::EmitterStyle::value) override {
    Node(mark, false);
    ++depth_;
  }
  void OnMapEnd() override { --depth_; }

 private:
  void Node(const YAML::Mark& mark, bool is_null) {
    if (depth_ == 0 && !documents.empty() && documents.back().root.is_null()) {
      documents.back().root = mark;
      documents.back().null_root = is_null;
    }
  }
  int depth_ = 0;
};

class Loader {
 public:
  explicit Loader(std::string_view source) : source_(source) {}

  void Load(std::string_view text, Config* config) {
    const std::string input(text);
    YAML::Node root;
    try {
      root = YAML::Load(input);  // the first document only
    } catch (const YAML::Exception& e) {
      SyntaxError(e);
      return;
    } catch (const std::exception& e) {
      Error(YAML::Mark::null_mark(), std::string("cannot parse: ") + e.what());
      return;
    }
    CheckDocuments(input);
    try {
      LoadRoot(root, config);
    } catch (const YAML::Exception& e) {
      // Not expected: every access below checks the node type first.
      Error(e.mark, "cannot read the YAML structure: " + e.msg);
    }
  }

  // Annotations alone (ParseAnnotationsText): one mapping or a list of them.
  void LoadAnnotationsOnly(std::string_view text, std::size_t first_number,
                           std::vector<Annotation>* out) {
    YAML::Node root;
    try {
      root = YAML::Load(std::string(text));
    } catch (const YAML::Exception& e) {
      SyntaxError(e);
      return;
    }
    // A mapping alone is a list of one. (Not by assigning to a copy of root:
    // yaml-cpp's assignment writes through to the node the copy shares.)
    YAML::Node one(YAML::NodeType::Sequence);
    if (root.IsMap()) one.push_back(root);
    const YAML::Node& list = root.IsMap() ? one : root;
    Config config;
    annotation_number_offset_ = first_number - 1;
    try {
      LoadAnnotations(Field{"annotations", root.Mark(), list}, &config);
    } catch (const YAML::Exception& e) {
      Error(e.mark, "cannot read the YAML structure: " + e.msg);
    }
    *out = std::move(config.annotations);
  }

  std::vector<ConfigError> TakeErrors() {
    std::stable_sort(errors_.begin(), errors_.end(),
                     [](const ConfigError& a, const ConfigError& b) {
                       return std::pair(a.line, a.column) < std::pair(b.line, b.column);
                     });
    return std::move(errors_);
  }

 private:
  void Error(const YAML::Mark& mark, std::string message) {
    ConfigError error;
    error.source = source_;
    if (!mark.is_null()) {
      error.line = mark.line + 1;
      error.column = mark.column + 1;
    }
    error.message = std::move(message);
    errors_.push_back(std::move(error));
  }

  void SyntaxError(const YAML::Exception& e) {
    std::string message = "YAML syntax error: " + e.msg;
    if (e.msg.find("alias") != std::string::npos ||
        e.msg.find("anchor") != std::string::npos) {
      // `match: *` and `match: */temp_c` read as YAML aliases.
      message +=
          " (a glob that starts with '*' must be quoted, e.g. match: \"*/temp_c\")";
    }
    Error(e.mark, std::move(message));
  }

  // Looks past the first document: a second one is an error, and so is a
  // stray flow character (',' at the start of a block) that yaml-cpp 0.7
  // turns into an endless run of empty documents (upstream issue #1040, fixed
  // in 2024 by pull request #1319); hence a bounded walk, never LoadAll.
  void CheckDocuments(const std::string& input) {
    std::istringstream stream(input);
    YAML::Parser parser(stream);
    DocumentRecorder recorder;
    try {
      for (int i = 0; i < kDocumentsToScan && parser.HandleNextDocument(recorder); ++i) {
      }
    } catch (const YAML::Exception& e) {
      SyntaxError(e);
      return;
    }
    const std::vector<DocumentRecorder::Document>& documents = recorder.documents;
    for (std::size_t i = 1; i < documents.size(); ++i) {
      const DocumentRecorder::Document& a = documents[i - 1];
      const DocumentRecorder::Document& b = documents[i];
      if (a.null_root && b.null_root && a.root.pos == b.root.pos) {
        const auto pos = static_cast<std::size_t>(b.root.pos);
        std::string what = "unexpected input";
        if (pos < input.size()) what = "unexpected '" + std::string(1, input[pos]) + "'";
        Error(b.root, "YAML syntax error: " + what);
        return;
      }
    }
    if (documents.size() > 1) {
      Error(documents[1].start,
            "only one YAML document is allowed; a second one starts here (remove the "
            "'---')");
    }
  }

  // Walks the keys of a mapping: reports non-scalar and duplicate keys, and
  // calls visit(field) once for each first occurrence of a key.
  template <typename Visit>
  void ForEachKey(const YAML::Node& map, Visit visit) {
    std::map<std::string, int> first_line;
    for (auto it = map.begin(); it != map.end(); ++it) {
      // By value: yaml-cpp's iterator hands out a temporary pair, so a
      // reference into it would dangle (found by AddressSanitizer).
      const YAML::Node key = it->first;
      const YAML::Node value = it->second;
      if (!key.IsScalar()) {
        Error(key.Mark(), "keys must be plain names, got " + Describe(key));
        continue;
      }
      const int line = key.Mark().line + 1;
      auto [previous, inserted] = first_line.emplace(key.Scalar(), line);
      if (!inserted) {
        Error(key.Mark(), "duplicate key '" + key.Scalar() + "' (first given at line " +
                              std::to_string(previous->second) + ")");
        continue;
      }
      visit(Field{key.Scalar(), key.Mark(), value});
    }
  }

  template <typename Choices>
  void UnknownKey(const Field& field, std::string_view where, const Choices& valid) {
    std::string message =
        "unknown key '" + std::string(field.key) + "'" + std::string(where);
    if (auto suggestion = Closest(field.key, valid)) {
      message += "; did you mean '" + std::string(*suggestion) + "'?";
    }
    message += " (valid keys: " + Join(valid, ", ") + ")";
    Error(field.key_mark, std::move(message));
  }

  void LoadRoot(const YAML::Node& root, Config* config) {
    bool have_series = false;
    if (root.IsMap()) {
      ForEachKey(root, [&](const Field& field) {
        if (field.key == "series") {
          have_series = true;
          LoadSeries(field, config);
          return;
        }
        if (field.key == "annotations") {
          LoadAnnotations(field, config);
          return;
        }
        if (LoadServiceKey(field, &config->service)) {
          service_marks_[std::string(field.key)] = field.Where();
          return;
        }
        const auto* planned = std::find(std::begin(kPlannedTopLevelKeys),
                                        std::end(kPlannedTopLevelKeys), field.key);
        if (planned != std::end(kPlannedTopLevelKeys)) {
          Error(field.key_mark,
                "top-level section '" + std::string(field.key) +
                    "' is not supported by this version yet (valid keys: " +
                    Join(kTopLevelKeys, ", ") + ")");
          return;
        }
        UnknownKey(field, " at the top level", kTopLevelKeys);
      });
    } else if (!root.IsNull()) {
      Error(root.Mark(),
            "the config must be a mapping with a 'series' key, got " + Describe(root));
    }
    CheckService(root, config->service);
    if (!have_series || config->series.empty()) {
      // No profiles: one catch-all with every default.
      config->series.clear();
      config->series.emplace_back();
      config->series.back().match = std::string(kEverySeries);
    }
  }

  void LoadSeries(const Field& field, Config* config) {
    if (field.value.IsNull()) return;  // `series:` with no entries
    if (!field.value.IsSequence()) {
      Error(field.Where(),
            "series: expected a list of profiles (each starting with "
            "'- match: ...'), got " +
                Describe(field.value));
      return;
    }
    std::vector<YAML::Mark> marks;  // of each loaded profile, for the reachability check
    for (const YAML::Node& item : field.value) {
      if (!item.IsMap()) {
        Error(item.Mark().is_null() ? field.key_mark : item.Mark(),
              "series: each profile must be a mapping of keys (match: ..., kind: ...), "
              "got " +
                  Describe(item));
        continue;
      }
      ProfileOptions profile;
      if (LoadProfile(item, &profile)) {
        config->series.push_back(std::move(profile));
        marks.push_back(item.Mark());
      }
    }
    CheckReachable(config->series, marks);
  }

  // annotations: a list of planned changes and maintenance windows
  // (detectors/annotation.h). Times are RFC 3339 or epoch seconds.
  void LoadAnnotations(const Field& field, Config* config) {
    if (field.value.IsNull()) return;
    if (!field.value.IsSequence()) {
      Error(field.Where(),
            "annotations: expected a list (each starting with '- kind: "
            "planned-change' or '- kind: maintenance'), got " +
                Describe(field.value));
      return;
    }
    for (const YAML::Node& item : field.value) {
      if (!item.IsMap()) {
        Error(item.Mark().is_null() ? field.key_mark : item.Mark(),
              "annotations: each entry must be a mapping (kind: ..., match: ...), got " +
                  Describe(item));
        continue;
      }
      const std::size_t errors_before = errors_.size();
      Annotation a;
      std::map<std::string_view, YAML::Mark> marks;
      ForEachKey(item, [&](const Field& f) {
        marks[f.key] = f.Where();
        const std::string_view k = f.key;
        std::string text;
        if (k == "id" || k == "note") {
          if (ScalarText(f, "text", &text)) (k == "id" ? a.id : a.note) = text;
        } else if (k == "kind") {
          if (ScalarText(f, "planned-change or maintenance", &text) &&
              !AnnotationKindFromString(text, &a.kind)) {
            Error(f.Where(),
                  "kind: expected planned-change or maintenance, got '" + text + "'");
          }
        } else if (k == "match") {
          Glob(f, &a.match);
        } else if (k == "at" || k == "from" || k == "to") {
          if (!ScalarText(f, "a time such as 2026-04-01T00:00:00Z", &text)) return;
          StatusOr<EventTime> t = ParseTime(text);
          if (!t.ok()) {
            Error(f.Where(), std::string(k) +
                                 ": expected a time such as "
                                 "2026-04-01T00:00:00Z, got '" +
                                 text + "'");
            return;
          }
          (k == "at" ? a.at : k == "from" ? a.from : a.to) = *t;
        } else if (k == "direction") {
          if (!ScalarText(f, "up, down or any", &text)) return;
          if (text == "any") {
            a.direction = Direction::kNone;
          } else if (auto d = DirectionFromString(text); d && *d != Direction::kNone) {
            a.direction = *d;
          } else {
            Error(f.Where(), "direction: expected up, down or any, got '" + text + "'");
          }
        } else if (k == "within") {
          Duration(f, false, &a.within);
        } else if (k == "learn") {
          Bool(f, &a.learn);
        } else {
          UnknownKey(f, " in an annotation", kAnnotationKeys);
        }
      });
      if (errors_.size() != errors_before) continue;
      const bool planned = a.kind == AnnotationKind::kPlannedChange;
      const char* needed[] = {"kind", planned ? "at" : "from", planned ? "at" : "to"};
      bool complete = true;
      for (const char* key : needed) {
        if (!marks.count(key)) {
          Error(item.Mark(), std::string("annotation: missing '") + key + "' (a " +
                                 std::string(ToString(a.kind)) + " needs kind, " +
                                 (planned ? "at" : "from and to") + ")");
          complete = false;
          break;
        }
      }
      if (!complete) continue;
      if (a.id.empty())
        a.id = std::string(ToString(a.kind)) + "-" +
               std::to_string(annotation_number_offset_ + config->annotations.size() + 1);
      std::string why;
      if (!a.IsValid(&why)) {
        const std::string_view key = std::string_view(why).substr(0, why.find(' '));
        auto it = marks.find(key);
        Error(it != marks.end() ? it->second : item.Mark(), "annotation: " + why);
        continue;
      }
      config->annotations.push_back(std::move(a));
    }
  }

  // A profile is dead when an earlier one takes every series it could match:
  // an earlier "**", or an earlier profile with the very same glob.
  void CheckReachable(const std::vector<ProfileOptions>& series,
                      const std::vector<YAML::Mark>& marks) {
    for (std::size_t i = 0; i < series.size(); ++i) {
      for (std::size_t j = 0; j < i; ++j) {
        const bool every = series[j].match == kEverySeries;
        if (every || series[j].match == series[i].match) {
          Error(marks[i], "this profile can never match: the profile at line " +
                              std::to_string(marks[j].line + 1) + " (match \"" +
                              series[j].match + "\") takes " +
                              (every ? "every series" : "all its series") +
                              " first; put the narrower profile first");
          break;
        }
      }
    }
  }

  // Maps one profile; returns false if it had any error.
  bool LoadProfile(const YAML::Node& map, ProfileOptions* profile) {
    const std::size_t errors_before = errors_.size();
    profile->match = std::string(kEverySeries);
    std::map<std::string_view, YAML::Mark> value_marks;
    ForEachKey(map, [&](const Field& field) {
      if (!LoadProfileKey(field, profile)) {
        UnknownKey(field, " in a series profile", kProfileKeys);
        return;
      }
      value_marks[field.key] = field.Where();
    });
    if (errors_.size() != errors_before) return false;
    std::string why;
    if (!profile->IsValid(&why)) {
      // IsValid's rules start with the key they are about; point at that key
      // when the profile gives it, else at the profile itself.
      const std::string_view key = std::string_view(why).substr(0, why.find(' '));
      auto it = value_marks.find(key);
      Error(it != value_marks.end() ? it->second : map.Mark(), why);
      return false;
    }
    return true;
  }

  // Returns false only for an unknown key (other problems are reported here).
  bool LoadProfileKey(const Field& f, ProfileOptions* p) {
    const std::string_view k = f.key;
    if (k == "match") {
      Glob(f, &p->match);
    } else if (k == "kind") {
      Enum(f, SeriesKindFromString, SeriesKindChoices(), &p->kind);
    } else if (k == "seasons") {
      List(f, "a list of durations such as [1d, 7d] ([] for none)", &p->seasons,
           [this](const Field& e, EventTime* out) { return Duration(e, false, out); });
    } else if (k == "gaps") {
      Enum(f, GapPolicyFromString, GapPolicyChoices(), &p->gaps);
    } else if (k == "warmup") {
      WholeNumber(f, "a whole number of readings", &p->warmup);
    } else if (k == "arl0") {
      Number(f, "a number of readings", &p->arl0);
    } else if (k == "shift") {
      Number(f, "a number of standard deviations", &p->shift);
    } else if (k == "detectors") {
      List(f, "a list of detectors such as [cusum, page-hinkley]", &p->detectors,
           [this](const Field& e, DetectorKind* out) {
             return Enum(e, DetectorKindFromString, DetectorKindChoices(), out);
           });
    } else if (k == "agree") {
      WholeNumber(f, "a whole number of detectors", &p->agree);
    } else if (k == "silence_after") {
      EventTime value = 0;
      if (Duration(f, false, &value)) p->silence_after = value;
    } else if (k == "harmonics") {
      List(f, "a list of whole numbers, one per season, such as [3, 2]", &p->harmonics,
           [this](const Field& e, int* out) {
             return WholeNumber(e, "a whole number of Fourier pairs", out);
           });
    } else if (k == "every") {
      EventTime value = 0;
      if (Duration(f, false, &value)) p->every = value;
    } else if (k == "memory") {
      EventTime value = 0;
      if (Duration(f, false, &value)) p->memory = value;
    } else if (k == "trend") {
      Bool(f, &p->trend);
    } else if (k == "level_noise") {
      std::string text;
      if (ScalarText(f, kLevelNoiseHint, &text)) {
        if (text == "auto") {
          p->level_noise_auto = true;
          p->level_noise = 0.0;
        } else if (text == "off") {
          p->level_noise_auto = false;
          p->level_noise = 0.0;
        } else if (const std::optional<double> q = ParseFiniteNumber(text)) {
          p->level_noise_auto = false;
          p->level_noise = *q;
        } else {
          Error(f.Where(), std::string(f.key) + ": expected " +
                               std::string(kLevelNoiseHint) + ", got '" + text + "'");
        }
      }
    } else if (k == "lateness") {
      Duration(f, true, &p->lateness);
    } else if (k == "agree_within") {
      WholeNumber(f, "a whole number of readings", &p->agree_within);
    } else if (k == "cooldown") {
      WholeNumber(f, "a whole number of readings", &p->cooldown);
    } else if (k == "covariates") {
      List(f, "a list of series names such as [coldstore/orders/pallets_shipped]",
           &p->covariates, [this](const Field& e, std::string* out) {
             return ScalarText(e, "a series name", out);
           });
    } else if (k == "covariate_max_age") {
      Duration(f, false, &p->covariate_max_age);
    } else if (k == "count_chart") {
      Enum(f, CountChartFromString, CountChartChoices(), &p->count_chart);
    } else if (k == "adapt_thresholds") {
      Bool(f, &p->adapt_thresholds);
    } else {
      return false;
    }
    return true;
  }

  // ---- The service sections (config/service_options.h) ----

  // Returns false only for a key that is not a service key.
  bool LoadServiceKey(const Field& f, ServiceOptions* o) {
    const std::string_view k = f.key;
    if (k == "listeners") {
      Section(f, "listeners", kListenerKeys, [&](const Field& e) {
        if (e.key == "tcp") {
          Section(
              e, "listeners.tcp", kTcpKeys,
              [&](const Field& t) {
                return t.key == "tls" ? LoadTls(t, "listeners.tcp.tls", &o->tcp.tls)
                                      : LoadTcpKey(t, &o->tcp);
              },
              [&](std::string* why) { return o->tcp.IsValid(why); });
        } else if (e.key == "http") {
          Section(
              e, "listeners.http", kHttpKeys,
              [&](const Field& h) {
                return h.key == "tls" ? LoadTls(h, "listeners.http.tls", &o->http.tls)
                                      : LoadHttpKey(h, &o->http);
              },
              [&](std::string* why) { return o->http.IsValid(why); });
        } else {
          return false;
        }
        return true;
      });
    } else if (k == "shards") {
      WholeNumber(f, "a whole number of shards (0: one per core)", &o->shards);
    } else if (k == "queue_batches") {
      WholeNumber(f, "a whole number of batches", &o->queue_batches);
    } else if (k == "max_series") {
      Size(f, "a whole number of series", &o->max_series);
    } else if (k == "recent_points") {
      Size(f, "a whole number of readings (0: none)", &o->recent_points);
    } else if (k == "storage") {
      Section(f, "storage", kStorageKeys, [&](const Field& e) {
        if (e.key == "checkpoint_every") {
          Duration(e, true, &o->checkpoint_every);
          return true;
        }
        if (e.key == "http_ingest") {
          Enum(e, IngestAckFromString, IngestAckChoices(), &o->http_ingest);
          return true;
        }
        if (e.key != "directory") return false;
        ScalarText(e, "a directory path", &o->state_directory);
        return true;
      });
    } else if (k == "inputs") {
      Section(f, "inputs", kInputKeys, [&](const Field& e) {
        if (e.key == "kafka") return LoadKafkaInput(e, &o->kafka), true;
        if (e.key == "mqtt") return LoadMqttInput(e, &o->mqtt), true;
        if (e.key != "files") return false;
        LoadFiles(e, &o->files);
        return true;
      });
    } else if (k == "sinks") {
      Section(
          f, "sinks", kSinkKeys,
          [&](const Field& e) { return LoadSinkKey(e, &o->sinks); },
          [&](std::string* why) { return o->sinks.IsValid(why); });
    } else if (k == "metrics") {
      Section(f, "metrics", kMetricsKeys, [&](const Field& e) {
        if (e.key != "series_limit") return false;
        WholeNumber(e, "a whole number of series", &o->metrics_series_limit);
        service_marks_["series_limit"] = e.Where();
        return true;
      });
    } else if (k == "shutdown_timeout") {
      Duration(f, false, &o->shutdown_timeout);
    } else if (k == "max_time_ahead") {
      Duration(f, false, &o->max_time_ahead);
    } else if (k == "ingest_memory_bytes") {
      Size(f, "a whole number of bytes", &o->ingest_memory_bytes);
    } else if (k == "access") {
      Section(
          f, "access", kAccessKeys,
          [&](const Field& e) {
            ScalarText(e, e.key == "token_file" ? "a file path" : "a variable name",
                       e.key == "token_file" ? &o->access.token_file : &o->access.token_env);
            return true;
          },
          [&](std::string* why) { return o->access.IsValid(why); });
    } else {
      return false;
    }
    return true;
  }

  // A listener's `tls` section; always true (its errors are reported here).
  bool LoadTls(const Field& f, std::string_view name, TlsOptions* o) {
    Section(
        f, name, kTlsKeys,
        [&](const Field& e) {
          if (e.key != "certificate_file" && e.key != "key_file") return false;
          ScalarText(e, "a PEM file path",
                     e.key == "certificate_file" ? &o->certificate_file : &o->key_file);
          return true;
        },
        [&](std::string* why) { return o->IsValid(why); });
    return true;
  }

  bool LoadTcpKey(const Field& f, TcpListenerOptions* o) {
    const std::string_view k = f.key;
    if (k == "enabled") {
      Bool(f, &o->enabled);
    } else if (k == "address") {
      ScalarText(f, "a host address such as 127.0.0.1", &o->address);
    } else if (k == "port") {
      WholeNumber(f, "a port number", &o->port);
    } else if (k == "idle_timeout") {
      Duration(f, false, &o->idle_timeout);
    } else if (k == "max_connections") {
      WholeNumber(f, "a whole number of connections", &o->max_connections);
    } else if (k == "max_line_bytes") {
      Size(f, "a whole number of bytes", &o->max_line_bytes);
    } else {
      return false;
    }
    return true;
  }

  bool LoadHttpKey(const Field& f, HttpListenerOptions* o) {
    const std::string_view k = f.key;
    if (k == "enabled") {
      Bool(f, &o->enabled);
    } else if (k == "address") {
      ScalarText(f, "a host address such as 127.0.0.1", &o->address);
    } else if (k == "port") {
      WholeNumber(f, "a port number", &o->port);
    } else if (k == "max_body_bytes") {
      Size(f, "a whole number of bytes", &o->max_body_bytes);
    } else {
      return false;
    }
    return true;
  }

  bool LoadSinkKey(const Field& f, SinkOptions* o) {
    const std::string_view k = f.key;
    if (k == "alert_log") {
      Section(
          f, "sinks.alert_log", kAlertLogKeys,
          [&](const Field& e) {
            if (e.key == "enabled") {
              Bool(e, &o->alert_log.enabled);
            } else if (e.key == "path") {
              ScalarText(e, "a file path", &o->alert_log.path);
            } else if (e.key == "min_severity") {
              Enum(e, SeverityFromString, SeverityChoices(), &o->alert_log.min_severity);
            } else {
              return false;
            }
            return true;
          },
          [&](std::string* why) { return o->alert_log.IsValid(why); });
    } else if (k == "webhook") {
      WebhookOptions& w = o->webhook;
      Section(
          f, "sinks.webhook", kWebhookKeys,
          [&](const Field& e) {
            const std::string_view key = e.key;
            if (key == "url") {
              ScalarText(e, "an http:// URL", &w.url);
            } else if (key == "attempts") {
              WholeNumber(e, "a whole number of tries", &w.attempts);
            } else if (key == "backoff") {
              Duration(e, false, &w.backoff);
            } else if (key == "backoff_max") {
              Duration(e, false, &w.backoff_max);
            } else if (key == "timeout") {
              Duration(e, false, &w.timeout);
            } else if (key == "queue") {
              WholeNumber(e, "a whole number of alerts", &w.queue);
            } else if (key == "dead_letter") {
              ScalarText(e, "a file path", &w.dead_letter);
            } else if (key == "min_severity") {
              Enum(e, SeverityFromString, SeverityChoices(), &w.min_severity);
            } else {
              return false;
            }
            return true;
          },
          [&](std::string* why) { return w.IsValid(why); });
    } else if (k == "stdout") {
      // true | false, or a mapping with enabled and min_severity.
      if (!f.value.IsMap()) {
        Bool(f, &o->to_stdout);
        return true;
      }
      Section(f, "sinks.stdout", kStdoutKeys, [&](const Field& e) {
        if (e.key == "enabled") {
          Bool(e, &o->to_stdout);
        } else if (e.key == "min_severity") {
          Enum(e, SeverityFromString, SeverityChoices(), &o->stdout_min_severity);
        } else {
          return false;
        }
        return true;
      });
    } else if (k == "kafka") {
      KafkaSinkOptions& s = o->kafka;
      Section(
          f, "sinks.kafka", kKafkaSinkKeys,
          [&](const Field& e) {
            if (e.key == "brokers") {
              ScalarText(e, "bootstrap servers such as 127.0.0.1:9092", &s.brokers);
            } else if (e.key == "topic") {
              ScalarText(e, "a topic name", &s.topic);
            } else if (e.key == "min_severity") {
              Enum(e, SeverityFromString, SeverityChoices(), &s.min_severity);
            } else {
              return false;
            }
            return true;
          },
          [&](std::string* why) { return s.IsValid(why); });
    } else if (k == "events") {
      Bool(f, &o->events);
    } else {
      return false;
    }
    return true;
  }

  void LoadKafkaInput(const Field& f, KafkaInputOptions* o) {
    Section(
        f, "inputs.kafka", kKafkaInputKeys,
        [&](const Field& e) {
          const std::string_view key = e.key;
          if (key == "brokers") {
            ScalarText(e, "bootstrap servers such as 127.0.0.1:9092", &o->brokers);
          } else if (key == "topic" || key == "group" || key == "state_topic") {
            ScalarText(e, key == "group" ? "a consumer group name" : "a topic name",
                       key == "topic"   ? &o->topic
                       : key == "group" ? &o->group
                                        : &o->state_topic);
          } else if (key == "state_directory") {
            ScalarText(e, "a directory path", &o->state_directory);
          } else if (key == "checkpoint_every") {
            Duration(e, false, &o->checkpoint_every);
          } else if (key == "session_timeout") {
            Duration(e, false, &o->session_timeout);
          } else if (key == "start_at") {
            StartAt start_at = StartAt::kBeginning;
            if (Enum(e, StartAtFromString, StartAtChoices(), &start_at)) {
              o->start_at_end = start_at == StartAt::kEnd;
            }
          } else {
            return false;
          }
          return true;
        },
        [&](std::string* why) { return o->IsValid(why); });
  }

  void LoadMqttInput(const Field& f, MqttInputOptions* o) {
    Section(
        f, "inputs.mqtt", kMqttKeys,
        [&](const Field& e) {
          const std::string_view key = e.key;
          if (key == "host") {
            ScalarText(e, "a broker host such as 127.0.0.1", &o->host);
          } else if (key == "port") {
            WholeNumber(e, "a port number", &o->port);
          } else if (key == "client_id") {
            ScalarText(e, "a client id", &o->client_id);
          } else if (key == "topics") {
            List(e, "a list of topic filters such as [\"harbourside/+/temp_c\"]",
                 &o->topics, [&](const Field& element, std::string* out) {
                   return ScalarText(element, "a topic filter", out);
                 });
          } else if (key == "series") {
            ScalarText(e, "a series name template such as coldstore/{2}/{3}", &o->series);
          } else if (key == "keepalive") {
            Duration(e, false, &o->keepalive);
          } else if (key == "backoff") {
            Duration(e, false, &o->backoff);
          } else if (key == "backoff_max") {
            Duration(e, false, &o->backoff_max);
          } else {
            return false;
          }
          return true;
        },
        [&](std::string* why) { return o->IsValid(why); });
  }

  // `files:` is a list whose elements are a path or a mapping with `path`.
  void LoadFiles(const Field& f, std::vector<FileInputOptions>* files) {
    if (f.value.IsNull()) return;
    if (!f.value.IsSequence()) {
      Error(f.Where(),
            "files: expected a list of files to follow (each a path or "
            "'- path: ...'), got " +
                Describe(f.value));
      return;
    }
    for (const YAML::Node& element : f.value) {
      FileInputOptions file;
      Field element_field{f.key, element.Mark().is_null() ? f.Where() : element.Mark(),
                          element, true};
      if (element.IsScalar()) {
        ScalarText(element_field, "a file path", &file.path);
      } else {
        Section(
            element_field, "inputs.files", kFileKeys,
            [&](const Field& e) {
              if (e.key == "path") {
                ScalarText(e, "a file path", &file.path);
              } else if (e.key == "start_at") {
                Enum(e, StartAtFromString, StartAtChoices(), &file.start_at);
              } else if (e.key == "poll_interval") {
                Duration(e, false, &file.poll_interval);
              } else {
                return false;
              }
              return true;
            },
            [&](std::string* why) { return file.IsValid(why); });
      }
      files->push_back(std::move(file));
    }
  }

  // A nested mapping: load_key maps one key (false: unknown); when every key
  // loaded cleanly, is_valid's rule (if given) is reported at the key its
  // first word names, else at the section.
  template <typename Keys, typename LoadKey>
  void Section(const Field& f, std::string_view name, const Keys& keys,
               LoadKey load_key) {
    Section(f, name, keys, load_key, [](std::string*) { return true; });
  }
  template <typename Keys, typename LoadKey, typename IsValid>
  void Section(const Field& f, std::string_view name, const Keys& keys, LoadKey load_key,
               IsValid is_valid) {
    if (f.value.IsNull() && !f.list_element) return;  // `key:` alone: all defaults
    if (!f.value.IsMap()) {
      Error(f.Where(), std::string(name) + ": expected a mapping of keys (" +
                           Join(keys, ", ") + "), got " + Describe(f.value));
      return;
    }
    const std::size_t errors_before = errors_.size();
    std::map<std::string, YAML::Mark> marks;
    const std::string where = " in " + std::string(name);
    ForEachKey(f.value, [&](const Field& field) {
      if (!load_key(field)) {
        UnknownKey(field, where, keys);
        return;
      }
      marks[std::string(field.key)] = field.Where();
    });
    if (errors_.size() != errors_before) return;
    std::string why;
    if (!is_valid(&why)) {
      auto it = marks.find(why.substr(0, why.find(' ')));
      Error(it != marks.end() ? it->second : f.value.Mark(),
            std::string(name) + ": " + why);
    }
  }

  // The rules that span sections (shards, queue sizes, duplicate inputs), once
  // every section has loaded cleanly.
  void CheckService(const YAML::Node& root, const ServiceOptions& o) {
    if (!errors_.empty()) return;
    std::string why;
    if (o.IsValid(&why)) return;
    const std::string key = why.substr(0, why.find(' '));
    auto it = service_marks_.find(key == "directory" ? "storage"
                                  : key == "path"    ? "inputs"
                                                     : key);
    Error(it != service_marks_.end() ? it->second : root.Mark(), why);
  }

  template <typename Integer>
  bool Size(const Field& f, std::string_view expected, Integer* out) {
    std::string text;
    if (!ScalarText(f, expected, &text)) return false;
    const std::optional<long long> value = ParseWholeNumber(text);
    if (!value || *value < 0) {
      Error(f.Where(), std::string(f.key) + ": expected " + std::string(expected) +
                           ", got '" + text + "'");
      return false;
    }
    *out = static_cast<Integer>(*value);
    return true;
  }

  std::map<std::string, YAML::Mark> service_marks_;  // top-level service keys

  // ---- Typed readers: each reports its own error and returns false on one ----

  bool ScalarText(const Field& f, std::string_view expected, std::string* out) {
    if (f.value.IsNull()) {
      Error(f.Where(),
            std::string(f.key) +
                (f.list_element ? ": empty list element; expected "
                                : ": no value; expected ") +
                std::string(expected) +
                (f.list_element ? "" : " (remove the key to use the default)"));
      return false;
    }
    if (!f.value.IsScalar()) {
      Error(f.Where(), std::string(f.key) + ": expected " + std::string(expected) +
                           ", got " + Describe(f.value));
      return false;
    }
    *out = f.value.Scalar();
    return true;
  }

  bool WholeNumber(const Field& f, std::string_view expected, int* out) {
    std::string text;
    if (!ScalarText(f, expected, &text)) return false;
    const std::optional<long long> value = ParseWholeNumber(text);
    if (!value || *value < std::numeric_limits<int>::min() ||
        *value > std::numeric_limits<int>::max()) {
      Error(f.Where(), std::string(f.key) + ": expected " + std::string(expected) +
                           ", got '" + text + "'");
      return false;
    }
    *out = static_cast<int>(*value);
    return true;
  }

  // A `match` glob over series names; *out is left alone when it is invalid.
  bool Glob(const Field& f, std::string* out) {
    std::string text;
    if (!ScalarText(f, "a glob such as \"coldstore/*/temp_c\"", &text)) return false;
    if (Status status = ValidateGlob(text); !status.ok()) {
      std::string why = status.message();
      if (why.rfind("glob: ", 0) == 0) why.erase(0, 6);
      Error(f.Where(), "match: invalid glob \"" + text + "\": " + why);
      return false;
    }
    *out = std::move(text);
    return true;
  }

  bool Number(const Field& f, std::string_view expected, double* out) {
    std::string text;
    if (!ScalarText(f, expected, &text)) return false;
    const std::optional<double> value = ParseFiniteNumber(text);
    if (!value) {
      Error(f.Where(), std::string(f.key) + ": expected " + std::string(expected) +
                           ", got '" + text + "'");
      return false;
    }
    *out = *value;
    return true;
  }

  bool Duration(const Field& f, bool allow_zero, EventTime* out) {
    std::string text;
    if (!ScalarText(f, kDurationHint, &text)) return false;
    if (allow_zero && IsZeroDuration(text)) {
      *out = 0;
      return true;
    }
    if (ParseFiniteNumber(text)) {
      Error(f.Where(), std::string(f.key) + ": '" + text + "' has no unit; expected " +
                           std::string(kDurationHint));
      return false;
    }
    StatusOr<EventTime> value = ParseDuration(text);
    if (!value.ok()) {
      Error(f.Where(), std::string(f.key) + ": " + value.status().message() +
                           "; expected " + std::string(kDurationHint));
      return false;
    }
    *out = *value;
    return true;
  }

  // "0", "0s", "0.0m", ...: zero in any unit (only `lateness` may be zero).
  static bool IsZeroDuration(std::string_view text) {
    for (std::string_view unit : {"ms", "s", "m", "h", "d", "w"}) {
      if (text.size() > unit.size() && text.substr(text.size() - unit.size()) == unit) {
        text.remove_suffix(unit.size());
        break;
      }
    }
    const std::optional<double> value = ParseFiniteNumber(text);
    return value && *value == 0 && text.find_first_not_of("0.") == std::string_view::npos;
  }

  bool Bool(const Field& f, bool* out) {
    std::string text;
    if (!ScalarText(f, "true | false", &text)) return false;
    std::string lower;
    for (char c : text) lower += Lower(c);
    if (lower == "true" || lower == "yes" || lower == "on") {
      *out = true;
    } else if (lower == "false" || lower == "no" || lower == "off") {
      *out = false;
    } else {
      Error(f.Where(),
            std::string(f.key) + ": expected true | false, got '" + text + "'");
      return false;
    }
    return true;
  }

  template <typename T, typename FromString>
  bool Enum(const Field& f, FromString from_string, std::string_view choices, T* out) {
    const std::string expected = "one of " + std::string(choices);
    std::string text;
    if (!ScalarText(f, expected, &text)) return false;
    std::optional<T> value = from_string(text);
    if (!value) {
      std::string message =
          std::string(f.key) + ": unknown value '" + text + "'; expected " + expected;
      if (auto suggestion = Closest(text, SplitChoices(choices))) {
        message += "; did you mean '" + std::string(*suggestion) + "'?";
      }
      Error(f.Where(), std::move(message));
      return false;
    }
    *out = *value;
    return true;
  }

  // A list whose elements are each read by read_element; the list is replaced
  // only if every element was good.
  template <typename T, typename ReadElement>
  bool List(const Field& f, std::string_view expected, std::vector<T>* out,
            ReadElement read_element) {
    if (f.value.IsNull()) {
      Error(f.Where(),
            std::string(f.key) + ": no value; expected " + std::string(expected));
      return false;
    }
    if (!f.value.IsSequence()) {
      Error(f.Where(), std::string(f.key) + ": expected " + std::string(expected) +
                           ", got " + Describe(f.value));
      return false;
    }
    std::vector<T> values;
    bool ok = true;
    for (const YAML::Node& element : f.value) {
      T value{};
      Field element_field{f.key, element.Mark().is_null() ? f.Where() : element.Mark(),
                          element, true};
      if (read_element(element_field, &value)) {
        values.push_back(value);
      } else {
        ok = false;
      }
    }
    if (ok) *out = std::move(values);
    return ok;
  }

  std::string source_;
  std::vector<ConfigError> errors_;
  // Added to the numbers of default annotation ids (ParseAnnotationsText).
  std::size_t annotation_number_offset_ = 0;
};

std::string JoinErrors(const std::vector<ConfigError>& errors) {
  std::string out;
  for (const ConfigError& error : errors) {
    if (!out.empty()) out += '\n';
    out += error.ToString();
  }
  return out;
}

// Reads a whole file; on failure returns the reason.
std::optional<std::string> ReadFile(const std::string& path, std::string* contents) {
  std::FILE* file = std::fopen(path.c_str(), "rb");
  if (file == nullptr) return std::string("cannot open: ") + std::strerror(errno);
  char buffer[65536];
  std::optional<std::string> failure;
  while (true) {
    const std::size_t n = std::fread(buffer, 1, sizeof(buffer), file);
    contents->append(buffer, n);
    if (contents->size() > kMaxConfigBytes) {
      failure =
          "larger than " + std::to_string(kMaxConfigBytes >> 20) + " MiB; not a config";
      break;
    }
    if (n < sizeof(buffer)) {
      if (std::ferror(file))
        failure = std::string("cannot read: ") + std::strerror(errno);
      break;
    }
  }
  std::fclose(file);
  return failure;
}

}  // namespace

std::string ConfigError::ToString() const {
  if (line <= 0) return source + ": " + message;
  return source + ":" + std::to_string(line) + ":" + std::to_string(column) + ": " +
         message;
}

std::vector<ConfigError> ParseConfigText(std::string_view text,
                                         std::string_view source_name, Config* config) {
  *config = Config();
  Loader loader(source_name);
  loader.Load(text, config);
  return loader.TakeErrors();
}

std::vector<ConfigError> ParseAnnotationsText(std::string_view text,
                                              std::string_view source_name,
                                              std::size_t first_number,
                                              std::vector<Annotation>* out) {
  out->clear();
  Loader loader(source_name);
  loader.LoadAnnotationsOnly(text, std::max<std::size_t>(first_number, 1), out);
  return loader.TakeErrors();
}

std::vector<ConfigError> ParseConfigFile(const std::string& path, Config* config) {
  std::string contents;
  if (std::optional<std::string> failure = ReadFile(path, &contents)) {
    return {ConfigError{path, 0, 0, *failure}};
  }
  return ParseConfigText(contents, path, config);
}

StatusOr<Config> LoadConfigText(std::string_view text, std::string_view source_name) {
  Config config;
  std::vector<ConfigError> errors = ParseConfigText(text, source_name, &config);
  if (!errors.empty()) return Status::InvalidArgument(JoinErrors(errors));
  return config;
}

StatusOr<Config> LoadConfigFile(const std::string& path) {
  Config config;
  std::vector<ConfigError> errors = ParseConfigFile(path, &config);
  if (!errors.empty()) {
    const bool unreadable = errors.size() == 1 && errors[0].line == 0;
    return unreadable ? Status::IoError(JoinErrors(errors))
                      : Status::InvalidArgument(JoinErrors(errors));
  }
  return config;
}

const ProfileOptions* MatchProfile(const Config& config, std::string_view series) {
  for (const ProfileOptions& profile : config.series) {
    if (GlobMatch(profile.match, series)) return &profile;
  }
  return nullptr;
}

std::string DescribeProfile(const ProfileOptions& p) {
  auto list = [](const auto& items, auto format) {
    std::string out = "[";
    for (std::size_t i = 0; i < items.size(); ++i) {
      if (i > 0) out += ", ";
      out += format(items[i]);
    }
    return out + "]";
  };
  std::string out = p.match + ": " + std::string(ToString(p.kind));
  out += ", seasons " + list(p.seasons, [](EventTime t) { return FormatDuration(t); });
  out += ", gaps " + std::string(ToString(p.gaps));
  out += ", warmup " + std::to_string(p.warmup);
  out += ", arl0 " + FormatNumber(p.arl0);
  out += ", shift " + FormatNumber(p.shift);
  out += ", detectors " +
         list(p.detectors, [](DetectorKind d) { return std::string(ToString(d)); });
  out += ", agree " + std::to_string(p.agree);
  if (p.agree > 1) out += " within " + std::to_string(p.agree_within) + " readings";
  out += ", silence_after " +
         (p.silence_after ? FormatDuration(*p.silence_after) : std::string("adaptive"));
  if (!p.harmonics.empty()) {
    out += ", harmonics " + list(p.harmonics, [](int h) { return std::to_string(h); });
  }
  if (p.every) out += ", every " + FormatDuration(*p.every);
  if (p.memory) out += ", memory " + FormatDuration(*p.memory);
  if (!p.trend) out += ", no trend";
  if (p.level_noise_auto) {
    out += ", level_noise auto";
  } else if (p.level_noise > 0) {
    out += ", level_noise " + FormatNumber(p.level_noise);
  }
  if (p.lateness > 0) out += ", lateness " + FormatDuration(p.lateness);
  if (p.cooldown > 0) out += ", cooldown " + std::to_string(p.cooldown);
  if (p.kind == SeriesKind::kCount && p.count_chart != CountChart::kAuto) {
    out += ", count_chart " + std::string(ToString(p.count_chart));
  }
  if (p.adapt_thresholds) out += ", adapt_thresholds";
  return out;
}

}  // namespace plumbline
