#include "daemon/log.h"

#include <unistd.h>

#include <atomic>
#include <chrono>
#include <cstdio>
#include <mutex>

#include "detectors/time_format.h"

namespace plumbline {
namespace {

std::atomic<int> g_level{static_cast<int>(LogLevel::kInfo)};
std::mutex g_mutex;  // guards g_writer and serialises writes
std::function<void(std::string_view)> g_writer;

bool NeedsQuotes(std::string_view value) {
  if (value.empty()) return true;
  for (unsigned char c : value) {
    if (c <= ' ' || c == '"' || c == '=' || c == '\\' || c == 0x7f) return true;
  }
  return false;
}

void AppendValue(std::string* out, std::string_view value) {
  if (!NeedsQuotes(value)) {
    *out += value;
    return;
  }
  out->push_back('"');
  for (unsigned char c : value) {
    switch (c) {
      case '"':
        *out += "\\\"";
        break;
      case '\\':
        *out += "\\\\";
        break;
      case '\n':
        *out += "\\n";
        break;
      case '\r':
        *out += "\\r";
        break;
      case '\t':
        *out += "\\t";
        break;
      default:
        if (c < 0x20 || c == 0x7f) {
          char buffer[8];
          std::snprintf(buffer, sizeof buffer, "\\x%02x", c);
          *out += buffer;
        } else {
          out->push_back(static_cast<char>(c));
        }
    }
  }
  out->push_back('"');
}

}  // namespace

std::string_view ToString(LogLevel level) {
  switch (level) {
    case LogLevel::kDebug:
      return "debug";
    case LogLevel::kInfo:
      return "info";
    case LogLevel::kWarning:
      return "warning";
    case LogLevel::kError:
      return "error";
  }
  return "info";
}

std::optional<LogLevel> LogLevelFromString(std::string_view text) {
  for (LogLevel level :
       {LogLevel::kDebug, LogLevel::kInfo, LogLevel::kWarning, LogLevel::kError}) {
    if (text == ToString(level)) return level;
  }
  return std::nullopt;
}

std::string_view LogLevelChoices() { return "debug | info | warning | error"; }

LogField::LogField(std::string_view k, double v) : key(k) {
  char buffer[32];
  std::snprintf(buffer, sizeof buffer, "%.6g", v);
  value = buffer;
}

void SetLogLevel(LogLevel level) { g_level.store(static_cast<int>(level)); }
LogLevel GetLogLevel() { return static_cast<LogLevel>(g_level.load()); }
bool LogEnabled(LogLevel level) {
  return static_cast<int>(level) >= g_level.load(std::memory_order_relaxed);
}

void SetLogWriter(std::function<void(std::string_view line)> writer) {
  std::lock_guard<std::mutex> lock(g_mutex);
  g_writer = std::move(writer);
}

std::string FormatLogFields(LogLevel level, std::string_view message,
                            std::initializer_list<LogField> fields) {
  std::string line = "level=";
  line += ToString(level);
  line += " msg=";
  AppendValue(&line, message);
  for (const LogField& field : fields) {
    line.push_back(' ');
    line += field.key;
    line.push_back('=');
    AppendValue(&line, field.value);
  }
  return line;
}

void Log(LogLevel level, std::string_view message,
         std::initializer_list<LogField> fields) {
  if (!LogEnabled(level)) return;
  const auto now = std::chrono::system_clock::now().time_since_epoch();
  const auto micros = std::chrono::duration_cast<std::chrono::microseconds>(now).count();
  // Milliseconds are enough for a log line.
  std::string line = "ts=" + FormatRfc3339(micros - micros % 1000) + " ";
  line += FormatLogFields(level, message, fields);
  std::lock_guard<std::mutex> lock(g_mutex);
  if (g_writer) {
    g_writer(line);
    return;
  }
  line.push_back('\n');
  std::string_view rest = line;
  while (!rest.empty()) {
    const ssize_t n = ::write(STDERR_FILENO, rest.data(), rest.size());
    if (n <= 0) break;  // nowhere to report a failing stderr
    rest.remove_prefix(static_cast<std::size_t>(n));
  }
}

}  // namespace plumbline
