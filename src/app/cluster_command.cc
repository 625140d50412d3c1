// `aftershock cluster status`: the partition assignment of the scale-out mode
// as the lease bucket holds it (partition_leases.h).
#include <cstdio>
#include <map>
#include <string>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
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
      "(released, expired or never claimed). Read from the lease bucket of [nats].\n"
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
                      "\",\"revision\":", p.revision, ",\"age_s\":",
                      p.written_ns > 0 ? static_cast<double>(now - p.written_ns) / 1e9 : -1.0,
                      "}");
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
  std::printf("\n%9s  %-30s %9s %7s\n", "partition", "owner", "revision", "age_s");
  for (const PartitionAssignment& p : a->partitions) {
    std::printf("%9d  %-30s %9llu %7s\n", p.partition, p.owner.empty() ? "-" : p.owner.c_str(),
                static_cast<unsigned long long>(p.revision),
                p.written_ns > 0
                    ? absl::StrCat(static_cast<int64_t>((now - p.written_ns) / 100000000) / 10.0)
                          .c_str()
                    : "-");
  }
  return 0;
}

}  // namespace aftershock::app
