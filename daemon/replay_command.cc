// plumbline replay: the same pipeline as serve, over files, on event time, as
// fast as possible. Inputs are merged by reading time; alerts go to --alerts
// as JSON lines; a readable table goes to stdout and a summary to stderr.
//
// plumbline forecast: the same replay, then one series' forecasts at the times
// asked (GET /v1/series/{name}/forecast over a replayed state).
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <deque>
#include <fstream>
#include <iterator>
#include <map>
#include <memory>
#include <optional>
#include <sys/stat.h>
#include <thread>

#include "config/config.h"
#include "daemon/command_line.h"
#include "daemon/covariate_groups.h"
#include "daemon/design_cache.h"
#include "daemon/engine.h"
#include "daemon/http_api.h"
#include "daemon/reading_parser.h"
#include "daemon/replay_report.h"
#include "daemon/series_trace.h"
#include "daemon/subcommands.h"
#include "daemon/terminal.h"
#include "daemon/ui_pages.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

const std::vector<OptionSpec> kReplayOptions = {
    {"config", true, false, "profiles and detector settings (YAML)", "FILE"},
    {"input", true, true, "reading file: CSV or JSON lines", "FILE"},
    {"alerts", true, false, "write alerts here, one JSON object per line", "FILE"},
    {"events", true, false, "also write every event (alerts, resumes, retrain, meter resets)",
     "FILE"},
    {"quiet", false, false, "print no alert lines, only the summary"},
    {"json", false, false,
     "print alerts on stdout as JSON lines instead of readable lines"},
    {"report", true, false, "write a self-contained HTML report: a chart per series",
     "FILE"},
    {"truth", true, false,
     "labelled changes (CSV: series,kind,at,from,to,label) to score the alerts against",
     "FILE"},
    {"trace", true, false,
     "write one series' model and detectors at each of its observations (CSV: time, "
     "value, z, then each detector's statistic and threshold; a bucketed series has "
     "a line per bucket) to --trace-to",
     "NAME"},
    {"trace-to", true, false, "where --trace writes its CSV", "FILE"},
    {"threads", true, false,
     "engines run side by side, each on its share of the series (placed as serve "
     "places them on shards); the alerts and their order are the same as with one. "
     "Default 1; 0: one per core. Not with --report",
     "N"},
};

// Readings a threaded replay reads ahead and hands to its engines at once.
constexpr std::size_t kThreadedBlock = std::size_t{1} << 16;
// At most this many engines (threads) for --threads.
constexpr unsigned kMaxThreads = 64;

const std::vector<OptionSpec> kForecastOptions = {
    {"config", true, false, "profiles and detector settings (YAML)", "FILE"},
    {"input", true, true, "reading file: CSV or JSON lines", "FILE"},
    {"series", true, false, "the series to forecast", "NAME"},
    {"at", true, true,
     "a time to forecast (RFC 3339 or epoch seconds); default: the next reading's "
     "expected time",
     "TIME"},
    {"level", true, false,
     "coverage of the prediction intervals, in (0, 1); default 0.95", "P"},
    {"json", false, false, "print the HTTP API's JSON object instead of a table"},
};

struct OwnedReading {
  EventTime time;
  std::string series;
  double value;
  std::uint64_t line;  // in its file, for reports
};

struct RejectedLine {
  std::string file;
  std::uint64_t line;
  std::string reason;
  std::string detail;
};

// One input file, parsed incrementally, read ahead by at most one chunk.
class InputStream {
 public:
  InputStream(std::string path, std::vector<RejectedLine>* first_errors,
              std::map<std::string, std::uint64_t>* rejected)
      : path_(std::move(path)),
        file_(path_, std::ios::binary),
        parser_(
            ReadingParserOptions{},
            [this](const Reading& r) {
              queue_.push_back({r.time, std::string(r.series), r.value,
                                parser_.line_number()});
            },
            [this, first_errors, rejected](std::uint64_t line, ReadingError reason,
                                           std::string_view detail) {
              ++(*rejected)[std::string(ToString(reason))];
              if (first_errors->size() < 10) {
                first_errors->push_back(
                    {path_, line, std::string(ToString(reason)), std::string(detail)});
              }
            }) {}

