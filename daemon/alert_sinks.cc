#include "daemon/alert_sinks.h"

#include <utility>
#include <algorithm>
#include <boost/asio/connect.hpp>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <cstdio>

#include "daemon/log.h"
#include "daemon/terminal.h"
#include "plumbline_version.h"

namespace plumbline {
namespace {

namespace asio = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;
using tcp = asio::ip::tcp;

bool Wanted(const Alert& alert, bool events) {
  return events || alert.event == EventType::kAlert;
}

}  // namespace

// ---- AlertLog ----

AlertLog::AlertLog(std::string path, FileSystem* file_system, PipelineObserver* observer)
    : path_(std::move(path)), observer_(observer) {
  auto file = file_system->OpenAppend(path_);
  if (!file.ok()) {
    Fail(file.status());
    return;
  }
  file_ = std::move(file).value();
  syncer_ = std::thread([this] { SyncLoop(); });
}

AlertLog::~AlertLog() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_ = true;
  }
  work_.notify_all();
  if (syncer_.joinable()) syncer_.join();
  if (file_) file_->Close();
}

void AlertLog::Fail(const Status& status) {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    if (!failure_.ok()) return;
    failure_ = status;
  }
  LogError("alert log failed; alerts are no longer written to it (restart after fixing)",
           {{"sink", "alert_log"}, {"path", path_}, {"error", status.message()}});
  if (observer_) observer_->OnSinkFailure("alert_log");
  {
    std::lock_guard<std::mutex> lock(mutex_);
    failure_reported_ = true;
  }
  synced_.notify_all();
}

void AlertLog::Deliver(const std::vector<Alert>& alerts) {
  bool failed;
  {
    std::lock_guard<std::mutex> lock(mutex_);
    failed = !failure_.ok();
  }
  if (failed) {
    if (observer_) observer_->OnSinkFailure("alert_log");
    return;
  }
  std::string lines;
  for (const Alert& alert : alerts) {
    lines += AlertToJson(alert);
    lines.push_back('\n');
  }
  if (Status status = file_->Append(lines); !status.ok()) {
    Fail(status);
    return;
  }
  {
    std::lock_guard<std::mutex> lock(mutex_);
    ++appended_;
  }
  work_.notify_one();
}

void AlertLog::SyncLoop() {
  std::unique_lock<std::mutex> lock(mutex_);
  while (true) {
    work_.wait(lock, [this] { return stop_ || appended_ > synced_through_; });
    if (appended_ == synced_through_ || !failure_.ok()) return;  // stopping
    const std::uint64_t through = appended_;
    lock.unlock();
    const Status status = file_->Sync();
    if (!status.ok()) {
      Fail(status);
      return;
    }
    lock.lock();
    synced_through_ = through;
    synced_.notify_all();
  }
}

bool AlertLog::Flush(std::chrono::steady_clock::time_point deadline) {
  std::unique_lock<std::mutex> lock(mutex_);
  const std::uint64_t through = appended_;
  return synced_.wait_until(
      lock, deadline, [&] { return synced_through_ >= through || failure_reported_; });
}

bool AlertLog::Healthy(std::string* why) const {
  std::lock_guard<std::mutex> lock(mutex_);
  if (failure_.ok()) return true;
  if (why) *why = "alert log: " + failure_.message();
  return false;
}

// ---- StdoutSink ----

void StdoutSink::Deliver(const std::vector<Alert>& alerts) {
  for (const Alert& alert : alerts) {
    const std::string line = json_ ? AlertToJson(alert) : AlertLine(alert, colour_);
    std::fprintf(out_, "%s\n", line.c_str());
  }
  std::fflush(out_);
}

// ---- Webhook ----

EventTime WebhookBackoff(const WebhookOptions& options, int failed_tries,
                         std::mt19937_64* random) {
  double base = static_cast<double>(options.backoff);
  for (int i = 1; i < failed_tries && base < static_cast<double>(options.backoff_max);
       ++i) {
    base *= 2;
  }
  base = std::min(base, static_cast<double>(options.backoff_max));
  std::uniform_real_distribution<double> jitter(0.5, 1.0);
  return static_cast<EventTime>(base * jitter(*random));
}

