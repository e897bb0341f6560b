// A tiny structured logger for the daemon: one logfmt line per event on
// stderr, e.g.
//
//   ts=2026-03-19T14:02:00.125Z level=info msg="listening" input=tcp
//   address=127.0.0.1:7411
//
// Levels debug < info < warning < error; lines below the threshold cost one
// atomic load. Values that hold spaces, quotes, '=' or control bytes are quoted
// with backslash escapes. Thread-safe: each line is written whole under a mutex.
#pragma once

#include <cstdint>
#include <functional>
#include <initializer_list>
#include <optional>
#include <string>
#include <string_view>

namespace plumbline {

enum class LogLevel { kDebug, kInfo, kWarning, kError };
// "debug", "info", "warning", "error"; and back (nullopt for unknown text).
std::string_view ToString(LogLevel level);
std::optional<LogLevel> LogLevelFromString(std::string_view text);
std::string_view LogLevelChoices();  // "debug | info | warning | error"

// One key=value pair of a log line. Keys are plain words chosen by the caller.
struct LogField {
  LogField(std::string_view k, std::string_view v) : key(k), value(v) {}
  LogField(std::string_view k, const std::string& v) : key(k), value(v) {}
  LogField(std::string_view k, const char* v) : key(k), value(v) {}
  LogField(std::string_view k, long long v) : key(k), value(std::to_string(v)) {}
  LogField(std::string_view k, unsigned long long v) : key(k), value(std::to_string(v)) {}
  LogField(std::string_view k, long v) : key(k), value(std::to_string(v)) {}
  LogField(std::string_view k, unsigned long v) : key(k), value(std::to_string(v)) {}
  LogField(std::string_view k, int v) : key(k), value(std::to_string(v)) {}
  LogField(std::string_view k, unsigned v) : key(k), value(std::to_string(v)) {}
  LogField(std::string_view k, double v);
  LogField(std::string_view k, bool v) : key(k), value(v ? "true" : "false") {}
  std::string_view key;
  std::string value;
};

// Lines below `level` are dropped (default info).
void SetLogLevel(LogLevel level);
LogLevel GetLogLevel();
bool LogEnabled(LogLevel level);

// Where finished lines go (without their "\n"); default: stderr. For tests.
// Passing nullptr restores stderr.
void SetLogWriter(std::function<void(std::string_view line)> writer);

void Log(LogLevel level, std::string_view message,
         std::initializer_list<LogField> fields = {});
inline void LogDebug(std::string_view m, std::initializer_list<LogField> f = {}) {
  Log(LogLevel::kDebug, m, f);
}
inline void LogInfo(std::string_view m, std::initializer_list<LogField> f = {}) {
  Log(LogLevel::kInfo, m, f);
}
inline void LogWarning(std::string_view m, std::initializer_list<LogField> f = {}) {
  Log(LogLevel::kWarning, m, f);
}
inline void LogError(std::string_view m, std::initializer_list<LogField> f = {}) {
  Log(LogLevel::kError, m, f);
}

// The line Log would write (without the timestamp, for tests): level, msg, fields.
std::string FormatLogFields(LogLevel level, std::string_view message,
                            std::initializer_list<LogField> fields);

}  // namespace plumbline
