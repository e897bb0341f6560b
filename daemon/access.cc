#include "daemon/access.h"

#include <cstdlib>
#include <fstream>

namespace plumbline {

StatusOr<std::string> LoadAccessToken(const AccessOptions& options) {
  if (!options.enabled()) return std::string();
  std::string token;
  std::string where;
  if (!options.token_file.empty()) {
    where = "token_file " + options.token_file;
    std::ifstream in(options.token_file);
    if (!in) return Status::InvalidArgument("access: cannot read " + where);
    std::getline(in, token);
    if (!token.empty() && token.back() == '\r') token.pop_back();
  } else {
    where = "token_env " + options.token_env;
    const char* value = std::getenv(options.token_env.c_str());
    if (value == nullptr)
      return Status::InvalidArgument("access: " + where + " is not set");
    token = value;
  }
  if (token.empty())
    return Status::InvalidArgument("access: the token in " + where + " is empty");
  for (const char c : token) {
    const auto byte = static_cast<unsigned char>(c);
    if (byte <= 0x20 || byte == 0x7F) {
      return Status::InvalidArgument("access: the token in " + where +
                                     " holds a space or a control character");
    }
  }
  return token;
}

bool TokenMatches(std::string_view given, std::string_view expected) {
  // Every byte of `given` is looked at whatever it holds; a length difference
  // is folded in at the end (the expected length is no secret worth hiding).
  unsigned difference = given.size() == expected.size() ? 0u : 1u;
  for (std::size_t i = 0; i < given.size(); ++i) {
    const char wanted = expected.empty() ? '\0' : expected[i % expected.size()];
    difference |= static_cast<unsigned char>(given[i] ^ wanted);
  }
  return difference == 0 && !expected.empty();
}

bool BearerMatches(std::string_view authorization, std::string_view expected) {
  constexpr std::string_view kScheme = "bearer ";
  if (authorization.size() < kScheme.size()) return false;
  for (std::size_t i = 0; i < kScheme.size(); ++i) {
    const char c = authorization[i];
    if ((c >= 'A' && c <= 'Z' ? static_cast<char>(c - 'A' + 'a') : c) != kScheme[i])
      return false;
  }
  std::string_view token = authorization.substr(kScheme.size());
  while (!token.empty() && token.front() == ' ') token.remove_prefix(1);
  while (!token.empty() && token.back() == ' ') token.remove_suffix(1);
  return TokenMatches(token, expected);
}

}  // namespace plumbline
