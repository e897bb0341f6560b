// Alert sinks (daemon/alert_sinks.h): the alert log appends JSON lines and its
// first failure is sticky; the webhook posts each alert, retries with capped
// exponential backoff and jitter, and dead-letters what it cannot deliver; the
// dispatcher fans out and answers "alerts since". The rules are the header's
// and DESIGN.md's; common practice, no published source.
#include "daemon/alert_sinks.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <utility>
#include <atomic>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <filesystem>
#include <fstream>
#include <mutex>
#include <set>
#include <string>
#include <thread>
#include <vector>

#include "tests/support/interposed_file_system.h"
#include "tests/support/temp_dir.h"

namespace plumbline {
namespace {

namespace asio = boost::asio;
namespace http = boost::beast::http;
using tcp = asio::ip::tcp;

std::string TempDir(const std::string& name) {
  return test_support::FreshTempDir("alert_sinks_" + name);
}

std::vector<std::string> Lines(const std::string& path) {
  std::ifstream file(path);
  std::vector<std::string> lines;
  for (std::string line; std::getline(file, line);) lines.push_back(line);
  return lines;
}

Alert MakeAlert(int i) {
  Alert a;
  a.id = "id" + std::to_string(i);
  a.series = "coldstore/freezer-1/temp_c";
  a.kind = AlertKind::kLevel;
  a.direction = Direction::kUp;
  a.detected_at = (1'772'323'200LL + 60 * i) * kMicrosPerSecond;
  a.change_at = a.detected_at - 600 * kMicrosPerSecond;
  a.detectors = {"cusum"};
  return a;
}

// A file system whose syncs fail on demand or wait until released, counting
// appends and syncs; otherwise POSIX.
class FaultyFileSystem : public test_support::InterposedFileSystem {
 public:
  std::atomic<bool> fail_sync{false};
  std::atomic<int> appends{0};
  std::atomic<int> syncs{0};

  FaultyFileSystem() {
    before_append = [this](std::string_view) {
      ++appends;
      return Status::Ok();
    };
    before_sync = [this] {
      {
        std::unique_lock<std::mutex> lock(mutex_);
        // Bounded, so that a broken log fails the test instead of hanging it.
        released_.wait_for(lock, std::chrono::seconds(20), [this] { return !held_; });
      }
      ++syncs;
      return fail_sync ? Status::IoError("injected fsync failure") : Status::Ok();
    };
  }
  void HoldSyncs() {
    std::lock_guard<std::mutex> lock(mutex_);
    held_ = true;
  }
  void ReleaseSyncs() {
    {
      std::lock_guard<std::mutex> lock(mutex_);
      held_ = false;
    }
    released_.notify_all();
  }

 private:
  std::mutex mutex_;
  std::condition_variable released_;
  bool held_ = false;
};

class CountingObserver : public PipelineObserver {
 public:
  void OnSinkFailure(std::string_view sink) override {
    std::lock_guard<std::mutex> lock(mutex_);
    failures.push_back(std::string(sink));
  }
  std::vector<std::string> Failures() {
    std::lock_guard<std::mutex> lock(mutex_);
    return failures;
  }

 private:
  std::mutex mutex_;
  std::vector<std::string> failures;
};

TEST(AlertLogTest, AppendsOneJsonLinePerAlert) {
  const std::string dir = TempDir("log");
  AlertLog log(dir + "/alerts.jsonl", FileSystem::Default(), nullptr);
  log.Deliver({MakeAlert(1), MakeAlert(2)});
  log.Deliver({MakeAlert(3)});
  const auto lines = Lines(dir + "/alerts.jsonl");
  ASSERT_EQ(lines.size(), 3u);
  EXPECT_EQ(lines[0], AlertToJson(MakeAlert(1)));
  EXPECT_EQ(lines[2], AlertToJson(MakeAlert(3)));
  std::string why;
  EXPECT_TRUE(log.Healthy(&why));
  // A second log on the same file appends after the first's lines.
  AlertLog again(dir + "/alerts.jsonl", FileSystem::Default(), nullptr);
  again.Deliver({MakeAlert(4)});
  EXPECT_EQ(Lines(dir + "/alerts.jsonl").size(), 4u);
}

TEST(AlertLogTest, FailedFsyncIsStickyReportedAndNotRetried) {
  const std::string dir = TempDir("log_fail");
  FaultyFileSystem fs;
  CountingObserver observer;
  AlertLog log(dir + "/alerts.jsonl", &fs, &observer);
  log.Deliver({MakeAlert(1)});
  EXPECT_TRUE(log.Healthy(nullptr));
  fs.fail_sync = true;
  log.Deliver({MakeAlert(2)});
  // The fsync runs on the log's thread; Flush waits for it (a failed log
  // holds nothing back, so Flush answers true).
  EXPECT_TRUE(log.Flush(std::chrono::steady_clock::now() + std::chrono::seconds(20)));
  std::string why;
  EXPECT_FALSE(log.Healthy(&why));
  EXPECT_NE(why.find("injected fsync failure"), std::string::npos) << why;
  fs.fail_sync = false;  // even when the disk recovers, the failure stays
  const int appends = fs.appends;
  log.Deliver({MakeAlert(3)});
  EXPECT_EQ(fs.appends, appends);  // no retry
  EXPECT_FALSE(log.Healthy(nullptr));
  const auto failures = observer.Failures();
  EXPECT_EQ(failures, (std::vector<std::string>{"alert_log", "alert_log"}));
}

TEST(AlertLogTest, BatchesAreReadableBeforeTheirFsyncWhichFlushWaitsFor) {
  const std::string dir = TempDir("log_group");
  FaultyFileSystem fs;
  AlertLog log(dir + "/alerts.jsonl", &fs, nullptr);
  const auto soon = [] {
    return std::chrono::steady_clock::now() + std::chrono::milliseconds(50);
  };
  const auto later = [] {
    return std::chrono::steady_clock::now() + std::chrono::seconds(20);
  };
  fs.HoldSyncs();  // the disk is slow
  log.Deliver({MakeAlert(1)});
  log.Deliver({MakeAlert(2)});  // not held behind the first batch's fsync
  log.Deliver({MakeAlert(3)});
  EXPECT_EQ(Lines(dir + "/alerts.jsonl").size(), 3u);
  EXPECT_FALSE(log.Flush(soon()));  // not yet durable
  fs.ReleaseSyncs();
  EXPECT_TRUE(log.Flush(later()));
  // The first fsync was held; the batches appended meanwhile share one more.
  EXPECT_GE(fs.syncs, 1);
  EXPECT_LE(fs.syncs, 2);
  EXPECT_TRUE(log.Healthy(nullptr));
  log.Deliver({MakeAlert(4)});
  EXPECT_TRUE(log.Flush(later()));
  EXPECT_EQ(Lines(dir + "/alerts.jsonl").size(), 4u);
}

TEST(AlertLogTest, UnopenableFileIsUnhealthyFromTheStart) {
  AlertLog log("/nonexistent-dir-for-plumbline-test/alerts.jsonl", FileSystem::Default(),
               nullptr);
  std::string why;
  EXPECT_FALSE(log.Healthy(&why));
  EXPECT_NE(why.find("cannot open"), std::string::npos) << why;
}

TEST(WebhookBackoffTest, DoublesPerTryUpToTheCapWithJitterInTheUpperHalf) {
  WebhookOptions o;
  o.backoff = 100 * 1000;
  o.backoff_max = 1000 * 1000;
  std::mt19937_64 random(42);
  for (int round = 0; round < 200; ++round) {
    for (int tries = 1; tries <= 8; ++tries) {
      const double base = std::min(100e3 * std::pow(2.0, tries - 1), 1000e3);
      const EventTime wait = WebhookBackoff(o, tries, &random);
      EXPECT_GE(wait, static_cast<EventTime>(base / 2) - 1) << tries;
      EXPECT_LE(wait, static_cast<EventTime>(base)) << tries;
    }
  }
  // Jitter: the same try does not always wait the same.
  std::set<EventTime> waits;
  for (int i = 0; i < 20; ++i) waits.insert(WebhookBackoff(o, 3, &random));
  EXPECT_GT(waits.size(), 10u);
}

// A tiny HTTP receiver: answers `fail_first` requests with 503, then 200, and
// keeps the bodies of the accepted ones.
class Receiver {
 public:
  explicit Receiver(int fail_first) : fail_first_(fail_first), acceptor_(io_) {
    tcp::endpoint endpoint(asio::ip::make_address("127.0.0.1"), 0);
    acceptor_.open(endpoint.protocol());
    acceptor_.bind(endpoint);
    acceptor_.listen();
    port_ = acceptor_.local_endpoint().port();
    thread_ = std::thread([this] { Serve(); });
  }
  ~Receiver() {
    stop_ = true;
    boost::system::error_code ignored;
    // Wake the blocking accept with one connection.
    tcp::socket poke(io_);
    poke.connect(acceptor_.local_endpoint(), ignored);
    thread_.join();
  }
  std::string url() const {
    return "http://127.0.0.1:" + std::to_string(port_) + "/alerts";
  }
  std::vector<std::string> bodies() {
    std::lock_guard<std::mutex> lock(mutex_);
    return bodies_;
  }
  int requests() const { return requests_.load(); }

 private:
  void Serve() {
    while (!stop_) {
      tcp::socket socket(io_);
      boost::system::error_code error;
      acceptor_.accept(socket, error);
      if (error || stop_) continue;
      boost::beast::flat_buffer buffer;
      http::request<http::string_body> request;
      http::read(socket, buffer, request, error);
      if (error) continue;
      const int n = ++requests_;
      http::response<http::string_body> response{
          n <= fail_first_ ? http::status::service_unavailable : http::status::ok, 11};
      if (n > fail_first_) {
        std::lock_guard<std::mutex> lock(mutex_);
        bodies_.push_back(request.body());
        EXPECT_EQ(request.target(), "/alerts");
        EXPECT_EQ(request[http::field::content_type], "application/json");
      }
      response.prepare_payload();
      http::write(socket, response, error);
    }
  }

  const int fail_first_;
  asio::io_context io_;
  tcp::acceptor acceptor_;
  unsigned short port_ = 0;
  std::atomic<bool> stop_{false};
  std::atomic<int> requests_{0};
  std::mutex mutex_;
  std::vector<std::string> bodies_;
  std::thread thread_;
};

WebhookOptions FastWebhook(const std::string& url) {
  WebhookOptions o;
  o.url = url;
  o.attempts = 4;
  o.backoff = 1000;      // 1 ms
  o.backoff_max = 5000;  // 5 ms
  o.timeout = 2 * kMicrosPerSecond;
  return o;
}

TEST(WebhookTest, PostJsonSaysWhyItFailed) {
  HttpUrl url;
  ASSERT_TRUE(ParseHttpUrl("http://127.0.0.1:1/x", &url));  // nothing listens on port 1
  const Status status = PostJson(url, "{}", std::chrono::milliseconds(2000));
  EXPECT_FALSE(status.ok());
  EXPECT_NE(status.message().find("connect"), std::string::npos) << status.message();
}

TEST(WebhookTest, RetriesUntilTheReceiverTakesEachAlertInOrder) {
  Receiver receiver(/*fail_first=*/2);
  const std::string dir = TempDir("webhook");
  WebhookSink sink(FastWebhook(receiver.url()), dir + "/dead.jsonl",
                   FileSystem::Default(), nullptr);
  sink.Start();
  sink.Deliver({MakeAlert(1), MakeAlert(2), MakeAlert(3)});
  sink.Drain(std::chrono::steady_clock::now() + std::chrono::seconds(20));
  EXPECT_EQ(sink.delivered(), 3u);
  EXPECT_EQ(sink.dead_lettered(), 0u);
  EXPECT_EQ(receiver.requests(), 5);  // two refusals, then three deliveries
  EXPECT_EQ(receiver.bodies(), (std::vector<std::string>{AlertToJson(MakeAlert(1)),
                                                         AlertToJson(MakeAlert(2)),
                                                         AlertToJson(MakeAlert(3))}));
  EXPECT_FALSE(std::filesystem::exists(dir + "/dead.jsonl"));
}

TEST(WebhookTest, DeadLettersAnAlertAfterItsAttempts) {
  const std::string dir = TempDir("webhook_dead");
  CountingObserver observer;
  WebhookSink sink(FastWebhook("http://127.0.0.1:1/alerts"), dir + "/dead.jsonl",
                   FileSystem::Default(), &observer);
  sink.Start();
  sink.Deliver({MakeAlert(1), MakeAlert(2)});
  sink.Drain(std::chrono::steady_clock::now() + std::chrono::seconds(20));
  EXPECT_EQ(sink.delivered(), 0u);
  EXPECT_EQ(sink.dead_lettered(), 2u);
  const auto lines = Lines(dir + "/dead.jsonl");
  ASSERT_EQ(lines.size(), 2u);
  EXPECT_NE(lines[0].find("\"reason\":\"attempts exhausted\",\"tries\":4"),
            std::string::npos)
      << lines[0];
  EXPECT_NE(lines[0].find("\"alert\":" + AlertToJson(MakeAlert(1))), std::string::npos);
  EXPECT_TRUE(sink.Healthy(nullptr));
  int webhook_failures = 0;
  for (const std::string& f : observer.Failures()) webhook_failures += f == "webhook";
  EXPECT_EQ(webhook_failures, 8);  // 4 tries x 2 alerts
}

TEST(WebhookTest, FullQueueSendsAlertsStraightToTheDeadLetterFile) {
  const std::string dir = TempDir("webhook_full");
  WebhookOptions o = FastWebhook("http://127.0.0.1:1/alerts");
  o.queue = 2;
  o.attempts = 100;
  o.backoff = 50 * 1000;
  o.backoff_max = 50 * 1000;
  WebhookSink sink(o, dir + "/dead.jsonl", FileSystem::Default(), nullptr);
  // Not started: nothing leaves the queue.
  sink.Deliver({MakeAlert(1), MakeAlert(2), MakeAlert(3), MakeAlert(4)});
  EXPECT_EQ(sink.queued(), 2u);
  EXPECT_EQ(sink.dead_lettered(), 2u);
  const auto lines = Lines(dir + "/dead.jsonl");
  ASSERT_EQ(lines.size(), 2u);
  EXPECT_NE(lines[0].find("\"reason\":\"queue full\""), std::string::npos);
  EXPECT_NE(lines[0].find(AlertToJson(MakeAlert(3))), std::string::npos);
  // At shutdown the queued ones are dead-lettered too: nothing is lost.
  sink.Drain(std::chrono::steady_clock::now());
  EXPECT_EQ(Lines(dir + "/dead.jsonl").size(), 4u);
}

TEST(AlertDispatcherTest, FansOutAlertsAndKeepsEventsForTheApiOnly) {
  const std::string dir = TempDir("dispatch");
  AlertDispatcher dispatcher({}, nullptr);
  dispatcher.AddSink(
      std::make_unique<AlertLog>(dir + "/alerts.jsonl", FileSystem::Default(), nullptr));
  dispatcher.Start();
  std::vector<Alert> batch = {MakeAlert(5), MakeAlert(1)};
  Alert retrain = MakeAlert(3);
  retrain.event = EventType::kRetrain;
  batch.push_back(retrain);
  dispatcher.Publish(0, &batch);
  EXPECT_TRUE(batch.empty());
  dispatcher.Stop(std::chrono::steady_clock::now() + std::chrono::seconds(5));
  EXPECT_EQ(Lines(dir + "/alerts.jsonl").size(), 2u);  // alerts only
  const auto recent = dispatcher.Recent(MakeAlert(2).detected_at, 100);
  ASSERT_EQ(recent.size(), 2u);  // ordered by detected_at, events included
  EXPECT_EQ(recent[0].id, "id3");
  EXPECT_EQ(recent[1].id, "id5");
  EXPECT_EQ(dispatcher.Recent(0, 1).size(), 1u);
  EXPECT_EQ(dispatcher.Recent(0, 1)[0].id, "id5");  // the newest when limited
}

TEST(AlertDispatcherTest, EachSinkGetsOnlyAlertsAtOrAboveItsMinimumSeverity) {
  const std::string dir = TempDir("routing");
  AlertDispatcher dispatcher({}, nullptr);
  dispatcher.AddSink(
      std::make_unique<AlertLog>(dir + "/all.jsonl", FileSystem::Default(), nullptr));
  dispatcher.AddSink(
      std::make_unique<AlertLog>(dir + "/notify.jsonl", FileSystem::Default(), nullptr),
      Severity::kNotify);
  dispatcher.AddSink(
      std::make_unique<AlertLog>(dir + "/page.jsonl", FileSystem::Default(), nullptr),
      Severity::kPage);
  dispatcher.Start();
  std::vector<Alert> batch = {MakeAlert(1), MakeAlert(2), MakeAlert(3)};
  batch[0].severity = Severity::kRecord;
  batch[1].severity = Severity::kNotify;
  batch[2].severity = Severity::kPage;
  dispatcher.Publish(0, &batch);
  dispatcher.Stop(std::chrono::steady_clock::now() + std::chrono::seconds(5));
  EXPECT_EQ(Lines(dir + "/all.jsonl").size(), 3u);
  EXPECT_EQ(Lines(dir + "/notify.jsonl").size(), 2u);
  const auto paged = Lines(dir + "/page.jsonl");
  ASSERT_EQ(paged.size(), 1u);
  EXPECT_NE(paged[0].find("\"id\":\"id3\""), std::string::npos) << paged[0];
  EXPECT_NE(paged[0].find("\"severity\":\"page\""), std::string::npos) << paged[0];
  EXPECT_EQ(dispatcher.Recent(0, 100).size(), 3u);  // the API keeps every alert
}

}  // namespace
}  // namespace plumbline
