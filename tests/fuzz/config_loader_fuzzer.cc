// libFuzzer target for the YAML config loader (config/config.h).
//
// Any text must give either a config whose every part passes its own
// IsValid rules, or at least one error with a sane position and a message;
// never a crash, a hang, an exception or a sanitizer report.
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <string>
#include <string_view>
#include <vector>

#include "config/config.h"

namespace {
void Require(bool condition) {
  if (!condition) std::abort();
}
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  plumbline::Config config;
  const std::vector<plumbline::ConfigError> errors =
      plumbline::ParseConfigText(text, "fuzz.yaml", &config);
  if (errors.empty()) {
    std::string why;
    Require(config.service.IsValid(&why));
    for (const plumbline::ProfileOptions& profile : config.series) {
      Require(profile.IsValid(&why));
    }
    return 0;
  }
  for (const plumbline::ConfigError& error : errors) {
    Require(!error.message.empty());
    Require(error.line >= 0 && error.column >= 0);
    Require(!error.ToString().empty());
  }
  return 0;
}
