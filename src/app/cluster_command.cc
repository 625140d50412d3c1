// `aftershock cluster status`: the partition assignment of the scale-out mode
// as the lease bucket holds it (partition_leases.h).
#include <cstdio>
#include <map>
#include <string>
#include <utility>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
#include "aftershock/partition_checkpoints.h"
#include "aftershock/partition_leases.h"
#include "app/args.h"
#include "app/cli.h"

namespace aftershock::app {
namespace {

int Fail(const absl::Status& s, int code) { return ReportFailure("cluster", s, code); }

}  // namespace

int ClusterCommand(int argc, char** argv) {
  ArgParser args(
      "aftershock cluster status",
      "Print the partition assignment of the scale-out mode ([feed] source = \"nats\"): the\n"
      "live engine instances and, per partition, the instance holding its lease, the lease\n"
      "key's revision and its age (seconds since it was last renewed). \"-\" = free\n"
      "(released, expired or never claimed). Read from the lease bucket of [nats]. Then\n"
      "the partition's stored checkpoint: the last stream sequence it covers and its age\n"
      "(\"-\" = none yet: a new holder replays the partition from its first message).\n"
      "Exit 0, 1 when the broker cannot be reached, 2 for bad usage.\n\n"
      "Example:\n  aftershock cluster status --config engine.toml");
  args.AddOption("config", "FILE", "engine configuration (its [nats] section)", "", true);
  args.AddFlag("json", "one JSON object instead of the table");
  // argv holds the arguments after "cluster"; the first may be the sub-command.
  if (argc >= 1 && std::string(argv[0]) == "status") {
    --argc;
    ++argv;
  } else if (argc >= 1 && argv[0][0] != '-') {
    return Fail(absl::InvalidArgumentError(
                    absl::StrCat("unknown cluster sub-command '", argv[0], "' (known: status)")),
                2);
  }
  if (auto s = args.Parse(argc, argv); !s.ok()) return Fail(s, 2);
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  auto config = LoadEngineConfigFile(args.Get("config"));
  if (!config.ok()) return Fail(config.status(), 2);
  auto a = ReadClusterAssignment(config->nats);
  if (absl::IsNotFound(a.status())) {
    std::printf("no lease bucket '%s' yet: no engine has joined\n",
                config->nats.lease_bucket.c_str());
    return 0;
  }
  if (!a.ok()) return Fail(a.status(), 1);
  const int64_t now = SystemClock()->NowNs();
  // The stored checkpoints (sequence, written_ns), when the bucket exists.
  std::vector<StoredCheckpoint> cps(a->partitions.size());
  auto store = PartitionCheckpointStore::Open(config->nats, "aftershock-cluster-status", false);
  if (store.ok()) {
    for (size_t i = 0; i < cps.size(); ++i) {
      auto c = (*store)->Peek(static_cast<int>(i));
      if (c.ok()) {
        cps[i] = *std::move(c);
      } else if (!absl::IsNotFound(c.status())) {
        return Fail(c.status(), 1);
      }
    }
  } else if (!absl::IsNotFound(store.status())) {
    return Fail(store.status(), 1);
  }
  auto age = [now](int64_t ns) { return ns > 0 ? static_cast<double>(now - ns) / 1e9 : -1.0; };
  std::map<std::string, int> count;
  for (const PartitionAssignment& p : a->partitions) {
    if (!p.owner.empty()) ++count[p.owner];
  }
  if (args.Flag("json")) {
    std::string o = absl::StrCat("{\"bucket\":\"", config->nats.lease_bucket,
                                 "\",\"instances\":[");
    for (size_t i = 0; i < a->instances.size(); ++i) {
      absl::StrAppend(&o, i ? "," : "", "\"", a->instances[i], "\"");
    }
    absl::StrAppend(&o, "],\"partitions\":[");
    for (size_t i = 0; i < a->partitions.size(); ++i) {
      const PartitionAssignment& p = a->partitions[i];
      absl::StrAppend(&o, i ? "," : "", "{\"partition\":", p.partition, ",\"owner\":\"", p.owner,
                      "\",\"revision\":", p.revision, ",\"age_s\":", age(p.written_ns),
                      ",\"checkpoint_sequence\":", cps[i].sequence,
                      ",\"checkpoint_age_s\":", age(cps[i].written_ns), "}");
    }
    absl::StrAppend(&o, "]}\n");
    std::fputs(o.c_str(), stdout);
    return 0;
  }
  std::printf("lease bucket %s at %s: %zu live instance(s), %d partitions\n",
              config->nats.lease_bucket.c_str(), config->nats.servers.front().c_str(),
              a->instances.size(), config->nats.partitions);
  for (const std::string& i : a->instances) {
    std::printf("  instance %-30s %d partition(s)\n", i.c_str(), count[i]);
  }
  // Ages to 0.1 s, "-" when absent.
  auto tenths = [now](int64_t ns) {
    return ns > 0 ? absl::StrCat(static_cast<int64_t>((now - ns) / 100000000) / 10.0)
                  : std::string("-");
  };
  std::printf("\n%9s  %-30s %9s %7s %14s %9s\n", "partition", "owner", "revision", "age_s",
              "checkpoint_seq", "cp_age_s");
  for (size_t i = 0; i < a->partitions.size(); ++i) {
    const PartitionAssignment& p = a->partitions[i];
    const std::string seq = cps[i].written_ns > 0 ? absl::StrCat(cps[i].sequence) : "-";
    std::printf("%9d  %-30s %9llu %7s %14s %9s\n", p.partition,
                p.owner.empty() ? "-" : p.owner.c_str(),
                static_cast<unsigned long long>(p.revision), tenths(p.written_ns).c_str(),
                seq.c_str(), tenths(cps[i].written_ns).c_str());
  }
  return 0;
}

}  // namespace aftershock::app
