// Access control shared by the HTTP API and TCP ingest: the bearer token,
// loaded once at start from a file or an environment variable
// (AccessOptions), and compared in constant time. The token is never logged:
// errors name where it was looked for, not what was found.
//
// TCP ingest protocol with a token: the first line of a connection is
// `token <token>`; readings follow on the next lines. A connection whose first
// line is anything else is closed at once (counted as unauthorized), before
// any of its readings is taken. Thread-safe: pure functions.
#pragma once

#include <string>
#include <string_view>

#include "config/service_options.h"
#include "detectors/status.h"

namespace plumbline {

// The first word of a TCP connection's token line.
inline constexpr std::string_view kTcpTokenPrefix = "token ";

// The token: the first line of token_file (without its line end), or the
// value of the variable token_env; "" when access control is off.
// InvalidArgument when the file cannot be read, the variable is unset, or the
// token is empty or holds spaces or control characters.
StatusOr<std::string> LoadAccessToken(const AccessOptions& options);

// Whether `given` equals `expected`, in time that depends only on their
// lengths (not on where they first differ).
bool TokenMatches(std::string_view given, std::string_view expected);

// Whether an HTTP Authorization header value is `Bearer <expected>` (the
// scheme case-insensitive, RFC 6750 section 2.1).
bool BearerMatches(std::string_view authorization, std::string_view expected);

}  // namespace plumbline
