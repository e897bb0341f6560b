#include "config/stream_options.h"

namespace plumbline {
namespace {

bool Refuse(std::string* why, std::string message) {
  if (why) *why = std::move(message);
  return false;
}

// The text between braces at `open` ("" when unclosed), and where it ends.
std::string_view Placeholder(std::string_view text, std::size_t open,
                             std::size_t* close) {
  *close = text.find('}', open);
  if (*close == std::string_view::npos) return {};
  return text.substr(open + 1, *close - open - 1);
}

bool ValidPlaceholder(std::string_view name) {
  return name == "topic" || (name.size() == 1 && name[0] >= '1' && name[0] <= '9');
}

}  // namespace

bool KafkaInputOptions::IsValid(std::string* why) const {
  if (!enabled()) return true;
  if (topic.empty()) return Refuse(why, "topic must name the readings topic");
  if (group.empty()) return Refuse(why, "group must name the consumer group");
  if (state_topic.empty() == state_directory.empty()) {
    return Refuse(why,
                  "state_topic or state_directory must say where partition state lives "
                  "(one of them)");
  }
  if (checkpoint_every < 100 * 1000 || checkpoint_every > kMicrosPerHour) {
    return Refuse(why, "checkpoint_every must be in [100ms, 1h]");
  }
  if (session_timeout < kMicrosPerSecond || session_timeout > 5 * kMicrosPerMinute) {
    return Refuse(why, "session_timeout must be in [1s, 5m]");
  }
  return true;
}

bool MqttInputOptions::IsValid(std::string* why) const {
  if (!enabled()) return true;
  if (port < 1 || port > 65535) return Refuse(why, "port must be in [1, 65535]");
  if (topics.empty()) return Refuse(why, "topics must list at least one topic filter");
  for (const std::string& filter : topics) {
    if (filter.empty()) return Refuse(why, "topics must not hold an empty filter");
  }
  if (series.empty())
    return Refuse(why, "series must be a name template such as {topic}");
  for (std::size_t at = series.find('{'); at != std::string::npos;
       at = series.find('{', at + 1)) {
    std::size_t close = 0;
    if (!ValidPlaceholder(Placeholder(series, at, &close))) {
      return Refuse(why, "series may hold only {topic} and {1}..{9} in braces");
    }
  }
  if (keepalive < 5 * kMicrosPerSecond || keepalive > kMicrosPerHour) {
    return Refuse(why, "keepalive must be in [5s, 1h]");
  }
  if (backoff <= 0) return Refuse(why, "backoff must be positive");
  if (backoff_max < backoff) return Refuse(why, "backoff_max must be at least backoff");
  return true;
}

bool KafkaSinkOptions::IsValid(std::string* why) const {
  if (enabled() && topic.empty()) return Refuse(why, "topic must name the alerts topic");
  return true;
}

std::string SeriesFromTopic(std::string_view series_template, std::string_view topic) {
  std::vector<std::string_view> levels;
  for (std::size_t begin = 0;;) {
    const std::size_t slash = topic.find('/', begin);
    levels.push_back(topic.substr(begin, slash - begin));
    if (slash == std::string_view::npos) break;
    begin = slash + 1;
  }
  std::string out;
  for (std::size_t at = 0; at < series_template.size();) {
    if (series_template[at] != '{') {
      out += series_template[at++];
      continue;
    }
    std::size_t close = 0;
    const std::string_view name = Placeholder(series_template, at, &close);
    if (name == "topic") {
      out += topic;
    } else {
      const std::size_t level = static_cast<std::size_t>(name[0] - '0');
      if (level > levels.size() || levels[level - 1].empty()) return {};
      out += levels[level - 1];
    }
    at = close + 1;
  }
  return out;
}

}  // namespace plumbline
