// kafka_mock: librdkafka's mock cluster (rdkafka_mock.h: brokers in this
// process on loopback sockets, so other processes reach them by the bootstrap
// string) and the few client steps the Kafka e2e test needs around it.
//
//   kafka_mock cluster TOPIC:PARTITIONS...   runs a 3-broker cluster with those
//                                            topics; prints "bootstrap=<servers>",
//                                            serves until stdin closes
//   kafka_mock produce BROKERS TOPIC FILE RATE
//                                            one message per CSV reading line
//                                            (key: its series), RATE a second
//                                            (0: as fast as possible); prints
//                                            "produced <n>" every 10,000
//   kafka_mock lag BROKERS GROUP TOPIC        prints "lag=<n>": messages past the
//                                            group's committed offsets
//   kafka_mock dump BROKERS TOPIC            prints every message's value, one a line
//
// Exit status 0, or 1 with the reason on stderr.
#include <librdkafka/rdkafka.h>
#include <librdkafka/rdkafka_mock.h>

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <iostream>
#include <string>
#include <thread>
#include <vector>

namespace {

constexpr int kTimeoutMilliseconds = 30000;

[[noreturn]] void Die(const std::string& why) {
  std::cerr << "kafka_mock: " << why << "\n";
  std::exit(1);
}

rd_kafka_t* Client(rd_kafka_type_t type,
                   const std::vector<std::pair<std::string, std::string>>& settings) {
  rd_kafka_conf_t* conf = rd_kafka_conf_new();
  char error[512];
  for (const auto& [name, value] : settings) {
    if (rd_kafka_conf_set(conf, name.c_str(), value.c_str(), error, sizeof error) !=
        RD_KAFKA_CONF_OK) {
      Die(name + ": " + error);
    }
  }
  rd_kafka_t* client = rd_kafka_new(type, conf, error, sizeof error);
  if (!client) Die(error);
  return client;
}

int Cluster(const std::vector<std::string>& topics) {
  rd_kafka_t* handle = Client(RD_KAFKA_PRODUCER, {{"log_level", "3"}});
  rd_kafka_mock_cluster_t* cluster = rd_kafka_mock_cluster_new(handle, 3);
  if (!cluster) Die("mock cluster not made");
  for (const std::string& spec : topics) {
    const std::size_t colon = spec.find(':');
    if (colon == std::string::npos) Die("topic spec " + spec + " is not NAME:PARTITIONS");
    const std::string name = spec.substr(0, colon);
    const int partitions = std::atoi(spec.c_str() + colon + 1);
    if (rd_kafka_mock_topic_create(cluster, name.c_str(), partitions, 3)) {
      Die("topic " + name + " not made");
    }
  }
  std::cout << "bootstrap=" << rd_kafka_mock_cluster_bootstraps(cluster) << std::endl;
  std::string line;
  while (std::getline(std::cin, line)) {
  }
  rd_kafka_mock_cluster_destroy(cluster);
  rd_kafka_destroy(handle);
  return 0;
}

int Produce(const std::string& brokers, const std::string& topic, const std::string& file,
            double rate) {
  rd_kafka_t* producer = Client(RD_KAFKA_PRODUCER, {{"bootstrap.servers", brokers},
                                                    {"enable.idempotence", "true"},
                                                    {"linger.ms", "5"}});
  std::ifstream in(file);
  if (!in) Die("cannot read " + file);
  const auto begun = std::chrono::steady_clock::now();
  std::string line;
  long long produced = 0;
  while (std::getline(in, line)) {
    const std::size_t first = line.find(',');
    const std::size_t second = line.find(',', first + 1);
    if (first == std::string::npos || second == std::string::npos) continue;
    const std::string series = line.substr(first + 1, second - first - 1);
    rd_kafka_resp_err_t error;
    while ((error = rd_kafka_producev(producer, RD_KAFKA_V_TOPIC(topic.c_str()),
                                      RD_KAFKA_V_KEY(series.data(), series.size()),
                                      RD_KAFKA_V_VALUE(line.data(), line.size()),
                                      RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY),
                                      RD_KAFKA_V_END)) == RD_KAFKA_RESP_ERR__QUEUE_FULL) {
      rd_kafka_poll(producer, 10);
    }
    if (error) Die(std::string("produce: ") + rd_kafka_err2str(error));
    rd_kafka_poll(producer, 0);
    if (++produced % 10000 == 0) std::cout << "produced " << produced << std::endl;
    if (rate > 0) {
      std::this_thread::sleep_until(
          begun + std::chrono::duration_cast<std::chrono::steady_clock::duration>(
                      std::chrono::duration<double>(produced / rate)));
    }
  }
  rd_kafka_flush(producer, kTimeoutMilliseconds);
  if (rd_kafka_outq_len(producer) > 0) Die("messages not acknowledged");
  rd_kafka_destroy(producer);
  std::cout << "done " << produced << std::endl;
  return 0;
}

