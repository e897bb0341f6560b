// plumbline: watches streams of readings and raises an alert, with an estimate
// of when the change began, whenever a stream leaves its regime.
#include <cstdio>
#include <cstring>
#include <string>
#include <vector>

#include "daemon/subcommands.h"
#include "plumbline_version.h"

namespace plumbline {
namespace {

struct Subcommand {
  const char* name;
  const char* usage;
  const char* summary;
  int (*run)(const Args&);
};

constexpr Subcommand kSubcommands[] = {
    {"serve", "serve --config FILE", "run the daemon", RunServe},
    {"replay", "replay --config FILE --input FILE [--input FILE ...] --alerts FILE",
     "run the pipeline over reading files and write alerts", RunReplay},
    {"check", "check --config FILE", "validate a config file", RunCheck},
    {"forecast", "forecast --config FILE --input FILE ... --series NAME [--at TIME ...]",
     "replay reading files, then forecast one series", RunForecast},
    {"calibrate", "calibrate --arl0 N --shift D",
     "print detector thresholds for a target false-alarm rate", RunCalibrate},
};

constexpr char kCaution[] =
    "Plumbline's alerts are advisory. It is not a safety system and does not replace\n"
    "the temperature records and alarms that food-safety rules require, nor machine\n"
    "guards and interlocks.\n";

void PrintHelp() {
  std::printf(
      "plumbline %s: watch streams of readings and alert when one changes regime\n\n"
      "usage: plumbline COMMAND [OPTIONS]\n\ncommands:\n",
      PLUMBLINE_VERSION);
  for (const Subcommand& sub : kSubcommands) {
    std::printf("  %-11s %s\n", sub.name, sub.summary);
  }
  std::printf(
      "\n  plumbline COMMAND --help   options of one command\n"
      "  plumbline --version        print the version\n\n%s",
      kCaution);
}

}  // namespace
}  // namespace plumbline

int main(int argc, char** argv) {
  using namespace plumbline;
  if (argc < 2 || std::strcmp(argv[1], "--help") == 0 || std::strcmp(argv[1], "-h") == 0) {
    PrintHelp();
    return argc < 2 ? 2 : 0;
  }
  if (std::strcmp(argv[1], "--version") == 0) {
    std::printf("plumbline %s\n", PLUMBLINE_VERSION);
    return 0;
  }
  for (const Subcommand& sub : kSubcommands) {
    if (std::strcmp(argv[1], sub.name) == 0) {
      return sub.run(Args(argv + 2, argv + argc));
    }
  }
  std::fprintf(stderr, "plumbline: unknown command '%s' (try plumbline --help)\n", argv[1]);
  return 2;
}
