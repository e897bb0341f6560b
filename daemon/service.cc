#include "daemon/service.h"

#include <algorithm>
#include <cmath>

#include "daemon/access.h"
#include "daemon/design_cache.h"
#include "daemon/http_api.h"
#include "daemon/kafka_alert_sink.h"
#include "daemon/log.h"
#include "detectors/glob.h"

namespace plumbline {
namespace {

using SteadyTime = std::chrono::steady_clock::time_point;

// Alert batches waiting for the dispatcher, from all shards together.
constexpr std::size_t kDispatcherQueueBatches = 1024;
// Alerts and events kept for GET /v1/alerts.
constexpr std::size_t kRecentAlerts = 10000;

// Calibrates every profile (once, into the cache), so a profile that cannot
// be designed is refused at start or reload instead of dropping its series.
Status CheckProfiles(const Config& config, DesignCache* designs) {
  for (const ProfileOptions& profile : config.series) {
    auto design = designs->Make(profile);
    if (!design.ok()) {
      return Status::InvalidArgument(
          "profile \"" + profile.match +
          "\" cannot be calibrated: " + design.status().message());
    }
  }
  return Status::Ok();
}

bool InMaintenance(const Config& config, const std::string& name, EventTime time) {
  for (const Annotation& a : config.annotations) {
    if (a.kind == AnnotationKind::kMaintenance && a.from <= time && time < a.to &&
        GlobMatch(a.match, name)) {
      return true;
    }
  }
  return false;
}

SeriesSummary Summarise(const ShardState& state, const std::string& name,
                        const SeriesExtras& extras) {
  SeriesSummary summary;
  summary.name = name;
  if (const ProfileOptions* profile = MatchProfile(state.config(), name)) {
    summary.kind = std::string(ToString(profile->kind));
  }
  summary.last_time = extras.last_time;
  summary.last_value = extras.last_value;
  summary.readings = extras.readings;
  summary.alert_count = extras.alert_count;
  summary.last_change_at = extras.last_change_at;
  if (const SeriesMonitor* monitor = state.engine().Find(name)) {
    summary.armed = monitor->armed();
    summary.silent = monitor->silent();
  }
  if (summary.silent) {
    summary.state = SeriesState::kQuiet;
  } else if (InMaintenance(state.config(), name, extras.last_time)) {
    summary.state = SeriesState::kHeld;
  } else if (!summary.armed) {
    summary.state = SeriesState::kSettling;
  } else if (extras.shifted) {
    summary.state = SeriesState::kShifted;
  } else {
    summary.state = SeriesState::kSteady;
  }
  return summary;
}

std::vector<SeriesDetail::Span> AnnotationSpans(const Config& config,
                                                const std::string& name) {
  std::vector<SeriesDetail::Span> spans;
  for (const Annotation& a : config.annotations) {
    if (!GlobMatch(a.match, name)) continue;
    SeriesDetail::Span span{a.id, std::string(ToString(a.kind)), a.from, a.to, a.note};
    if (a.kind == AnnotationKind::kPlannedChange) {
      span.from = a.at - a.within;
      span.to = a.at + a.within;
    }
    spans.push_back(std::move(span));
  }
  return spans;
}

}  // namespace

Service::Service(Config config, ServiceDependencies dependencies)
    : config_(std::move(config)),
      deps_(dependencies),
      max_line_bytes_(config_.service.tcp.max_line_bytes),
      max_time_ahead_(config_.service.max_time_ahead),
      annotation_file_(config_.service.InStateDirectory(kAnnotationFileName)),
      designs_(std::make_shared<DesignCache>()) {}

Service::~Service() { Shutdown(); }

Status Service::Start() {
  const ServiceOptions& options = config_.service;
  std::string why;
  if (!options.IsValid(&why)) return Status::InvalidArgument("service settings: " + why);
  auto token = LoadAccessToken(options.access);
  if (!token.ok()) return token.status();
  access_token_ = std::move(*token);
  auto tcp_tls = MakeServerTlsContext(options.tcp.tls, "listeners.tcp");
  if (!tcp_tls.ok()) return tcp_tls.status();
  tcp_tls_ = std::move(*tcp_tls);
  auto http_tls = MakeServerTlsContext(options.http.tls, "listeners.http");
  if (!http_tls.ok()) return http_tls.status();
  http_tls_ = std::move(*http_tls);
  if (Status status = CheckProfiles(config_, designs_.get()); !status.ok()) return status;
  if (Status status = deps_.file_system->CreateDirectories(options.state_directory);
      !status.ok()) {
    return status;
  }
  Config initial;  // the profiles with the config's and the API's annotations
  {
    StatusOr<std::vector<Annotation>> saved =
        LoadAnnotationFile(deps_.file_system, annotation_file_);
    if (!saved.ok()) return saved.status();
    std::lock_guard<std::mutex> lock(annotations_mutex_);
    file_config_ = config_;
    api_annotations_ = std::move(saved).value();
    next_annotation_number_ = api_annotations_.size() + 1;
    initial = WithApiAnnotations();
  }

  AlertDispatcher::Options dispatch;
  dispatch.queue_batches = kDispatcherQueueBatches;
  dispatch.recent = kRecentAlerts;
  dispatch.events = options.sinks.events;
  dispatcher_ = std::make_unique<AlertDispatcher>(dispatch, deps_.observer);
  if (options.sinks.alert_log.enabled) {
    auto log =
        std::make_unique<AlertLog>(options.InStateDirectory(options.sinks.alert_log.path),
                                   deps_.file_system, deps_.observer);
    std::string failure;
    if (!log->Healthy(&failure)) return Status::IoError(failure);
    dispatcher_->AddSink(std::move(log), options.sinks.alert_log.min_severity);
  }
  if (options.sinks.to_stdout) {
    dispatcher_->AddSink(
        std::make_unique<StdoutSink>(deps_.text_out, deps_.text_json, deps_.text_colour),
        options.sinks.stdout_min_severity);
  }
  if (options.sinks.webhook.enabled()) {
    auto webhook = std::make_unique<WebhookSink>(
        options.sinks.webhook,
        options.InStateDirectory(options.sinks.webhook.dead_letter), deps_.file_system,
        deps_.observer);
    webhook->Start();
    dispatcher_->AddSink(std::move(webhook), options.sinks.webhook.min_severity);
  }
  if (options.sinks.kafka.enabled()) {
    auto kafka = KafkaAlertSink::Make(options.sinks.kafka, deps_.observer);
    if (!kafka.ok()) return kafka.status();
    dispatcher_->AddSink(std::move(kafka).value(), options.sinks.kafka.min_severity);
  }
  dispatcher_->Start();

  ShardOptions shard_options;
  shard_options.queue_batches = static_cast<std::size_t>(options.queue_batches);
  shard_options.engine.max_series = options.max_series;
  shard_options.recent_points = options.recent_points;
  if (options.checkpoint_every > 0) {  // checkpoints and the log go together
    wal_ = std::make_unique<WriteAheadLog>(options.state_directory, deps_.file_system);
    shard_options.wal = wal_.get();
  }
  shard_options.engine.make_design = [designs = designs_](const ProfileOptions& profile) {
    return designs->Make(profile);
  };
  AlertPublisher* publisher = dispatcher_.get();
  if (wal_ && options.sinks.alert_log.enabled) {  // a restart replays the log's tail
    known_alerts_ = MakeKnownAlertFilter(
        options.InStateDirectory(options.sinks.alert_log.path), publisher, nullptr);
    publisher = known_alerts_.get();
  }
  shards_ = std::make_unique<ShardSet>(
      static_cast<std::size_t>(options.EffectiveShards()), initial, shard_options,
      deps_.clock, publisher, deps_.observer);
  budget_ = std::make_unique<IngestBudget>(options.ingest_memory_bytes, deps_.observer);
  shards_->set_budget(budget_.get());
  shards_->Start();
  if (Status status = StartCheckpoints(); !status.ok()) {
    started_ = true;
    Shutdown();
    return status;
  }

  if (options.tcp.enabled) {
    tcp_ = std::make_unique<TcpListener>(
        io_, options.tcp, shards_.get(), deps_.observer,
        TcpIngestRules{options.max_time_ahead, access_token_, tcp_tls_});
    tcp_->set_write_ahead_log(wal_.get());
    if (Status status = tcp_->Start(); !status.ok()) {
      tcp_.reset();
      started_ = true;
      Shutdown();  // stops what already runs
      return status;
    }
    work_.emplace(boost::asio::make_work_guard(io_));
    io_thread_ = std::thread([this] { io_.run(); });
  }
  for (const FileInputOptions& file : options.files) {
    followers_.push_back(std::make_unique<FileFollower>(
        file, options.state_directory, shards_.get(), deps_.file_system, deps_.observer));
    followers_.back()->set_write_ahead_log(wal_.get());  // null without checkpoints
    followers_.back()->Start();
  }
  if (options.kafka.enabled()) {
    kafka_ = std::make_unique<KafkaInput>(
        options.kafka, shards_.get(),
        [dispatcher = dispatcher_.get()](SteadyTime deadline) {
          return dispatcher->Flush(deadline);
        },
        options.max_time_ahead, deps_.file_system, deps_.observer);
    if (Status status = kafka_->Start(); !status.ok()) {
      kafka_.reset();
      started_ = true;
      Shutdown();
      return status;
    }
  }
  if (options.mqtt.enabled()) {
    mqtt_ = std::make_unique<MqttInput>(options.mqtt, shards_.get(), options.max_time_ahead,
                                        deps_.observer);
    if (Status status = mqtt_->Start(); !status.ok()) {
      mqtt_.reset();
      started_ = true;
      Shutdown();
      return status;
    }
  }
  started_ = true;
  if (deps_.observer) deps_.observer->OnReady(true);
  LogInfo("service started", {{"shards", shards_->size()},
                              {"profiles", config_.series.size()},
                              {"state_directory", options.state_directory},
                              {"files", options.files.size()}});
  return Status::Ok();
}

void Service::StopInputs(SteadyTime deadline) {
  if (tcp_) {
    tcp_->Stop();
    while (tcp_->open_connections() > 0 && std::chrono::steady_clock::now() < deadline) {
      std::this_thread::sleep_for(std::chrono::milliseconds(5));
    }
  }
  for (auto& follower : followers_) follower->Stop();
  if (kafka_) kafka_->Stop();  // leaves the group: its partitions' state saved
  if (mqtt_) mqtt_->Stop();
  if (io_thread_.joinable()) {
    work_.reset();
    io_.stop();
    io_thread_.join();
  }
}

void Service::Shutdown() {
  if (!started_ || stopped_) return;
  stopped_ = true;
  stopping_ = true;
  if (deps_.observer) deps_.observer->OnReady(false);
  const auto begun = std::chrono::steady_clock::now();
  // The stages share the time: inputs and shard queues get 60% of it, the
  // sinks (the webhook's retries) what is left.
  const auto timeout = std::chrono::microseconds(config_.service.shutdown_timeout);
  const SteadyTime drain_deadline = begun + timeout * 6 / 10;
  const SteadyTime deadline = begun + timeout;
  LogInfo("shutting down: stopping inputs");
  StopInputs(drain_deadline);
  StopCheckpoints(drain_deadline);
  LogInfo("shutting down: draining shard queues");
  if (shards_) shards_->CloseAndJoin(drain_deadline);
  LogInfo("shutting down: flushing sinks");
  if (dispatcher_) dispatcher_->Stop(deadline);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - begun).count();
  LogInfo("stopped",
          {{"seconds", seconds},
           {"alerts_delivered", static_cast<unsigned long long>(delivered())}});
}

