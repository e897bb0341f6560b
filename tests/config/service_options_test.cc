// Tests for the daemon's config sections (config/service_options.h): defaults
// that keep DESIGN.md's minimal config working, the mapping of every key, and
// errors at FILE:LINE:COLUMN. Line and column numbers are counted by hand from
// the texts below (1-based). Common practice, no published source.
#include "config/service_options.h"

#include <gtest/gtest.h>

#include <string>
#include <vector>

#include "config/config.h"

namespace plumbline {
namespace {

Config MustLoad(const std::string& text) {
  Config config;
  for (const ConfigError& e : ParseConfigText(text, "s.yaml", &config)) {
    ADD_FAILURE() << e.ToString();
  }
  return config;
}

void ExpectOneError(const std::string& text, int line, int column,
                    std::vector<std::string> fragments) {
  Config config;
  std::vector<ConfigError> errors = ParseConfigText(text, "s.yaml", &config);
  ASSERT_EQ(errors.size(), 1u) << [&] {
    std::string all;
    for (const ConfigError& e : errors) all += e.ToString() + "\n";
    return all;
  }();
  EXPECT_EQ(errors[0].line, line) << errors[0].ToString();
  EXPECT_EQ(errors[0].column, column) << errors[0].ToString();
  for (const std::string& fragment : fragments) {
    EXPECT_NE(errors[0].message.find(fragment), std::string::npos)
        << "missing '" << fragment << "' in: " << errors[0].ToString();
  }
}

TEST(ServiceOptionsTest, MinimalConfigRunsOnLoopbackWithDefaults) {
  const Config config = MustLoad("series:\n  - match: \"**\"\n");
  const ServiceOptions& s = config.service;
  EXPECT_EQ(s.tcp.address, "127.0.0.1");
  EXPECT_EQ(s.http.address, "127.0.0.1");
  EXPECT_TRUE(s.tcp.enabled);
  EXPECT_TRUE(s.http.enabled);
  EXPECT_NE(s.tcp.port, s.http.port);
  EXPECT_EQ(s.shards, 0);
  EXPECT_GE(s.EffectiveShards(), 1);
  EXPECT_TRUE(s.files.empty());
  EXPECT_TRUE(s.sinks.alert_log.enabled);
  EXPECT_FALSE(s.sinks.webhook.enabled());
  EXPECT_TRUE(s.sinks.to_stdout);
  std::string why;
  EXPECT_TRUE(s.IsValid(&why)) << why;
}

TEST(ServiceOptionsTest, EverySectionMapsOntoTheStructs) {
  const Config config = MustLoad(R"(series: []
listeners:
  tcp: {address: 0.0.0.0, port: 9100, idle_timeout: 30s, max_connections: 50, max_line_bytes: 1024}
  http: {enabled: false, port: 0, max_body_bytes: 2048}
shards: 3
queue_batches: 8
max_series: 500
storage:
  directory: /var/lib/plumbline
inputs:
  files:
    - /var/log/a.csv
    - path: b.csv
      start_at: end
      poll_interval: 50ms
sinks:
  alert_log: {path: /tmp/alerts.jsonl}
  webhook: {url: "http://127.0.0.1:9000/hook", attempts: 3, backoff: 100ms, backoff_max: 2s, timeout: 1s, queue: 10, dead_letter: dead.jsonl}
  stdout: false
  events: true
metrics:
  series_limit: 7
shutdown_timeout: 4s
)");
  const ServiceOptions& s = config.service;
  EXPECT_EQ(s.tcp.address, "0.0.0.0");
  EXPECT_EQ(s.tcp.port, 9100);
  EXPECT_EQ(s.tcp.idle_timeout, 30 * kMicrosPerSecond);
  EXPECT_EQ(s.tcp.max_connections, 50);
  EXPECT_EQ(s.tcp.max_line_bytes, 1024u);
  EXPECT_FALSE(s.http.enabled);
  EXPECT_EQ(s.http.port, 0);
  EXPECT_EQ(s.http.max_body_bytes, 2048u);
  EXPECT_EQ(s.shards, 3);
  EXPECT_EQ(s.EffectiveShards(), 3);
  EXPECT_EQ(s.queue_batches, 8);
  EXPECT_EQ(s.max_series, 500u);
  EXPECT_EQ(s.state_directory, "/var/lib/plumbline");
  ASSERT_EQ(s.files.size(), 2u);
  EXPECT_EQ(s.files[0].path, "/var/log/a.csv");
  EXPECT_EQ(s.files[0].start_at, StartAt::kBeginning);
  EXPECT_EQ(s.files[1].path, "b.csv");
  EXPECT_EQ(s.files[1].start_at, StartAt::kEnd);
  EXPECT_EQ(s.files[1].poll_interval, 50 * 1000);
  EXPECT_EQ(s.sinks.alert_log.path, "/tmp/alerts.jsonl");
  EXPECT_EQ(s.sinks.webhook.url, "http://127.0.0.1:9000/hook");
  EXPECT_EQ(s.sinks.webhook.attempts, 3);
  EXPECT_EQ(s.sinks.webhook.backoff, 100 * 1000);
  EXPECT_EQ(s.sinks.webhook.backoff_max, 2 * kMicrosPerSecond);
  EXPECT_EQ(s.sinks.webhook.timeout, kMicrosPerSecond);
  EXPECT_EQ(s.sinks.webhook.queue, 10);
  EXPECT_FALSE(s.sinks.to_stdout);
  EXPECT_TRUE(s.sinks.events);
  EXPECT_EQ(s.metrics_series_limit, 7);
  EXPECT_EQ(s.shutdown_timeout, 4 * kMicrosPerSecond);
  // Sink files: absolute paths stay, relative ones go in the state directory.
  EXPECT_EQ(s.InStateDirectory(s.sinks.alert_log.path), "/tmp/alerts.jsonl");
  EXPECT_EQ(s.InStateDirectory(s.sinks.webhook.dead_letter),
            "/var/lib/plumbline/dead.jsonl");
}

TEST(ServiceOptionsTest, UnknownKeyInASectionSuggestsTheClosest) {
  ExpectOneError("listeners:\n  tcp:\n    prot: 9100\n", 3, 5,
                 {"unknown key 'prot' in listeners.tcp", "did you mean 'port'?",
                  "valid keys: enabled, address, port"});
}

TEST(ServiceOptionsTest, OutOfRangePortIsReportedAtThePort) {
  ExpectOneError("listeners:\n  http:\n    port: 70000\n", 3, 11,
                 {"listeners.http: port must be in [0, 65535]"});
}

TEST(ServiceOptionsTest, WebhookUrlMustBePlainHttp) {
  ExpectOneError("sinks:\n  webhook:\n    url: https://example.org/x\n", 3, 10,
                 {"sinks.webhook: url must start with http://"});
}

TEST(ServiceOptionsTest, EachSinkTakesAMinimumSeverity) {
  const Config plain = MustLoad("series:\n  - match: \"**\"\n");
  EXPECT_EQ(plain.service.sinks.alert_log.min_severity, Severity::kRecord);
  EXPECT_EQ(plain.service.sinks.webhook.min_severity, Severity::kRecord);
  EXPECT_EQ(plain.service.sinks.stdout_min_severity, Severity::kRecord);
  const Config config = MustLoad(
      "series:\n  - match: \"**\"\nsinks:\n"
      "  alert_log: {min_severity: notify}\n"
      "  webhook: {url: \"http://127.0.0.1:9000/hook\", min_severity: page}\n"
      "  stdout: {enabled: true, min_severity: notify}\n");
  const SinkOptions& sinks = config.service.sinks;
  EXPECT_EQ(sinks.alert_log.min_severity, Severity::kNotify);
  EXPECT_EQ(sinks.webhook.min_severity, Severity::kPage);
  EXPECT_TRUE(sinks.to_stdout);
  EXPECT_EQ(sinks.stdout_min_severity, Severity::kNotify);
  EXPECT_FALSE(MustLoad("series:\n  - match: \"**\"\nsinks:\n  stdout: false\n")
                   .service.sinks.to_stdout);
  ExpectOneError("sinks:\n  webhook:\n    min_severity: urgent\n", 3, 19,
                 {"record | notify | page", "urgent"});
}

TEST(ServiceOptionsTest, BackoffMaxBelowBackoffIsRefusedAtBackoffMax) {
  ExpectOneError("sinks:\n  webhook:\n    backoff: 2s\n    backoff_max: 1s\n", 4, 18,
                 {"backoff_max must be at least backoff"});
}

TEST(ServiceOptionsTest, ShardsOutOfRangeIsReportedAtTheKey) {
  ExpectOneError("series: []\nshards: 1000\n", 2, 9, {"shards must be in [0, 256]"});
}

TEST(ServiceOptionsTest, LimitsAndAccessMapOntoTheStructs) {
  const Config config = MustLoad(
      "series: []\nmax_time_ahead: 2h\ningest_memory_bytes: 8388608\n"
      "access:\n  token_env: PLUMBLINE_TOKEN\n");
  EXPECT_EQ(config.service.max_time_ahead, 2 * kMicrosPerHour);
  EXPECT_EQ(config.service.ingest_memory_bytes, 8388608u);
  EXPECT_EQ(config.service.access.token_env, "PLUMBLINE_TOKEN");
  EXPECT_TRUE(config.service.access.enabled());
  const Config defaults = MustLoad("series: []\n");
  EXPECT_EQ(defaults.service.max_time_ahead, kMicrosPerDay);
  EXPECT_EQ(defaults.service.ingest_memory_bytes, 64u << 20);
  EXPECT_FALSE(defaults.service.access.enabled());
}

TEST(ServiceOptionsTest, LimitsAndAccessRulesAreReportedAtTheirKeys) {
  ExpectOneError("series: []\ningest_memory_bytes: 1000\n", 2, 22,
                 {"ingest_memory_bytes must be in [1048576"});
  ExpectOneError("series: []\nmax_time_ahead: 400d\n", 2, 17, {"max_time_ahead must be in"});
  ExpectOneError("access:\n  token_file: /etc/t\n  token_env: T\n", 2, 15,
                 {"token_file and token_env cannot both be set"});
}

TEST(ServiceOptionsTest, TlsMapsOntoEachListener) {
  const Config config = MustLoad(
      "series: []\nlisteners:\n  tcp:\n    tls: {certificate_file: c.pem, key_file: "
      "k.pem}\n"
      "  http:\n    tls:\n      certificate_file: h.pem\n      key_file: hk.pem\n");
  EXPECT_TRUE(config.service.tcp.tls.enabled());
  EXPECT_EQ(config.service.tcp.tls.certificate_file, "c.pem");
  EXPECT_EQ(config.service.tcp.tls.key_file, "k.pem");
  EXPECT_TRUE(config.service.http.tls.enabled());
  EXPECT_EQ(config.service.http.tls.certificate_file, "h.pem");
  EXPECT_EQ(config.service.http.tls.key_file, "hk.pem");
  EXPECT_EQ(DescribeService(config.service)[0],
            "listeners: tcp 127.0.0.1:7411 (tls), http 127.0.0.1:7412 (tls)");
  const Config defaults = MustLoad("series: []\n");
  EXPECT_FALSE(defaults.service.tcp.tls.enabled());
  EXPECT_FALSE(defaults.service.http.tls.enabled());
}

TEST(ServiceOptionsTest, TlsNeedsBothFilesAndKnownKeys) {
  ExpectOneError("listeners:\n  tcp:\n    tls: {certificate_file: c.pem}\n", 3, 10,
                 {"listeners.tcp.tls: tls needs both certificate_file and key_file"});
  ExpectOneError("listeners:\n  http:\n    tls: {cert: c.pem, key_file: k.pem}\n", 3, 11,
                 {"unknown key 'cert' in listeners.http.tls"});
}

TEST(ServiceOptionsTest, AFileFollowedTwiceIsRefused) {
  ExpectOneError("inputs:\n  files: [a.csv, a.csv]\n", 2, 3,
                 {"path 'a.csv' is followed twice"});
}

TEST(ServiceOptionsTest, SectionThatIsNotAMappingSaysWhatItExpects) {
  ExpectOneError("listeners: 9100\n", 1, 12,
                 {"listeners: expected a mapping of keys (tcp, http), got '9100'"});
}

TEST(ServiceOptionsTest, BadStartAtListsTheChoices) {
  ExpectOneError("inputs:\n  files:\n    - {path: a.csv, start_at: begining}\n", 3, 31,
                 {"start_at: unknown value 'begining'", "beginning | end",
                  "did you mean 'beginning'?"});
}

TEST(ServiceOptionsTest, DurationsNeedUnits) {
  ExpectOneError("shutdown_timeout: 10\n", 1, 19, {"'10' has no unit"});
}

TEST(HttpUrlTest, SplitsHostPortAndTarget) {
  HttpUrl url;
  ASSERT_TRUE(ParseHttpUrl("http://hooks.example:8080/a/b?c=1", &url));
  EXPECT_EQ(url.host, "hooks.example");
  EXPECT_EQ(url.port, "8080");
  EXPECT_EQ(url.target, "/a/b?c=1");
  ASSERT_TRUE(ParseHttpUrl("http://127.0.0.1", &url));
  EXPECT_EQ(url.port, "80");
  EXPECT_EQ(url.target, "/");
  ASSERT_TRUE(ParseHttpUrl("http://[::1]:9000/x", &url));
  EXPECT_EQ(url.host, "::1");
  EXPECT_EQ(url.port, "9000");
}

TEST(HttpUrlTest, RefusesWhatTheWebhookCannotReach) {
  std::string why;
  EXPECT_FALSE(ParseHttpUrl("https://x/", nullptr, &why));
  EXPECT_FALSE(ParseHttpUrl("http://:80/", nullptr, &why));
  EXPECT_FALSE(ParseHttpUrl("http://x:0/", nullptr, &why));
  EXPECT_FALSE(ParseHttpUrl("http://x:99999/", nullptr, &why));
  EXPECT_FALSE(ParseHttpUrl("http://user@x/", nullptr, &why));
  EXPECT_FALSE(ParseHttpUrl("http://[::1/", nullptr, &why));
}

TEST(EnumTest, StartAtRoundTrips) {
  for (StartAt s : {StartAt::kBeginning, StartAt::kEnd}) {
    EXPECT_EQ(StartAtFromString(ToString(s)), s);
  }
  EXPECT_FALSE(StartAtFromString("middle"));
}

}  // namespace
}  // namespace plumbline
