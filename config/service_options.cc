#include "config/service_options.h"

#include <algorithm>
#include <charconv>
#include <set>
#include <thread>

#include "detectors/time_format.h"

namespace plumbline {
namespace {

bool Fail(std::string* why, std::string message) {
  if (why) *why = std::move(message);
  return false;
}

bool ValidPort(int port) { return port >= 0 && port <= 65535; }

}  // namespace

bool TlsOptions::IsValid(std::string* why) const {
  if (certificate_file.empty() != key_file.empty()) {
    return Fail(why, "tls needs both certificate_file and key_file");
  }
  return true;
}

bool TcpListenerOptions::IsValid(std::string* why) const {
  if (address.empty()) return Fail(why, "address must be a non-empty host address");
  if (!ValidPort(port)) return Fail(why, "port must be in [0, 65535] (0: any free port)");
  if (idle_timeout <= 0) return Fail(why, "idle_timeout must be positive");
  if (max_connections < 1 || max_connections > 100000) {
    return Fail(why, "max_connections must be in [1, 100000]");
  }
  if (max_line_bytes < 64 || max_line_bytes > (16u << 20)) {
    return Fail(why, "max_line_bytes must be in [64, 16777216]");
  }
  return tls.IsValid(why);
}

bool HttpListenerOptions::IsValid(std::string* why) const {
  if (address.empty()) return Fail(why, "address must be a non-empty host address");
  if (!ValidPort(port)) return Fail(why, "port must be in [0, 65535] (0: any free port)");
  if (max_body_bytes < 1024 || max_body_bytes > (1u << 30)) {
    return Fail(why, "max_body_bytes must be in [1024, 1073741824]");
  }
  return tls.IsValid(why);
}

std::string_view ToString(IngestAck ack) {
  return ack == IngestAck::kFast ? "fast" : "durable";
}

std::optional<IngestAck> IngestAckFromString(std::string_view text) {
  if (text == "durable") return IngestAck::kDurable;
  if (text == "fast") return IngestAck::kFast;
  return std::nullopt;
}

std::string_view IngestAckChoices() { return "durable | fast"; }

std::string_view ToString(StartAt start_at) {
  return start_at == StartAt::kEnd ? "end" : "beginning";
}

std::optional<StartAt> StartAtFromString(std::string_view text) {
  if (text == "beginning") return StartAt::kBeginning;
  if (text == "end") return StartAt::kEnd;
  return std::nullopt;
}

std::string_view StartAtChoices() { return "beginning | end"; }

bool FileInputOptions::IsValid(std::string* why) const {
  if (path.empty()) return Fail(why, "path must name the file to follow");
  if (poll_interval < 1000 || poll_interval > kMicrosPerMinute) {
    return Fail(why, "poll_interval must be in [1ms, 1m]");
  }
  return true;
}

bool AlertLogOptions::IsValid(std::string* why) const {
  if (enabled && path.empty()) return Fail(why, "path must name the alert log file");
  return true;
}

bool ParseHttpUrl(std::string_view url, HttpUrl* out, std::string* why) {
  constexpr std::string_view kScheme = "http://";
  if (url.substr(0, kScheme.size()) != kScheme) {
    return Fail(why, "must start with http:// (https is not supported)");
  }
  url.remove_prefix(kScheme.size());
  const std::size_t slash = url.find('/');
  std::string_view authority = url.substr(0, slash);
  HttpUrl result;
  result.target = slash == std::string_view::npos ? "/" : std::string(url.substr(slash));
  if (authority.find('@') != std::string_view::npos) {
    return Fail(why, "must not carry user information");
  }
  std::string_view host = authority;
  if (!authority.empty() && authority.front() == '[') {  // [IPv6]:port
    const std::size_t close = authority.find(']');
    if (close == std::string_view::npos)
      return Fail(why, "has an unclosed '[' in its host");
    host = authority.substr(1, close - 1);
    std::string_view rest = authority.substr(close + 1);
    if (!rest.empty()) {
      if (rest.front() != ':') return Fail(why, "has text after its IPv6 host");
      result.port = std::string(rest.substr(1));
    }
  } else if (const std::size_t colon = authority.rfind(':');
             colon != std::string_view::npos) {
    host = authority.substr(0, colon);
    result.port = std::string(authority.substr(colon + 1));
  }
  if (host.empty()) return Fail(why, "has no host");
  int port = 0;
  const auto [end, ec] =
      std::from_chars(result.port.data(), result.port.data() + result.port.size(), port);
  if (result.port.empty() || ec != std::errc() ||
      end != result.port.data() + result.port.size() || port < 1 || port > 65535) {
    return Fail(why, "has a port outside [1, 65535]");
  }
  result.host = std::string(host);
  if (out) *out = std::move(result);
  return true;
}

bool WebhookOptions::IsValid(std::string* why) const {
  std::string url_why;
  if (!url.empty() && !ParseHttpUrl(url, nullptr, &url_why)) {
    return Fail(why, "url " + url_why);
  }
  if (attempts < 1 || attempts > 100) return Fail(why, "attempts must be in [1, 100]");
  if (backoff <= 0) return Fail(why, "backoff must be positive");
  if (backoff_max < backoff) return Fail(why, "backoff_max must be at least backoff");
  if (timeout <= 0 || timeout > 10 * kMicrosPerMinute) {
    return Fail(why, "timeout must be in (0, 10m]");
  }
  if (queue < 1 || queue > 1000000) return Fail(why, "queue must be in [1, 1000000]");
  if (dead_letter.empty()) return Fail(why, "dead_letter must name a file");
  return true;
}

bool SinkOptions::IsValid(std::string* why) const {
  return alert_log.IsValid(why) && webhook.IsValid(why) && kafka.IsValid(why);
}

bool AccessOptions::IsValid(std::string* why) const {
  if (!token_file.empty() && !token_env.empty()) {
    return Fail(why, "token_file and token_env cannot both be set");
  }
  return true;
}

bool ServiceOptions::IsValid(std::string* why) const {
  if (!tcp.IsValid(why) || !http.IsValid(why) || !sinks.IsValid(why)) return false;
  if (!access.IsValid(why)) return false;
  if (max_time_ahead < kMicrosPerSecond || max_time_ahead > 366 * kMicrosPerDay) {
    return Fail(why, "max_time_ahead must be in [1s, 366d]");
  }
  if (ingest_memory_bytes < (std::size_t{1} << 20) ||
      ingest_memory_bytes > (std::size_t{1} << 40)) {
    return Fail(why, "ingest_memory_bytes must be in [1048576, 1099511627776]");
  }
  if (shards < 0 || shards > 256)
    return Fail(why, "shards must be in [0, 256] (0: one per core)");
  if (queue_batches < 1 || queue_batches > 65536) {
    return Fail(why, "queue_batches must be in [1, 65536]");
  }
  if (max_series < 1) return Fail(why, "max_series must be at least 1");
  if (recent_points > 4096) return Fail(why, "recent_points must be in [0, 4096]");
  if (state_directory.empty())
    return Fail(why, "directory must name the state directory");
  if (checkpoint_every < 0 || checkpoint_every > 24 * kMicrosPerHour) {
    return Fail(why, "checkpoint_every must be in [0, 24h] (0: never)");
  }
  if (metrics_series_limit < 0 || metrics_series_limit > 100000) {
    return Fail(why, "series_limit must be in [0, 100000]");
  }
  if (shutdown_timeout <= 0 || shutdown_timeout > 10 * kMicrosPerMinute) {
    return Fail(why, "shutdown_timeout must be in (0, 10m]");
  }
  if (!kafka.IsValid(why) || !mqtt.IsValid(why)) return false;
  if (kafka.enabled() && checkpoint_every != 0) {
    return Fail(why,
                "checkpoint_every must be 0 with inputs.kafka: a local checkpoint would bring "
                "back series of partitions another instance owns now");
  }
  std::set<std::string> paths;
  for (const FileInputOptions& file : files) {
    if (!file.IsValid(why)) return false;
    if (!paths.insert(file.path).second) {
      return Fail(why, "path '" + file.path + "' is followed twice");
    }
  }
  return true;
}

int ServiceOptions::EffectiveShards() const {
  if (shards > 0) return shards;
  return static_cast<int>(std::max(1u, std::thread::hardware_concurrency()));
}

std::string ServiceOptions::InStateDirectory(const std::string& path) const {
  if (!path.empty() && path.front() == '/') return path;
  std::string out = state_directory;
  if (!out.empty() && out.back() != '/') out += '/';
  return out + path;
}

std::vector<std::string> DescribeService(const ServiceOptions& o) {
  auto listener = [](std::string_view name, bool enabled, const std::string& address,
                     int port, const TlsOptions& tls) {
    std::string out(name);
    if (!enabled) return out + " off";
    const bool v6 = address.find(':') != std::string::npos;
    return out + " " + (v6 ? "[" + address + "]" : address) + ":" +
           (port == 0 ? std::string("any") : std::to_string(port)) +
           (tls.enabled() ? " (tls)" : "");
  };
  std::vector<std::string> lines;
  lines.push_back(
      "listeners: " +
      listener("tcp", o.tcp.enabled, o.tcp.address, o.tcp.port, o.tcp.tls) + ", " +
      listener("http", o.http.enabled, o.http.address, o.http.port, o.http.tls));
  lines.push_back("shards: " +
                  (o.shards == 0 ? std::string("one per core (") +
                                       std::to_string(o.EffectiveShards()) + ")"
                                 : std::to_string(o.shards)) +
                  ", queue " + std::to_string(o.queue_batches) + " batches each");
  lines.push_back("state directory: " + o.state_directory);
  std::string inputs = "inputs: tcp and http";
  for (const FileInputOptions& file : o.files) {
    inputs += ", file " + file.path + " (from the " +
              std::string(ToString(file.start_at)) + ")";
  }
  if (o.kafka.enabled()) {
    inputs += ", kafka " + o.kafka.topic + " on " + o.kafka.brokers + " (group " +
              o.kafka.group + ", state in " +
              (o.kafka.state_topic.empty() ? "directory " + o.kafka.state_directory
                                           : "topic " + o.kafka.state_topic) +
              ")";
  }
  if (o.mqtt.enabled()) {
    inputs += ", mqtt " + o.mqtt.host + ":" + std::to_string(o.mqtt.port) + " (" +
              std::to_string(o.mqtt.topics.size()) + " topic filters)";
  }
  lines.push_back(inputs);
  std::string sinks = "sinks:";
  // " (notify and up)" for a sink that drops the less urgent alerts.
  const auto from = [](Severity minimum) {
    return minimum == Severity::kRecord
               ? std::string()
               : " (" + std::string(ToString(minimum)) + " and up)";
  };
  if (o.sinks.alert_log.enabled) {
    sinks += " alert log " + o.InStateDirectory(o.sinks.alert_log.path) +
             from(o.sinks.alert_log.min_severity) + ";";
  }
  if (o.sinks.webhook.enabled()) {
    sinks += " webhook " + o.sinks.webhook.url + " (" +
             std::to_string(o.sinks.webhook.attempts) + " attempts, then " +
             o.InStateDirectory(o.sinks.webhook.dead_letter) + ")" +
             from(o.sinks.webhook.min_severity) + ";";
  }
  if (o.sinks.to_stdout) sinks += " stdout" + from(o.sinks.stdout_min_severity) + ";";
  if (o.sinks.kafka.enabled()) {
    sinks += " kafka " + o.sinks.kafka.topic + " on " + o.sinks.kafka.brokers +
             from(o.sinks.kafka.min_severity) + ";";
  }
  if (sinks.back() == ';') sinks.pop_back();
  if (sinks == "sinks:") sinks += " none";
  if (o.sinks.events) sinks += " (with events)";
  lines.push_back(sinks);
  return lines;
}

}  // namespace plumbline
