// JSON wire micro-benchmark (issue 13): the inbound tick decoder in
// src/io/wire.cc against a simdjson on-demand decoder of the same schema,
// side by side in one process, on the same pre-encoded messages; and the
// outbound update encoders (JSON and binary) on the same updates, and the
// one std::to_chars call per double that dominates the JSON encoder.
//
// The simdjson decoder is a benchmark-only reference: it reuses one parser and
// one padded buffer (the message is copied in, as a ZeroMQ frame is not
// padded), reads the happy-path schema (keys s, t, p/r, v; types; t >= 0 and
// integral; p > 0; finite values; v >= 0; symbol rules) and counts what it
// rejects without naming reasons. It does less than DecodeTicks (no reason
// names, no unknown-key skipping rules, no duplicate-key or NaN-token
// handling), so a tie or a loss for it is a conservative result.
//
// Built only where Debian's libsimdjson-dev is installed (optional; see
// DEVELOPERS.md). Run: build/bench/json_wire_bench [--benchmark_min_time=0.2]
#include <benchmark/benchmark.h>

#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "aftershock/update_codec.h"
#include "aftershock/wire.h"
#include "io/shortest_double.h"
#include "simdjson.h"

namespace aftershock {
namespace {

constexpr int64_t kT0 = 1772443800000000000;
constexpr int kMessages = 4096;
constexpr int kBatch = 256;

std::string Sym(int i) {
  char b[16];
  std::snprintf(b, sizeof(b), "SYM%03d.B", i % 100);
  return b;
}

// Two corpora: kMixed, half the ticks returns at full precision (about 17
// significant digits) and half prices of two decimals with a size; kShort,
// returns of 6 decimals (as engine_bench sends) and the same prices.
enum CorpusKind { kMixed = 0, kShort = 1 };

Tick MakeTick(int i, CorpusKind kind, std::mt19937_64* g) {
  std::normal_distribution<double> nd(0, 1e-3);
  Tick k;
  k.symbol.assign(Sym(i));
  k.t_ns = kT0 + i;
  if (i % 2 == 0) {
    k.kind = Tick::kReturn;
    k.value = nd(*g);  // full-precision double, 17 significant digits
    if (kind == kShort) k.value = std::round(k.value * 1e6) / 1e6;
  } else {
    k.kind = Tick::kPrice;
    k.value = 100.0 + std::round(nd(*g) * 1e5) / 100.0;  // two decimals
    k.size = 100;
  }
  return k;
}

struct Corpus {
  std::vector<std::string> topics, singles;
  std::vector<std::string> batches;
  explicit Corpus(CorpusKind kind) {
    std::mt19937_64 g(42);
    std::vector<Tick> ticks;
    for (int i = 0; i < kMessages; ++i) {
      const Tick t = MakeTick(i, kind, &g);
      topics.emplace_back(t.symbol.view());
      singles.emplace_back();
      EncodeTickJson(t, &singles.back());
      ticks.push_back(t);
      if (static_cast<int>(ticks.size()) == kBatch) {
        batches.emplace_back();
        EncodeBatchJson(ticks, &batches.back());
        ticks.clear();
      }
    }
  }
};

const Corpus& TheCorpus(int kind) {
  static const Corpus* c[2] = {new Corpus(kMixed), new Corpus(kShort)};
  return *c[kind];
}

// ---- simdjson on-demand reference decoder ----------------------------------

class SimdjsonTickDecoder {
 public:
  SimdjsonTickDecoder() : capacity_(kDefaultMaxMessageBytes + simdjson::SIMDJSON_PADDING) {
    buf_.reset(new char[capacity_]);
  }