StatusOr<ReloadReport> Service::Reload(const Config& config) {
  if (!started_ || stopping_)
    return Status::FailedPrecondition("the service is not running");
  if (Status status = CheckProfiles(config, designs_.get()); !status.ok()) return status;
  ReloadReport report;
  const std::vector<std::string> before = DescribeService(config_.service);
  const std::vector<std::string> after = DescribeService(config.service);
  for (std::size_t i = 0; i < after.size(); ++i) {
    if (i >= before.size() || before[i] != after[i]) report.ignored.push_back(after[i]);
  }
  // Running series stay on their shards: until a restart places them by the
  // new relations, a series whose covariate is on another shard reads it as
  // missing (its running mean).
  if (!shards_->groups().SamePlacement(CovariateGroups(config))) {
    report.ignored.push_back(
        "covariate relations (which series share a shard; until then a covariate on "
        "another shard reads as missing)");
  }
  // Shared, not referenced: a task that outlives a timed-out wait still has it.
  // The annotations made through the API stay.
  std::lock_guard<std::mutex> lock(annotations_mutex_);
  file_config_ = config;
  auto shared = std::make_shared<const Config>(WithApiAnnotations());
  for (std::size_t i = 0; i < shards_->size(); ++i) {
    auto result = shards_->shard(i).Ask<ReconfigureReport>(
        [shared, dispatcher = dispatcher_.get()](ShardState& state) {
          std::vector<Alert> released;  // by series flushed for a restart
          ReconfigureReport r = state.Reconfigure(*shared, &released);
          dispatcher->Publish(state.index(), &released);
          return r;
        },
        std::chrono::seconds(60));
    if (!result)
      return Status::Unavailable("shard " + std::to_string(i) + " did not answer");
    report.series.kept += result->kept;
    report.series.retuned += result->retuned;
    report.series.restarted += result->restarted;
    report.series.dropped += result->dropped;
  }
  Config updated = config;
  updated.service = config_.service;  // service settings change only with a restart
  config_ = std::move(updated);
  return report;
}