  bool is_open() const { return file_.is_open(); }
  const std::string& path() const { return path_; }
  std::uint64_t bytes_read() const { return bytes_; }

  // The next reading, or null at the end of the file.
  const OwnedReading* Head() {
    while (queue_.empty() && !done_) {
      buffer_.resize(1 << 20);
      file_.read(buffer_.data(), static_cast<std::streamsize>(buffer_.size()));
      const auto got = static_cast<std::size_t>(file_.gcount());
      bytes_ += got;
      if (got > 0) parser_.Feed(std::string_view(buffer_.data(), got));
      if (got < buffer_.size()) {
        parser_.Finish();
        done_ = true;
      }
    }
    return queue_.empty() ? nullptr : &queue_.front();
  }
  void Pop() { queue_.pop_front(); }
  // Removes and returns the head; precondition: Head() returned non-null.
  OwnedReading Take() {
    OwnedReading head = std::move(queue_.front());
    queue_.pop_front();
    return head;
  }
  // The reading `k` places after the head if it is parsed already, else null.
  const OwnedReading* Ahead(std::size_t k) const {
    return k < queue_.size() ? &queue_[k] : nullptr;
  }

 private:
  std::string path_;
  std::ifstream file_;
  ReadingParser parser_;
  std::deque<OwnedReading> queue_;
  std::vector<char> buffer_;
  std::uint64_t bytes_ = 0;
  bool done_ = false;
};

// The input whose next reading comes first (ties go to the earlier input), or
// null once every input is done.
InputStream* Earliest(const std::vector<std::unique_ptr<InputStream>>& streams) {
  InputStream* next = nullptr;
  const OwnedReading* head = nullptr;
  for (const auto& stream : streams) {
    const OwnedReading* candidate = stream->Head();
    if (candidate && (!head || candidate->time < head->time)) {
      head = candidate;
      next = stream.get();
    }
  }
  return next;
}

void PrintProgress(std::uint64_t done, std::uint64_t total, std::uint64_t readings) {
  const double fraction = total ? static_cast<double>(done) / static_cast<double>(total) : 1.0;
  const int width = 30, filled = static_cast<int>(fraction * width);
  std::fprintf(stderr, "\r[%.*s%*s] %3.0f%%  %llu readings", filled,
               "##############################", width - filled, "", fraction * 100,
               static_cast<unsigned long long>(readings));
}

}  // namespace

