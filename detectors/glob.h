// Globs over series names: how a profile's `match:` picks the series it governs.
// Pure functions of their arguments; safe to call from any thread.
//
// Series names are paths such as `coldstore/freezer-1/temp_c`, so the syntax is
// the path-aware one of shells and build tools:
//
//   *        any run of characters, possibly empty, that contains no '/'
//   **       any run of characters, possibly empty, '/' included
//   **/      (at the start of the pattern or right after a '/') zero or more whole
//            path segments: `a/**/b` matches `a/b`, `a/x/b` and `a/x/y/b`
//   ?        exactly one character other than '/'
//   [abc]    one character from the set; ranges such as [a-z] and [0-9] allowed;
//   [!abc]   one character not in the set ([^abc] is the same); a class never
//            matches '/'; a ']' right after '[' or '[!' is a member, not the end
//   \c       the character c itself (\*, \?, \[, \], \\)
//   other    itself, compared byte for byte (case-sensitive)
//
// "Character" means one UTF-8 code point; bytes that are not valid UTF-8 count
// as one character each. The whole name must match, not a part of it.
//
// Cost: matching is iterative with two backtrack points (the last '*' and the
// last '**'), never recursive, so there is no exponential blow-up: a pattern
// without '**' costs at most O(|pattern| * |name|), one with '**' at most
// O(|pattern| * |name|^2), and typical patterns run in O(|pattern| + |name|).
// The pattern is parsed on every call; callers that match one name against
// many profiles do so once per new series, not per reading.
#pragma once

#include <string_view>

#include "detectors/status.h"

namespace plumbline {

// True when `name` matches `pattern` as a whole. A pattern that ValidateGlob
// refuses matches nothing (so a broken profile never captures series).
bool GlobMatch(std::string_view pattern, std::string_view name);

// Ok for a well-formed pattern. Otherwise InvalidArgument whose message names
// the 0-based byte offset of the problem and how to fix it: an empty pattern,
// an unclosed '[', an unescaped ']' outside a class, an empty class, a reversed
// range such as [z-a], a '/' inside a class (it could never match), or a
// trailing lone '\'.
Status ValidateGlob(std::string_view pattern);

}  // namespace plumbline
