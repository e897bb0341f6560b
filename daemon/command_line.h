// A small command-line reader for Plumbline's subcommands: `--name value`,
// `--name=value`, repeatable options and boolean switches. Not thread-safe;
// used once at start-up.
#pragma once

#include <map>
#include <optional>
#include <set>
#include <string>
#include <vector>

#include "detectors/status.h"

namespace plumbline {

struct OptionSpec {
  std::string name;         // without the leading dashes
  bool takes_value = true;  // false: a switch such as --quiet
  bool repeatable = false;  // true: may be given several times (--input A --input B)
  std::string help;         // one line for --help
  std::string value_name = "VALUE";
};

class ParsedArgs {
 public:
  bool Has(const std::string& name) const { return values_.count(name) > 0; }
  // The last value given for name, if any.
  std::optional<std::string> Get(const std::string& name) const;
  const std::vector<std::string>& GetAll(const std::string& name) const;

 private:
  friend StatusOr<ParsedArgs> ParseArgs(const std::vector<std::string>&,
                                        const std::vector<OptionSpec>&);
  std::map<std::string, std::vector<std::string>> values_;
};

// Parses args against specs. `--help` is always accepted as a switch.
// Fails with InvalidArgument naming the offending word on unknown options,
// missing values, repeated non-repeatable options and stray positional words.
StatusOr<ParsedArgs> ParseArgs(const std::vector<std::string>& args,
                               const std::vector<OptionSpec>& specs);

// The option list as printed under a subcommand's --help.
std::string FormatOptions(const std::vector<OptionSpec>& specs);

}  // namespace plumbline
