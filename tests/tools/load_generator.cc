// load_generator: streams synthetic seasonal readings to `plumbline serve` over
// TCP and measures ingest throughput and ingest-to-alert latency (a
// measurement tool, not a test).
//
// Series load/sNNNNN (--series) are spread over --connections connections,
// one thread each. Every series gets one reading per step, --spacing seconds
// of event time apart (a daily and a weekly season and N(0, 1) noise, seeded);
// a connection sends step by step, so each series is in time order. --rate is
// the total readings per second (0: as fast as the daemon takes them, TCP flow
// control being the limit, in writes of 512 lines). At a set rate each
// connection writes --write-ms worth of its share at a time, the connections
// in turn, so the daemon sees a steady stream rather than every connection's
// lines at the same instant (a reading would then wait behind the whole burst,
// which is the sender's doing, not the daemon's). From step --shift-step on, every
// --shift-every-th series steps up by --shift noise sd. The send time of each of their
// shifted readings is kept, and the alert log (--alerts, the daemon's
// <storage.directory>/alerts.jsonl) is followed: an alert on a shifted series
// whose detected_at is one of those readings counts one latency, from just
// before that reading's batch was written to the socket to the moment the
// alert line was read from the log (so it includes the alert log's fsync).
//
// usage: load_generator --port 7411 [--host 127.0.0.1] [--connections 8]
//          [--series 1000] [--steps 600] [--spacing 60] [--rate 0]
//          [--shift-step 400] [--shift-every 10] [--shift 6] [--alerts FILE]
//          [--linger 2] [--http-port 7412] [--write-ms 1]
// With --http-port the run ends when the daemon's /metrics count
// plumbline_readings_accepted_total has grown by every reading sent (readings
// held in its queues are not yet ingested); otherwise at the last byte sent.
// Prints one line of key=value figures.
#include <arpa/inet.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <sys/socket.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <ctime>
#include <map>
#include <mutex>
#include <numbers>
#include <random>
#include <string>
#include <thread>
#include <vector>