Status PostJson(const HttpUrl& url, const std::string& body,
                std::chrono::milliseconds timeout) {
  asio::io_context io;
  tcp::resolver resolver(io);
  beast::tcp_stream stream(io);
  beast::flat_buffer buffer;
  http::request<http::string_body> request{http::verb::post, url.target, 11};
  request.set(http::field::host, url.host);
  request.set(http::field::user_agent, "plumbline/" PLUMBLINE_VERSION);
  request.set(http::field::content_type, "application/json");
  request.set(http::field::connection, "close");
  request.body() = body;
  request.prepare_payload();
  http::response<http::string_body> response;
  Status result =
      Status::Unavailable("timed out after " + std::to_string(timeout.count()) + " ms");
  bool finished = false;

  auto fail = [&](std::string_view step, const beast::error_code& error) {
    result = Status::Unavailable(std::string(step) + ": " + error.message());
    finished = true;
  };
  resolver.async_resolve(
      url.host, url.port,
      [&](const beast::error_code& error, tcp::resolver::results_type endpoints) {
        if (error) return fail("resolve", error);
        stream.expires_after(timeout);
        stream.async_connect(
            endpoints, [&](const beast::error_code& error, const tcp::endpoint&) {
              if (error) return fail("connect", error);
              http::async_write(
                  stream, request, [&](const beast::error_code& error, std::size_t) {
                    if (error) return fail("send", error);
                    http::async_read(stream, buffer, response,
                                     [&](const beast::error_code& error, std::size_t) {
                                       if (error) return fail("answer", error);
                                       finished = true;
                                       const unsigned status = response.result_int();
                                       if (status >= 200 && status < 300) {
                                         result = Status::Ok();
                                       } else {
                                         result = Status::Unavailable(
                                             "answered HTTP " + std::to_string(status));
                                       }
                                     });
                  });
            });
      });
  // The stream's deadline bounds connect, send and answer; resolving a name
  // is bounded here.
  io.run_for(timeout + std::chrono::milliseconds(100));
  if (!finished) {
    resolver.cancel();
    beast::error_code ignored;
    stream.socket().close(ignored);
    io.restart();
    io.run();
  }
  beast::error_code ignored;
  stream.socket().shutdown(tcp::socket::shutdown_both, ignored);
  return result;
}

WebhookSink::WebhookSink(WebhookOptions options, std::string dead_letter_path,
                         FileSystem* file_system, PipelineObserver* observer)
    : options_(std::move(options)),
      dead_letter_path_(std::move(dead_letter_path)),
      file_system_(file_system),
      observer_(observer) {
  ParseHttpUrl(options_.url, &url_);
}

WebhookSink::~WebhookSink() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_ = true;
  }
  wake_.notify_all();
  if (thread_.joinable()) thread_.join();
}

void WebhookSink::Start() {
  thread_ = std::thread([this] { Run(); });
}

std::size_t WebhookSink::queued() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return queue_.size();
}

void WebhookSink::Deliver(const std::vector<Alert>& alerts) {
  std::vector<Pending> overflow;
  {
    std::lock_guard<std::mutex> lock(mutex_);
    for (const Alert& alert : alerts) {
      Pending pending{AlertToJson(alert), 0, {}};
      if (queue_.size() >= static_cast<std::size_t>(options_.queue) || stop_) {
        overflow.push_back(std::move(pending));
      } else {
        queue_.push_back(std::move(pending));
      }
    }
  }
  wake_.notify_all();
  for (const Pending& pending : overflow) DeadLetter(pending, "queue full");
}