int RunReplay(const Args& args) {
  auto parsed = ParseArgs(args, kReplayOptions);
  if (!parsed.ok()) {
    std::fprintf(stderr, "plumbline replay: %s\n", parsed.status().message().c_str());
    return 2;
  }
  if (parsed->Has("help")) {
    std::printf(
        "usage: plumbline replay --config FILE --input FILE [--input FILE ...] --alerts FILE\n\n"
        "Runs the same pipeline as `serve` over reading files, merged by reading time, as\n"
        "fast as possible, and writes alerts as JSON lines. Same input, same alerts.\n"
        "Prints one line per alert (coloured on a terminal unless NO_COLOR is set)\n"
        "and a summary; --truth scores the alerts against labelled changes, --report\n"
        "draws them.\n\n%s",
        FormatOptions(kReplayOptions).c_str());
    return 0;
  }
  const auto config_path = parsed->Get("config");
  const auto alerts_path = parsed->Get("alerts");
  const auto& inputs = parsed->GetAll("input");
  if (!config_path || !alerts_path || inputs.empty()) {
    std::fprintf(stderr, "plumbline replay: --config, --input and --alerts are required\n");
    return 2;
  }
  auto config = LoadConfigFile(*config_path);
  if (!config.ok()) {
    std::fprintf(stderr, "%s\n", config.status().message().c_str());
    return 1;
  }
  const auto truth_path = parsed->Get("truth");
  std::optional<std::vector<TruthLabel>> truth;
  if (truth_path) {
    std::ifstream file(*truth_path, std::ios::binary);
    const std::string text((std::istreambuf_iterator<char>(file)),
                           std::istreambuf_iterator<char>());
    StatusOr<std::vector<TruthLabel>> labels = ParseTruth(text);
    if (!file.is_open() || !labels.ok()) {
      std::fprintf(stderr, "plumbline replay: %s:%s\n", truth_path->c_str(),
                   file.is_open() ? labels.status().message().c_str() : " cannot read");
      return 1;
    }
    truth = std::move(labels).value();
  }
  const auto report_path = parsed->Get("report");
  const auto trace_series = parsed->Get("trace");
  const auto trace_path = parsed->Get("trace-to");
  if (trace_series.has_value() != trace_path.has_value()) {
    std::fprintf(stderr, "plumbline replay: --trace and --trace-to go together\n");
    return 2;
  }
  unsigned threads = 1;
  if (auto text = parsed->Get("threads")) {
    char* end = nullptr;
    const long n = std::strtol(text->c_str(), &end, 10);
    if (text->empty() || end != text->c_str() + text->size() || n < 0 || n > kMaxThreads) {
      std::fprintf(stderr, "plumbline replay: --threads must be a whole number in [0, %u]\n",
                   kMaxThreads);
      return 2;
    }
    threads = n == 0 ? std::max(1u, std::thread::hardware_concurrency())
                     : static_cast<unsigned>(n);
  }
  if (threads > 1 && report_path) {
    std::fprintf(stderr, "plumbline replay: --report needs one thread (leave out --threads)\n");
    return 2;
  }
  std::unique_ptr<std::FILE, int (*)(std::FILE*)> trace_file(nullptr, &std::fclose);
  std::optional<ObservationTracer> tracer;
  if (trace_path) {
    trace_file.reset(std::fopen(trace_path->c_str(), "w"));
    if (!trace_file) {
      std::fprintf(stderr, "plumbline replay: cannot write the trace to %s\n",
                   trace_path->c_str());
      return 1;
    }
    tracer.emplace(*trace_series, trace_file.get());
  }
  const Config report_config = *config;  // the engine takes the config
  ReplayRecorder recorder;
  std::vector<Alert> raised;  // for --truth

  std::vector<RejectedLine> first_errors;
  std::map<std::string, std::uint64_t> rejected;
  std::vector<std::unique_ptr<InputStream>> streams;
  std::uint64_t total_bytes = 0;
  for (const std::string& path : inputs) {
    auto stream = std::make_unique<InputStream>(path, &first_errors, &rejected);
    if (!stream->is_open()) {
      std::fprintf(stderr, "plumbline replay: cannot open input %s\n", path.c_str());
      return 1;
    }
    struct stat info {};
    if (::stat(path.c_str(), &info) == 0) total_bytes += static_cast<std::uint64_t>(info.st_size);
    streams.push_back(std::move(stream));
  }
  std::FILE* alerts_file = std::fopen(alerts_path->c_str(), "w");
  if (!alerts_file) {
    std::fprintf(stderr, "plumbline replay: cannot write alerts to %s\n", alerts_path->c_str());
    return 1;
  }
  std::FILE* events_file = nullptr;
  if (auto events_path = parsed->Get("events")) {
    events_file = std::fopen(events_path->c_str(), "w");
    if (!events_file) {
      std::fprintf(stderr, "plumbline replay: cannot write events to %s\n", events_path->c_str());
      std::fclose(alerts_file);
      return 1;
    }
  }

  const bool quiet = parsed->Has("quiet");
  const bool json = parsed->Has("json");
  const bool colour = !json && WantsColour(stdout);
  const bool progress = ::isatty(STDERR_FILENO) != 0;
  // One engine per thread. With several, each holds the series serve would
  // place on its shard (a series with the covariates it reads), and they share
  // one calibration per profile.
  const Config engine_config = std::move(config).value();
  auto designs = std::make_shared<DesignCache>();
  EngineOptions engine_options;
  if (threads > 1) {
    engine_options.make_design = [designs](const ProfileOptions& profile) {
      return designs->Make(profile);
    };
  }
  std::vector<std::unique_ptr<Engine>> engines;
  for (unsigned k = 0; k < threads; ++k) {
    engines.push_back(std::make_unique<Engine>(engine_config, engine_options));
  }
  const CovariateGroups groups(engine_config);
  const auto owner = [&](std::string_view series) {
    return threads == 1 ? 0u : static_cast<unsigned>(groups.RouteHash(series) % threads);
  };
  Engine& engine = *engines[0];
  if (tracer) {
    engines[owner(tracer->series())]->SetObservationListener(tracer->series(), &*tracer);
  }
  std::vector<Alert> out;
  std::map<std::string, std::uint64_t> alerts_by_kind, events_by_type;
  std::uint64_t readings = 0;
  const auto started = std::chrono::steady_clock::now();

  auto publish = [&]() {
    for (const Alert& a : out) {
      const std::string line = AlertToJson(a);
      if (events_file) std::fprintf(events_file, "%s\n", line.c_str());
      ++events_by_type[std::string(ToString(a.event))];
      if (a.event != EventType::kAlert) continue;
      std::fprintf(alerts_file, "%s\n", line.c_str());
      ++alerts_by_kind[std::string(ToString(a.kind))];
      if (report_path) recorder.AddAlert(a);
      if (truth) raised.push_back(a);
      if (!quiet) {
        if (progress) std::fprintf(stderr, "\r\033[K");
        std::printf("%s\n", json ? line.c_str() : AlertLine(a, colour).c_str());
      }
    }
    out.clear();
  };

  auto refuse = [&](const InputStream& stream, const OwnedReading& reading,
                    IngestOutcome outcome) {
    ++rejected[std::string(ToString(outcome))];
    if (first_errors.size() < 10) {
      first_errors.push_back({stream.path(), reading.line, std::string(ToString(outcome)),
                              "series \"" + reading.series + "\" at " +
                                  FormatRfc3339(reading.time)});
    }
  };
  auto show_progress = [&]() {
    std::uint64_t done = 0;
    for (auto& stream : streams) done += stream->bytes_read();
    PrintProgress(done, total_bytes, readings);
  };

  if (!quiet && !json) {
    std::printf("%-20s  %-13s %s\n", "detected_at", "kind", "series, change and size");
  }
  while (threads == 1) {
    InputStream* next = Earliest(streams);
    if (!next) break;
    const OwnedReading* head = next->Head();
    // The series' state of later readings starts loading now (Engine::PrefetchAhead;
    // one input only: with several, the merge order is not known that far ahead).
    if (streams.size() == 1) {
      engine.PrefetchAhead([next](std::size_t n) -> std::optional<Engine::NameAndTime> {
        const OwnedReading* ahead = next->Ahead(n);
        if (!ahead) return std::nullopt;
        return Engine::NameAndTime{ahead->series, ahead->time};
      });
    }
    engine.AdvanceClock(head->time, &out);
    const TraceBefore trace =
        report_path ? TraceStateBefore(engine.Find(head->series)) : TraceBefore{};
    const IngestOutcome outcome = engine.Ingest(head->series, head->time, head->value, &out);
    if (outcome == IngestOutcome::kAccepted) {
      ++readings;
      if (report_path) {
        // The report's forecast, as the model made it before the reading.
        recorder.AddPoint(head->series, TracePointAfter(engine.Find(head->series), trace,
                                                        head->time, head->value));
      }
    } else {
      refuse(*next, *head, outcome);
    }
    next->Pop();
    publish();
    if (progress && (readings & 0xFFFF) == 0) show_progress();
  }

  // Threaded: the merged readings are read kThreadedBlock at a time, and every
  // engine walks the whole block. Each advances its clock at every reading, as
  // the one engine would, and ingests its own series' readings. Their alerts
  // are then put back into the one engine's order: by reading; at a reading,
  // the silences its clock raised (by queued deadline, then series name:
  // Engine::AdvanceClock's order) before what the reading itself raised.
  // Only the first-errors list may order a bad line and a refused reading
  // differently, as lines are parsed a block ahead.
  struct BlockEntry {
    OwnedReading reading;
    const InputStream* stream;
  };
  struct Tagged {
    std::size_t index;  // in the block
    int phase;          // 0: the clock's silences, 1: the reading's own alerts
    EventTime key;      // phase 0: the queued deadline
    Alert alert;
  };
  struct EngineRound {
    std::vector<std::size_t> own;  // block indices of this engine's readings
    std::vector<Tagged> out;
    std::vector<std::pair<std::size_t, IngestOutcome>> refused;
    std::uint64_t accepted = 0;
  };
  std::vector<BlockEntry> block;
  std::vector<EngineRound> rounds(threads);
  const auto run_engine = [&](unsigned k) {
    Engine& e = *engines[k];
    EngineRound& round = rounds[k];
    std::vector<Alert> raised_here;
    std::vector<EventTime> keys;
    std::size_t next_own = 0;
    for (std::size_t i = 0; i < block.size(); ++i) {
      const OwnedReading& reading = block[i].reading;
      raised_here.clear();
      keys.clear();
      e.AdvanceClock(reading.time, &raised_here, &keys);
      for (std::size_t j = 0; j < raised_here.size(); ++j) {
        round.out.push_back({i, 0, keys[j], std::move(raised_here[j])});
      }
      if (next_own >= round.own.size() || round.own[next_own] != i) continue;
      e.PrefetchAhead([&](std::size_t n) -> std::optional<Engine::NameAndTime> {
        if (next_own + n >= round.own.size()) return std::nullopt;
        const OwnedReading& ahead = block[round.own[next_own + n]].reading;
        return Engine::NameAndTime{ahead.series, ahead.time};
      });
      ++next_own;
      raised_here.clear();
      const IngestOutcome outcome =
          e.Ingest(reading.series, reading.time, reading.value, &raised_here);
      for (Alert& a : raised_here) round.out.push_back({i, 1, 0, std::move(a)});
      if (outcome == IngestOutcome::kAccepted) {
        ++round.accepted;
      } else {
        round.refused.emplace_back(i, outcome);
      }
    }
  };
  while (threads > 1) {
    block.clear();
    for (EngineRound& round : rounds) round = EngineRound{};
    while (block.size() < kThreadedBlock) {
      InputStream* next = Earliest(streams);
      if (!next) break;
      rounds[owner(next->Head()->series)].own.push_back(block.size());
      block.push_back({next->Take(), next});
    }
    if (block.empty()) break;
    std::vector<std::thread> workers;
    for (unsigned k = 1; k < threads; ++k) workers.emplace_back(run_engine, k);
    run_engine(0);
    for (std::thread& worker : workers) worker.join();
    std::vector<Tagged> merged;
    std::vector<std::pair<std::size_t, IngestOutcome>> refused;
    for (EngineRound& round : rounds) {
      std::move(round.out.begin(), round.out.end(), std::back_inserter(merged));
      refused.insert(refused.end(), round.refused.begin(), round.refused.end());
      readings += round.accepted;
    }
    std::stable_sort(merged.begin(), merged.end(), [](const Tagged& a, const Tagged& b) {
      if (a.index != b.index) return a.index < b.index;
      if (a.phase != b.phase) return a.phase < b.phase;
      if (a.key != b.key) return a.key < b.key;
      return a.alert.series < b.alert.series;
    });
    for (Tagged& t : merged) out.push_back(std::move(t.alert));
    publish();
    std::sort(refused.begin(), refused.end(),
              [](const auto& a, const auto& b) { return a.first < b.first; });
    for (const auto& [i, outcome] : refused) refuse(*block[i].stream, block[i].reading, outcome);
    if (progress) show_progress();
  }

  if (threads == 1) {
    engine.Finish(&out);
  } else {  // each engine flushes in name order: merged, the one engine's order
    for (auto& e : engines) e->Finish(&out);
    std::stable_sort(out.begin(), out.end(),
                     [](const Alert& a, const Alert& b) { return a.series < b.series; });
  }
  publish();
  if (progress) std::fprintf(stderr, "\r\033[K");
  std::fclose(alerts_file);
  if (events_file) std::fclose(events_file);
  std::size_t series_count = 0;
  for (auto& e : engines) series_count += e->series_count();
  for (auto& e : engines) {
    if (e->design_status().ok()) continue;
    std::fprintf(stderr, "plumbline replay: a profile could not be calibrated: %s\n",
                 e->design_status().ToString().c_str());
    break;
  }

  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  std::fflush(stdout);  // the alert table first, then the summary, even through pipes
  std::uint64_t alerts_total = 0;
  for (const auto& [kind, n] : alerts_by_kind) alerts_total += n;
  std::fprintf(stderr, "\nreplay summary\n  readings   %llu accepted from %zu file(s), %zu series\n",
               static_cast<unsigned long long>(readings), inputs.size(), series_count);
  std::fprintf(stderr, "  alerts     %llu", static_cast<unsigned long long>(alerts_total));
  for (const auto& [kind, n] : alerts_by_kind) {
    std::fprintf(stderr, "  %s %llu", kind.c_str(), static_cast<unsigned long long>(n));
  }
  std::uint64_t events_total = 0;  // besides the alerts
  for (const auto& [type, n] : events_by_type) {
    if (type != "alert") events_total += n;
  }
  std::fprintf(stderr, "\n  events     %llu", static_cast<unsigned long long>(events_total));
  for (const auto& [type, n] : events_by_type) {
    if (type != "alert") {
      std::fprintf(stderr, "  %s %llu", type.c_str(), static_cast<unsigned long long>(n));
    }
  }
  std::uint64_t rejected_total = 0;
  for (const auto& [reason, n] : rejected) rejected_total += n;
  std::fprintf(stderr, "\n  rejected   %llu", static_cast<unsigned long long>(rejected_total));
  for (const auto& [reason, n] : rejected) {
    std::fprintf(stderr, "  %s %llu", reason.c_str(), static_cast<unsigned long long>(n));
  }
  std::fprintf(stderr, "\n");
  for (const RejectedLine& e : first_errors) {
    std::fprintf(stderr, "    %s:%llu: %s: %s\n", e.file.c_str(),
                 static_cast<unsigned long long>(e.line), e.reason.c_str(), e.detail.c_str());
  }
  std::optional<TruthOutcome> scored;
  if (truth) {
    scored = ScoreTruth(*truth, raised);
    std::fprintf(
        stderr,
        "  truth      %zu labelled changes: %zu hit, %zu missed; %zu false alarms\n",
        scored->labels.size(), scored->hits(), scored->labels.size() - scored->hits(),
        scored->false_alarms.size());
  }
  if (report_path) {
    const std::string page = ReportPageHtml(
        recorder.ToJson(report_config, inputs, *config_path, readings,
                        scored ? &*scored : nullptr, truth_path.value_or("")));
    std::FILE* report = std::fopen(report_path->c_str(), "w");
    bool written = report != nullptr &&
                   std::fwrite(page.data(), 1, page.size(), report) == page.size();
    if (report != nullptr) written = std::fclose(report) == 0 && written;
    if (!written) {
      std::fprintf(stderr, "plumbline replay: cannot write the report to %s\n",
                   report_path->c_str());
      return 1;
    }
    std::fprintf(stderr, "  report     %s\n", report_path->c_str());
  }
  std::fprintf(stderr, "  throughput %.0f readings/s (%.2f s)\n",
               seconds > 0 ? static_cast<double>(readings) / seconds : 0.0, seconds);
  std::fprintf(stderr, "  alerts are advisory: Plumbline is not a safety system.\n");
  return 0;
}

