#include "daemon/terminal.h"

#include <unistd.h>

#include <cstdlib>

namespace plumbline {
namespace {

constexpr const char* kReset = "\033[0m";
constexpr const char* kDim = "\033[2m";
constexpr const char* kBold = "\033[1m";

const char* KindColour(const Alert& alert) {
  if (alert.event != EventType::kAlert || !alert.annotation.empty()) return kDim;
  switch (alert.kind) {
    case AlertKind::kLevel:
      return "\033[1;31m";
    case AlertKind::kVariance:
      return "\033[1;35m";
    case AlertKind::kRate:
      return "\033[1;33m";
    case AlertKind::kSilence:
      return "\033[1;34m";
  }
  return kBold;
}

}  // namespace

bool WantsColour(std::FILE* stream) {
  const char* no_colour = std::getenv("NO_COLOR");
  if (no_colour != nullptr && *no_colour != '\0') return false;
  return ::isatty(::fileno(stream)) != 0;
}

std::string AlertLine(const Alert& alert, bool colour) {
  std::string text = AlertToText(alert);
  if (!colour) return text;
  // The line is "<time>  <kind...> <series>  <rest>" (AlertToText).
  const std::size_t time_end = text.find("  ");
  const std::size_t series_at = time_end == std::string::npos
                                    ? std::string::npos
                                    : text.find(alert.series, time_end);
  if (series_at == std::string::npos) return text;
  const std::size_t series_end = series_at + alert.series.size();
  std::string out;
  out.reserve(text.size() + 32);
  out += kDim + text.substr(0, time_end) + kReset;
  out += KindColour(alert) + text.substr(time_end, series_at - time_end) + kReset;
  out += kBold + text.substr(series_at, alert.series.size()) + kReset;
  out += text.substr(series_end);
  return out;
}

}  // namespace plumbline
