#include "daemon/message_payload.h"

#include <charconv>
#include <cmath>

namespace plumbline {

bool BareNumber(std::string_view payload, double* value) {
  constexpr std::string_view kBlanks = " \t\r\n";
  const std::size_t begin = payload.find_first_not_of(kBlanks);
  if (begin == std::string_view::npos) return false;
  payload = payload.substr(begin, payload.find_last_not_of(kBlanks) - begin + 1);
  if (!payload.empty() && payload.front() == '+') payload.remove_prefix(1);
  double number = 0.0;
  const auto [end, error] =
      std::from_chars(payload.data(), payload.data() + payload.size(), number);
  if (error != std::errc() || end != payload.data() + payload.size() ||
      !std::isfinite(number)) {
    return false;
  }
  *value = number;
  return true;
}

}  // namespace plumbline
