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
  o.max_pending = 4;
  o.retry_delay_ms = 100;
  o.give_up_ms = 5000;
  return o;
}

// Records every attempt the window sends.
struct Wire {
  std::vector<std::string> ids, bodies;
  AckWindow::SendFn Fn() {
    return [this](const std::string& id, const std::string&, const std::string& body) {
      ids.push_back(id);
      bodies.push_back(body);
    };
  }
};

TEST_CASE("a key has at most one unacknowledged message; the next is sent on its ack") {
  Wire wire;
  AckWindow w(Options(), wire.Fn());
  w.Add("A", "1.a.A", "ticks.A", "a1", 0);
  w.Add("A", "2.a.A", "ticks.A", "a2", 0);  // queued behind 1.a.A
  w.Add("B", "1.b.B", "ticks.B", "b1", 0);
  CHECK(wire.ids == std::vector<std::string>{"1.a.A", "1.b.B"});
  CHECK(w.pending() == 3);
  CHECK(w.in_flight() == 2);
  CHECK(w.HasRoom());
  w.Add("A", "3.a.A", "ticks.A", "a3", 0);
  CHECK(!w.HasRoom());  // max_pending
  CHECK(w.OnAck("1.a.A", false, 10 * kMs));
  CHECK(wire.ids.back() == "2.a.A");  // sent by the acknowledgement
  CHECK(wire.bodies.back() == "a2");
  CHECK(!w.OnAck("1.a.A", false, 10 * kMs));  // reported twice: nothing changes
  CHECK(!w.OnAck("3.a.A", false, 10 * kMs));  // queued, not sent: no acknowledgement yet
  CHECK(!w.OnFailure("9.z.Z", "x", 0));
  CHECK(w.OnAck("1.b.B", false, 11 * kMs));
  CHECK(wire.ids.size() == 3);  // B had nothing queued
  CHECK(w.OnAck("2.a.A", false, 12 * kMs));
  CHECK(wire.ids.back() == "3.a.A");
  CHECK(w.OnAck("3.a.A", false, 13 * kMs));
  CHECK(w.pending() == 0);
  const AckWindowStats s = w.stats();
  CHECK(s.added == 4);
  CHECK(s.acked == 4);
  CHECK(s.failures == 0);
  CHECK(s.resends == 0);
}

TEST_CASE("failed attempts are resent after the retry delay, oldest first send first") {
  Wire wire;
  AckWindow w(Options(), wire.Fn());
  w.Add("A", "1.a.A", "ticks.A", "a1", 0);
  w.Add("B", "1.b.B", "ticks.B", "b1", 1 * kMs);
  w.Add("C", "1.c.C", "ticks.C", "c1", 2 * kMs);
  w.Add("A", "2.a.A", "ticks.A", "a2", 3 * kMs);
  CHECK(w.NextResend() == std::numeric_limits<int64_t>::max());
  // C fails first, then A: the resends still go out in first-send order.
  CHECK(w.OnFailure("1.c.C", "No responders available for request", 10 * kMs));
  CHECK(w.OnFailure("1.a.A", "Timeout", 20 * kMs));
  CHECK(w.NextResend() == 110 * kMs);  // C's
  CHECK(w.ResendDue(109 * kMs) == 0);
  wire.ids.clear();
  CHECK(w.ResendDue(200 * kMs) == 2);
  CHECK(wire.ids == std::vector<std::string>{"1.a.A", "1.c.C"});
  CHECK(w.ResendDue(1000 * kMs) == 0);  // resent: not due again until it fails again
  CHECK(w.OnFailure("1.a.A", "Timeout", 2200 * kMs));
  CHECK(w.ResendDue(2300 * kMs) == 1);
  // A's second tick is still queued: nothing of A was sent but 1.a.A.
  for (const std::string& id : wire.ids) CHECK(id != "2.a.A");
  // The broker had stored the first copy: the resend's acknowledgement says
  // duplicate, and A's next tick goes out.
  CHECK(w.OnAck("1.a.A", true, 2400 * kMs));
  CHECK(wire.ids.back() == "2.a.A");
  CHECK(w.OnAck("1.c.C", false, 2400 * kMs));
  CHECK(w.OnAck("1.b.B", false, 2400 * kMs));
  CHECK(w.OnAck("2.a.A", false, 2500 * kMs));
  CHECK(w.pending() == 0);
  const AckWindowStats s = w.stats();
  CHECK(s.acked == 4);
  CHECK(s.duplicates == 1);
  CHECK(s.failures == 3);
  CHECK(s.resends == 3);
}