IngestReceipt Service::IngestLines(std::string_view body) {
  IngestReceipt receipt;
  if (!started_ || stopping_ || !shards_) {
    // Not taking readings: every line is refused, reported once as line 1.
    receipt.rejected =
        static_cast<std::size_t>(std::count(body.begin(), body.end(), '\n')) +
        (!body.empty() && body.back() != '\n' ? 1 : 0);
    receipt.first_rejections.push_back({1, started_ ? "shutting_down" : "starting"});
    return receipt;
  }
  // The body and, at worst, a batch entry and a name as long as the line for
  // every line, taken from the budget at once or not at all (503).
  const std::size_t lines =
      static_cast<std::size_t>(std::count(body.begin(), body.end(), '\n'));
  const std::size_t bytes = 2 * body.size() + (lines + 1) * sizeof(ReadingBatch::Entry);
  if (!budget_->TryAcquire(bytes, "http")) {
    receipt.overloaded = true;
    return receipt;
  }
  auto lease = std::make_shared<IngestLease>(budget_.get(), bytes);
  auto ticket = std::make_shared<IngestTicket>();
  std::uint64_t wal_sequence = 0;
  std::uint64_t routed = 0, parse_refused = 0;
  {
    ShardRouter router(shards_.get(), ticket, std::move(lease), "http");
    ReadingParserOptions parser_options;
    parser_options.max_line_bytes = max_line_bytes_;
    ReadingParser* parser_ptr = nullptr;
    ReadingParser parser(
        parser_options,
        [&](const Reading& reading) { router.Add(reading, parser_ptr->line_number()); },
        [&](std::uint64_t line, ReadingError reason, std::string_view) {
          if (deps_.observer) deps_.observer->OnParseRejected(reason, 1);
          ++parse_refused;
          ticket->Refuse(line, std::string(ToString(reason)));
        });
    parser_ptr = &parser;
    parser.set_latest_time(WallClockNow() + max_time_ahead_);
    parser.Feed(body);
    parser.Finish();
    router.Flush();
    routed = router.routed();
    wal_sequence = router.last_wal_sequence();
  }
  const bool judged = ticket->Wait(kIngestWait);
  // Durable mode: answered once the readings are in the fsynced log.
  if (wal_ && config_.service.http_ingest == IngestAck::kDurable && wal_sequence > 0 &&
      !wal_->WaitDurable(wal_sequence, kIngestWait)) {
    receipt.rejected = routed + parse_refused;
    receipt.first_rejections.push_back({1, "not_durable"});
    LogWarning("ingest not made durable", {{"input", "http"}});
    return receipt;
  }
  receipt.accepted = ticket->accepted();
  receipt.rejected = ticket->refused();
  if (!judged) {
    // Readings still queued were taken; their verdict is not known yet, so
    // they count as accepted.
    const std::uint64_t shard_refused = receipt.rejected - parse_refused;
    const std::uint64_t pending = routed - receipt.accepted - shard_refused;
    receipt.accepted += pending;
    LogWarning("ingest answered before every reading was judged",
               {{"input", "http"}, {"pending_readings", pending}});
  }
  for (const IngestTicket::Refusal& refusal : ticket->first_refusals()) {
    receipt.first_rejections.push_back({refusal.line, refusal.reason});
  }
  return receipt;
}

