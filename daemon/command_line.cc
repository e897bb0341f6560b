#include "daemon/command_line.h"

#include <algorithm>

namespace plumbline {

std::optional<std::string> ParsedArgs::Get(const std::string& name) const {
  auto it = values_.find(name);
  if (it == values_.end() || it->second.empty()) return std::nullopt;
  return it->second.back();
}

const std::vector<std::string>& ParsedArgs::GetAll(const std::string& name) const {
  static const std::vector<std::string> kEmpty;
  auto it = values_.find(name);
  return it == values_.end() ? kEmpty : it->second;
}

StatusOr<ParsedArgs> ParseArgs(const std::vector<std::string>& args,
                               const std::vector<OptionSpec>& specs) {
  ParsedArgs parsed;
  for (size_t i = 0; i < args.size(); ++i) {
    const std::string& word = args[i];
    if (word.rfind("--", 0) != 0 || word.size() == 2) {
      return Status::InvalidArgument("unexpected argument '" + word + "'");
    }
    std::string name = word.substr(2);
    std::optional<std::string> inline_value;
    if (auto eq = name.find('='); eq != std::string::npos) {
      inline_value = name.substr(eq + 1);
      name = name.substr(0, eq);
    }
    if (name == "help") {
      parsed.values_["help"].push_back("");
      continue;
    }
    auto spec = std::find_if(specs.begin(), specs.end(),
                             [&](const OptionSpec& s) { return s.name == name; });
    if (spec == specs.end()) {
      return Status::InvalidArgument("unknown option '--" + name + "' (see --help)");
    }
    if (!spec->repeatable && parsed.Has(name)) {
      return Status::InvalidArgument("option '--" + name + "' given twice");
    }
    if (!spec->takes_value) {
      if (inline_value) {
        return Status::InvalidArgument("option '--" + name + "' takes no value");
      }
      parsed.values_[name].push_back("");
      continue;
    }
    if (!inline_value) {
      if (i + 1 >= args.size()) {
        return Status::InvalidArgument("option '--" + name + "' needs a " +
                                       spec->value_name);
      }
      inline_value = args[++i];
    }
    parsed.values_[name].push_back(*inline_value);
  }
  return parsed;
}

std::string FormatOptions(const std::vector<OptionSpec>& specs) {
  std::string out;
  for (const OptionSpec& spec : specs) {
    std::string left = "  --" + spec.name;
    if (spec.takes_value) left += " " + spec.value_name;
    if (left.size() < 26) left.resize(26, ' ');
    else left += "  ";
    out += left + spec.help + (spec.repeatable ? " (repeatable)" : "") + "\n";
  }
  out += "  --help                  show this help\n";
  return out;
}

}  // namespace plumbline
