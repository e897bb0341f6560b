// `plumbline serve [--config FILE]`: runs the daemon until SIGTERM or SIGINT.
//
// Signals are blocked in every thread and taken by the main thread with
// sigwait, so handlers never run inside library code:
//   SIGTERM, SIGINT  staged shutdown (Service::Shutdown after the HTTP server
//                    stops), bounded by shutdown_timeout; a watchdog ends the
//                    process if the stages overrun by more than kWatchdogSlack.
//   SIGHUP           re-reads the config file; a valid one replaces the
//                    profiles (series state kept where settings are unchanged),
//                    an invalid one is refused with its errors in the log and
//                    the old config stays.
//   SIGPIPE          ignored (a closed socket is an error code, not a death).
//
// Without --config the daemon runs on a built-in default: loopback listeners,
// one catch-all profile, state in ./plumbline-state.
#include <pthread.h>
#include <signal.h>
#include <unistd.h>

#include <utility>
#include <atomic>
#include <boost/asio/executor_work_guard.hpp>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/address.hpp>
#include <chrono>
#include <condition_variable>
#include <cstdio>
#include <mutex>
#include <optional>
#include <string>
#include <thread>

#include "config/config.h"
#include "daemon/command_line.h"
#include "daemon/http_server.h"
#include "daemon/log.h"
#include "daemon/metrics.h"
#include "daemon/service.h"
#include "daemon/subcommands.h"
#include "daemon/terminal.h"
#include "plumbline_version.h"

namespace plumbline {
namespace {

// Beyond shutdown_timeout, how long the watchdog waits before ending the process.
constexpr auto kWatchdogSlack = std::chrono::seconds(5);
// The HTTP server's share of the shutdown: in-flight requests finish within it.
constexpr auto kHttpGrace = std::chrono::milliseconds(2000);

constexpr char kBuiltInConfig[] = "series: []\n";  // one catch-all profile, every default

const std::vector<OptionSpec> kServeOptions = {
    {"config", true, false,
     "profiles, listeners, inputs and sinks (YAML); default: built in", "FILE"},
    {"log-level", true, false, "debug | info | warning | error (default info)", "LEVEL"},
    {"quiet", false, false,
     "print no alert lines on stdout (config sinks.stdout: false)"},
    {"json", false, false,
     "print alerts on stdout as JSON lines instead of readable lines"},
};

// Forwards the pipeline's reports to the Prometheus registry.
class MetricsObserver : public PipelineObserver {
 public:
  explicit MetricsObserver(ServiceMetrics* metrics) : metrics_(metrics) {}
  void OnOutcome(IngestOutcome outcome, std::uint64_t n) override {
    metrics_->CountOutcome(outcome, n);
  }
  void OnParseRejected(ReadingError reason, std::uint64_t n) override {
    metrics_->CountRejected(reason, n);
  }
  void OnEvent(const Alert& alert) override { metrics_->CountEvent(alert); }
  void OnNewSeries(std::size_t, std::string_view series) override {
    metrics_->AdmitSeries(series);
  }
  void OnSeriesCount(std::size_t shard, std::size_t series) override {
    metrics_->SetSeriesCount(shard, series);
  }
  void OnQueueDepth(std::size_t shard, std::size_t depth) override {
    metrics_->SetQueueDepth(shard, depth);
  }
  void OnQueueCapacity(std::size_t shard, std::size_t capacity) override {
    metrics_->SetQueueCapacity(shard, capacity);
  }
  void OnBatchLatency(double seconds) override {
    metrics_->ObserveProcessingLatency(seconds);
  }
  void OnSinkFailure(std::string_view sink) override { metrics_->CountSinkFailure(sink); }
  void OnReady(bool ready) override { metrics_->SetReady(ready); }
  void OnConnectionDropped(std::string_view input, std::string_view reason) override {
    metrics_->CountConnectionDropped(input, reason);
  }
  void OnIngestMemory(std::size_t bytes, std::size_t budget) override {
    metrics_->SetIngestMemory(bytes);
    metrics_->SetIngestMemoryBudget(budget);
  }
  void OnOverloaded(std::string_view input) override { metrics_->CountOverloaded(input); }

