// `plumbline check --config FILE`: validates a config file without starting
// anything. Prints "FILE: ok (N profiles)" and one line per profile on success;
// then the service settings `serve` would run with (listeners, shards, state,
// inputs, sinks); otherwise every error as FILE:LINE:COLUMN: message on stderr.
#include <cstdio>
#include <string>
#include <vector>

#include "config/config.h"
#include "daemon/command_line.h"
#include "daemon/subcommands.h"

namespace plumbline {

int RunCheck(const Args& args) {
  const std::vector<OptionSpec> specs = {
      {"config", true, false, "the config file to validate", "FILE"},
  };
  StatusOr<ParsedArgs> parsed = ParseArgs(args, specs);
  if (!parsed.ok()) {
    std::fprintf(stderr, "plumbline check: %s\n", parsed.status().message().c_str());
    return 2;
  }
  if (parsed->Has("help")) {
    std::printf(
        "usage: plumbline check --config FILE\n\n"
        "Validates a config file: prints FILE: ok, one line per profile and the\n"
        "service settings (listeners, shards, state, inputs, sinks), or every\n"
        "problem as FILE:LINE:COLUMN: message. Exit status 0 when valid, 1 when not,\n"
        "2 for a usage error.\n\noptions:\n%s",
        FormatOptions(specs).c_str());
    return 0;
  }
  const std::optional<std::string> path = parsed->Get("config");
  if (!path) {
    std::fprintf(stderr, "plumbline check: --config FILE is required (see --help)\n");
    return 2;
  }
  Config config;
  const std::vector<ConfigError> errors = ParseConfigFile(*path, &config);
  if (!errors.empty()) {
    for (const ConfigError& error : errors) {
      std::fprintf(stderr, "%s\n", error.ToString().c_str());
    }
    return 1;
  }
  std::printf("%s: ok (%zu profile%s)\n", path->c_str(), config.series.size(),
              config.series.size() == 1 ? "" : "s");
  for (std::size_t i = 0; i < config.series.size(); ++i) {
    std::printf("  %zu. %s\n", i + 1, DescribeProfile(config.series[i]).c_str());
  }
  for (const std::string& line : DescribeService(config.service)) {
    std::printf("  %s\n", line.c_str());
  }
  return 0;
}

}  // namespace plumbline