  // Returns the good ticks written to out; *rejected counts the others (a
  // syntax error rejects the whole message as one).
  int Decode(absl::string_view frame, absl::string_view body, absl::Span<Tick> out, int* rejected) {
    *rejected = 0;
    if (body.size() + simdjson::SIMDJSON_PADDING > capacity_) return Reject(rejected);
    std::memcpy(buf_.get(), body.data(), body.size());
    simdjson::ondemand::document doc;
    if (parser_.iterate(buf_.get(), body.size(), capacity_).get(doc)) return Reject(rejected);
    if (frame == "*") {
      simdjson::ondemand::array arr;
      if (doc.get_array().get(arr)) return Reject(rejected);
      int n = 0;
      for (auto element : arr) {
        simdjson::ondemand::object obj;
        if (element.get_object().get(obj)) return Reject(rejected);
        if (n >= static_cast<int>(out.size())) return Reject(rejected);
        const int r = Object(obj, absl::string_view(), &out[static_cast<size_t>(n)]);
        if (r < 0) return Reject(rejected);
        if (r == 1)
          ++n;
        else
          ++*rejected;
      }
      if (!AtEnd(doc)) return Reject(rejected);
      return n;
    }
    if (!IsValidSymbol(frame) || out.empty()) return Reject(rejected);
    simdjson::ondemand::object obj;
    if (doc.get_object().get(obj)) return Reject(rejected);
    const int r = Object(obj, frame, &out[0]);
    if (r < 0 || !AtEnd(doc)) return Reject(rejected);
    if (r == 0) ++*rejected;
    return r;
  }

 private:
  // simdjson 3.0.1 has no document::at_end(); a finished document reports
  // OUT_OF_BOUNDS for its current location.
  static bool AtEnd(simdjson::ondemand::document& doc) {
    return doc.current_location().error() == simdjson::OUT_OF_BOUNDS;
  }

  static int Reject(int* rejected) {
    *rejected = 1;
    return 0;
  }

  // 1 good, 0 record rejected, -1 syntax error.
  static int Object(simdjson::ondemand::object& obj, absl::string_view frame, Tick* tick) {
    bool have_t = false, have_value = false, have_s = false, bad = false;
    tick->size = 0;
    tick->rv = std::numeric_limits<double>::quiet_NaN();
    for (auto field : obj) {
      if (field.error()) return -1;
      simdjson::ondemand::raw_json_string key;
      if (field.key().get(key)) return -1;
      const char* k = key.raw();
      if (k[0] == '\0' || k[1] != '"') {
        bad = true;
        continue;  // the iterator skips the unread value
      }
      simdjson::ondemand::value v;
      if (field.value().get(v)) return -1;
      switch (k[0]) {
        case 's': {
          std::string_view sv;
          if (v.get_string().get(sv)) {
            bad = true;
            have_s = true;
            break;
          }
          const absl::string_view s(sv.data(), sv.size());
          if (!IsValidSymbol(s) || (!frame.empty() && s != frame)) {
            bad = true;
          } else {
            tick->symbol.assign(s);
          }
          have_s = true;
          break;
        }
        case 't': {
          int64_t t = 0;
          if (v.get_int64().get(t) || t < 0)
            bad = true;
          else
            tick->t_ns = t;
          have_t = true;
          break;
        }
        case 'p':
        case 'r': {
          double d = 0;
          if (v.get_double().get(d) || !std::isfinite(d) || (k[0] == 'p' && d <= 0)) {
            bad = true;
          } else {
            tick->kind = k[0] == 'p' ? Tick::kPrice : Tick::kReturn;
            tick->value = d;
          }
          if (have_value) bad = true;
          have_value = true;
          break;
        }
        case 'v': {
          double d = 0;
          if (v.get_double().get(d) || !std::isfinite(d) || d < 0)
            bad = true;
          else
            tick->size = d;
          break;
        }
        default:
          bad = true;
      }
    }
    if (bad || !have_t || !have_value || (frame.empty() && !have_s)) return 0;
    if (!have_s) tick->symbol.assign(frame);
    return 1;
  }

