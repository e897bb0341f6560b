#include "daemon/text.h"

#include <charconv>
#include <cmath>

namespace plumbline {

std::size_t Utf8SequenceLength(const unsigned char* p, std::size_t n) {
  const unsigned c = p[0];
  if (c < 0x80) return 1;
  auto in = [](unsigned byte, unsigned lo, unsigned hi) {
    return byte >= lo && byte <= hi;
  };
  if (c < 0xC2) return 0;  // a continuation byte, or an overlong 2-byte lead
  if (c < 0xE0) return n >= 2 && in(p[1], 0x80, 0xBF) ? 2 : 0;
  if (c < 0xF0) {
    if (n < 3) return 0;
    const unsigned lo = c == 0xE0 ? 0xA0 : 0x80;  // E0: no overlongs
    const unsigned hi = c == 0xED ? 0x9F : 0xBF;  // ED: no surrogates
    return in(p[1], lo, hi) && in(p[2], 0x80, 0xBF) ? 3 : 0;
  }
  if (c < 0xF5) {
    if (n < 4) return 0;
    const unsigned lo = c == 0xF0 ? 0x90 : 0x80;  // F0: no overlongs
    const unsigned hi = c == 0xF4 ? 0x8F : 0xBF;  // F4: nothing above U+10FFFF
    return in(p[1], lo, hi) && in(p[2], 0x80, 0xBF) && in(p[3], 0x80, 0xBF) ? 4 : 0;
  }
  return 0;
}

void AppendJsonString(std::string_view text, std::string* out) {
  out->push_back('"');
  for (std::size_t i = 0; i < text.size();) {
    const auto c = static_cast<unsigned char>(text[i]);
    if (c >= 0x80) {
      const std::size_t length = Utf8SequenceLength(
          reinterpret_cast<const unsigned char*>(text.data()) + i, text.size() - i);
      if (length == 0) {
        *out += "\xEF\xBF\xBD";  // U+FFFD REPLACEMENT CHARACTER
        ++i;
      } else {
        out->append(text.substr(i, length));
        i += length;
      }
      continue;
    }
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
        if (c < 0x20 || c == 0x7F) {
          static constexpr char kHex[] = "0123456789abcdef";
          *out += "\\u00";
          out->push_back(kHex[c >> 4]);
          out->push_back(kHex[c & 0xF]);
        } else {
          out->push_back(static_cast<char>(c));
        }
    }
    ++i;
  }
  out->push_back('"');
}

void AppendJsonNumber(double value, std::string* out) {
  if (!std::isfinite(value)) {
    *out += "null";
    return;
  }
  char buffer[32];
  const auto result = std::to_chars(buffer, buffer + sizeof buffer, value);
  out->append(buffer, result.ptr);
}

}  // namespace plumbline
