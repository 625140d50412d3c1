#include "aftershock/update_batch.h"

#include <catch2/catch.hpp>
#include <cstring>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/update_codec.h"
#include "streaming/engine_test_util.h"

namespace aftershock {
namespace {

// Keeps every message it accepts (refuses while `refuse` is set) and counts
// the rounds and flushes passed on to it.
class Recorder : public testing::CollectingSink {
 public:
  void EndRound() override { ++rounds; }
  absl::Status Flush() override {
    ++flushes;
    return absl::OkStatus();
  }
  int rounds = 0;
  int flushes = 0;
};

BarUpdate MakeUpdate(int i) {
  BarUpdate u;
  u.symbol.assign(absl::StrCat("SYM", i % 7, ".Q"));
  u.t_ns = 1772443800000000000 + i;
  u.r = 0.001 * (i % 13 - 6);
  u.mu = 1e-4;
  u.eps = u.r - u.mu;
  u.var = 1e-6 * (1 + i % 5);
  u.z = u.eps / std::sqrt(u.var);
  u.var_next = 1.1e-6;
  u.vol_ann = 0.2;
  u.n_horizons = 2;
  u.horizons[0] = 1;
  u.horizons[1] = 5;
  u.var_h[0] = 1.1e-6;
  u.var_h[1] = 5.6e-6;
  u.n_levels = 1;
  u.levels[0] = 0.99;
  u.var_risk[0] = 0.0025;
  u.es[0] = 0.0029;
  u.scale = 1.5;
  u.ver = static_cast<uint32_t>(i);
  u.flags = (i % 3 == 0) ? kFlagWarmup | kFlagStale : 0;  // JSON: a "flags" array with strings
  return u;
}

std::string Encode(const BarUpdate& u, WireEncoding enc) {
  std::string body;
  REQUIRE((enc == WireEncoding::kBinary ? EncodeUpdateBinary(u, &body) : EncodeUpdateJson(u, &body))
              .ok());
  return body;
}

PublishConfig Config(WireEncoding enc, UpdateTopics topics, int64_t max_bytes, int max_updates) {
  PublishConfig p;
  p.encoding = enc;
  p.update_topics = topics;
  p.batch_max_bytes = max_bytes;
  p.batch_max_updates = max_updates;
  return p;
}

// The records of every batch message in `messages`, in order.
std::vector<std::string> BatchRecords(const std::vector<Recorder::Message>& messages,
                                      WireEncoding enc, std::vector<size_t>* sizes = nullptr) {
  std::vector<std::string> out;
  for (const auto& m : messages) {
    if (m.topic != kUpdateBatchTopic) continue;
    std::vector<absl::string_view> recs;
    const absl::Status s = SplitUpdateBatch(m.body, enc, &recs);
    INFO(s.ToString());
    REQUIRE(s.ok());
    if (sizes != nullptr) sizes->push_back(recs.size());
    for (absl::string_view r : recs) out.emplace_back(r);
  }
  return out;
}

TEST_CASE("batches carry the per-symbol bodies in order, within the caps", "[update_batch]") {
  const WireEncoding enc = GENERATE(WireEncoding::kBinary, WireEncoding::kJson);
  INFO(WireEncodingName(enc));
  auto rec = std::make_unique<Recorder>();
  Recorder* r = rec.get();
  const int64_t max_bytes = 2048;
  const int max_updates = 5;
  BatchingSink sink(Config(enc, UpdateTopics::kBoth, max_bytes, max_updates), std::move(rec));
  std::vector<std::string> sent;
  int round_ends = 0;
  // Rounds of 0..12 updates; an alert in the middle passes through at once.
  int i = 0;
  for (int round = 0; round < 12; ++round) {
    for (int k = 0; k < round; ++k, ++i) {
      const BarUpdate u = MakeUpdate(i);
      sent.push_back(Encode(u, enc));
      CHECK(sink.Send(absl::StrCat("u.", u.symbol.view()), sent.back()));
      if (k == 1) CHECK(sink.Send("a.SYM1.Q", "{\"alert\":1}"));
    }
    sink.EndRound();
    ++round_ends;
    CHECK(sink.pending() == 0);
  }
  CHECK(r->rounds == round_ends);  // passed on

  // "both": every update also went out alone, in order.
  std::vector<std::string> singles;
  for (const auto& m : r->messages) {
    if (m.topic.rfind("u.", 0) == 0) singles.push_back(m.body);
  }
  CHECK(singles == sent);
  std::vector<size_t> sizes;
  const std::vector<std::string> batched = BatchRecords(r->messages, enc, &sizes);
  CHECK(batched == sent);  // same bytes, same order, nothing missing
  for (const auto& m : r->messages) {
    if (m.topic == kUpdateBatchTopic) CHECK(m.body.size() <= static_cast<size_t>(max_bytes));
  }
  for (size_t n : sizes) {
    CHECK(n >= 1);
    CHECK(n <= static_cast<size_t>(max_updates));
  }
  // Rounds of 6..11 updates need two or three batches (at most 5 each).
  CHECK(sizes.size() > 11);
  CHECK(sink.stats().batches == sizes.size());
  CHECK(sink.stats().batched_updates == sent.size());
  CHECK(sink.stats().batch_drops == 0);
  // Every record decodes to the update it came from.
  for (size_t k = 0; k < batched.size(); ++k) {
    BarUpdate u;
    REQUIRE((enc == WireEncoding::kBinary ? DecodeUpdateBinary(batched[k], &u)
                                          : DecodeUpdateJson(batched[k], &u))
                .ok());
    CHECK(u.ver == k);
  }
}

TEST_CASE("the binary batch layout, byte by byte", "[update_batch]") {
  auto rec = std::make_unique<Recorder>();
  Recorder* r = rec.get();
  BatchingSink sink(Config(WireEncoding::kBinary, UpdateTopics::kBatch, 65536, 1024),
                    std::move(rec));
  const std::string a = Encode(MakeUpdate(1), WireEncoding::kBinary);
  const std::string b = Encode(MakeUpdate(2), WireEncoding::kBinary);
  CHECK(sink.Send("u.SYM1.Q", a));
  CHECK(sink.Send("u.SYM2.Q", b));
  CHECK(r->messages.empty());  // "batch": nothing per symbol, nothing before the round ends
  sink.EndRound();
  REQUIRE(r->messages.size() == 1);
  CHECK(r->messages[0].topic == "b.u");
  std::string want;
  want.push_back(static_cast<char>(0xA9));
  want.push_back(1);
  want.push_back(2);
  want.push_back(0);
  want.push_back(static_cast<char>(a.size() & 0xFF));
  want.push_back(static_cast<char>(a.size() >> 8));
  want += a;
  want.push_back(static_cast<char>(b.size() & 0xFF));
  want.push_back(static_cast<char>(b.size() >> 8));
  want += b;
  CHECK(r->messages[0].body == want);
  sink.EndRound();  // nothing pending: no empty batch
  CHECK(r->messages.size() == 1);
}

TEST_CASE("the JSON batch is {\"n\":count,\"u\":[updates]}", "[update_batch]") {
  auto rec = std::make_unique<Recorder>();
  Recorder* r = rec.get();
  BatchingSink sink(Config(WireEncoding::kJson, UpdateTopics::kBatch, 65536, 1024), std::move(rec));
  std::vector<std::string> bodies;
  for (int i = 0; i < 12; ++i) {
    bodies.push_back(Encode(MakeUpdate(i), WireEncoding::kJson));
    CHECK(sink.Send("u.X", bodies.back()));
  }
  CHECK(sink.Flush().ok());  // sends the batch in hand, then flushes the inner sink
  CHECK(r->flushes == 1);
  REQUIRE(r->messages.size() == 1);
  const std::string& body = r->messages[0].body;
  CHECK(body.rfind("{\"n\":12,\"u\":[{", 0) == 0);
  const auto j = nlohmann::json::parse(body);  // valid JSON for any parser
  REQUIRE(j.size() == 2);
  CHECK(j["n"] == 12);
  REQUIRE(j["u"].size() == 12);
  for (int i = 0; i < 12; ++i) CHECK(j["u"][i] == nlohmann::json::parse(bodies[i]));
}

TEST_CASE("the byte cap: a batch is sent before it would pass batch_max_bytes", "[update_batch]") {
  const WireEncoding enc = GENERATE(WireEncoding::kBinary, WireEncoding::kJson);
  INFO(WireEncodingName(enc));
  auto rec = std::make_unique<Recorder>();
  Recorder* r = rec.get();
  const std::string one = Encode(MakeUpdate(0), enc);
  // Room for exactly three records of this size with the header.
  const size_t per = enc == WireEncoding::kBinary ? one.size() + 2 : one.size() + 1;
  const int64_t cap = std::max<int64_t>(1024, static_cast<int64_t>(3 * per + 18));
  const size_t fits = (static_cast<size_t>(cap) - (enc == WireEncoding::kBinary ? 4 : 17)) / per;
  BatchingSink sink(Config(enc, UpdateTopics::kBatch, cap, 65535), std::move(rec));
  for (int i = 0; i < 40; ++i) CHECK(sink.Send("u.SYM0.Q", one));
  sink.EndRound();
  std::vector<size_t> sizes;
  const auto recs = BatchRecords(r->messages, enc, &sizes);
  CHECK(recs.size() == 40);
  REQUIRE(sizes.size() >= 2);
  for (size_t k = 0; k + 1 < sizes.size(); ++k) CHECK(sizes[k] >= fits);
  for (const auto& m : r->messages) CHECK(m.body.size() <= static_cast<size_t>(cap));

  // An update larger than the cap travels alone (a batch of one).
  auto rec2 = std::make_unique<Recorder>();
  Recorder* r2 = rec2.get();
  BatchingSink small(Config(enc, UpdateTopics::kBatch, 1024, 65535), std::move(rec2));
  const std::string big = enc == WireEncoding::kBinary
                              ? std::string(1500, 'x')
                              : "{\"s\":\"" + std::string(1500, 'x') + "\"}";
  CHECK(small.Send("u.A", one));
  CHECK(small.Send("u.B", big));
  CHECK(small.Send("u.C", one));
  small.EndRound();
  std::vector<size_t> sizes2;
  const auto recs2 = BatchRecords(r2->messages, enc, &sizes2);
  CHECK(sizes2 == std::vector<size_t>{1, 1, 1});
  REQUIRE(recs2.size() == 3);
  CHECK(recs2[1] == big);
}

TEST_CASE("a refused batch is counted with its updates", "[update_batch]") {
  auto rec = std::make_unique<Recorder>();
  Recorder* r = rec.get();
  BatchingSink sink(Config(WireEncoding::kBinary, UpdateTopics::kBatch, 65536, 1024),
                    std::move(rec));
  const std::string a = Encode(MakeUpdate(1), WireEncoding::kBinary);
  for (int i = 0; i < 3; ++i) CHECK(sink.Send("u.X", a));
  r->refuse = true;
  sink.EndRound();
  CHECK(sink.stats().batch_drops == 1);
  CHECK(sink.stats().dropped_updates == 3);
  CHECK(sink.stats().batches == 0);
  r->refuse = false;
  CHECK(sink.Send("u.X", a));
  sink.EndRound();
  CHECK(sink.stats().batches == 1);
  CHECK(sink.stats().batched_updates == 1);
  std::string prom;
  sink.AppendPrometheus(&prom);
  CHECK(prom.find("aftershock_update_batches_total 1\n") != std::string::npos);
  CHECK(prom.find("aftershock_update_batch_drops_total 1\n") != std::string::npos);
  CHECK(prom.find("aftershock_update_batch_dropped_updates_total 3\n") != std::string::npos);
  CHECK(sink.metrics() == &sink);
}

TEST_CASE("MaybeBatchUpdates wraps only for batch and both", "[update_batch]") {
  auto plain = std::make_unique<Recorder>();
  UpdateSink* p = plain.get();
  auto same = MaybeBatchUpdates(Config(WireEncoding::kJson, UpdateTopics::kSymbol, 65536, 1024),
                                std::move(plain));
  CHECK(same.get() == p);
  CHECK(same->metrics() == nullptr);
  auto wrapped = MaybeBatchUpdates(Config(WireEncoding::kJson, UpdateTopics::kBatch, 65536, 1024),
                                   std::make_unique<Recorder>());
  CHECK(dynamic_cast<BatchingSink*>(wrapped.get()) != nullptr);
  CHECK(wrapped->metrics() != nullptr);
}

TEST_CASE("SplitUpdateBatch rejects malformed batches", "[update_batch]") {
  std::vector<absl::string_view> recs;
  const std::string a = Encode(MakeUpdate(1), WireEncoding::kBinary);
  std::string good = {static_cast<char>(0xA9), 1, 1, 0};
  good.push_back(static_cast<char>(a.size() & 0xFF));
  good.push_back(static_cast<char>(a.size() >> 8));
  good += a;
  REQUIRE(SplitUpdateBatch(good, WireEncoding::kBinary, &recs).ok());
  REQUIRE(recs.size() == 1);
  CHECK(recs[0] == a);
  auto bad = [&](std::string b, WireEncoding enc) {
    INFO(b.size());
    CHECK(!SplitUpdateBatch(b, enc, &recs).ok());
    CHECK(recs.empty());
  };
  bad(good.substr(0, 3), WireEncoding::kBinary);                // short header
  bad(good.substr(0, good.size() - 1), WireEncoding::kBinary);  // truncated record
  bad(good + "x", WireEncoding::kBinary);                       // trailing bytes
  bad(std::string{static_cast<char>(0xA8)} + good.substr(1), WireEncoding::kBinary);  // magic
  bad(std::string{static_cast<char>(0xA9), 2} + good.substr(2), WireEncoding::kBinary);
  bad(std::string{static_cast<char>(0xA9), 1, 0, 0}, WireEncoding::kBinary);  // no records

  REQUIRE(SplitUpdateBatch("{\"n\":2,\"u\":[{\"s\":\"}{\"},{\"a\":{\"b\":1}}]}",
                           WireEncoding::kJson, &recs)
              .ok());
  REQUIRE(recs.size() == 2);
  CHECK(recs[0] == "{\"s\":\"}{\"}");  // braces inside strings do not count
  CHECK(recs[1] == "{\"a\":{\"b\":1}}");
  bad("{\"n\":3,\"u\":[{},{}]}", WireEncoding::kJson);  // n too large
  bad("{\"n\":1,\"u\":[{},{}]}", WireEncoding::kJson);  // n too small
  bad("{\"n\":0,\"u\":[]}", WireEncoding::kJson);
  bad("{\"u\":[{}],\"n\":1}", WireEncoding::kJson);
  bad("{\"n\":1,\"u\":[{\"s\":1]}", WireEncoding::kJson);  // unterminated
  bad("[{}]", WireEncoding::kJson);
}

}  // namespace
}  // namespace aftershock