std::vector<SeriesSummary> Service::ListSeries(std::string_view glob) {
  std::vector<SeriesSummary> out;
  if (!shards_) return out;
  const std::string pattern = glob.empty() ? "**" : std::string(glob);
  for (std::size_t i = 0; i < shards_->size(); ++i) {
    auto part = shards_->shard(i).Ask<std::vector<SeriesSummary>>(
        [pattern](ShardState& state) {
          std::vector<SeriesSummary> rows;
          for (const auto& [name, extras] : state.series()) {
            if (pattern == "**" || GlobMatch(pattern, name)) {
              rows.push_back(Summarise(state, name, extras));
            }
          }
          return rows;
        },
        kAskTimeout);
    if (!part) {
      LogWarning("series list incomplete: a shard did not answer in time",
                 {{"shard", i}});
      continue;
    }
    out.insert(out.end(), std::make_move_iterator(part->begin()),
               std::make_move_iterator(part->end()));
  }
  std::sort(out.begin(), out.end(), [](const SeriesSummary& a, const SeriesSummary& b) {
    return a.name < b.name;
  });
  return out;
}

std::optional<SeriesDetail> Service::GetSeries(std::string_view name) {
  if (!shards_) return std::nullopt;
  const std::string wanted(name);
  auto answer =
      shards_->shard(shards_->ShardFor(wanted))
          .Ask<std::optional<SeriesDetail>>(
              [wanted](ShardState& state) -> std::optional<SeriesDetail> {
                const SeriesExtras* extras = state.Find(wanted);
                const SeriesMonitor* monitor = state.engine().Find(wanted);
                if (!extras || !monitor) return std::nullopt;
                SeriesDetail detail;
                detail.summary = Summarise(state, wanted, *extras);
                detail.sigma = monitor->scale().sigma();
                detail.last_z = monitor->last_z();
                detail.calibration.autocorrelation = monitor->residual_autocorrelation();
                if (const CalibrationHealth& h = monitor->health(); h.count() > 0) {
                  detail.calibration.variance = h.variance();
                  detail.calibration.lag1 = h.lag1();
                  detail.calibration.tail_share = h.tail_share();
                  detail.calibration.drift_ratio = h.drift_ratio();
                }
                detail.calibration.level_chart = monitor->count_chart() ? "count" : "normal";
                detail.calibration.adapted_threshold = monitor->adapted_threshold();
                for (const SeriesMonitor::DetectorSnapshot& d :
                     monitor->DetectorSnapshots()) {
                  detail.detectors.push_back(
                      {std::string(d.name), d.statistic, d.threshold});
                }
                if (const auto run_length = monitor->RunLength()) {
                  detail.run_length = SeriesDetail::RunLength{
                      static_cast<double>(run_length->most_likely),
                      run_length->change_probability};
                }
                const SeasonalForecaster* forecaster = monitor->forecaster();
                if (forecaster && forecaster->has_data()) {
                  const Forecast f = forecaster->Predict(extras->last_time);
                  detail.forecast = f.value;
                  const double half =
                      kBandZ * detail.sigma *
                      std::sqrt(1.0 + std::max(0.0, f.parameter_variance_factor));
                  detail.band_low = f.value - half;
                  detail.band_high = f.value + half;
                }
                for (const TracePoint& p : extras->points.Points()) {
                  SeriesDetail::Point point{p.time, p.value};
                  if (p.has_forecast()) {
                    point.forecast = p.forecast;
                    point.band_low = p.forecast - p.band;
                    point.band_high = p.forecast + p.band;
                  }
                  detail.recent_points.push_back(point);
                }
                detail.recent_alerts = extras->alerts;
                detail.annotations = AnnotationSpans(state.config(), wanted);
                return detail;
              },
              kAskTimeout);
  if (!answer) return std::nullopt;
  return *answer;
}

