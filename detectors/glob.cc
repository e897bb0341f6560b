#include "detectors/glob.h"

#include <cstdint>
#include <string>
#include <utility>
#include <vector>

namespace plumbline {
namespace {

// One UTF-8 code point at text[i]: its value and its length in bytes. A byte
// that does not start a valid, shortest-form sequence counts as one character
// whose value is the byte itself plus 0x110000 (outside Unicode, so it never
// equals a real code point but still compares equal to the same stray byte).
struct CodePoint {
  std::uint32_t value;
  std::size_t length;
};

CodePoint DecodeAt(std::string_view text, std::size_t i) {
  const auto byte = [&](std::size_t k) { return static_cast<unsigned char>(text[k]); };
  const unsigned char lead = byte(i);
  const CodePoint stray{0x110000u + lead, 1};
  if (lead < 0x80) return {lead, 1};
  std::size_t length;
  std::uint32_t value;
  std::uint32_t min_value;
  if ((lead & 0xE0) == 0xC0) {
    length = 2, value = lead & 0x1F, min_value = 0x80;
  } else if ((lead & 0xF0) == 0xE0) {
    length = 3, value = lead & 0x0F, min_value = 0x800;
  } else if ((lead & 0xF8) == 0xF0) {
    length = 4, value = lead & 0x07, min_value = 0x10000;
  } else {
    return stray;
  }
  if (i + length > text.size()) return stray;
  for (std::size_t k = 1; k < length; ++k) {
    if ((byte(i + k) & 0xC0) != 0x80) return stray;
    value = (value << 6) | (byte(i + k) & 0x3F);
  }
  if (value < min_value || value > 0x10FFFF || (value >= 0xD800 && value <= 0xDFFF)) {
    return stray;
  }
  return {value, length};
}

enum class TokenKind {
  kLiteral,     // one code point, compared exactly
  kAnyOne,      // '?'
  kClass,       // [...] or [!...]
  kStar,        // '*': a run without '/'
  kDoubleStar,  // '**': any run
  kSegments,    // '**/' at a segment start: empty, or any run ending in '/'
};

struct Token {
  TokenKind kind;
  std::uint32_t value = 0;       // kLiteral: the code point
  bool negated = false;          // kClass
  std::size_t ranges_begin = 0;  // kClass: [begin, end) in Pattern::ranges
  std::size_t ranges_end = 0;
};

struct Pattern {
  std::vector<Token> tokens;
  std::vector<std::pair<std::uint32_t, std::uint32_t>> ranges;  // inclusive
};

Status Error(std::size_t offset, const std::string& what) {
  return Status::InvalidArgument("glob: " + what + " at offset " +
                                 std::to_string(offset));
}

// Parses pattern into tokens; the same pass validates it.
Status Parse(std::string_view pattern, Pattern* out) {
  if (pattern.empty()) {
    return Status::InvalidArgument(
        "glob: empty pattern (use \"*\" or \"**\" to match every series)");
  }
  std::size_t i = 0;
  while (i < pattern.size()) {
    const char c = pattern[i];
    if (c == '*') {
      std::size_t stars = 0;
      while (i < pattern.size() && pattern[i] == '*') ++stars, ++i;
      if (stars == 1) {
        out->tokens.push_back({TokenKind::kStar});
        continue;
      }
      const bool at_segment_start =
          out->tokens.empty() || (out->tokens.back().kind == TokenKind::kLiteral &&
                                  out->tokens.back().value == '/');
      if (at_segment_start && i < pattern.size() && pattern[i] == '/') {
        ++i;  // the '/' belongs to the token
        out->tokens.push_back({TokenKind::kSegments});
      } else {
        out->tokens.push_back({TokenKind::kDoubleStar});
      }
      continue;
    }
    if (c == '?') {
      out->tokens.push_back({TokenKind::kAnyOne});
      ++i;
      continue;
    }
    if (c == ']') {
      return Error(i, "unmatched ']' (write \\] for a literal bracket)");
    }
    if (c == '\\') {
      if (i + 1 >= pattern.size()) {
        return Error(i, "lone '\\' at the end (write \\\\ for a literal backslash)");
      }
      const CodePoint cp = DecodeAt(pattern, i + 1);
      out->tokens.push_back({TokenKind::kLiteral, cp.value});
      i += 1 + cp.length;
      continue;
    }
    if (c == '[') {
      const std::size_t open = i;
      Token token{TokenKind::kClass};
      token.ranges_begin = out->ranges.size();
      ++i;
      if (i < pattern.size() && (pattern[i] == '!' || pattern[i] == '^')) {
        token.negated = true;
        ++i;
      }
      bool first = true;
      bool closed = false;
      while (i < pattern.size()) {
        if (pattern[i] == ']' && !first) {
          closed = true;
          ++i;
          break;
        }
        first = false;
        // One member: a character (maybe escaped), maybe the start of a range.
        auto read_member = [&](std::uint32_t* value) -> Status {
          const std::size_t at = i;
          if (pattern[i] == '\\') {
            if (i + 1 >= pattern.size()) return Error(open, "unclosed '['");
            ++i;
          }
          const CodePoint cp = DecodeAt(pattern, i);
          i += cp.length;
          if (cp.value == '/') {
            return Error(at, "'/' inside a character class (a class never matches '/')");
          }
          *value = cp.value;
          return Status::Ok();
        };
        std::uint32_t low = 0;
        const std::size_t low_at = i;
        if (Status s = read_member(&low); !s.ok()) return s;
        std::uint32_t high = low;
        if (i + 1 < pattern.size() && pattern[i] == '-' && pattern[i + 1] != ']') {
          ++i;
          if (Status s = read_member(&high); !s.ok()) return s;
          if (high < low) {
            return Error(low_at, "reversed range '" +
                                     std::string(pattern.substr(low_at, i - low_at)) +
                                     "' in a character class");
          }
        }
        out->ranges.emplace_back(low, high);
      }
      if (!closed) return Error(open, "unclosed '[' (write \\[ for a literal bracket)");
      token.ranges_end = out->ranges.size();
      out->tokens.push_back(token);
      continue;
    }
    const CodePoint cp = DecodeAt(pattern, i);
    out->tokens.push_back({TokenKind::kLiteral, cp.value});
    i += cp.length;
  }
  return Status::Ok();
}

bool MatchesOne(const Pattern& pattern, const Token& token, std::uint32_t ch) {
  switch (token.kind) {
    case TokenKind::kLiteral:
      return ch == token.value;
    case TokenKind::kAnyOne:
      return ch != '/';
    case TokenKind::kClass: {
      if (ch == '/') return false;
      bool member = false;
      for (std::size_t r = token.ranges_begin; r < token.ranges_end; ++r) {
        if (ch >= pattern.ranges[r].first && ch <= pattern.ranges[r].second) {
          member = true;
          break;
        }
      }
      return member != token.negated;
    }
    default:
      return false;
  }
}

// The classic wildcard walk, extended to two kinds of star. On a mismatch the
// most recent '*' takes one more character if it can (it cannot take '/');
// otherwise the most recent '**' (or '**/') takes more and everything after it
// is matched again. Passing a '**' forgets earlier backtrack points: anything a
// later start of the earlier stars could match, the '**' can absorb.
bool Match(const Pattern& pattern, std::string_view name) {
  constexpr std::size_t kNone = static_cast<std::size_t>(-1);
  const std::vector<Token>& tokens = pattern.tokens;
  std::size_t p = 0;  // next token
  std::size_t t = 0;  // next byte of name
  std::size_t star_p = kNone, star_t = 0;
  std::size_t deep_p = kNone, deep_t = 0;
  bool deep_segments = false;
  while (true) {
    if (p < tokens.size()) {
      const Token& token = tokens[p];
      if (token.kind == TokenKind::kStar) {
        star_p = ++p;
        star_t = t;
        continue;
      }
      if (token.kind == TokenKind::kDoubleStar || token.kind == TokenKind::kSegments) {
        deep_segments = token.kind == TokenKind::kSegments;
        deep_p = ++p;
        deep_t = t;
        star_p = kNone;
        continue;
      }
      if (t < name.size()) {
        const CodePoint cp = DecodeAt(name, t);
        if (MatchesOne(pattern, token, cp.value)) {
          ++p;
          t += cp.length;
          continue;
        }
      }
    } else if (t == name.size()) {
      return true;
    }
    // Mismatch: widen the latest star that can still grow.
    if (star_p != kNone && star_t < name.size() && name[star_t] != '/') {
      star_t += DecodeAt(name, star_t).length;
      p = star_p;
      t = star_t;
      continue;
    }
    if (deep_p != kNone && deep_t < name.size()) {
      if (deep_segments) {
        const std::size_t slash = name.find('/', deep_t);
        if (slash == std::string_view::npos) return false;
        deep_t = slash + 1;
      } else {
        deep_t += DecodeAt(name, deep_t).length;
      }
      p = deep_p;
      t = deep_t;
      star_p = kNone;
      continue;
    }
    return false;
  }
}

}  // namespace

bool GlobMatch(std::string_view pattern, std::string_view name) {
  Pattern parsed;
  if (!Parse(pattern, &parsed).ok()) return false;
  return Match(parsed, name);
}

Status ValidateGlob(std::string_view pattern) {
  Pattern parsed;
  return Parse(pattern, &parsed);
}

}  // namespace plumbline
