// libFuzzer target for the line parser (daemon/reading_parser.h).
//
// The input is fed twice: whole, and cut into chunks at places chosen by its
// first bytes. Both feeds must give the same readings and the same refusals,
// every line must end in exactly one outcome, and every reading must keep the
// input contract (a valid series name, a finite value). Any difference or a
// sanitizer report is a finding.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/reading_parser.h"

namespace {

struct Outcome {
  std::vector<std::string> lines;  // one per reading or refusal, in order
  plumbline::ReadingParserCounters counters;
};

void Require(bool condition) {
  if (!condition) std::abort();
}

Outcome Parse(std::string_view input, const std::vector<std::size_t>& cuts,
              std::size_t max_line_bytes) {
  Outcome out;
  plumbline::ReadingParser parser(
      plumbline::ReadingParserOptions{max_line_bytes},
      [&out](const plumbline::Reading& reading) {
        Require(plumbline::IsValidSeriesName(reading.series));
        Require(std::isfinite(reading.value));
        out.lines.push_back("R " + std::to_string(reading.time) + " " +
                            std::string(reading.series) + " " +
                            std::to_string(reading.value));
      },
      [&out](std::uint64_t line, plumbline::ReadingError reason,
             std::string_view detail) {
        Require(detail.size() <= 200);
        out.lines.push_back("E " + std::to_string(line) + " " +
                            std::string(plumbline::ToString(reason)));
      });
  std::size_t at = 0;
  for (std::size_t cut : cuts) {
    if (cut <= at || cut > input.size()) continue;
    parser.Feed(input.substr(at, cut - at));
    at = cut;
  }
  parser.Feed(input.substr(at));
  parser.Finish();
  out.counters = parser.counters();
  const auto& c = out.counters;
  Require(c.readings + c.rejected + c.blank_lines + c.header_lines == c.lines);
  Require(c.bytes == input.size());
  return out;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size < 2) return 0;
  // First byte: the line limit (64..319 bytes, so that the over-long path runs
  // often); second: the chunk stride (1..16 bytes, 0 = a few uneven cuts).
  const std::size_t max_line_bytes = 64 + data[0];
  const std::size_t stride = data[1] % 17;
  const std::string_view input(reinterpret_cast<const char*>(data + 2), size - 2);

  std::vector<std::size_t> cuts;
  if (stride == 0) {
    cuts = {input.size() / 3, input.size() / 2, input.size() - input.size() / 7};
  } else {
    for (std::size_t at = stride; at < input.size(); at += stride) cuts.push_back(at);
  }
  const Outcome whole = Parse(input, {}, max_line_bytes);
  const Outcome chunked = Parse(input, cuts, max_line_bytes);
  Require(whole.lines == chunked.lines);
  Require(whole.counters.lines == chunked.counters.lines);
  return 0;
}