  simdjson::ondemand::parser parser_;
  size_t capacity_;
  std::unique_ptr<char[]> buf_;
};

// ---- benchmarks -------------------------------------------------------------
// The argument is the corpus: short:0 mixed, short:1 short decimals.

void BM_DecodeSingle_Ours(benchmark::State& state) {
  const Corpus& c = TheCorpus(static_cast<int>(state.range(0)));
  Tick out[1];
  RejectCounters counters;
  size_t i = 0;
  int64_t good = 0;
  for (auto _ : state) {
    const DecodeResult r =
        DecodeTicks(c.topics[i], c.singles[i], WireEncoding::kJson, kDefaultMaxMessageBytes,
                    absl::Span<Tick>(out, 1), &counters);
    good += r.n_ticks;
    benchmark::DoNotOptimize(out[0].value);
    if (++i == c.singles.size()) i = 0;
  }
  if (counters.Total() != 0 || good != static_cast<int64_t>(state.iterations()))
    state.SkipWithError("rejections");
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_DecodeSingle_Ours)->ArgName("short")->Arg(kMixed)->Arg(kShort);

void BM_DecodeSingle_Simdjson(benchmark::State& state) {
  const Corpus& c = TheCorpus(static_cast<int>(state.range(0)));
  SimdjsonTickDecoder d;
  Tick out[1];
  size_t i = 0;
  int64_t good = 0, bad = 0;
  for (auto _ : state) {
    int rejected = 0;
    good += d.Decode(c.topics[i], c.singles[i], absl::Span<Tick>(out, 1), &rejected);
    bad += rejected;
    benchmark::DoNotOptimize(out[0].value);
    if (++i == c.singles.size()) i = 0;
  }
  if (bad != 0 || good != static_cast<int64_t>(state.iterations()))
    state.SkipWithError("rejections");
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_DecodeSingle_Simdjson)->ArgName("short")->Arg(kMixed)->Arg(kShort);

void BM_DecodeBatch256_Ours(benchmark::State& state) {
  const Corpus& c = TheCorpus(static_cast<int>(state.range(0)));
  std::vector<Tick> out(kBatch);
  RejectCounters counters;
  size_t i = 0;
  int64_t good = 0;
  for (auto _ : state) {
    const DecodeResult r = DecodeTicks("*", c.batches[i], WireEncoding::kJson,
                                       kDefaultMaxMessageBytes, absl::MakeSpan(out), &counters);
    good += r.n_ticks;
    benchmark::DoNotOptimize(out[0].value);
    if (++i == c.batches.size()) i = 0;
  }
  if (counters.Total() != 0 || good != static_cast<int64_t>(state.iterations()) * kBatch)
    state.SkipWithError("rejections");
  state.SetItemsProcessed(state.iterations() * kBatch);
}
BENCHMARK(BM_DecodeBatch256_Ours)->ArgName("short")->Arg(kMixed)->Arg(kShort);

void BM_DecodeBatch256_Simdjson(benchmark::State& state) {
  const Corpus& c = TheCorpus(static_cast<int>(state.range(0)));
  SimdjsonTickDecoder d;
  std::vector<Tick> out(kBatch);
  size_t i = 0;
  int64_t good = 0, bad = 0;
  for (auto _ : state) {
    int rejected = 0;
    good += d.Decode("*", c.batches[i], absl::MakeSpan(out), &rejected);
    bad += rejected;
    benchmark::DoNotOptimize(out[0].value);
    if (++i == c.batches.size()) i = 0;
  }
  if (bad != 0 || good != static_cast<int64_t>(state.iterations()) * kBatch)
    state.SkipWithError("rejections");
  state.SetItemsProcessed(state.iterations() * kBatch);
}
BENCHMARK(BM_DecodeBatch256_Simdjson)->ArgName("short")->Arg(kMixed)->Arg(kShort);

// An update as the engine publishes it with the default configuration
// (horizons 1, 5, 20; levels 0.99, 0.975), full-precision values.
BarUpdate MakeUpdate(std::mt19937_64* g) {
  std::normal_distribution<double> nd(0, 1);
  BarUpdate u;
  u.symbol.assign("SYM042.B");
  u.t_ns = kT0;
  u.r = 1e-3 * nd(*g);
  u.mu = 2e-4;
  u.eps = u.r - u.mu;
  u.var = 1e-6 * std::exp(nd(*g));
  u.z = u.eps / std::sqrt(u.var);
  u.var_next = 1e-6 * std::exp(nd(*g));
  u.vol_ann = std::sqrt(u.var_next * 252 * 390);
  const int horizons[] = {1, 5, 20};
  for (int h : horizons) {
    u.horizons[u.n_horizons] = h;
    u.var_h[u.n_horizons++] = h * u.var_next * (1 + 0.01 * nd(*g));
  }
  const double levels[] = {0.99, 0.975};
  for (double l : levels) {
    u.levels[u.n_levels] = l;
    u.var_risk[u.n_levels] = 2.3 * std::sqrt(u.var_next) * (1 + 0.01 * nd(*g));
    u.es[u.n_levels++] = 2.6 * std::sqrt(u.var_next) * (1 + 0.01 * nd(*g));
  }
  u.scale = 5 + nd(*g);
  u.ver = 3;
  return u;
}

void EncodeUpdates(benchmark::State& state, bool json) {
  std::mt19937_64 g(7);
  std::vector<BarUpdate> updates;
  for (int i = 0; i < 1024; ++i) updates.push_back(MakeUpdate(&g));
  std::string out;
  size_t i = 0, bytes = 0;
  for (auto _ : state) {
    const absl::Status s =
        json ? EncodeUpdateJson(updates[i], &out) : EncodeUpdateBinary(updates[i], &out);
    if (!s.ok()) state.SkipWithError("encode failed");
    bytes += out.size();
    if (++i == updates.size()) i = 0;
  }
  state.SetItemsProcessed(state.iterations());
  state.SetBytesProcessed(static_cast<int64_t>(bytes));
}
void BM_EncodeUpdateJson(benchmark::State& state) { EncodeUpdates(state, true); }
void BM_EncodeUpdateBinary(benchmark::State& state) { EncodeUpdates(state, false); }
BENCHMARK(BM_EncodeUpdateJson);
BENCHMARK(BM_EncodeUpdateBinary);

// One shortest round-trip formatting of a double, the JSON update encoder's
// per-double cost (it formats 12 of them per update with the default
// configuration; mu, scale and the level keys are memoized), on values of the
// magnitudes an update carries. Arg kind: 0 variances (~1e-6, exponent form),
// 1 z-scores, 2 value-at-risk / es (~2e-3), 3 returns (~1e-3). Arg writer:
// 0 std::to_chars, 1 the encoder's WriteShortestDouble (same bytes).
void BM_FormatDouble(benchmark::State& state) {
  std::mt19937_64 g(7);
  std::normal_distribution<double> nd(0, 1);
  std::vector<double> values;
  for (int i = 0; i < 4096; ++i) {
    const double z = nd(g);
    switch (state.range(0)) {
      case 0:
        values.push_back(1e-6 * std::exp(z));
        break;
      case 1:
        values.push_back(z);
        break;
      case 2:
        values.push_back(2.3e-3 * (1 + 0.01 * z));
        break;
      default:
        values.push_back(1e-3 * z);
        break;
    }
  }
  const int64_t writer = state.range(1);
  if (writer == 1 && !internal::ShortestDoubleHasFastDigits()) {
    state.SetLabel("built without fmt's digits: std::to_chars");
  }
  char buf[32];
  size_t i = 0, bytes = 0;
  for (auto _ : state) {
    const char* end = writer == 0 ? std::to_chars(buf, buf + sizeof(buf), values[i]).ptr
                                  : internal::WriteShortestDouble(buf, values[i]);
    benchmark::DoNotOptimize(buf);
    bytes += static_cast<size_t>(end - buf);
    if (++i == values.size()) i = 0;
  }
  state.SetItemsProcessed(state.iterations());
  state.SetBytesProcessed(static_cast<int64_t>(bytes));
}
BENCHMARK(BM_FormatDouble)->ArgNames({"kind", "writer"})->ArgsProduct({{0, 1, 2, 3}, {0, 1}});

}  // namespace
}  // namespace aftershock

BENCHMARK_MAIN();