int PartitionCount(rd_kafka_t* client, const std::string& topic) {
  rd_kafka_topic_t* handle = rd_kafka_topic_new(client, topic.c_str(), nullptr);
  const rd_kafka_metadata_t* metadata = nullptr;
  if (rd_kafka_metadata(client, 0, handle, &metadata, kTimeoutMilliseconds)) {
    Die("metadata of " + topic);
  }
  const int count = metadata->topic_cnt == 1 ? metadata->topics[0].partition_cnt : 0;
  rd_kafka_metadata_destroy(metadata);
  rd_kafka_topic_destroy(handle);
  return count;
}

int Lag(const std::string& brokers, const std::string& group, const std::string& topic) {
  rd_kafka_t* consumer =
      Client(RD_KAFKA_CONSUMER, {{"bootstrap.servers", brokers}, {"group.id", group}});
  const int partitions = PartitionCount(consumer, topic);
  rd_kafka_topic_partition_list_t* list = rd_kafka_topic_partition_list_new(partitions);
  for (int p = 0; p < partitions; ++p)
    rd_kafka_topic_partition_list_add(list, topic.c_str(), p);
  if (rd_kafka_committed(consumer, list, kTimeoutMilliseconds)) Die("committed offsets");
  long long lag = 0;
  for (int i = 0; i < list->cnt; ++i) {
    std::int64_t low = 0, high = 0;
    if (rd_kafka_query_watermark_offsets(consumer, topic.c_str(),
                                         list->elems[i].partition, &low, &high,
                                         kTimeoutMilliseconds)) {
      Die("watermarks");
    }
    const std::int64_t committed =
        list->elems[i].offset < 0 ? low : list->elems[i].offset;
    lag += high - committed;
  }
  rd_kafka_topic_partition_list_destroy(list);
  rd_kafka_destroy(consumer);
  std::cout << "lag=" << lag << std::endl;
  return 0;
}

int Dump(const std::string& brokers, const std::string& topic) {
  rd_kafka_t* consumer = Client(RD_KAFKA_CONSUMER, {{"bootstrap.servers", brokers},
                                                    {"group.id", "kafka-mock-dump"},
                                                    {"enable.auto.commit", "false"}});
  rd_kafka_poll_set_consumer(consumer);
  const int partitions = PartitionCount(consumer, topic);
  rd_kafka_topic_partition_list_t* list = rd_kafka_topic_partition_list_new(partitions);
  int left = 0;
  std::vector<std::int64_t> end(static_cast<std::size_t>(partitions), 0);
  for (int p = 0; p < partitions; ++p) {
    std::int64_t low = 0, high = 0;
    if (rd_kafka_query_watermark_offsets(consumer, topic.c_str(), p, &low, &high,
                                         kTimeoutMilliseconds)) {
      Die("watermarks");
    }
    end[static_cast<std::size_t>(p)] = high;
    if (high > low) {
      rd_kafka_topic_partition_list_add(list, topic.c_str(), p)->offset = low;
      ++left;
    }
  }
  rd_kafka_assign(consumer, list);
  rd_kafka_topic_partition_list_destroy(list);
  const auto deadline =
      std::chrono::steady_clock::now() + std::chrono::milliseconds(kTimeoutMilliseconds);
  while (left > 0) {
    if (std::chrono::steady_clock::now() > deadline) Die("topic not read in time");
    rd_kafka_message_t* message = rd_kafka_consumer_poll(consumer, 100);
    if (!message) continue;
    if (message->err) {
      if (message->err != RD_KAFKA_RESP_ERR__PARTITION_EOF) {
        Die(rd_kafka_message_errstr(message));
      }
    } else {
      std::cout.write(static_cast<const char*>(message->payload),
                      static_cast<std::streamsize>(message->len));
      std::cout << "\n";
      if (message->offset + 1 == end[static_cast<std::size_t>(message->partition)])
        --left;
    }
    rd_kafka_message_destroy(message);
  }
  rd_kafka_consumer_close(consumer);
  rd_kafka_destroy(consumer);
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  const std::vector<std::string> args(argv + 1, argv + argc);
  if (!args.empty() && args[0] == "cluster") {
    return Cluster(std::vector<std::string>(args.begin() + 1, args.end()));
  }
  if (args.size() == 5 && args[0] == "produce") {
    return Produce(args[1], args[2], args[3], std::atof(args[4].c_str()));
  }
  if (args.size() == 4 && args[0] == "lag") return Lag(args[1], args[2], args[3]);
  if (args.size() == 3 && args[0] == "dump") return Dump(args[1], args[2]);
  std::cerr
      << "usage: kafka_mock cluster TOPIC:PARTITIONS... | produce BROKERS TOPIC FILE "
         "RATE | lag BROKERS GROUP TOPIC | dump BROKERS TOPIC\n";
  return 2;
}