 private:
  ServiceMetrics* metrics_;
};

// Readiness on the metrics page follows the service's own answer, which
// changes when a durable sink fails; it is refreshed every second.
class ReadyRefresher {
 public:
  ReadyRefresher(Service* service, ServiceMetrics* metrics)
      : thread_([this, service, metrics] {
          std::unique_lock<std::mutex> lock(mutex_);
          while (!stop_) {
            lock.unlock();
            metrics->SetReady(service->Ready(nullptr));
            lock.lock();
            wake_.wait_for(lock, std::chrono::seconds(1), [this] { return stop_; });
          }
        }) {}
  ~ReadyRefresher() {
    {
      std::lock_guard<std::mutex> lock(mutex_);
      stop_ = true;
    }
    wake_.notify_all();
    thread_.join();
  }

 private:
  std::mutex mutex_;  // guards stop_
  std::condition_variable wake_;
  bool stop_ = false;
  std::thread thread_;
};

void LogHttp(HttpLogLevel level, std::string_view message) {
  const LogLevel mapped = level == HttpLogLevel::kError     ? LogLevel::kError
                          : level == HttpLogLevel::kWarning ? LogLevel::kWarning
                                                            : LogLevel::kInfo;
  Log(mapped, message, {{"component", "http"}});
}

StatusOr<Config> LoadServeConfig(const std::optional<std::string>& path) {
  if (!path) return LoadConfigText(kBuiltInConfig, "(built-in default)");
  return LoadConfigFile(*path);
}

void Reload(Service* service, const std::optional<std::string>& path) {
  if (!path) {
    LogWarning(
        "reload asked, but the daemon runs on the built-in default; nothing to reload");
    return;
  }
  LogInfo("reloading config", {{"path", *path}});
  auto config = LoadConfigFile(*path);
  if (!config.ok()) {
    LogError("config refused; the old one stays in force",
             {{"path", *path}, {"errors", config.status().message()}});
    return;
  }
  auto report = service->Reload(*config);
  if (!report.ok()) {
    LogError("config refused; the old one stays in force",
             {{"path", *path}, {"error", report.status().message()}});
    return;
  }
  LogInfo("config reloaded", {{"path", *path},
                              {"profiles", config->series.size()},
                              {"series_kept", report->series.kept},
                              {"series_retuned", report->series.retuned},
                              {"series_restarted", report->series.restarted},
                              {"series_dropped", report->series.dropped}});
  for (const std::string& line : report->ignored) {
    LogWarning("service setting changed; it takes effect at the next restart",
               {{"setting", line}});
  }
}

}  // namespace

int RunServe(const Args& args) {
  auto parsed = ParseArgs(args, kServeOptions);
  if (!parsed.ok()) {
    std::fprintf(stderr, "plumbline serve: %s\n", parsed.status().message().c_str());
    return 2;
  }
  if (parsed->Has("help")) {
    std::printf(
        "usage: plumbline serve [--config FILE]\n\n"
        "Runs the daemon: ingests readings over TCP (one per line), HTTP (POST\n"
        "/v1/readings) and followed files, raises alerts live to the alert log,\n"
        "stdout and a webhook, and serves the HTTP API and /metrics. Without\n"
        "--config it runs on a built-in default: TCP 127.0.0.1:7411, HTTP\n"
        "127.0.0.1:7412, one catch-all profile, state in ./plumbline-state.\n\n"
        "Signals: SIGTERM or SIGINT stop it in stages (inputs, queues, sinks);\n"
        "SIGHUP reloads the profiles from FILE, keeping series state.\n\n%s",
        FormatOptions(kServeOptions).c_str());
    return 0;
  }
  if (auto level = parsed->Get("log-level")) {
    auto value = LogLevelFromString(*level);
    if (!value) {
      std::fprintf(stderr, "plumbline serve: --log-level must be one of %s\n",
                   std::string(LogLevelChoices()).c_str());
      return 2;
    }
    SetLogLevel(*value);
  }
  const std::optional<std::string> config_path = parsed->Get("config");
  auto config = LoadServeConfig(config_path);
  if (!config.ok()) {
    std::fprintf(stderr, "%s\n", config.status().message().c_str());
    return 1;
  }

  // Every thread started from here on inherits the blocked set.
  sigset_t signals;
  sigemptyset(&signals);
  sigaddset(&signals, SIGTERM);
  sigaddset(&signals, SIGINT);
  sigaddset(&signals, SIGHUP);
  pthread_sigmask(SIG_BLOCK, &signals, nullptr);
  ::signal(SIGPIPE, SIG_IGN);

  LogInfo("starting", {{"version", PLUMBLINE_VERSION},
                       {"config", config_path.value_or("(built-in default)")},
                       {"pid", static_cast<long long>(::getpid())}});
  const ServiceOptions& options = config->service;
  ServiceMetricsOptions metrics_options;
  metrics_options.shards = static_cast<std::size_t>(options.EffectiveShards());
  metrics_options.max_detector_series =
      static_cast<std::size_t>(options.metrics_series_limit);
  ServiceMetrics metrics(metrics_options);
  MetricsObserver observer(&metrics);
  ServiceDependencies dependencies;
  dependencies.observer = &observer;
  if (parsed->Has("quiet")) config->service.sinks.to_stdout = false;
  dependencies.text_json = parsed->Has("json");
  dependencies.text_colour = !dependencies.text_json && WantsColour(stdout);
  Service service(*config, dependencies);
  if (Status status = service.Start(); !status.ok()) {
    LogError("cannot start", {{"error", status.message()}});
    return 1;
  }

  boost::asio::io_context http_io;
  std::optional<HttpServer> http;
  std::thread http_thread;
  if (options.http.enabled) {
    boost::system::error_code error;
    const auto address = boost::asio::ip::make_address(options.http.address, error);
    if (error) {
      LogError("cannot start",
               {{"error", "http listener: bad address '" + options.http.address +
                              "': " + error.message()}});
      service.Shutdown();
      return 1;
    }
    HttpServerOptions http_options;
    http_options.max_body_bytes = options.http.max_body_bytes;
    http_options.token = service.access_token();
    http_options.tls = service.http_tls();
    http.emplace(http_io,
                 boost::asio::ip::tcp::endpoint(
                     address, static_cast<unsigned short>(options.http.port)),
                 service, &metrics, http_options, LogHttp);
    if (Status status = http->Start(); !status.ok()) {
      LogError("cannot start", {{"error", status.message()}});
      service.Shutdown();
      return 1;
    }
    http_thread = std::thread([&http_io] {
      auto work = boost::asio::make_work_guard(http_io);
      http_io.run();
    });
  }
  std::optional<ReadyRefresher> refresher;
  refresher.emplace(&service, &metrics);
  LogInfo("ready", {{"tcp", options.tcp.enabled ? service.tcp_address() + ":" +
                                                      std::to_string(service.tcp_port())
                                                : std::string("off")},
                    {"http", http ? http->local_endpoint().address().to_string() + ":" +
                                        std::to_string(http->local_endpoint().port())
                                  : std::string("off")}});

  while (true) {
    int signal_number = 0;
    if (sigwait(&signals, &signal_number) != 0) continue;
    if (signal_number == SIGHUP) {
      Reload(&service, config_path);
      continue;
    }
    LogInfo("shutdown asked",
            {{"signal", signal_number == SIGINT ? "SIGINT" : "SIGTERM"}});
    break;
  }

  // A watchdog, so that a stuck stage cannot keep the process alive forever.
  const auto limit = std::chrono::microseconds(options.shutdown_timeout) + kWatchdogSlack;
  std::thread([limit] {
    std::this_thread::sleep_for(limit);
    LogError("shutdown overran its time; exiting now");
    std::_Exit(1);
  }).detach();

  const auto begun = std::chrono::steady_clock::now();
  refresher.reset();
  if (http) {
    LogInfo("shutting down: stopping the HTTP server");
    http->Stop(kHttpGrace);
    http->WaitStopped(kHttpGrace + std::chrono::milliseconds(500));
  }
  service.Shutdown();
  http_io.stop();
  if (http_thread.joinable()) http_thread.join();
  http.reset();
  LogInfo("exiting", {{"shutdown_seconds", std::chrono::duration<double>(
                                               std::chrono::steady_clock::now() - begun)
                                               .count()}});
  return 0;
}

}  // namespace plumbline