namespace {

using Clock = std::chrono::steady_clock;

struct Options {
  std::string host = "127.0.0.1";
  int port = 7411;
  int connections = 8;
  int series = 1000;
  int steps = 600;
  int spacing = 60;
  double rate = 0.0;
  int shift_step = 400;
  int shift_every = 10;
  double shift = 6.0;
  std::string alerts;
  double linger = 2.0;
  int http_port = 0;
  double write_ms =
      1.0;  // with --rate: how much of a connection's schedule one write carries
};

constexpr std::int64_t kStart = 1'772'323'200;  // 2026-03-01T00:00:00Z
constexpr int kMaxLinesPerWrite = 512;

// Lines in one write to the socket. At full speed the largest writes; at a
// set rate, --write-ms worth of the connection's share (at least one line),
// so a reading does not queue behind a burst of the lines sent with it.
int LinesPerWrite(const Options& o) {
  if (o.rate <= 0.0) return kMaxLinesPerWrite;
  const double lines = o.rate / o.connections * o.write_ms / 1000.0;
  return static_cast<int>(std::clamp(std::round(lines), 1.0, double{kMaxLinesPerWrite}));
}

bool ParseOptions(int argc, char** argv, Options* o) {
  for (int i = 1; i + 1 < argc; i += 2) {
    const std::string key = argv[i];
    const char* value = argv[i + 1];
    if (key == "--host") {
      o->host = value;
    } else if (key == "--port") {
      o->port = std::atoi(value);
    } else if (key == "--connections") {
      o->connections = std::atoi(value);
    } else if (key == "--series") {
      o->series = std::atoi(value);
    } else if (key == "--steps") {
      o->steps = std::atoi(value);
    } else if (key == "--spacing") {
      o->spacing = std::atoi(value);
    } else if (key == "--rate") {
      o->rate = std::atof(value);
    } else if (key == "--shift-step") {
      o->shift_step = std::atoi(value);
    } else if (key == "--shift-every") {
      o->shift_every = std::atoi(value);
    } else if (key == "--shift") {
      o->shift = std::atof(value);
    } else if (key == "--alerts") {
      o->alerts = value;
    } else if (key == "--linger") {
      o->linger = std::atof(value);
    } else if (key == "--http-port") {
      o->http_port = std::atoi(value);
    } else if (key == "--write-ms") {
      o->write_ms = std::atof(value);
    } else {
      std::fprintf(stderr, "load_generator: unknown option %s\n", key.c_str());
      return false;
    }
  }
  return o->connections >= 1 && o->series >= o->connections && o->steps >= 1 &&
         o->spacing >= 1 && o->shift_every >= 1 && o->write_ms > 0.0;
}

int Connect(const Options& o, int port) {
  const int fd = ::socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in address{};
  address.sin_family = AF_INET;
  address.sin_port = htons(static_cast<std::uint16_t>(port));
  if (fd < 0 || ::inet_pton(AF_INET, o.host.c_str(), &address.sin_addr) != 1 ||
      ::connect(fd, reinterpret_cast<sockaddr*>(&address), sizeof address) != 0) {
    std::perror("load_generator: connect");
    std::exit(2);
  }
  const int one = 1;
  ::setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
  return fd;
}

void WriteAll(int fd, const std::string& text) {
  std::size_t done = 0;
  while (done < text.size()) {
    const ssize_t n = ::write(fd, text.data() + done, text.size() - done);
    if (n <= 0) {
      std::perror("load_generator: write");
      std::exit(2);
    }
    done += static_cast<std::size_t>(n);
  }
}

// Send times of the shifted readings, by (series, event time in seconds).
struct SendLog {
  std::mutex mutex;
  std::map<std::pair<int, std::int64_t>, Clock::time_point> sent;
};

void Sender(const Options& o, int connection, SendLog* log, std::atomic<long>* total) {
  const int fd = Connect(o, o.port);
  std::mt19937_64 random(static_cast<std::uint64_t>(connection) + 1);
  std::normal_distribution<double> noise;
  std::vector<int> mine;
  for (int s = connection; s < o.series; s += o.connections) mine.push_back(s);
  std::vector<double> level(mine.size());
  for (std::size_t i = 0; i < mine.size(); ++i) level[i] = 20.0 + (mine[i] % 50);
  const double per_second = o.rate / o.connections;  // this connection's share
  const int lines_per_write = LinesPerWrite(o);
  // At a set rate the connections take turns: each starts its schedule a
  // share of one write's interval after the one before, instead of all
  // writing at the same instants.
  const double offset =
      per_second > 0.0 ? lines_per_write / per_second * connection / o.connections : 0.0;
  const Clock::time_point began =
      Clock::now() +
      std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(offset));
  long lines = 0;
  std::string text;
  std::vector<std::pair<int, std::int64_t>> pending;  // shifted readings in `text`
  auto flush = [&] {
    if (per_second > 0.0) {
      std::this_thread::sleep_until(
          began +
          std::chrono::duration_cast<Clock::duration>(
              std::chrono::duration<double>(static_cast<double>(lines) / per_second)));
    }
    if (!pending.empty()) {
      const Clock::time_point now = Clock::now();
      std::lock_guard<std::mutex> lock(log->mutex);
      for (const auto& key : pending) log->sent[key] = now;
      pending.clear();
    }
    WriteAll(fd, text);
    text.clear();
  };
  char line[96];
  int in_text = 0;
  for (int step = 0; step < o.steps; ++step) {
    const std::int64_t t = kStart + static_cast<std::int64_t>(step) * o.spacing;
    const double days = static_cast<double>(t - kStart) / 86400.0;
    const double season = 3.0 * std::sin(2 * std::numbers::pi * days) +
                          1.5 * std::cos(2 * std::numbers::pi * days / 7);
    for (std::size_t i = 0; i < mine.size(); ++i) {
      const bool shifted = step >= o.shift_step && mine[i] % o.shift_every == 0;
      const double value = level[i] + season + noise(random) + (shifted ? o.shift : 0.0);
      const int n = std::snprintf(line, sizeof line, "%lld,load/s%05d,%.4f\n",
                                  static_cast<long long>(t), mine[i], value);
      text.append(line, static_cast<std::size_t>(n));
      if (shifted) pending.emplace_back(mine[i], t);
      ++lines;
      if (++in_text == lines_per_write) {
        flush();
        in_text = 0;
      }
    }
  }
  flush();
  total->fetch_add(lines);
  ::close(fd);
}

// plumbline_readings_accepted_total from GET /metrics (readings that reached a
// series' model).
double AcceptedReadings(const Options& o) {
  const int fd = Connect(o, o.http_port);
  WriteAll(fd,
           "GET /metrics HTTP/1.1\r\nHost: " + o.host + "\r\nConnection: close\r\n\r\n");
  std::string answer;
  char buffer[65536];
  ssize_t n;
  while ((n = ::read(fd, buffer, sizeof buffer)) > 0) answer.append(buffer, n);
  ::close(fd);
  const char kName[] = "\nplumbline_readings_accepted_total ";
  const std::size_t at = answer.find(kName);
  return at == std::string::npos ? -1.0
                                 : std::atof(answer.c_str() + at + sizeof kName - 1);
}

// "key":"value" of a JSON line (the alert log's strings need no unescaping
// for the two fields read here).
std::string Field(const std::string& line, const char* key) {
  const std::string quoted = std::string("\"") + key + "\":\"";
  const std::size_t at = line.find(quoted);
  if (at == std::string::npos) return "";
  const std::size_t from = at + quoted.size();
  return line.substr(from, line.find('"', from) - from);
}