std::vector<Alert> Service::AlertsSince(EventTime since) {
  if (!dispatcher_) return {};
  return dispatcher_->Recent(since, kMaxAlertsAnswered);
}

bool Service::Ready(std::string* why) {
  if (!started_) {
    if (why) *why = "starting";
    return false;
  }
  if (stopping_) {
    if (why) *why = "shutting down";
    return false;
  }
  // The alert log first: its failure is the one an operator must act on.
  if (!dispatcher_->Healthy(why)) return false;
  if (kafka_ && !kafka_->Healthy(why)) return false;
  {
    std::lock_guard<std::mutex> lock(checkpoint_mutex_);
    if (!checkpoint_failure_.ok()) {
      if (why) *why = "checkpoint failed: " + checkpoint_failure_.message();
      return false;
    }
    if (wal_ && !wal_->failure().ok()) {
      if (why) *why = "write-ahead log failed: " + wal_->failure().message();
      return false;
    }
  }
  return true;
}

StatusOr<SeriesForecast> Service::ForecastSeries(std::string_view name,
                                                 const std::vector<EventTime>& at,
                                                 double level) {
  if (!shards_) return Status::Unavailable("not running");
  const std::string wanted(name);
  auto answer =
      shards_->shard(shards_->ShardFor(wanted))
          .Ask<StatusOr<SeriesForecast>>(
              [wanted, at, level](ShardState& state) -> StatusOr<SeriesForecast> {
                const SeriesMonitor* monitor = state.engine().Find(wanted);
                if (!monitor) return Status::NotFound("no series named " + wanted);
                return MakeSeriesForecast(*monitor, wanted, at, level);
              },
              kAskTimeout);
  if (!answer) return Status::Unavailable("the series' shard did not answer in time");
  return *answer;
}

