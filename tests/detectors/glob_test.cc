// Tests for detectors/glob.h. The syntax is common practice for path globs
// (shell '*', '?', '[...]', and the '**' of build tools); no published source.
#include "detectors/glob.h"

#include <gtest/gtest.h>

#include <string>
#include <vector>

#include "detectors/random.h"

namespace plumbline {
namespace {

TEST(GlobTest, StarMatchesOneSegmentOfTheDesignExample) {
  EXPECT_TRUE(GlobMatch("coldstore/*/temp_c", "coldstore/freezer-1/temp_c"));
  EXPECT_TRUE(GlobMatch("coldstore/*/temp_c", "coldstore/freezer-2/temp_c"));
  EXPECT_FALSE(GlobMatch("coldstore/*/temp_c", "coldstore/a/b/temp_c"));
  EXPECT_FALSE(GlobMatch("coldstore/*/temp_c", "coldstore/freezer-1/temp_c2"));
  EXPECT_FALSE(GlobMatch("coldstore/*/temp_c", "harbour/freezer-1/temp_c"));
  EXPECT_FALSE(GlobMatch("coldstore/*/temp_c", "coldstore/compressor-2/power_kw"));
  // '*' may be empty.
  EXPECT_TRUE(GlobMatch("coldstore/*/temp_c", "coldstore//temp_c"));
}

TEST(GlobTest, WholeNameMustMatchNotAPart) {
  EXPECT_FALSE(GlobMatch("temp", "temp_c"));
  EXPECT_FALSE(GlobMatch("temp_c", "x/temp_c"));
  EXPECT_TRUE(GlobMatch("temp_c", "temp_c"));
}

TEST(GlobTest, StarNeverCrossesSlash) {
  EXPECT_TRUE(GlobMatch("*", "anything-at-all"));
  EXPECT_FALSE(GlobMatch("*", "a/b"));
  EXPECT_TRUE(GlobMatch("*/*", "a/b"));
  EXPECT_TRUE(GlobMatch("a*b*c", "aXXbYYc"));
  EXPECT_FALSE(GlobMatch("a*c", "ab/c"));
  EXPECT_TRUE(GlobMatch("*_kw", "power_kw"));
  EXPECT_TRUE(GlobMatch("*", ""));
}

TEST(GlobTest, DoubleStarCrossesSlashes) {
  EXPECT_TRUE(GlobMatch("**", "a/b/c"));
  EXPECT_TRUE(GlobMatch("**", ""));
  EXPECT_TRUE(GlobMatch("coldstore/**", "coldstore/freezer-1/temp_c"));
  EXPECT_TRUE(GlobMatch("coldstore/**", "coldstore/"));
  EXPECT_FALSE(GlobMatch("coldstore/**", "coldstore"));
  EXPECT_TRUE(GlobMatch("**_kwh", "coldstore/main/energy_kwh"));
  EXPECT_TRUE(GlobMatch("cold**kwh", "coldstore/main/energy_kwh"));
  EXPECT_FALSE(GlobMatch("**_kwh", "coldstore/main/energy_kw"));
}

TEST(GlobTest, DoubleStarSlashMatchesZeroOrMoreWholeSegments) {
  EXPECT_TRUE(GlobMatch("coldstore/**/temp_c", "coldstore/temp_c"));
  EXPECT_TRUE(GlobMatch("coldstore/**/temp_c", "coldstore/freezer-1/temp_c"));
  EXPECT_TRUE(GlobMatch("coldstore/**/temp_c", "coldstore/a/b/c/temp_c"));
  EXPECT_FALSE(GlobMatch("coldstore/**/temp_c", "coldstore/a/xtemp_c"));
  EXPECT_FALSE(GlobMatch("coldstore/**/temp_c", "coldstoretemp_c"));
  EXPECT_TRUE(GlobMatch("**/temp_c", "temp_c"));
  EXPECT_TRUE(GlobMatch("**/temp_c", "a/b/temp_c"));
  EXPECT_FALSE(GlobMatch("**/temp_c", "a/btemp_c"));
  // Not at a segment start: plain '**', so "x**/y" needs a '/' before y.
  EXPECT_TRUE(GlobMatch("x**/y", "xa/b/y"));
  EXPECT_FALSE(GlobMatch("x**/y", "xy"));
}

TEST(GlobTest, QuestionMarkIsOneCharacterOtherThanSlash) {
  EXPECT_TRUE(GlobMatch("freezer-?", "freezer-1"));
  EXPECT_FALSE(GlobMatch("freezer-?", "freezer-12"));
  EXPECT_FALSE(GlobMatch("freezer-?", "freezer-"));
  EXPECT_FALSE(GlobMatch("a?b", "a/b"));
}

TEST(GlobTest, QuestionMarkTakesOneUtf8CodePointNotOneByte) {
  // "\xc3\xa9" is U+00E9 (two bytes); "\xe2\x82\xac" is U+20AC (three bytes).
  EXPECT_TRUE(GlobMatch("caf?", "caf\xc3\xa9"));
  EXPECT_FALSE(GlobMatch("caf??", "caf\xc3\xa9"));
  EXPECT_TRUE(GlobMatch("?", "\xe2\x82\xac"));
  EXPECT_TRUE(GlobMatch("[\xc3\xa9\xe2\x82\xac]", "\xe2\x82\xac"));
  EXPECT_FALSE(GlobMatch("[!\xc3\xa9]", "\xc3\xa9"));
  // An invalid byte counts as one character.
  EXPECT_TRUE(GlobMatch("a?b", std::string("a\xff") + "b"));
}

TEST(GlobTest, CharacterClassesSetsRangesAndNegation) {
  EXPECT_TRUE(GlobMatch("freezer-[12]", "freezer-1"));
  EXPECT_TRUE(GlobMatch("freezer-[12]", "freezer-2"));
  EXPECT_FALSE(GlobMatch("freezer-[12]", "freezer-3"));
  EXPECT_TRUE(GlobMatch("[a-c]x", "bx"));
  EXPECT_FALSE(GlobMatch("[a-c]x", "dx"));
  EXPECT_TRUE(GlobMatch("[a-c0-9]", "7"));
  EXPECT_TRUE(GlobMatch("[!x]", "y"));
  EXPECT_FALSE(GlobMatch("[!x]", "x"));
  EXPECT_TRUE(GlobMatch("[^x]", "y"));
  EXPECT_FALSE(GlobMatch("[!x]", "/"));
  EXPECT_FALSE(GlobMatch("[!x]", ""));
  // ']' first in a class is a member; '-' first or last is literal.
  EXPECT_TRUE(GlobMatch("[]a]", "]"));
  EXPECT_TRUE(GlobMatch("[!]]", "a"));
  EXPECT_FALSE(GlobMatch("[!]]", "]"));
  EXPECT_TRUE(GlobMatch("[a-]", "-"));
  EXPECT_TRUE(GlobMatch("[-a]", "-"));
  EXPECT_TRUE(GlobMatch("[\\]]", "]"));
}

TEST(GlobTest, BackslashEscapesSpecialCharacters) {
  EXPECT_TRUE(GlobMatch("a\\*b", "a*b"));
  EXPECT_FALSE(GlobMatch("a\\*b", "aXb"));
  EXPECT_TRUE(GlobMatch("a\\?", "a?"));
  EXPECT_FALSE(GlobMatch("a\\?", "ab"));
  EXPECT_TRUE(GlobMatch("\\[x\\]", "[x]"));
  EXPECT_TRUE(GlobMatch("a\\\\b", "a\\b"));
  EXPECT_TRUE(GlobMatch("\\a", "a"));
}

TEST(GlobTest, InvalidPatternMatchesNothing) {
  EXPECT_FALSE(GlobMatch("[abc", "[abc"));
  EXPECT_FALSE(GlobMatch("[abc", "a"));
  EXPECT_FALSE(GlobMatch("", ""));
}

TEST(GlobTest, ValidateGlobAcceptsWellFormedPatterns) {
  for (const char* pattern :
       {"*", "**", "coldstore/*/temp_c", "coldstore/**/temp_c", "a?c", "[a-z0-9_]x",
        "[!x]", "[]]", "\\[literal\\]", "\\*", "a-b"}) {
    EXPECT_TRUE(ValidateGlob(pattern).ok())
        << pattern << ": " << ValidateGlob(pattern).message();
  }
}

TEST(GlobTest, ValidateGlobNamesTheProblemAndItsOffset) {
  struct Case {
    const char* pattern;
    const char* expected;
  };
  for (const Case& c : {
           Case{"", "empty pattern"},
           Case{"coldstore/[ab",
                "unclosed '[' (write \\[ for a literal bracket) at offset 10"},
           Case{"[]", "unclosed '['"},
           Case{"a]", "unmatched ']' (write \\] for a literal bracket) at offset 1"},
           Case{"x[z-a]", "reversed range 'z-a' in a character class at offset 2"},
           Case{"[a/b]",
                "'/' inside a character class (a class never matches '/') at offset 2"},
           Case{"ab\\",
                "lone '\\' at the end (write \\\\ for a literal backslash) at offset 2"},
       }) {
    Status status = ValidateGlob(c.pattern);
    ASSERT_FALSE(status.ok()) << c.pattern;
    EXPECT_EQ(status.code(), Status::Code::kInvalidArgument);
    EXPECT_NE(status.message().find(c.expected), std::string::npos)
        << c.pattern << " -> " << status.message();
  }
}

TEST(GlobTest, NoExponentialBlowUpOnPathologicalPatterns) {
  // With naive recursion "a*a*a*...b" against "aaaa...a" takes exponential time;
  // the iterative walk finishes at once. A hang here is the failure mode.
  const std::string name(200, 'a');
  std::string pattern;
  for (int i = 0; i < 30; ++i) pattern += "a*";
  EXPECT_FALSE(GlobMatch(pattern + "b", name));
  EXPECT_TRUE(GlobMatch(pattern, name));
  std::string deep;
  for (int i = 0; i < 30; ++i) deep += "a**";
  EXPECT_FALSE(GlobMatch(deep + "b", name));
  EXPECT_TRUE(GlobMatch(deep, name));
}

// ---- Cross-check against an independent dynamic-programming matcher ----
//
// Patterns are drawn from a small alphabet so that every feature collides often.
// The reference works on the generator's own token list, so it shares no parsing
// code with the implementation.

enum class RefKind { kChar, kAny, kClassAb, kClassNotA, kStar, kDoubleStar, kSegments };
struct RefToken {
  RefKind kind;
  char c = 0;
};

bool ReferenceMatch(const std::vector<RefToken>& tokens, const std::string& name) {
  const size_t n = tokens.size(), m = name.size();
  // can[p][t]: tokens[p..] match name[t..].
  std::vector<std::vector<char>> can(n + 1, std::vector<char>(m + 1, 0));
  can[n][m] = 1;
  for (size_t p = n; p-- > 0;) {
    for (size_t t = m + 1; t-- > 0;) {
      const RefToken& tok = tokens[p];
      bool ok = false;
      switch (tok.kind) {
        case RefKind::kChar:
          ok = t < m && name[t] == tok.c && can[p + 1][t + 1];
          break;
        case RefKind::kAny:
          ok = t < m && name[t] != '/' && can[p + 1][t + 1];
          break;
        case RefKind::kClassAb:
          ok = t < m && (name[t] == 'a' || name[t] == 'b') && can[p + 1][t + 1];
          break;
        case RefKind::kClassNotA:
          ok = t < m && name[t] != 'a' && name[t] != '/' && can[p + 1][t + 1];
          break;
        case RefKind::kStar:
          for (size_t k = t; k <= m && !ok; ++k) {
            if (k > t && name[k - 1] == '/') break;
            ok = can[p + 1][k];
          }
          break;
        case RefKind::kDoubleStar:
          for (size_t k = t; k <= m && !ok; ++k) ok = can[p + 1][k];
          break;
        case RefKind::kSegments:
          for (size_t k = t; k <= m && !ok; ++k) {
            if (k > t && name[k - 1] != '/') continue;
            ok = can[p + 1][k];
          }
          break;
      }
      can[p][t] = ok;
    }
  }
  return can[0][0];
}

TEST(GlobTest, AgreesWithDynamicProgrammingReferenceOnRandomCases) {
  Random random(20260301);
  int matches = 0;
  const int kCases = 200000;
  for (int i = 0; i < kCases; ++i) {
    std::vector<RefToken> tokens;
    std::string pattern;
    const int length = 1 + static_cast<int>(random.Uniform() * 8);
    for (int j = 0; j < length; ++j) {
      const bool segment_start =
          tokens.empty() ||
          (tokens.back().kind == RefKind::kChar && tokens.back().c == '/');
      const bool after_star =
          !tokens.empty() && (tokens.back().kind == RefKind::kStar ||
                              tokens.back().kind == RefKind::kDoubleStar ||
                              tokens.back().kind == RefKind::kSegments);
      const double u = random.Uniform();
      if (u < 0.45) {
        const char c = "ab/"[static_cast<int>(random.Uniform() * 3)];
        tokens.push_back({RefKind::kChar, c});
        pattern += c;
      } else if (u < 0.55) {
        tokens.push_back({RefKind::kAny});
        pattern += '?';
      } else if (u < 0.6) {
        tokens.push_back({RefKind::kClassAb});
        pattern += "[ab]";
      } else if (u < 0.65) {
        tokens.push_back({RefKind::kClassNotA});
        pattern += "[!a]";
      } else if (after_star) {
        // Adjacent stars would merge into one token; draw a literal instead.
        tokens.push_back({RefKind::kChar, 'b'});
        pattern += 'b';
      } else if (u < 0.85) {
        tokens.push_back({RefKind::kStar});
        pattern += '*';
      } else if (segment_start && random.Uniform() < 0.5) {
        tokens.push_back({RefKind::kSegments});
        pattern += "**/";
      } else {
        tokens.push_back({RefKind::kDoubleStar});
        pattern += "**";
        // "**" then '/' at a segment start would parse as the segments token.
        if (segment_start) {
          tokens.push_back({RefKind::kChar, 'a'});
          pattern += 'a';
        }
      }
    }
    std::string name;
    const int name_length = static_cast<int>(random.Uniform() * 10);
    for (int j = 0; j < name_length; ++j)
      name += "ab/c"[static_cast<int>(random.Uniform() * 4)];
    const bool expected = ReferenceMatch(tokens, name);
    matches += expected;
    ASSERT_EQ(GlobMatch(pattern, name), expected)
        << "pattern '" << pattern << "' name '" << name << "'";
  }
  // Both outcomes are well represented, so the comparison is not vacuous.
  EXPECT_GT(matches, kCases / 50);
  EXPECT_LT(matches, kCases - kCases / 50);
}

}  // namespace
}  // namespace plumbline
