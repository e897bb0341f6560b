// The configuration file: YAML text mapped onto Plumbline's option structs and
// validated, with every problem reported as FILE:LINE:COLUMN: message.
// Loading is a pure function of its input (plus one file read); the result is a
// plain value. Thread-compatible: load once at start-up, then share read-only.
//
// Accepted form (top level is a mapping): `series` below, plus the daemon's own
// sections (listeners, shards, queue_batches, max_series, storage, inputs,
// sinks, metrics, shutdown_timeout), described with their defaults in
// config/service_options.h. Every section is optional.
//
//   series:                        # profiles; the first whose glob matches wins
//     - match: "coldstore/*/temp_c"   # glob (detectors/glob.h); absent = "**"
//       kind: gauge                # gauge | count | meter
//       seasons: [8h, 1d]          # durations; [] for none
//       gaps: skip                 # skip | zero | hold
//       warmup: 48                 # whole number of readings
//       arl0: 5000                 # number
//       shift: 1.0                 # number
//       detectors: [cusum, page-hinkley]   # any of cusum, page-hinkley, bocpd, ewma
//       agree: 1                   # whole number
//       silence_after: 30m         # duration
//       harmonics: [3, 2]          # optional: whole numbers, one per season
//       every: 1m                  # optional: duration
//       memory: 14d                # optional: duration
//       trend: true                # optional: true | false
//       lateness: 0s               # optional: duration or 0
//       agree_within: 5            # optional: whole number of readings
//       cooldown: 0                # optional: whole number of readings
//       count_chart: auto          # optional: auto | poisson | normal (kind: count)
//       adapt_thresholds: false    # optional: true | false
//
// A key that is absent takes the default in ProfileOptions (detectors/profile.h),
// except `match`, which defaults to "**" so that a profile without it governs
// every series. A missing, null or empty `series` means one catch-all profile
// ("**") with all defaults. Durations must carry a unit (15m, 1d, 365.25d; see
// detectors/time_format.h); a bare number is refused with a hint, except 0 for
// `lateness`. Quoted scalars are read like plain ones ("48" is a number).
//
// Errors are collected, not stopped at: unknown keys (with a did-you-mean
// suggestion and the list of valid keys), duplicate keys, wrong types, bad
// durations, unknown enum values (with the valid choices), invalid globs,
// out-of-range values (ProfileOptions::IsValid's rule, placed at the offending
// key, or at the profile when the key is absent), profiles that can never match
// because an earlier one already takes all their series, and YAML syntax errors
// (only the first: the YAML parser cannot go on after one).
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "config/service_options.h"
#include "detectors/profile.h"
#include "detectors/annotation.h"
#include "detectors/status.h"

namespace plumbline {

struct Config {
  // Never empty after a successful load. Order matters: MatchProfile takes the
  // first profile whose `match` glob matches.
  std::vector<ProfileOptions> series;
  // What `serve` runs: listeners, shards, state, inputs, sinks. Defaults give a
  // loopback daemon, so a config with only `series` keeps working. Later
  // sections (annotations, covariates) are added the same way.
  ServiceOptions service;
  // Planned changes and maintenance windows, in config order.
  std::vector<Annotation> annotations;
};

// One problem found in a config file.
struct ConfigError {
  std::string source;  // the file name, as the caller gave it
  int line = 0;        // 1-based; 0 when the problem has no position (unreadable file)
  int column = 0;      // 1-based
  std::string message;

  // "FILE:LINE:COLUMN: message", or "FILE: message" when line is 0.
  std::string ToString() const;
};

// Parses and validates config text. On success fills *config and returns an
// empty vector; otherwise returns every error found, in document order, and
// leaves *config unspecified. `source_name` is used in the errors only.
std::vector<ConfigError> ParseConfigText(std::string_view text,
                                         std::string_view source_name, Config* config);

// As ParseConfigText on the contents of the file at `path`; an unreadable file
// gives one error without a position.
std::vector<ConfigError> ParseConfigFile(const std::string& path, Config* config);

// Status forms of the two calls above. On failure the status is InvalidArgument
// (IoError when the file cannot be read) and its message holds every error's
// ToString(), one per line.
StatusOr<Config> LoadConfigText(std::string_view text, std::string_view source_name);
StatusOr<Config> LoadConfigFile(const std::string& path);

// Parses annotations given outside the config file (the HTTP API's POST
// body, the state directory's annotations.json): one mapping or a list of
// them, in JSON or YAML, with the keys and rules of the config's
// `annotations:` entries. One without an id gets "<kind>-<n>", n counting
// from first_number. On success fills *out and returns no error.
std::vector<ConfigError> ParseAnnotationsText(std::string_view text,
                                              std::string_view source_name,
                                              std::size_t first_number,
                                              std::vector<Annotation>* out);

// The profile that governs `series`: the first whose glob matches, or nullptr
// when none does (the caller then refuses the series). The pointer is into
// config.series and lives as long as config is unchanged.
const ProfileOptions* MatchProfile(const Config& config, std::string_view series);

// One line describing a profile, as `plumbline check` prints it, e.g.
// `coldstore/*/temp_c: gauge, seasons [8h, 1d], gaps skip, warmup 48, arl0 5000,
// shift 1, detectors [cusum, page-hinkley], agree 1, silence_after 30m`.
std::string DescribeProfile(const ProfileOptions& profile);

}  // namespace plumbline