Config Service::WithApiAnnotations() const {
  Config merged = file_config_;
  merged.annotations.insert(merged.annotations.end(), api_annotations_.begin(),
                            api_annotations_.end());
  return merged;
}

Status Service::PushAnnotations() {
  auto shared = std::make_shared<const Config>(WithApiAnnotations());
  for (std::size_t i = 0; i < shards_->size(); ++i) {
    auto result = shards_->shard(i).Ask<bool>(
        [shared, dispatcher = dispatcher_.get()](ShardState& state) {
          std::vector<Alert> released;  // none: the profiles are unchanged
          state.Reconfigure(*shared, &released);
          dispatcher->Publish(state.index(), &released);
          return true;
        },
        std::chrono::seconds(60));
    if (!result) {
      return Status::Unavailable("saved, but shard " + std::to_string(i) +
                                 " did not answer; it applies the change when it does");
    }
  }
  return Status::Ok();
}

std::vector<AnnotationEntry> Service::ListAnnotations() {
  std::lock_guard<std::mutex> lock(annotations_mutex_);
  std::vector<AnnotationEntry> out;
  for (const Annotation& a : file_config_.annotations) out.push_back({a, true});
  for (const Annotation& a : api_annotations_) out.push_back({a, false});
  return out;
}

StatusOr<Annotation> Service::CreateAnnotation(std::string_view body) {
  if (!started_ || stopping_ || !shards_) return Status::Unavailable("not running");
  std::lock_guard<std::mutex> lock(annotations_mutex_);
  const auto in_config = [this](const std::string& id) {
    return std::any_of(file_config_.annotations.begin(), file_config_.annotations.end(),
                       [&](const Annotation& a) { return a.id == id; });
  };
  const auto taken = [&](const std::string& id) {
    return in_config(id) || std::any_of(api_annotations_.begin(), api_annotations_.end(),
                                        [&](const Annotation& a) { return a.id == id; });
  };
  // Ids made up for entries without one: <kind>-<n>, n unused by either kind.
  std::size_t number = next_annotation_number_;
  while (taken(std::string(ToString(AnnotationKind::kPlannedChange)) + "-" +
               std::to_string(number)) ||
         taken(std::string(ToString(AnnotationKind::kMaintenance)) + "-" +
               std::to_string(number))) {
    ++number;
  }
  std::vector<Annotation> parsed;
  const std::vector<ConfigError> errors =
      ParseAnnotationsText(body, "request body", number, &parsed);
  if (!errors.empty()) {
    std::string message;
    for (const ConfigError& e : errors)
      message += (message.empty() ? "" : "\n") + e.ToString();
    return Status::InvalidArgument(message);
  }
  if (parsed.size() != 1) {
    return Status::InvalidArgument(
        "the body must hold one annotation, a JSON object such as {\"kind\": "
        "\"maintenance\", \"match\": \"coldstore/**\", \"from\": ..., \"to\": ...}");
  }
  const Annotation& created = parsed.front();
  if (taken(created.id)) {
    return Status::FailedPrecondition(
        "an annotation with id \"" + created.id + "\" exists already" +
        (in_config(created.id) ? " (declared in the config file)" : ""));
  }
  std::vector<Annotation> updated = api_annotations_;
  updated.push_back(created);
  if (Status saved = SaveAnnotationFile(deps_.file_system, annotation_file_, updated);
      !saved.ok()) {
    LogError("annotation not saved", {{"id", created.id}, {"error", saved.ToString()}});
    return saved;
  }
  api_annotations_ = std::move(updated);
  next_annotation_number_ = number + 1;
  LogInfo("annotation created", {{"id", created.id},
                                 {"kind", std::string(ToString(created.kind))},
                                 {"match", created.match}});
  if (Status pushed = PushAnnotations(); !pushed.ok()) return pushed;
  return created;
}