std::int64_t EpochSeconds(const std::string& rfc3339) {
  std::tm tm{};
  if (::strptime(rfc3339.c_str(), "%Y-%m-%dT%H:%M:%S", &tm) == nullptr) return -1;
  return static_cast<std::int64_t>(::timegm(&tm));
}

double Percentile(std::vector<double> v, double p) {
  if (v.empty()) return NAN;
  std::sort(v.begin(), v.end());
  return v[static_cast<std::size_t>(std::min<double>(v.size() - 1, p * v.size()))];
}

}  // namespace

int main(int argc, char** argv) {
  Options o;
  if (!ParseOptions(argc, argv, &o)) {
    std::fprintf(
        stderr,
        "usage: load_generator --port P [--host H] [--connections C] [--series S]\n"
        "  [--steps N] [--spacing SEC] [--rate READINGS_PER_S] [--shift-step K]\n"
        "  [--shift-every M] [--shift SD] [--alerts FILE] [--linger SEC]\n"
        "  [--http-port P] [--write-ms MS]\n");
    return 2;
  }
  SendLog log;
  std::atomic<long> total{0};
  std::atomic<bool> senders_done{false};
  std::vector<double> latencies_ms;
  long alerts_seen = 0;
  std::thread follower;
  if (!o.alerts.empty()) {
    follower = std::thread([&] {
      FILE* file = nullptr;
      std::string partial;
      char buffer[65536];
      Clock::time_point stop_at = Clock::time_point::max();
      while (Clock::now() < stop_at) {
        if (senders_done && stop_at == Clock::time_point::max()) {
          stop_at = Clock::now() + std::chrono::duration_cast<Clock::duration>(
                                       std::chrono::duration<double>(o.linger));
        }
        if (file == nullptr) file = std::fopen(o.alerts.c_str(), "r");
        const std::size_t n =
            file != nullptr ? std::fread(buffer, 1, sizeof buffer, file) : 0;
        if (n == 0) {
          if (file != nullptr) std::clearerr(file);
          std::this_thread::sleep_for(std::chrono::microseconds(200));
          continue;
        }
        const Clock::time_point now = Clock::now();
        partial.append(buffer, n);
        std::size_t end;
        while ((end = partial.find('\n')) != std::string::npos) {
          const std::string line = partial.substr(0, end);
          partial.erase(0, end + 1);
          ++alerts_seen;
          const std::string series = Field(line, "series");
          if (series.rfind("load/s", 0) != 0) continue;
          const int s = std::atoi(series.c_str() + 6);
          const std::int64_t at = EpochSeconds(Field(line, "detected_at"));
          std::lock_guard<std::mutex> lock(log.mutex);
          const auto it = log.sent.find({s, at});
          if (it != log.sent.end()) {
            latencies_ms.push_back(
                std::chrono::duration<double, std::milli>(now - it->second).count());
          }
        }
      }
      if (file != nullptr) std::fclose(file);
    });
  }
  const double baseline = o.http_port > 0 ? AcceptedReadings(o) : 0.0;
  const Clock::time_point began = Clock::now();
  std::vector<std::thread> senders;
  for (int c = 0; c < o.connections; ++c) {
    senders.emplace_back(Sender, std::cref(o), c, &log, &total);
  }
  for (std::thread& t : senders) t.join();
  const double sent_seconds = std::chrono::duration<double>(Clock::now() - began).count();
  // Throughput counts until the daemon has taken every reading into a model
  // (with --http-port), not just until the last byte left.
  // (A count that stops growing for 2 s ends the wait: readings were refused.)
  double seconds = sent_seconds;
  double accepted = static_cast<double>(total.load());
  if (o.http_port > 0) {
    Clock::time_point last_growth = Clock::now();
    double seen = -1.0;
    while ((accepted = AcceptedReadings(o) - baseline) <
               static_cast<double>(total.load()) &&
           Clock::now() - last_growth < std::chrono::seconds(2)) {
      if (accepted > seen) {
        seen = accepted;
        last_growth = Clock::now();
        seconds = std::chrono::duration<double>(last_growth - began).count();
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(5));
    }
    if (accepted >= static_cast<double>(total.load())) {
      seconds = std::chrono::duration<double>(Clock::now() - began).count();
    }
  }
  senders_done = true;
  if (follower.joinable()) follower.join();
  std::printf(
      "readings=%ld accepted=%.0f sent_seconds=%.3f seconds=%.3f "
      "readings_per_second=%.0f "
      "alerts=%ld "
      "timed_alerts=%zu latency_ms_p50=%.2f latency_ms_p99=%.2f latency_ms_max=%.2f\n",
      total.load(), accepted, sent_seconds, seconds, accepted / seconds, alerts_seen,
      latencies_ms.size(), Percentile(latencies_ms, 0.5), Percentile(latencies_ms, 0.99),
      Percentile(latencies_ms, 1.0));
  return 0;
}