void WebhookSink::Run() {
  std::mt19937_64 random(std::random_device{}());
  std::unique_lock<std::mutex> lock(mutex_);
  while (true) {
    wake_.wait(lock, [this] { return stop_ || !queue_.empty(); });
    if (stop_) return;
    Pending& head = queue_.front();
    idle_ = false;
    const std::string json = head.json;
    auto timeout = std::chrono::milliseconds(options_.timeout / 1000);
    if (draining_) {  // keep shutdown within its bound
      const auto left = std::chrono::duration_cast<std::chrono::milliseconds>(
          drain_deadline_ - std::chrono::steady_clock::now());
      timeout = std::min(timeout, std::max(left, std::chrono::milliseconds(50)));
    }
    lock.unlock();
    const Status sent = PostJson(url_, json, timeout);
    lock.lock();
    Pending& same = queue_.front();  // only this thread pops
    if (sent.ok()) {
      queue_.pop_front();
      delivered_.fetch_add(1);
    } else {
      ++same.tries;
      same.last_error = sent.message();
      if (observer_) observer_->OnSinkFailure("webhook");
      if (same.tries == 1) {
        LogWarning("webhook delivery failed; retrying with backoff",
                   {{"sink", "webhook"},
                    {"url", options_.url},
                    {"error", sent.message()},
                    {"queued", queue_.size()}});
      }
      const bool out_of_time =
          draining_ && std::chrono::steady_clock::now() >= drain_deadline_;
      if (same.tries >= options_.attempts || out_of_time) {
        Pending gone = std::move(same);
        queue_.pop_front();
        lock.unlock();
        DeadLetter(gone, out_of_time ? "shutdown" : "attempts exhausted");
        lock.lock();
      } else {
        const EventTime wait = WebhookBackoff(options_, same.tries, &random);
        auto until = std::chrono::steady_clock::now() + std::chrono::microseconds(wait);
        if (draining_) until = std::min(until, drain_deadline_);
        wake_.wait_until(lock, until, [this] { return stop_; });
      }
    }
    idle_ = queue_.empty();
    idle_changed_.notify_all();
  }
}

void WebhookSink::Drain(std::chrono::steady_clock::time_point deadline) {
  std::unique_lock<std::mutex> lock(mutex_);
  draining_ = true;
  drain_deadline_ = deadline;
  wake_.notify_all();
  idle_changed_.wait_until(lock, deadline, [this] { return queue_.empty() && idle_; });
  // Whatever is left goes to the dead-letter file, so nothing is lost.
  stop_ = true;
  wake_.notify_all();
  lock.unlock();
  if (thread_.joinable()) thread_.join();
  lock.lock();
  std::deque<Pending> left;
  left.swap(queue_);
  lock.unlock();
  for (const Pending& pending : left) DeadLetter(pending, "shutdown");
  if (!left.empty()) {
    LogWarning(
        "webhook: undelivered alerts written to the dead-letter file at shutdown",
        {{"sink", "webhook"}, {"count", left.size()}, {"path", dead_letter_path_}});
  }
}

void WebhookSink::DeadLetter(const Pending& pending, std::string_view reason) {
  dead_lettered_.fetch_add(1);
  if (observer_) observer_->OnSinkFailure("webhook_dead_letter");
  std::string line = "{\"reason\":\"" + std::string(reason) +
                     "\",\"tries\":" + std::to_string(pending.tries) +
                     ",\"last_error\":\"";
  for (char c : pending.last_error) {  // messages are plain text; keep JSON valid
    if (c == '"' || c == '\\') line.push_back('\\');
    line.push_back(static_cast<unsigned char>(c) < 0x20 ? ' ' : c);
  }
  line += "\",\"alert\":" + pending.json + "}\n";
  std::lock_guard<std::mutex> lock(mutex_);
  if (!failure_.ok()) return;
  Status status;
  if (!dead_file_) {
    auto file = file_system_->OpenAppend(dead_letter_path_);
    if (file.ok()) {
      dead_file_ = std::move(file).value();
    } else {
      status = file.status();
    }
  }
  if (status.ok()) status = dead_file_->Append(line);
  if (status.ok()) status = dead_file_->Sync();
  if (!status.ok()) {
    failure_ = status;
    if (dead_file_) dead_file_->Close();
    LogError(
        "webhook dead-letter file failed; undeliverable alerts are lost",
        {{"sink", "webhook"}, {"path", dead_letter_path_}, {"error", status.message()}});
  }
}

bool WebhookSink::Healthy(std::string* why) const {
  std::lock_guard<std::mutex> lock(mutex_);
  if (failure_.ok()) return true;
  if (why) *why = "webhook dead-letter file: " + failure_.message();
  return false;
}

// ---- AlertDispatcher ----

AlertDispatcher::AlertDispatcher(Options options, PipelineObserver* observer)
    : options_(options), observer_(observer) {}

AlertDispatcher::~AlertDispatcher() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stopping_ = true;
  }
  not_empty_.notify_all();
  not_full_.notify_all();
  if (thread_.joinable()) thread_.join();
}