Status Service::DeleteAnnotation(std::string_view id) {
  if (!started_ || stopping_ || !shards_) return Status::Unavailable("not running");
  std::lock_guard<std::mutex> lock(annotations_mutex_);
  for (const Annotation& a : file_config_.annotations) {
    if (a.id == id) {
      return Status::FailedPrecondition(
          "annotation \"" + std::string(id) +
          "\" is declared in the config file, which the API does not change: remove it "
          "there and reload the config (SIGHUP)");
    }
  }
  std::vector<Annotation> updated;
  for (const Annotation& a : api_annotations_) {
    if (a.id != id) updated.push_back(a);
  }
  if (updated.size() == api_annotations_.size()) {
    return Status::NotFound("no annotation with id \"" + std::string(id) + "\"");
  }
  if (Status saved = SaveAnnotationFile(deps_.file_system, annotation_file_, updated);
      !saved.ok()) {
    LogError("annotation deletion not saved",
             {{"id", std::string(id)}, {"error", saved.ToString()}});
    return saved;
  }
  api_annotations_ = std::move(updated);
  LogInfo("annotation deleted", {{"id", std::string(id)}});
  return PushAnnotations();
}

std::string Service::tcp_address() const {
  return tcp_ ? tcp_->local_endpoint().address().to_string() : std::string();
}

int Service::tcp_port() const { return tcp_ ? tcp_->local_endpoint().port() : 0; }

}  // namespace plumbline