int RunForecast(const Args& args) {
  auto parsed = ParseArgs(args, kForecastOptions);
  if (!parsed.ok()) {
    std::fprintf(stderr, "plumbline forecast: %s\n", parsed.status().message().c_str());
    return 2;
  }
  if (parsed->Has("help")) {
    std::printf(
        "usage: plumbline forecast --config FILE --input FILE [--input FILE ...] "
        "--series "
        "NAME\n                          [--at TIME ...] [--level P] [--json]\n\n"
        "Replays the reading files as `replay` does, then prints one series' predicted\n"
        "reading and prediction interval at each TIME, and when its next reading should\n"
        "come (GET /v1/series/{name}/forecast of a running daemon).\n\n%s",
        FormatOptions(kForecastOptions).c_str());
    return 0;
  }
  const auto config_path = parsed->Get("config");
  const auto series = parsed->Get("series");
  const auto& inputs = parsed->GetAll("input");
  if (!config_path || !series || inputs.empty()) {
    std::fprintf(stderr,
                 "plumbline forecast: --config, --input and --series are required\n");
    return 2;
  }
  std::vector<EventTime> at;
  for (const std::string& text : parsed->GetAll("at")) {
    StatusOr<EventTime> t = ParseTime(text);
    if (!t.ok()) {
      std::fprintf(stderr, "plumbline forecast: --at %s: %s\n", text.c_str(),
                   t.status().message().c_str());
      return 2;
    }
    at.push_back(*t);
  }
  double level = 0.95;
  if (auto text = parsed->Get("level")) {
    char* end = nullptr;
    level = std::strtod(text->c_str(), &end);
    if (end != text->c_str() + text->size() || !(level > 0.0 && level < 1.0)) {
      std::fprintf(stderr, "plumbline forecast: --level must be a number in (0, 1)\n");
      return 2;
    }
  }
  auto config = LoadConfigFile(*config_path);
  if (!config.ok()) {
    std::fprintf(stderr, "%s\n", config.status().message().c_str());
    return 1;
  }
  std::vector<RejectedLine> first_errors;
  std::map<std::string, std::uint64_t> rejected;
  std::vector<std::unique_ptr<InputStream>> streams;
  for (const std::string& path : inputs) {
    streams.push_back(std::make_unique<InputStream>(path, &first_errors, &rejected));
    if (!streams.back()->is_open()) {
      std::fprintf(stderr, "plumbline forecast: cannot open input %s\n", path.c_str());
      return 1;
    }
  }
  Engine engine(std::move(config).value());
  std::vector<Alert> out;  // the replay's alerts: not printed
  while (true) {
    InputStream* next = Earliest(streams);  // as in replay
    if (!next) break;
    const OwnedReading* head = next->Head();
    engine.AdvanceClock(head->time, &out);
    engine.Ingest(head->series, head->time, head->value, &out);
    next->Pop();
    out.clear();
  }
  engine.Finish(&out);
  const SeriesMonitor* monitor = engine.Find(*series);
  if (!monitor) {
    std::fprintf(stderr,
                 "plumbline forecast: no readings of series \"%s\" were accepted\n",
                 series->c_str());
    return 1;
  }
  StatusOr<SeriesForecast> forecast = MakeSeriesForecast(*monitor, *series, at, level);
  if (!forecast.ok()) {
    std::fprintf(stderr, "plumbline forecast: %s\n", forecast.status().message().c_str());
    return 1;
  }
  if (parsed->Has("json")) {
    std::printf("%s\n", SeriesForecastToJson(*forecast).c_str());
    return 0;
  }
  std::printf("%-24s %12s %12s %12s %12s\n", "at", "value", "low", "high", "sd");
  for (const ReadingForecast& r : forecast->readings) {
    std::printf("%-24s %12.6g %12.6g %12.6g %12.6g\n", FormatRfc3339(r.at).c_str(),
                r.value, r.low, r.high, r.sd);
  }
  std::printf("(intervals of %.3g%% coverage)\n", 100.0 * level);
  if (forecast->next) {
    std::printf("next reading: expected %s (last %s)",
                FormatRfc3339(forecast->next->expected).c_str(),
                FormatRfc3339(forecast->next->last).c_str());
    for (const NextReadingForecast::Quantile& q : forecast->next->quantiles) {
      std::printf(", %.0f%% by %s", 100.0 * q.probability, FormatRfc3339(q.time).c_str());
    }
    std::printf("\n");
  } else {
    std::printf("next reading: unknown (%s)\n", forecast->next_unknown.c_str());
  }
  return 0;
}

}  // namespace plumbline