void AlertDispatcher::AddSink(std::unique_ptr<AlertSink> sink, Severity min_severity) {
  sinks_.push_back({std::move(sink), min_severity});
}

void AlertDispatcher::Start() {
  thread_ = std::thread([this] { Run(); });
}

void AlertDispatcher::Publish(std::size_t /*shard*/, std::vector<Alert>* alerts) {
  if (alerts->empty()) return;
  {
    std::unique_lock<std::mutex> lock(mutex_);
    not_full_.wait(
        lock, [this] { return stopping_ || queue_.size() < options_.queue_batches; });
    if (stopping_) {  // only after the shards stopped, which should not publish then
      LogError("alerts raised after the sinks stopped are lost",
               {{"count", alerts->size()}});
      alerts->clear();
      return;
    }
    queue_.push_back(std::move(*alerts));
  }
  alerts->clear();
  not_empty_.notify_one();
}

void AlertDispatcher::Run() {
  std::unique_lock<std::mutex> lock(mutex_);
  while (true) {
    not_empty_.wait(lock, [this] { return stopping_ || !queue_.empty(); });
    if (queue_.empty()) {  // stopping, and nothing left
      busy_ = false;
      drained_.notify_all();
      return;
    }
    std::vector<Alert> batch = std::move(queue_.front());
    queue_.pop_front();
    busy_ = true;
    lock.unlock();
    not_full_.notify_one();

    {
      std::lock_guard<std::mutex> recent_lock(recent_mutex_);
      for (const Alert& alert : batch) {
        recent_.push_back(alert);
        if (recent_.size() > options_.recent) recent_.pop_front();
      }
    }
    std::vector<Alert> wanted;
    wanted.reserve(batch.size());
    for (Alert& alert : batch) {
      if (observer_) observer_->OnEvent(alert);
      if (Wanted(alert, options_.events)) wanted.push_back(std::move(alert));
    }
    if (!wanted.empty()) {
      std::vector<Alert> urgent;
      for (RoutedSink& routed : sinks_) {
        if (routed.min_severity == Severity::kRecord) {
          routed.sink->Deliver(wanted);
          continue;
        }
        urgent.clear();
        for (const Alert& alert : wanted) {
          if (alert.severity >= routed.min_severity) urgent.push_back(alert);
        }
        if (!urgent.empty()) routed.sink->Deliver(urgent);
      }
      delivered_.fetch_add(wanted.size());
    }

    lock.lock();
    busy_ = false;
    if (queue_.empty()) drained_.notify_all();
  }
}

void AlertDispatcher::Stop(std::chrono::steady_clock::time_point deadline) {
  {
    std::unique_lock<std::mutex> lock(mutex_);
    // Deliver what the shards published before they stopped.
    drained_.wait_until(lock, deadline, [this] { return queue_.empty() && !busy_; });
    stopping_ = true;
  }
  not_empty_.notify_all();
  not_full_.notify_all();
  if (thread_.joinable()) thread_.join();
  for (auto& routed : sinks_) routed.sink->Drain(deadline);
}

bool AlertDispatcher::Flush(std::chrono::steady_clock::time_point deadline) {
  {
    std::unique_lock<std::mutex> lock(mutex_);
    if (!drained_.wait_until(lock, deadline, [this] { return queue_.empty() && !busy_; })) {
      return false;
    }
  }
  bool flushed = true;
  for (auto& routed : sinks_) flushed = routed.sink->Flush(deadline) && flushed;
  return flushed;
}

std::vector<Alert> AlertDispatcher::Recent(EventTime since, std::size_t limit) const {
  std::vector<Alert> out;
  {
    std::lock_guard<std::mutex> lock(recent_mutex_);
    for (const Alert& alert : recent_) {
      if (alert.detected_at >= since) out.push_back(alert);
    }
  }
  std::stable_sort(out.begin(), out.end(), [](const Alert& a, const Alert& b) {
    return a.detected_at < b.detected_at;
  });
  if (out.size() > limit)
    out.erase(out.begin(), out.end() - static_cast<std::ptrdiff_t>(limit));
  return out;
}

bool AlertDispatcher::Healthy(std::string* why) const {
  for (const RoutedSink& routed : sinks_) {
    if (!routed.sink->Healthy(why)) return false;
  }
  return true;
}

}  // namespace plumbline