TEST_CASE("a message unacknowledged for the give-up time fails with what is known") {
  Wire wire;
  AckWindow w(Options(), wire.Fn());
  w.Add("B", "1.b.B", "ticks.B", "b1", 1000 * kMs);
  w.Add("A", "7.a.A", "ticks.A", "a7", 1500 * kMs);
  w.Add("A", "8.a.A", "ticks.A", "a8", 1600 * kMs);  // queued: its clock has not started
  CHECK(w.OnFailure("7.a.A", "No responders available for request", 1600 * kMs));
  CHECK(w.OnFailure("1.b.B", "Timeout", 3000 * kMs));
  CHECK(w.ResendDue(3100 * kMs) == 2);
  CHECK(w.CheckGiveUp(5999 * kMs).ok());
  const absl::Status s = w.CheckGiveUp(6000 * kMs);  // B: 5 s after its first send
  CHECK(absl::IsDeadlineExceeded(s));
  CHECK(s.message() ==
        "tick of B (message id 1.b.B) not acknowledged by JetStream 5 s after its first send (2 "
        "attempts; last error: Timeout); 3 tick(s) pending");
  CHECK(w.OnAck("1.b.B", false, 6000 * kMs));
  CHECK(w.CheckGiveUp(6000 * kMs).ok());
  CHECK(!w.CheckGiveUp(6500 * kMs).ok());      // A's first
  CHECK(w.OnAck("7.a.A", false, 6500 * kMs));  // 8.a.A sent now: its clock starts
  CHECK(w.CheckGiveUp(11499 * kMs).ok());
  CHECK(!w.CheckGiveUp(11500 * kMs).ok());
}

// A broker that loses some attempts (their failures are reported) and stores
// the others, answering in any order: whatever it loses, each key's messages
// are stored exactly once (the duplicate window drops copies) and in the
// order they were added.
TEST_CASE("with lost attempts and resends, every key's messages are stored once, in order") {
  AckWindowOptions o;
  o.max_pending = 16;
  o.retry_delay_ms = 0;
  o.give_up_ms = 1000000;
  std::vector<std::string> wire;  // attempts in flight at the "broker"
  AckWindow w(o, [&wire](const std::string& id, const std::string&, const std::string&) {
    wire.push_back(id);
  });
  const std::vector<std::string> keys = {"A", "B", "C", "D", "E"};
  std::map<std::string, int> next;  // per key: next sequence to add
  std::set<std::string> stored_ids;
  std::map<std::string, std::vector<int>> stored;  // per key, sequences in stored order
  uint64_t rng = 12345;
  auto rand = [&rng] {
    rng = rng * 6364136223846793005ull + 1442695040888963407ull;
    return rng >> 33;
  };
  int64_t now = 0;
  int added = 0;
  const int total = 600;
  while (added < total || w.pending() > 0) {
    ++now;
    w.ResendDue(now);
    if (added < total && w.HasRoom()) {
      const std::string& key = keys[rand() % keys.size()];
      w.Add(key, std::to_string(next[key]++) + ".x." + key, "ticks." + key, "", now);
      ++added;
    }
    if (wire.empty() || rand() % 2 != 0) continue;
    // The broker answers a random attempt in flight.
    const size_t i = rand() % wire.size();
    const std::string id = wire[i];
    wire.erase(wire.begin() + static_cast<long>(i));
    const uint64_t r = rand() % 10;
    if (r < 2) {  // lost before it was stored: the client reports a timeout
      w.OnFailure(id, "Timeout", now);
      continue;
    }
    const bool dup = !stored_ids.insert(id).second;
    if (!dup) stored[id.substr(id.rfind('.') + 1)].push_back(std::stoi(id.substr(0, id.find('.'))));
    if (r < 4) {  // stored, acknowledgement lost
      w.OnFailure(id, "Timeout", now);
    } else {
      w.OnAck(id, dup, now);
    }
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
