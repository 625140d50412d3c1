// AckWindow with an injected clock: one unacknowledged message per key,
// resends after the retry delay in admission order, give-up, the deadline the
// producer sleeps to. And TickMessageId, the deduplication key.
#include "io/ack_window.h"

#include <catch2/catch.hpp>
#include <cstdio>
#include <limits>
#include <map>
#include <set>
#include <string>
#include <vector>

#include "aftershock/jetstream_publisher.h"

namespace aftershock {
namespace {

constexpr int64_t kMs = 1000000;

AckWindowOptions Options() {
  AckWindowOptions o;
  o.max_in_flight = 3;
  o.retry_delay_ms = 100;
  o.give_up_ms = 5000;
  return o;
}

TEST_CASE("a key has at most one unacknowledged message; the window has a size") {
  AckWindow w(Options());
  CHECK(w.CanAdmit("A"));
  w.Admit("A", "1.a.A", "ticks.A", "a1", 0);
  CHECK(!w.CanAdmit("A"));  // its next tick waits for the acknowledgement
  CHECK(w.CanAdmit("B"));
  w.Admit("B", "1.b.B", "ticks.B", "b1", 0);
  w.Admit("C", "1.c.C", "ticks.C", "c1", 0);
  CHECK(w.in_flight() == 3);
  CHECK(!w.CanAdmit("D"));  // max_in_flight
  CHECK(w.OnAck("1.a.A", false));
  CHECK(w.CanAdmit("A"));
  CHECK(w.CanAdmit("D"));
  CHECK(!w.OnAck("1.a.A", false));  // a second acknowledgement (of a resend) changes nothing
  CHECK(!w.OnFailure("9.z.Z", "x", 0));
  const AckWindowStats s = w.stats();
  CHECK(s.admitted == 3);
  CHECK(s.acked == 1);
  CHECK(s.failures == 0);
}

TEST_CASE("failed attempts are resent after the retry delay, oldest admission first") {
  AckWindow w(Options());
  w.Admit("A", "1.a.A", "ticks.A", "a1", 0);
  w.Admit("B", "1.b.B", "ticks.B", "b1", 1 * kMs);
  w.Admit("C", "1.c.C", "ticks.C", "c1", 2 * kMs);
  CHECK(w.NextDeadline() == 5000 * kMs);  // A's give-up
  // C fails first, then A: the resends still go out in admission order.
  CHECK(w.OnFailure("1.c.C", "No responders available for request", 10 * kMs));
  CHECK(w.OnFailure("1.a.A", "Timeout", 20 * kMs));
  CHECK(w.NextDeadline() == 110 * kMs);  // C's resend
  CHECK(w.TakeDue(109 * kMs).empty());
  std::vector<AckWindowResend> due = w.TakeDue(200 * kMs);
  REQUIRE(due.size() == 2);
  CHECK(due[0].id == "1.a.A");
  CHECK(due[0].subject == "ticks.A");
  CHECK(due[0].body == "a1");
  CHECK(due[0].attempt == 2);
  CHECK(due[1].id == "1.c.C");
  CHECK(w.TakeDue(1000 * kMs).empty());  // taken: not due again until it fails again
  CHECK(!w.CanAdmit("A"));               // still unacknowledged during the resend
  CHECK(w.OnFailure("1.a.A", "Timeout", 2200 * kMs));
  due = w.TakeDue(2300 * kMs);
  REQUIRE(due.size() == 1);
  CHECK(due[0].attempt == 3);
  // The broker had stored the first copy: the resend's acknowledgement says duplicate.
  CHECK(w.OnAck("1.a.A", true));
  CHECK(w.OnAck("1.c.C", false));
  CHECK(w.OnAck("1.b.B", false));
  CHECK(w.in_flight() == 0);
  CHECK(w.NextDeadline() == std::numeric_limits<int64_t>::max());
  const AckWindowStats s = w.stats();
  CHECK(s.acked == 3);
  CHECK(s.duplicates == 1);
  CHECK(s.failures == 3);
  CHECK(s.resends == 3);
}

TEST_CASE("a message unacknowledged for the give-up time fails with what is known") {
  AckWindow w(Options());
  w.Admit("B", "1.b.B", "ticks.B", "b1", 1000 * kMs);
  w.Admit("A", "7.a.A", "ticks.A", "a7", 1500 * kMs);
  CHECK(w.OnFailure("7.a.A", "No responders available for request", 1600 * kMs));
  CHECK(w.OnFailure("1.b.B", "Timeout", 3000 * kMs));
  CHECK(w.TakeDue(3100 * kMs).size() == 2);
  CHECK(w.CheckGiveUp(5999 * kMs).ok());
  const absl::Status s = w.CheckGiveUp(6000 * kMs);  // B: 5 s after its first send
  CHECK(absl::IsDeadlineExceeded(s));
  CHECK(s.message() ==
        "tick of B (message id 1.b.B) not acknowledged by JetStream 5 s after its first send (2 "
        "attempts; last error: Timeout); 2 tick(s) unacknowledged");
  CHECK(w.OnAck("1.b.B", false));
  CHECK(w.CheckGiveUp(6000 * kMs).ok());
  CHECK(!w.CheckGiveUp(6500 * kMs).ok());  // A's turn
}

// A broker that loses some attempts (their failures are reported) and stores
// the others: whatever it loses, each key's messages are stored in admission
// order and exactly once (with the duplicate window dropping copies).
TEST_CASE("with lost attempts and resends, every key's messages are stored once, in order") {
  AckWindowOptions o;
  o.max_in_flight = 4;
  o.retry_delay_ms = 0;
  o.give_up_ms = 1000000;
  AckWindow w(o);
  const std::vector<std::string> keys = {"A", "B", "C", "D", "E"};
  std::map<std::string, int> next;                        // per key: next sequence to publish
  std::vector<std::pair<std::string, std::string>> wire;  // (id, key) in flight at the "broker"
  std::set<std::string> stored_ids;
  std::map<std::string, std::vector<int>> stored;  // per key, sequences in stored order
  uint64_t rng = 12345;
  auto rand = [&rng] {
    rng = rng * 6364136223846793005ull + 1442695040888963407ull;
    return rng >> 33;
  };
  int64_t now = 0;
  int published = 0;
  const int total = 400;
  auto deliver = [&](size_t i) {
    const auto [id, key] = wire[i];
    wire.erase(wire.begin() + static_cast<long>(i));
    const uint64_t r = rand() % 10;
    if (r < 2) {  // lost before it was stored: the client reports a timeout
      w.OnFailure(id, "Timeout", now);
      return;
    }
    const bool dup = !stored_ids.insert(id).second;
    if (!dup) stored[key].push_back(std::stoi(id.substr(0, id.find('.'))));
    if (r < 4) {  // stored, acknowledgement lost
      w.OnFailure(id, "Timeout", now);
    } else {
      w.OnAck(id, dup);
    }
  };
  while (published < total || w.in_flight() > 0) {
    ++now;
    for (const AckWindowResend& r : w.TakeDue(now)) {
      wire.push_back({r.id, r.id.substr(r.id.rfind('.') + 1)});
    }
    const std::string& key = keys[rand() % keys.size()];
    if (published < total && w.CanAdmit(key)) {
      const std::string id = std::to_string(next[key]++) + ".x." + key;
      w.Admit(key, id, "ticks." + key, "", now);
      wire.push_back({id, key});
      ++published;
    }
    // The broker answers a random message in flight (acknowledgements of
    // different keys come back in any order).
    if (!wire.empty() && rand() % 2 == 0) deliver(rand() % wire.size());
  }
  int count = 0;
  for (const auto& [key, seqs] : stored) {
    for (size_t i = 0; i < seqs.size(); ++i) CHECK(seqs[i] == static_cast<int>(i));
    count += static_cast<int>(seqs.size());
  }
  CHECK(count == total);
  const AckWindowStats s = w.stats();
  CHECK(s.resends > 0);
  CHECK(s.duplicates > 0);
  CHECK(s.acked == static_cast<uint64_t>(total));
}

TEST_CASE("TickMessageId: sequence, digest of kind, time and value, symbol token") {
  Tick t;
  t.symbol.assign("ALDER.X");
  t.t_ns = 1772443800000000000;
  t.value = 101.25;
  const std::string id = TickMessageId(t, 7);
  CHECK(id.substr(0, 2) == "7.");
  CHECK(id.size() == 2 + 16 + 1 + std::string("ALDER~2EX").size());
  CHECK(id.substr(id.size() - 10) == ".ALDER~2EX");
  CHECK(TickMessageId(t, 7) == id);  // deterministic
  CHECK(TickMessageId(t, 8) != id);
  Tick u = t;
  u.value = 101.26;
  CHECK(TickMessageId(u, 7) != id);
  u = t;
  u.t_ns += 1;
  CHECK(TickMessageId(u, 7) != id);
  u = t;
  u.kind = t.kind == Tick::Kind::kPrice ? Tick::Kind::kReturn : Tick::Kind::kPrice;
  CHECK(TickMessageId(u, 7) != id);
  // The digest is FNV-1a 64 over kind (1 byte), time and value bits (8
  // bytes each, little-endian): recomputed here byte by byte.
  uint64_t h = 14695981039346656037ull;
  std::vector<uint8_t> bytes = {static_cast<uint8_t>(t.kind)};
  uint64_t v = static_cast<uint64_t>(t.t_ns);
  for (int i = 0; i < 8; ++i) bytes.push_back(static_cast<uint8_t>(v >> (8 * i)));
  v = 0x4059500000000000ull;  // 101.25
  for (int i = 0; i < 8; ++i) bytes.push_back(static_cast<uint8_t>(v >> (8 * i)));
  for (uint8_t b : bytes) {
    h ^= b;
    h *= 1099511628211ull;
  }
  char hex[17];
  std::snprintf(hex, sizeof(hex), "%016llx", static_cast<unsigned long long>(h));
  CHECK(id == std::string("7.") + hex + ".ALDER~2EX");
}

}  // namespace
}  // namespace aftershock
