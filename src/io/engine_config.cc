#include "aftershock/engine_config.h"

#include <toml++/toml.h>

#include <charconv>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <initializer_list>
#include <iterator>
#include <limits>
#include <sstream>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "absl/types/span.h"
#include "aftershock/renames.h"

namespace aftershock {

absl::string_view ReturnUnitsName(ReturnUnits u) {
  return u == ReturnUnits::kPercent ? "percent" : "fraction";
}

absl::string_view FeedSourceName(FeedSource s) {
  return s == FeedSource::kNats ? "nats" : "zmq";
}

absl::string_view UpdateTopicsName(UpdateTopics t) {
  switch (t) {
    case UpdateTopics::kBatch:
      return "batch";
    case UpdateTopics::kBoth:
      return "both";
    case UpdateTopics::kSymbol:
      break;
  }
  return "symbol";
}

absl::string_view LogLevelName(LogLevel l) {
  switch (l) {
    case LogLevel::kDebug:
      return "debug";
    case LogLevel::kInfo:
      return "info";
    case LogLevel::kWarn:
      return "warn";
    case LogLevel::kError:
      return "error";
  }
  return "info";
}

absl::string_view TrackingModeName(TrackingMode m) {
  switch (m) {
    case TrackingMode::kTrack:
      return "track";
    case TrackingMode::kDrive:
      return "drive";
    case TrackingMode::kOff:
      break;
  }
  return "off";
}

absl::string_view OpeningReturnName(OpeningReturn o) {
  return o == OpeningReturn::kScaled ? "scaled" : "skip";
}

int64_t SeasonalityConfig::BarsPerSession(const BarsConfig& bars) {
  const SessionWindow& w = bars.session;
  int64_t length = kNanosPerDay;
  if (w.enabled) {
    const int minutes = w.end_minute > w.start_minute ? w.end_minute - w.start_minute
                                                      : w.end_minute + 1440 - w.start_minute;
    length = minutes * kNanosPerMinute;
  }
  return (length + bars.interval_ns - 1) / bars.interval_ns;
}

SeasonalOptions SeasonalityConfig::ToOptions(const BarsConfig& bars) const {
  SeasonalOptions o;
  o.buckets = static_cast<int>(std::min<int64_t>(BarsPerSession(bars), kMaxSeasonalBuckets + 1));
  o.method = method;
  o.smoothing = smoothing;
  o.min_sessions = min_sessions;
  o.prior_sessions = prior_sessions;
  return o;
}

BarOptions EngineConfig::ToBarOptions() const {
  BarOptions o = bars.ToBarOptions();
  o.overnight_return = SeasonalityActive() && seasonality.opening_return == OpeningReturn::kScaled;
  return o;
}

EngineConfig::EngineConfig() {
  model.spec.mean = MeanKind::kConstant;
  model.spec.variance = VarianceKind::kGarch;
  model.spec.arch_order = 1;
  model.spec.garch_order = 1;
  model.spec.innovations = Innovations::kStudentT;
}

int64_t SessionLengthNs(const SessionWindow& s) {
  if (!s.enabled) return kNanosPerDay;
  const int64_t minutes = s.end_minute > s.start_minute ? s.end_minute - s.start_minute
                                                        : s.end_minute + 1440 - s.start_minute;
  return minutes * kNanosPerMinute;
}

int64_t BarsPerSession(const SessionWindow& s, int64_t interval_ns) {
  const int64_t length = SessionLengthNs(s);
  return (length + interval_ns - 1) / interval_ns;
}

double AutoPeriodsPerYear(const BarsConfig& bars) {
  if (bars.interval_ns <= 0) return 252.0;
  return 252.0 * static_cast<double>(BarsPerSession(bars.session, bars.interval_ns));
}

void ResolveAutoSettings(EngineConfig* c) {
  if (c->outputs.periods_per_year_auto) {
    c->outputs.periods_per_year = AutoPeriodsPerYear(c->bars);
  }
}

bool ParseClockMinutes(absl::string_view s, bool allow_24, int* minutes) {
  if (s.size() != 5 || s[2] != ':') return false;
  for (int i : {0, 1, 3, 4}) {
    if (s[i] < '0' || s[i] > '9') return false;
  }
  const int h = (s[0] - '0') * 10 + (s[1] - '0');
  const int m = (s[3] - '0') * 10 + (s[4] - '0');
  if (m > 59 || h > 24 || (h == 24 && (m != 0 || !allow_24))) return false;
  *minutes = h * 60 + m;
  return true;
}

absl::StatusOr<int64_t> ParseDuration(absl::string_view text) {
  size_t i = 0;
  while (i < text.size() && text[i] >= '0' && text[i] <= '9') ++i;
  const absl::string_view digits = text.substr(0, i);
  const absl::string_view unit = text.substr(i);
  int64_t mult = 0;
  if (unit == "ns") {
    mult = 1;
  } else if (unit == "us") {
    mult = 1000;
  } else if (unit == "ms") {
    mult = 1000 * 1000;
  } else if (unit == "s") {
    mult = kNanosPerSecond;
  } else if (unit == "m") {
    mult = kNanosPerMinute;
  } else if (unit == "h") {
    mult = 60 * kNanosPerMinute;
  }
  int64_t n = 0;
  const auto res = std::from_chars(digits.data(), digits.data() + digits.size(), n);
  if (digits.empty() || mult == 0 || res.ec != std::errc() ||
      n > std::numeric_limits<int64_t>::max() / mult) {
    return absl::InvalidArgumentError(
        absl::StrCat("expected a duration like \"0s\", \"5s\", \"1m\", got \"", text, "\""));
  }
  return n * mult;
}

std::string FormatDuration(int64_t ns) {
  if (ns == 0) return "0s";
  const struct {
    int64_t mult;
    const char* unit;
  } units[] = {{60 * kNanosPerMinute, "h"}, {kNanosPerMinute, "m"}, {kNanosPerSecond, "s"},
               {1000 * 1000, "ms"},         {1000, "us"},           {1, "ns"}};
  for (const auto& u : units) {
    if (ns % u.mult == 0) return absl::StrCat(ns / u.mult, u.unit);
  }
  return absl::StrCat(ns, "ns");
}

namespace {

absl::string_view Sv(std::string_view s) { return absl::string_view(s.data(), s.size()); }

std::string TypeName(const toml::node& n) {
  switch (n.type()) {
    case toml::node_type::string:
      return "string";
    case toml::node_type::integer:
      return "integer";
    case toml::node_type::floating_point:
      return "float";
    case toml::node_type::boolean:
      return "boolean";
    case toml::node_type::array:
      return "array";
    case toml::node_type::table:
      return "table";
    case toml::node_type::date:
      return "date";
    case toml::node_type::time:
      return "time";
    case toml::node_type::date_time:
      return "date-time";
    default:
      return "nothing";
  }
}

std::string FormatNumber(double v) {
  char buf[32];
  const auto res = std::to_chars(buf, buf + sizeof(buf), v);
  std::string s(buf, static_cast<size_t>(res.ptr - buf));
  return s;
}

// A [section] of the document with line-aware typed getters. Getters leave
// the output untouched when the key is absent and return the first error.
class Section {
 public:
  Section(const std::string* source, std::string name, const toml::table* table, int line)
      : source_(source), name_(std::move(name)), table_(table), line_(line) {}

  bool present() const { return table_ != nullptr; }
  int line() const { return line_; }
  const toml::table* table() const { return table_; }

  // Line of `key` when given, else of the section header.
  int LineOf(absl::string_view key) const {
    if (table_ == nullptr) return line_;
    for (auto&& [k, v] : *table_) {
      if (Sv(k.str()) == key) return static_cast<int>(k.source().begin.line);
    }
    return line_;
  }
  bool Has(absl::string_view key) const {
    return table_ != nullptr && table_->get(std::string_view(key.data(), key.size())) != nullptr;
  }

  absl::Status Error(int line, absl::string_view key, absl::string_view msg) const {
    return absl::InvalidArgumentError(
        absl::StrCat(*source_, ":", line, ": [", name_, "] ", key, ": ", msg));
  }
  absl::Status KeyError(absl::string_view key, absl::string_view msg) const {
    return Error(LineOf(key), key, msg);
  }
  // An error about the section as a whole, at its header line.
  absl::Status SectionError(absl::string_view msg) const {
    return absl::InvalidArgumentError(absl::StrCat(*source_, ":", line_, ": [", name_, "] ", msg));
  }

  absl::Status CheckKeys(std::initializer_list<absl::string_view> known) const {
    return CheckKeys(absl::MakeConstSpan(known.begin(), known.size()));
  }
  absl::Status CheckKeys(absl::Span<const absl::string_view> known) const {
    if (table_ == nullptr) return absl::OkStatus();
    for (auto&& [k, v] : *table_) {
      bool ok = false;
      for (absl::string_view name : known) ok = ok || Sv(k.str()) == name;
      if (!ok) {
        const std::string hint =
            RenameHint(RenameKind::kConfigKey, absl::StrCat("[", name_, "]"), Sv(k.str()));
        if (!hint.empty()) {
          return absl::InvalidArgumentError(
              absl::StrCat(*source_, ":", k.source().begin.line, ": [", name_, "] ", hint));
        }
        return absl::InvalidArgumentError(
            absl::StrCat(*source_, ":", k.source().begin.line, ": [", name_, "] unknown key '",
                         std::string(k.str()), "' (known: ", absl::StrJoin(known, ", "), ")"));
      }
    }
    return absl::OkStatus();
  }

  const toml::node* Node(absl::string_view key) const {
    return table_ == nullptr ? nullptr : table_->get(std::string_view(key.data(), key.size()));
  }

  absl::Status String(absl::string_view key, std::string* out) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_string()) return TypeError(key, *n, "a string");
    *out = n->as_string()->get();
    return absl::OkStatus();
  }

  absl::Status Bool(absl::string_view key, bool* out) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_boolean()) return TypeError(key, *n, "true or false");
    *out = n->as_boolean()->get();
    return absl::OkStatus();
  }

  template <typename Int>
  absl::Status Integer(absl::string_view key, Int* out, int64_t lo, int64_t hi) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_integer()) return TypeError(key, *n, "an integer");
    const int64_t v = n->as_integer()->get();
    if (v < lo || v > hi) {
      return KeyError(key, absl::StrCat("must be in ", lo, "..", hi, ", got ", v));
    }
    *out = static_cast<Int>(v);
    return absl::OkStatus();
  }

  // Number (integer or float) in an interval; open ends excluded.
  absl::Status Number(absl::string_view key, double* out, double lo, double hi, bool lo_open,
                      bool hi_open) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    double v;
    if (!NumberOf(*n, &v)) return TypeError(key, *n, "a number");
    return CheckRange(key, v, lo, hi, lo_open, hi_open, out);
  }

  absl::Status CheckRange(absl::string_view key, double v, double lo, double hi, bool lo_open,
                          bool hi_open, double* out) const {
    const bool ok =
        std::isfinite(v) && (lo_open ? v > lo : v >= lo) && (hi_open ? v < hi : v <= hi);
    if (!ok) {
      const std::string hi_text = std::isinf(hi) ? "inf" : FormatNumber(hi);
      return KeyError(
          key, absl::StrCat("must be in ", lo_open ? "(" : "[", FormatNumber(lo), ", ", hi_text,
                            hi_open || std::isinf(hi) ? ")" : "]", ", got ", FormatNumber(v)));
    }
    *out = v;
    return absl::OkStatus();
  }

  absl::Status Duration(absl::string_view key, int64_t* out) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_string()) {
      double v = 0;
      const std::string value = NumberOf(*n, &v) ? FormatNumber(v) : TypeName(*n);
      return KeyError(key,
                      absl::StrCat("expected a duration like \"0s\", \"5s\", \"1m\", got ", value));
    }
    auto d = ParseDuration(n->as_string()->get());
    if (!d.ok()) return KeyError(key, d.status().message());
    *out = *d;
    return absl::OkStatus();
  }

  // One of the given words.
  absl::Status Word(absl::string_view key, std::initializer_list<absl::string_view> words,
                    int* index) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_string()) return TypeError(key, *n, "a string");
    const std::string& s = n->as_string()->get();
    int i = 0;
    for (absl::string_view w : words) {
      if (s == w) {
        *index = i;
        return absl::OkStatus();
      }
      ++i;
    }
    std::vector<std::string> quoted;
    for (absl::string_view w : words) quoted.push_back(absl::StrCat("\"", w, "\""));
    const std::string hint = RenameHint(RenameKind::kValue, key, s);
    return KeyError(key, absl::StrCat("expected one of ", absl::StrJoin(quoted, ", "), ", got \"",
                                      s, "\"", hint.empty() ? "" : "; ", hint));
  }

  absl::Status IntArray(absl::string_view key, std::vector<int>* out, size_t max_size, int64_t lo,
                        int64_t hi) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_array()) return TypeError(key, *n, "an array of integers");
    const toml::array& a = *n->as_array();
    if (a.size() > max_size) {
      return KeyError(key, absl::StrCat("at most ", max_size, " entries, got ", a.size()));
    }
    std::vector<int> v;
    for (const toml::node& e : a) {
      if (!e.is_integer()) return TypeError(key, e, "an array of integers");
      const int64_t x = e.as_integer()->get();
      if (x < lo || x > hi) {
        return KeyError(key, absl::StrCat("entries must be in ", lo, "..", hi, ", got ", x));
      }
      v.push_back(static_cast<int>(x));
    }
    *out = std::move(v);
    return absl::OkStatus();
  }

  absl::Status NumberArray(absl::string_view key, std::vector<double>* out, size_t max_size,
                           double lo, double hi) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_array()) return TypeError(key, *n, "an array of numbers");
    const toml::array& a = *n->as_array();
    if (a.size() > max_size) {
      return KeyError(key, absl::StrCat("at most ", max_size, " entries, got ", a.size()));
    }
    std::vector<double> v;
    for (const toml::node& e : a) {
      double x;
      if (!NumberOf(e, &x)) return TypeError(key, e, "an array of numbers");
      if (!(x > lo && x < hi)) {
        return KeyError(key, absl::StrCat("entries must be in (", FormatNumber(lo), ", ",
                                          FormatNumber(hi), "), got ", FormatNumber(x)));
      }
      v.push_back(x);
    }
    *out = std::move(v);
    return absl::OkStatus();
  }

  absl::Status StringArray(absl::string_view key, std::vector<std::string>* out) const {
    const toml::node* n = Node(key);
    if (n == nullptr) return absl::OkStatus();
    if (!n->is_array()) return TypeError(key, *n, "an array of strings");
    std::vector<std::string> v;
    for (const toml::node& e : *n->as_array()) {
      if (!e.is_string()) return TypeError(key, e, "an array of strings");
      v.push_back(e.as_string()->get());
    }
    *out = std::move(v);
    return absl::OkStatus();
  }

  static bool NumberOf(const toml::node& n, double* v) {
    if (n.is_integer()) {
      *v = static_cast<double>(n.as_integer()->get());
      return true;
    }
    if (n.is_floating_point()) {
      *v = n.as_floating_point()->get();
      return true;
    }
    return false;
  }

 private:
  absl::Status TypeError(absl::string_view key, const toml::node& n,
                         absl::string_view expected) const {
    return KeyError(key, absl::StrCat("expected ", expected, ", got ", TypeName(n)));
  }

  const std::string* source_;
  std::string name_;
  const toml::table* table_;
  int line_;
};

#define AS_RETURN_IF_ERROR(expr)         \
  do {                                   \
    const absl::Status status_ = (expr); \
    if (!status_.ok()) return status_;   \
  } while (0)

constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr absl::string_view kZ85 =
    "0123456789abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ.-:+=^!/*?&<>()[]{}@%$#";

absl::Status CheckCurveKey(const Section& s, absl::string_view key, const std::string& v) {
  if (v.empty()) return absl::OkStatus();
  bool ok = v.size() == 40;
  for (char c : v) ok = ok && kZ85.find(c) != absl::string_view::npos;
  if (!ok) {
    return s.KeyError(
        key, absl::StrCat("expected a 40-character Z85 CURVE key, got ", v.size(), " characters"));
  }
  return absl::OkStatus();
}

absl::Status CheckEndpoint(const Section& s, absl::string_view key, const std::string& v) {
  for (absl::string_view scheme : {"tcp://", "ipc://", "inproc://"}) {
    if (v.size() > scheme.size() && absl::string_view(v).substr(0, scheme.size()) == scheme) {
      return absl::OkStatus();
    }
  }
  return s.KeyError(key, absl::StrCat("expected a ZeroMQ endpoint like \"tcp://127.0.0.1:7301\", "
                                      "got \"",
                                      v, "\""));
}


Section SubSection(const std::string* source, const Section& parent, absl::string_view key,
                   const std::string& name) {
  const toml::node* n = parent.Node(key);
  if (n == nullptr || !n->is_table()) return Section(source, name, nullptr, parent.LineOf(key));
  return Section(source, name, n->as_table(), parent.LineOf(key));
}

absl::Status ParseFeed(const Section& s, FeedConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"source", "endpoints", "encoding", "max_message_bytes",
                                  "curve_server_key", "busy_poll_us"}));
  int source = static_cast<int>(c->source);
  AS_RETURN_IF_ERROR(s.Word("source", {"zmq", "nats"}, &source));
  c->source = static_cast<FeedSource>(source);
  AS_RETURN_IF_ERROR(s.StringArray("endpoints", &c->endpoints));
  if (c->endpoints.empty()) return s.KeyError("endpoints", "at least one endpoint is required");
  for (const std::string& e : c->endpoints) AS_RETURN_IF_ERROR(CheckEndpoint(s, "endpoints", e));
  int enc = static_cast<int>(c->encoding);
  AS_RETURN_IF_ERROR(s.Word("encoding", {"json", "binary"}, &enc));
  c->encoding = static_cast<WireEncoding>(enc);
  AS_RETURN_IF_ERROR(s.Integer("max_message_bytes", &c->max_message_bytes, 64, 16 << 20));
  AS_RETURN_IF_ERROR(s.String("curve_server_key", &c->curve_server_key));
  AS_RETURN_IF_ERROR(s.Integer("busy_poll_us", &c->busy_poll_us, 0, int64_t{3600} * 1000000));
  return CheckCurveKey(s, "curve_server_key", c->curve_server_key);
}

// True for 1..max bytes of [A-Za-z0-9_-] (names of streams, buckets, instances).
bool IsNatsName(absl::string_view v, size_t max) {
  if (v.empty() || v.size() > max) return false;
  for (char ch : v) {
    const bool ok = (ch >= 'A' && ch <= 'Z') || (ch >= 'a' && ch <= 'z') ||
                    (ch >= '0' && ch <= '9') || ch == '_' || ch == '-';
    if (!ok) return false;
  }
  return true;
}

// True for dot-separated NATS subject tokens without wildcards or white space.
bool IsPlainSubject(absl::string_view v) {
  if (v.empty() || v.front() == '.' || v.back() == '.') return false;
  for (size_t i = 0; i < v.size(); ++i) {
    const unsigned char c = static_cast<unsigned char>(v[i]);
    if (c <= ' ' || c == '*' || c == '>' || c == 0x7f) return false;
    if (c == '.' && v[i + 1] == '.') return false;
  }
  return true;
}

absl::Status ParseNats(const Section& s, NatsConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"servers", "stream", "subject", "partition_subject", "partitions",
                                  "lease_seconds", "instance", "lease_bucket", "updates_subject",
                                  "checkpoint_bucket", "checkpoint_seconds", "exact_refits",
                                  "replicas", "duplicate_window_seconds"}));
  AS_RETURN_IF_ERROR(s.StringArray("servers", &c->servers));
  if (c->servers.empty()) return s.KeyError("servers", "at least one server URL is required");
  for (const std::string& url : c->servers) {
    if (!absl::StartsWith(url, "nats://") && !absl::StartsWith(url, "tls://")) {
      return s.KeyError("servers", absl::StrCat("expected a URL like \"nats://127.0.0.1:4222\", got \"",
                                                url, "\""));
    }
  }
  AS_RETURN_IF_ERROR(s.String("stream", &c->stream));
  AS_RETURN_IF_ERROR(s.String("subject", &c->subject));
  AS_RETURN_IF_ERROR(s.String("partition_subject", &c->partition_subject));
  AS_RETURN_IF_ERROR(s.Integer("partitions", &c->partitions, 1, 1024));
  AS_RETURN_IF_ERROR(s.Number("lease_seconds", &c->lease_seconds, 1, 3600, false, false));
  AS_RETURN_IF_ERROR(s.String("instance", &c->instance));
  AS_RETURN_IF_ERROR(s.String("lease_bucket", &c->lease_bucket));
  AS_RETURN_IF_ERROR(s.String("updates_subject", &c->updates_subject));
  AS_RETURN_IF_ERROR(s.String("checkpoint_bucket", &c->checkpoint_bucket));
  AS_RETURN_IF_ERROR(
      s.Number("checkpoint_seconds", &c->checkpoint_seconds, 0, 86400, false, false));
  AS_RETURN_IF_ERROR(s.Bool("exact_refits", &c->exact_refits));
  AS_RETURN_IF_ERROR(s.Integer("replicas", &c->replicas, 1, 5));
  AS_RETURN_IF_ERROR(
      s.Number("duplicate_window_seconds", &c->duplicate_window_seconds, 1, 86400, false, false));
  for (const auto& [key, value] : {std::pair<const char*, const std::string*>{"stream", &c->stream},
                                   {"lease_bucket", &c->lease_bucket},
                                   {"checkpoint_bucket", &c->checkpoint_bucket}}) {
    if (!IsNatsName(*value, 64)) {
      return s.KeyError(key, absl::StrCat("expected 1..64 characters of [A-Za-z0-9_-], got \"",
                                          *value, "\""));
    }
  }
  if (!c->instance.empty() && !IsNatsName(c->instance, 64)) {
    return s.KeyError("instance", absl::StrCat("expected \"\" or 1..64 characters of "
                                               "[A-Za-z0-9_-], got \"", c->instance, "\""));
  }
  for (const auto& [key, value] :
       {std::pair<const char*, const std::string*>{"subject", &c->subject},
        {"partition_subject", &c->partition_subject}}) {
    if (!IsPlainSubject(*value)) {
      return s.KeyError(key, absl::StrCat("expected a subject like \"ticks\" (tokens separated by "
                                          "'.', no wildcards or spaces), got \"", *value, "\""));
    }
  }
  if (!c->updates_subject.empty()) {
    if (!IsPlainSubject(c->updates_subject)) {
      return s.KeyError("updates_subject",
                        absl::StrCat("expected \"\" or a subject like \"updates\" (tokens separated "
                                     "by '.', no wildcards or spaces), got \"",
                                     c->updates_subject, "\""));
    }
    for (const std::string* other : {&c->subject, &c->partition_subject}) {
      if (c->updates_subject == *other ||
          absl::StartsWith(c->updates_subject, *other + ".") ||
          absl::StartsWith(*other, c->updates_subject + ".")) {
        return s.KeyError("updates_subject",
                          absl::StrCat("must not overlap the tick subject \"", *other, "\""));
      }
    }
  }
  if (c->subject == c->partition_subject ||
      absl::StartsWith(c->partition_subject, c->subject + ".") ||
      absl::StartsWith(c->subject, c->partition_subject + ".")) {
    return s.KeyError("partition_subject",
                      absl::StrCat("must not overlap subject \"", c->subject, "\""));
  }
  return absl::OkStatus();
}

absl::Status ParsePublish(const Section& s, PublishConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"endpoint", "encoding", "high_water_mark", "curve_secret_key",
                                   "update_topics", "batch_max_bytes", "batch_max_updates"}));
  AS_RETURN_IF_ERROR(s.String("endpoint", &c->endpoint));
  AS_RETURN_IF_ERROR(CheckEndpoint(s, "endpoint", c->endpoint));
  int enc = static_cast<int>(c->encoding);
  AS_RETURN_IF_ERROR(s.Word("encoding", {"json", "binary"}, &enc));
  c->encoding = static_cast<WireEncoding>(enc);
  AS_RETURN_IF_ERROR(s.Integer("high_water_mark", &c->high_water_mark, 1, 1 << 30));
  AS_RETURN_IF_ERROR(s.String("curve_secret_key", &c->curve_secret_key));
  int topics = static_cast<int>(c->update_topics);
  AS_RETURN_IF_ERROR(s.Word("update_topics", {"symbol", "batch", "both"}, &topics));
  c->update_topics = static_cast<UpdateTopics>(topics);
  AS_RETURN_IF_ERROR(s.Integer("batch_max_bytes", &c->batch_max_bytes, 1024, 16 << 20));
  AS_RETURN_IF_ERROR(s.Integer("batch_max_updates", &c->batch_max_updates, 1, 65535));
  return CheckCurveKey(s, "curve_secret_key", c->curve_secret_key);
}

absl::Status ParseBars(const std::string* source, const Section& s, BarsConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"interval", "grace", "max_lateness", "session"}));
  AS_RETURN_IF_ERROR(s.Duration("interval", &c->interval_ns));
  AS_RETURN_IF_ERROR(s.Duration("grace", &c->grace_ns));
  AS_RETURN_IF_ERROR(s.Duration("max_lateness", &c->max_lateness_ns));
  const int64_t kMaxDuration = kMaxBarDurationNs;
  for (const char* key : {"interval", "grace", "max_lateness"}) {
    const int64_t v = std::string(key) == "interval" ? c->interval_ns
                      : std::string(key) == "grace"  ? c->grace_ns
                                                     : c->max_lateness_ns;
    if (v > kMaxDuration) return s.KeyError(key, "must be at most 7 days");
  }
  if (const toml::node* n = s.Node("session"); n != nullptr && !n->is_table()) {
    return s.KeyError("session", absl::StrCat("expected a table like { start = \"08:00\", end = "
                                              "\"16:30\" }, got ",
                                              TypeName(*n)));
  }
  const Section ss = SubSection(source, s, "session", "bars.session");
  if (!ss.present()) return absl::OkStatus();
  AS_RETURN_IF_ERROR(ss.CheckKeys({"start", "end", "timezone_offset_minutes"}));
  SessionWindow w;
  w.enabled = true;
  for (const char* key : {"start", "end"}) {
    if (!ss.Has(key)) return ss.KeyError(key, "required when a session is given");
    std::string text;
    AS_RETURN_IF_ERROR(ss.String(key, &text));
    const bool is_end = std::string(key) == "end";
    int minutes = 0;
    if (!ParseClockMinutes(text, is_end, &minutes)) {
      return ss.KeyError(key, absl::StrCat("expected a local time \"HH:MM\" (00:00..",
                                           is_end ? "24:00" : "23:59", "), got \"", text, "\""));
    }
    (is_end ? w.end_minute : w.start_minute) = minutes;
  }
  if (w.start_minute == w.end_minute % 1440) {
    return ss.KeyError("end", "the session must not be empty or a full day (start == end)");
  }
  AS_RETURN_IF_ERROR(ss.Integer("timezone_offset_minutes", &w.tz_offset_minutes, -1440, 1440));
  c->session = w;
  return absl::OkStatus();
}

absl::Status ParseModel(const std::string* source, const Section& s, ModelConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"mean", "mean_order", "variance", "shock_lags", "asym_lags",
                                  "variance_lags", "innovations", "presample", "params"}));
  std::string mean(MeanKindName(c->spec.mean));
  std::string variance(VarianceKindName(c->spec.variance));
  std::string innovations(InnovationsName(c->spec.innovations));
  AS_RETURN_IF_ERROR(s.String("mean", &mean));
  AS_RETURN_IF_ERROR(s.String("variance", &variance));
  AS_RETURN_IF_ERROR(s.String("innovations", &innovations));
  if (auto k = ParseMeanKind(mean); !k.ok()) return s.KeyError("mean", k.status().message());
  if (auto k = ParseVarianceKind(variance); !k.ok()) {
    return s.KeyError("variance", k.status().message());
  }
  if (auto k = ParseInnovations(innovations); !k.ok()) {
    return s.KeyError("innovations", k.status().message());
  }
  std::vector<int> mean_order;
  AS_RETURN_IF_ERROR(s.IntArray("mean_order", &mean_order, 2, 0, 1000));
  if (s.Has("mean_order") && mean != "arma") {
    return s.KeyError("mean_order", "only used with mean = \"arma\"");
  }
  VarianceLags lags;
  AS_RETURN_IF_ERROR(s.Integer("shock_lags", &lags.shock, 0, 1000));
  AS_RETURN_IF_ERROR(s.Integer("asym_lags", &lags.asym, 0, 1000));
  AS_RETURN_IF_ERROR(s.Integer("variance_lags", &lags.variance, 0, 1000));
  auto spec = MakeModelSpec(mean, mean_order, variance, lags, innovations);
  if (!spec.ok()) {
    const std::string msg(spec.status().message());
    const char* key = msg.find("ARMA") != std::string::npos            ? "mean_order"
                      : msg.find("asym_lags") != std::string::npos     ? "asym_lags"
                      : msg.find("variance_lags") != std::string::npos ? "variance_lags"
                                                                       : "shock_lags";
    return s.KeyError(key, msg);
  }
  c->spec = *spec;
  int presample = static_cast<int>(c->presample);
  AS_RETURN_IF_ERROR(s.Word("presample", {"mean-square", "robust-start"}, &presample));
  c->presample = static_cast<Presample>(presample);

  if (const toml::node* n = s.Node("params"); n != nullptr && !n->is_table()) {
    return s.KeyError("params",
                      absl::StrCat("expected a table of name = number, got ", TypeName(*n)));
  }
  const Section ps = SubSection(source, s, "params", "model.params");
  c->has_params = false;
  if (!ps.present()) return absl::OkStatus();
  const std::vector<std::string> names = c->spec.ParamNames();
  std::vector<std::pair<std::string, double>> named;
  for (auto&& [k, v] : *ps.table()) {
    const std::string key(k.str());
    bool known = false;
    for (const std::string& n : names) known = known || n == key;
    if (!known) {
      const std::string hint = RenameHint(RenameKind::kParameter, "", key);
      return ps.KeyError(
          key, absl::StrCat("not a parameter of ", c->spec.Label(), " (expected ",
                            absl::StrJoin(names, ", "), ")", hint.empty() ? "" : "; ", hint));
    }
    double value;
    if (!Section::NumberOf(v, &value)) {
      return ps.KeyError(key, absl::StrCat("expected a number, got ", TypeName(v)));
    }
    named.emplace_back(key, value);
  }
  auto params = ModelParams::FromNamed(c->spec, named);
  if (!params.ok()) return ps.Error(ps.line(), c->spec.Label(), params.status().message());
  if (absl::Status st = params->CheckConstraints(); !st.ok()) {
    const std::string msg(st.message());
    for (const std::string& n : names) {
      if (msg.compare(0, n.size() + 1, n + " ") == 0) return ps.KeyError(n, msg);
    }
    return ps.Error(ps.line(), c->spec.Label(), msg);
  }
  c->params = *std::move(params);
  c->has_params = true;
  return absl::OkStatus();
}

absl::Status ParseWarmup(const Section& s, WarmupConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"ewma_lambda", "min_bars", "start_bars"}));
  AS_RETURN_IF_ERROR(s.Number("ewma_lambda", &c->ewma_lambda, 0, 1, true, true));
  AS_RETURN_IF_ERROR(s.Integer("start_bars", &c->start_bars, 1, kMaxWarmupStartBars));
  return s.Integer("min_bars", &c->min_bars, 1, 100000);
}

absl::Status ParseOutputs(const Section& s, OutputsConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"horizons", "risk_levels", "periods_per_year", "return_units",
                                  "target_vol_ann", "scale_cap"}));
  AS_RETURN_IF_ERROR(s.IntArray("horizons", &c->horizons, kMaxHorizons, 1, 100000));
  for (size_t i = 1; i < c->horizons.size(); ++i) {
    if (c->horizons[i] <= c->horizons[i - 1]) {
      return s.KeyError("horizons", "entries must be strictly increasing");
    }
  }
  AS_RETURN_IF_ERROR(s.NumberArray("risk_levels", &c->risk_levels, kMaxRiskLevels, 0.5, 1));
  for (size_t i = 0; i < c->risk_levels.size(); ++i) {
    for (size_t j = 0; j < i; ++j) {
      if (c->risk_levels[i] == c->risk_levels[j]) {
        return s.KeyError("risk_levels", "entries must be distinct");
      }
    }
  }
  if (const toml::node* n = s.Node("periods_per_year"); n != nullptr && n->is_string()) {
    if (n->as_string()->get() != "auto") {
      return s.KeyError(
          "periods_per_year",
          absl::StrCat("expected \"auto\" or a number > 0, got \"", n->as_string()->get(), "\""));
    }
    c->periods_per_year_auto = true;
  } else if (n != nullptr) {
    AS_RETURN_IF_ERROR(s.Number("periods_per_year", &c->periods_per_year, 0, 1e9, true, false));
    c->periods_per_year_auto = false;
  }
  int units = static_cast<int>(c->return_units);
  AS_RETURN_IF_ERROR(s.Word("return_units", {"fraction", "percent"}, &units));
  c->return_units = static_cast<ReturnUnits>(units);
  AS_RETURN_IF_ERROR(s.Number("target_vol_ann", &c->target_vol_ann, 0, kInf, true, true));
  return s.Number("scale_cap", &c->scale_cap, 0, kInf, true, true);
}

absl::Status ParseRefit(const Section& s, RefitConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"every_bars", "every_seconds", "window", "min_bars", "workers",
                                  "reidentify_every", "max_persistence", "holdout_bars",
                                  "holdout_margin", "max_failures", "apply_lag_bars",
                                  "jitter_fraction", "queue_capacity", "diagnostics_level",
                                  "group_models"}));
  AS_RETURN_IF_ERROR(s.Bool("group_models", &c->group_models));
  AS_RETURN_IF_ERROR(s.Integer("every_bars", &c->every_bars, 0, int64_t{1} << 40));
  AS_RETURN_IF_ERROR(s.Number("every_seconds", &c->every_seconds, 0, 1e9, false, false));
  AS_RETURN_IF_ERROR(s.Integer("window", &c->window, 10, 1000000));
  AS_RETURN_IF_ERROR(s.Integer("min_bars", &c->min_bars, 10, 1000000));
  AS_RETURN_IF_ERROR(s.Integer("workers", &c->workers, 1, 256));
  AS_RETURN_IF_ERROR(s.Integer("reidentify_every", &c->reidentify_every, 0, 1000000));
  AS_RETURN_IF_ERROR(
      s.Number("max_persistence", &c->max_persistence, 0, kMaxPersistence, true, false));
  AS_RETURN_IF_ERROR(s.Integer("holdout_bars", &c->holdout_bars, 0, 1000000));
  AS_RETURN_IF_ERROR(s.Number("holdout_margin", &c->holdout_margin, 0, kInf, false, true));
  AS_RETURN_IF_ERROR(s.Integer("max_failures", &c->max_failures, 1, 1000000));
  AS_RETURN_IF_ERROR(s.Integer("apply_lag_bars", &c->apply_lag_bars, 0, 1000000));
  AS_RETURN_IF_ERROR(s.Number("jitter_fraction", &c->jitter_fraction, 0, 1, false, true));
  AS_RETURN_IF_ERROR(s.Integer("queue_capacity", &c->queue_capacity, 1, 1 << 24));
  AS_RETURN_IF_ERROR(s.Number("diagnostics_level", &c->diagnostics_level, 0, 0.5, true, true));
  if (c->min_bars > c->window) {
    return s.KeyError(
        s.Has("min_bars") ? "min_bars" : "window",
        absl::StrCat("min_bars (", c->min_bars, ") must not exceed window (", c->window, ")"));
  }
  if (c->holdout_bars >= c->min_bars) {
    return s.KeyError(s.Has("holdout_bars") ? "holdout_bars" : "min_bars",
                      absl::StrCat("holdout_bars (", c->holdout_bars,
                                   ") must be smaller than min_bars (", c->min_bars, ")"));
  }
  return absl::OkStatus();
}

absl::Status ParseSeasonality(const Section& s, const BarsConfig& bars, SeasonalityConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys(
      {"enabled", "method", "min_sessions", "smoothing", "prior_sessions", "opening_return"}));
  if (const toml::node* n = s.Node("enabled"); n != nullptr) {
    if (n->is_boolean()) {
      c->enabled = n->as_boolean()->get() ? SeasonalSwitch::kOn : SeasonalSwitch::kOff;
    } else if (n->is_string() && n->as_string()->get() == "auto") {
      c->enabled = SeasonalSwitch::kAuto;
    } else {
      return s.KeyError("enabled", absl::StrCat("expected \"auto\", true or false, got ",
                                                n->is_string() ? "\"" + n->as_string()->get() + "\""
                                                               : TypeName(*n)));
    }
  }
  int method = static_cast<int>(c->method);
  AS_RETURN_IF_ERROR(s.Word("method", {"local-linear", "fourier"}, &method));
  c->method = static_cast<SeasonalMethod>(method);
  AS_RETURN_IF_ERROR(s.Integer("min_sessions", &c->min_sessions, 1, 10000));
  AS_RETURN_IF_ERROR(s.Number("smoothing", &c->smoothing, 0, 10000, false, false));
  AS_RETURN_IF_ERROR(s.Number("prior_sessions", &c->prior_sessions, 0, 1e6, false, false));
  int opening = static_cast<int>(c->opening_return);
  AS_RETURN_IF_ERROR(s.Word("opening_return", {"skip", "scaled"}, &opening));
  c->opening_return = static_cast<OpeningReturn>(opening);
  if (c->enabled == SeasonalSwitch::kOn && bars.interval_ns <= 0) {
    return s.KeyError("enabled", "needs time bars ([bars] interval > 0)");
  }
  if (c->opening_return == OpeningReturn::kScaled && !c->Active(bars)) {
    return s.KeyError("opening_return",
                      "\"scaled\" needs seasonality on (a [bars] session and interval > 0)");
  }
  if (c->Active(bars)) {
    const int64_t k = SeasonalityConfig::BarsPerSession(bars);
    if (k < 2 || k > kMaxSeasonalBuckets) {
      if (c->enabled == SeasonalSwitch::kAuto) {
        c->enabled = SeasonalSwitch::kOff;  // no usable grid for a profile: stays off
      } else {
        return s.KeyError("enabled",
                          absl::StrCat("a session of ", k, " bars: seasonality needs 2..",
                                       kMaxSeasonalBuckets, " bars per session"));
      }
    }
  }
  if (c->Active(bars)) {
    if (auto st = ValidateSeasonalOptions(c->ToOptions(bars)); !st.ok()) {
      return s.KeyError("smoothing", st.message());
    }
  }
  return absl::OkStatus();
}

// The keys of [alerts] and of each [alerts.groups.<name>] (besides `symbols`).
constexpr absl::string_view kAlertKeys[] = {"shock_z",
                                            "shock_critical_z",
                                            "shock_info_z",
                                            "cooldown_bars",
                                            "cooldown_seconds",
                                            "regime_scale",
                                            "regime_enter_evidence",
                                            "regime_exit_evidence",
                                            "regime_tail_nu",
                                            "regime_warmup_bars",
                                            "persistence_threshold",
                                            "refit_failures",
                                            "stale_seconds",
                                            "stale_gap_multiple",
                                            "reject_burst",
                                            "reject_window_seconds",
                                            "alert_during_warmup"};

// The values of [alerts] (and of a group, over a copy of [alerts]).
absl::Status ParseAlertValues(const Section& s, AlertsConfig* c) {
  AS_RETURN_IF_ERROR(s.Number("shock_z", &c->shock_z, 0, kInf, true, true));
  AS_RETURN_IF_ERROR(s.Number("shock_critical_z", &c->shock_critical_z, 0, kInf, true, true));
  AS_RETURN_IF_ERROR(s.Number("shock_info_z", &c->shock_info_z, 0, kInf, false, true));
  AS_RETURN_IF_ERROR(s.Integer("cooldown_bars", &c->cooldown_bars, 0, 1000000));
  AS_RETURN_IF_ERROR(s.Number("cooldown_seconds", &c->cooldown_seconds, 0, 1e9, false, false));
  AS_RETURN_IF_ERROR(s.Number("regime_scale", &c->regime_scale, 1, 1e6, true, false));
  AS_RETURN_IF_ERROR(
      s.Number("regime_enter_evidence", &c->regime_enter_evidence, 0, 1e6, true, false));
  AS_RETURN_IF_ERROR(
      s.Number("regime_exit_evidence", &c->regime_exit_evidence, 0, 1e6, true, false));
  AS_RETURN_IF_ERROR(s.Number("regime_tail_nu", &c->regime_tail_nu, 0, 1000, false, false));
  AS_RETURN_IF_ERROR(s.Integer("regime_warmup_bars", &c->regime_warmup_bars, 0, 1000000000));
  AS_RETURN_IF_ERROR(
      s.Number("persistence_threshold", &c->persistence_threshold, 0, 1, true, true));
  AS_RETURN_IF_ERROR(s.Integer("refit_failures", &c->refit_failures, 1, 1000000));
  AS_RETURN_IF_ERROR(s.Number("stale_seconds", &c->stale_seconds, 0, kInf, true, true));
  AS_RETURN_IF_ERROR(s.Number("stale_gap_multiple", &c->stale_gap_multiple, 0, 1e6, false, false));
  AS_RETURN_IF_ERROR(s.Integer("reject_burst", &c->reject_burst, 1, int64_t{1} << 40));
  // The window is counted in 60 buckets of at least 1 ns each.
  AS_RETURN_IF_ERROR(
      s.Number("reject_window_seconds", &c->reject_window_seconds, 6e-8, 1e9, false, false));
  AS_RETURN_IF_ERROR(s.Bool("alert_during_warmup", &c->alert_during_warmup));
  if (c->shock_critical_z < c->shock_z) {
    return s.KeyError(s.Has("shock_critical_z") ? "shock_critical_z" : "shock_z",
                      absl::StrCat("shock_critical_z (", FormatNumber(c->shock_critical_z),
                                   ") must be >= shock_z (", FormatNumber(c->shock_z), ")"));
  }
  if (c->shock_info_z != 0 && !(c->shock_info_z < c->shock_z)) {
    return s.KeyError(
        s.Has("shock_info_z") ? "shock_info_z" : "shock_z",
        absl::StrCat("shock_info_z (", FormatNumber(c->shock_info_z),
                     ") must be 0 (off) or below shock_z (", FormatNumber(c->shock_z), ")"));
  }
  if (c->regime_tail_nu != 0 && !(c->regime_tail_nu > 2)) {
    return s.KeyError("regime_tail_nu",
                      absl::StrCat("must be 0 (normal law) or larger than 2, got ",
                                   FormatNumber(c->regime_tail_nu)));
  }
  // Backstop: the rules engine accepts everything the checks above accept.
  auto engine = AlertEngine::Create(c->ToAlertOptions());
  if (!engine.ok()) return s.SectionError(engine.status().message());
  return absl::OkStatus();
}

bool ValidSymbolPattern(absl::string_view p) {
  if (!p.empty() && p.back() == '*') p.remove_suffix(1);
  return IsValidSymbol(p);
}

// Calls `fn(name, section)` for each table [<table>.groups.<name>] under `s`
// (in file order); `contents` says what such a table holds, for the errors.
template <typename Fn>
absl::Status ForEachGroup(const std::string* source, const Section& s, absl::string_view table,
                          absl::string_view contents, Fn fn) {
  const toml::node* g = s.Node("groups");
  if (g == nullptr) return absl::OkStatus();
  if (!g->is_table()) {
    return s.KeyError(
        "groups", absl::StrCat("expected tables [", table, ".groups.<name>] with symbols = [...]"));
  }
  const std::string prefix = absl::StrCat(table, ".groups");
  const Section gs = SubSection(source, s, "groups", prefix);
  for (auto&& [key, node] : *g->as_table()) {
    const std::string name(key.str());
    if (!node.is_table())
      return gs.KeyError(name, absl::StrCat("expected a table with ", contents));
    AS_RETURN_IF_ERROR(fn(name, SubSection(source, gs, name, prefix + "." + name)));
  }
  return absl::OkStatus();
}

// The required `symbols` of a group table: names or prefixes ending in *.
absl::Status ParseGroupSymbols(const Section& one, std::vector<std::string>* symbols) {
  if (!one.Has("symbols")) return one.KeyError("symbols", "required: the symbols of the group");
  AS_RETURN_IF_ERROR(one.StringArray("symbols", symbols));
  if (symbols->empty()) return one.KeyError("symbols", "at least one symbol or prefix*");
  for (const std::string& p : *symbols) {
    if (!ValidSymbolPattern(p)) {
      return one.KeyError("symbols",
                          absl::StrCat("'", p, "' is not a symbol or a prefix ending in *"));
    }
  }
  return absl::OkStatus();
}

absl::Status ParseAlerts(const std::string* source, const Section& s, AlertsConfig* c,
                         std::vector<AlertGroupConfig>* groups) {
  std::vector<absl::string_view> keys(std::begin(kAlertKeys), std::end(kAlertKeys));
  keys.push_back("groups");
  AS_RETURN_IF_ERROR(s.CheckKeys(keys));
  AS_RETURN_IF_ERROR(ParseAlertValues(s, c));
  return ForEachGroup(
      source, s, "alerts", "symbols = [...] and alert keys",
      [&](const std::string& name, const Section& one) -> absl::Status {
        // The reject-burst rule counts rejected ticks of the whole feed (a rejected
        // tick may have no valid symbol), so its keys have no per-group meaning.
        for (absl::string_view feed_wide : {"reject_burst", "reject_window_seconds"}) {
          if (one.Has(feed_wide)) {
            return one.KeyError(feed_wide,
                                "the reject-burst rule is feed-wide: set it in [alerts]");
          }
        }
        std::vector<absl::string_view> group_keys;
        for (absl::string_view k : kAlertKeys) {
          if (k != "reject_burst" && k != "reject_window_seconds") group_keys.push_back(k);
        }
        group_keys.push_back("symbols");
        AS_RETURN_IF_ERROR(one.CheckKeys(group_keys));
        AlertGroupConfig group;
        group.name = name;
        group.alerts = *c;
        AS_RETURN_IF_ERROR(ParseGroupSymbols(one, &group.symbols));
        AS_RETURN_IF_ERROR(ParseAlertValues(one, &group.alerts));
        groups->push_back(std::move(group));
        return absl::OkStatus();
      });
}

absl::Status ParseTrackingMode(const Section& s, TrackingMode* mode) {
  int m = static_cast<int>(*mode);
  AS_RETURN_IF_ERROR(s.Word("mode", {"off", "track", "drive"}, &m));
  *mode = static_cast<TrackingMode>(m);
  return absl::OkStatus();
}

absl::Status ParseTracking(const std::string* source, const Section& s, TrackingConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"mode", "forgetting", "burn_in_bars", "max_step",
                                  "max_persistence", "max_level_ratio", "ridge", "stability_decay",
                                  "alert_threshold", "report_every_bars", "groups"}));
  AS_RETURN_IF_ERROR(ParseTrackingMode(s, &c->mode));
  TrackerOptions& t = c->tracker;
  AS_RETURN_IF_ERROR(s.Number("forgetting", &t.forgetting, 0, 1, true, true));
  AS_RETURN_IF_ERROR(s.Integer("burn_in_bars", &t.burn_in_bars, 1, 1000000));
  AS_RETURN_IF_ERROR(s.Number("max_step", &t.max_step, 0, 1, true, false));
  AS_RETURN_IF_ERROR(
      s.Number("max_persistence", &t.max_persistence, 0, kMaxPersistence, true, false));
  AS_RETURN_IF_ERROR(s.Number("max_level_ratio", &t.max_level_ratio, 1, 1e12, true, false));
  AS_RETURN_IF_ERROR(s.Number("ridge", &t.ridge, 0, 1e6, false, false));
  AS_RETURN_IF_ERROR(s.Number("stability_decay", &t.stability_decay, 0, 1, true, true));
  AS_RETURN_IF_ERROR(s.Number("alert_threshold", &c->alert_threshold, 0, 1e12, false, false));
  AS_RETURN_IF_ERROR(s.Integer("report_every_bars", &c->report_every_bars, 0, int64_t{1} << 40));
  if (auto st = ValidateTrackerOptions(t); !st.ok()) return s.SectionError(st.message());
  return ForEachGroup(source, s, "tracking", "symbols and mode",
                      [&](const std::string& name, const Section& one) -> absl::Status {
                        AS_RETURN_IF_ERROR(one.CheckKeys({"symbols", "mode"}));
                        TrackingGroupConfig group;
                        group.name = name;
                        group.mode = c->mode;
                        AS_RETURN_IF_ERROR(ParseGroupSymbols(one, &group.symbols));
                        AS_RETURN_IF_ERROR(ParseTrackingMode(one, &group.mode));
                        c->groups.push_back(std::move(group));
                        return absl::OkStatus();
                      });
}

absl::Status ParseHttp(const Section& s, HttpConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"endpoint", "enabled"}));
  AS_RETURN_IF_ERROR(s.String("endpoint", &c->endpoint));
  AS_RETURN_IF_ERROR(s.Bool("enabled", &c->enabled));
  const size_t colon = c->endpoint.rfind(':');
  int port = 0;
  bool ok = colon != std::string::npos && colon > 0 && colon + 1 < c->endpoint.size();
  if (ok) {
    const char* b = c->endpoint.data() + colon + 1;
    const char* e = c->endpoint.data() + c->endpoint.size();
    const auto res = std::from_chars(b, e, port);
    ok = res.ec == std::errc() && res.ptr == e && port >= 1 && port <= 65535;
  }
  if (!ok) {
    return s.KeyError("endpoint", absl::StrCat("expected host:port like \"127.0.0.1:7310\", got \"",
                                               c->endpoint, "\""));
  }
  return absl::OkStatus();
}

absl::Status ParseCheckpoint(const Section& s, CheckpointConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"path", "every_seconds", "slice_symbols"}));
  AS_RETURN_IF_ERROR(s.String("path", &c->path));
  AS_RETURN_IF_ERROR(s.Integer("slice_symbols", &c->slice_symbols, 0, 1 << 24));
  return s.Number("every_seconds", &c->every_seconds, 0, 1e9, false, false);
}

absl::Status ParseLog(const Section& s, LogConfig* c) {
  AS_RETURN_IF_ERROR(s.CheckKeys({"level"}));
  int level = static_cast<int>(c->level);
  AS_RETURN_IF_ERROR(s.Word("level", {"debug", "info", "warn", "error"}, &level));
  c->level = static_cast<LogLevel>(level);
  return absl::OkStatus();
}

absl::StatusOr<EngineConfig> ParseDocument(const toml::table& doc, const std::string& source) {
  static constexpr absl::string_view kSections[] = {
      "feed",  "nats",        "publish", "bars",     "model", "warmup",     "outputs",
      "limits", "refit", "seasonality", "alerts", "tracking", "http", "checkpoint", "log"};
  for (auto&& [k, v] : doc) {
    bool known = false;
    for (absl::string_view name : kSections) known = known || Sv(k.str()) == name;
    const int line = static_cast<int>(k.source().begin.line);
    if (!known) {
      return absl::InvalidArgumentError(absl::StrCat(
          source, ":", line, ": unknown ", v.is_table() ? "section [" : "top-level key '",
          std::string(k.str()), v.is_table() ? "]" : "'",
          " (sections: ", absl::StrJoin(std::begin(kSections), std::end(kSections), ", "), ")"));
    }
    if (!v.is_table()) {
      return absl::InvalidArgumentError(absl::StrCat(source, ":", line, ": '", std::string(k.str()),
                                                     "' must be a section [", std::string(k.str()),
                                                     "], got ", TypeName(v)));
    }
  }
  auto section = [&](absl::string_view name) {
    const toml::node* n = doc.get(std::string_view(name.data(), name.size()));
    const toml::table* t = n != nullptr ? n->as_table() : nullptr;
    int line = 0;
    for (auto&& [k, v] : doc) {
      if (Sv(k.str()) == name) line = static_cast<int>(k.source().begin.line);
    }
    return Section(&source, std::string(name), t, line);
  };
  EngineConfig c;
  AS_RETURN_IF_ERROR(ParseFeed(section("feed"), &c.feed));
  AS_RETURN_IF_ERROR(ParseNats(section("nats"), &c.nats));
  AS_RETURN_IF_ERROR(ParsePublish(section("publish"), &c.publish));
  AS_RETURN_IF_ERROR(ParseBars(&source, section("bars"), &c.bars));
  AS_RETURN_IF_ERROR(ParseModel(&source, section("model"), &c.model));
  AS_RETURN_IF_ERROR(ParseWarmup(section("warmup"), &c.warmup));
  AS_RETURN_IF_ERROR(ParseOutputs(section("outputs"), &c.outputs));
  {
    const Section s = section("limits");
    AS_RETURN_IF_ERROR(s.CheckKeys({"max_symbols"}));
    AS_RETURN_IF_ERROR(s.Integer("max_symbols", &c.limits.max_symbols, 1, 100000000));
  }
  AS_RETURN_IF_ERROR(ParseRefit(section("refit"), &c.refit));
  AS_RETURN_IF_ERROR(ParseSeasonality(section("seasonality"), c.bars, &c.seasonality));
  AS_RETURN_IF_ERROR(ParseAlerts(&source, section("alerts"), &c.alerts, &c.alert_groups));
  AS_RETURN_IF_ERROR(ParseTracking(&source, section("tracking"), &c.tracking));
  AS_RETURN_IF_ERROR(ParseHttp(section("http"), &c.http));
  AS_RETURN_IF_ERROR(ParseCheckpoint(section("checkpoint"), &c.checkpoint));
  AS_RETURN_IF_ERROR(ParseLog(section("log"), &c.log));
  ResolveAutoSettings(&c);
  return c;
}

std::string Quote(absl::string_view s) {
  std::string out = "\"";
  for (char ch : s) {
    const unsigned char c = static_cast<unsigned char>(ch);
    if (c == '"' || c == '\\') {
      out.push_back('\\');
      out.push_back(ch);
    } else if (c < 0x20 || c == 0x7f) {
      char buf[16];
      std::snprintf(buf, sizeof(buf), "\\u%04x", c);
      out += buf;
    } else {
      out.push_back(ch);
    }
  }
  out.push_back('"');
  return out;
}

std::string Clock(int minutes) {
  char buf[24];
  std::snprintf(buf, sizeof(buf), "%02d:%02d", minutes / 60, minutes % 60);
  return buf;
}

}  // namespace

namespace {

bool MatchesPatterns(const std::vector<std::string>& symbols, absl::string_view symbol) {
  for (const std::string& p : symbols) {
    if (!p.empty() && p.back() == '*') {
      if (absl::StartsWith(symbol, absl::string_view(p).substr(0, p.size() - 1))) return true;
    } else if (symbol == p) {
      return true;
    }
  }
  return false;
}

}  // namespace

bool TrackingGroupConfig::Matches(absl::string_view symbol) const {
  return MatchesPatterns(symbols, symbol);
}

TrackingMode TrackingConfig::ModeFor(absl::string_view symbol) const {
  for (const TrackingGroupConfig& g : groups) {
    if (g.Matches(symbol)) return g.mode;
  }
  return mode;
}

bool TrackingConfig::AnyOn() const {
  if (mode != TrackingMode::kOff) return true;
  for (const TrackingGroupConfig& g : groups) {
    if (g.mode != TrackingMode::kOff) return true;
  }
  return false;
}

bool AlertGroupConfig::Matches(absl::string_view symbol) const {
  for (const std::string& p : symbols) {
    if (!p.empty() && p.back() == '*') {
      if (absl::StartsWith(symbol, absl::string_view(p).substr(0, p.size() - 1))) return true;
    } else if (symbol == p) {
      return true;
    }
  }
  return false;
}

absl::StatusOr<EngineConfig> ParseEngineConfig(absl::string_view toml_text,
                                               absl::string_view source_name) {
  const std::string source(source_name);
  try {
    const toml::table doc =
        toml::parse(std::string_view(toml_text.data(), toml_text.size()), source);
    return ParseDocument(doc, source);
  } catch (const toml::parse_error& e) {
    return absl::InvalidArgumentError(
        absl::StrCat(source, ":", e.source().begin.line, ": ", std::string(e.description())));
  } catch (const std::exception& e) {
    return absl::InvalidArgumentError(absl::StrCat(source, ": ", e.what()));
  }
}

absl::StatusOr<EngineConfig> LoadEngineConfigFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return absl::NotFoundError(absl::StrCat(path, ": cannot open configuration file"));
  std::ostringstream text;
  text << in.rdbuf();
  return ParseEngineConfig(text.str(), path);
}

std::string FormatEngineConfig(const EngineConfig& c) {
  std::string o;
  auto num = [](double v) { return FormatNumber(v); };
  absl::StrAppend(&o, "[feed]\nsource = ", Quote(FeedSourceName(c.feed.source)),
                  "\nendpoints = [");
  for (size_t i = 0; i < c.feed.endpoints.size(); ++i) {
    absl::StrAppend(&o, i ? ", " : "", Quote(c.feed.endpoints[i]));
  }
  absl::StrAppend(&o, "]\nencoding = ", Quote(WireEncodingName(c.feed.encoding)),
                  "\nmax_message_bytes = ", c.feed.max_message_bytes,
                  "\nbusy_poll_us = ", c.feed.busy_poll_us, "\n");
  if (!c.feed.curve_server_key.empty()) {
    absl::StrAppend(&o, "curve_server_key = ", Quote(c.feed.curve_server_key), "\n");
  }
  absl::StrAppend(&o, "\n[nats]\nservers = [");
  for (size_t i = 0; i < c.nats.servers.size(); ++i) {
    absl::StrAppend(&o, i ? ", " : "", Quote(c.nats.servers[i]));
  }
  absl::StrAppend(
      &o, "]\nstream = ", Quote(c.nats.stream), "\nsubject = ", Quote(c.nats.subject),
      "\npartition_subject = ", Quote(c.nats.partition_subject),
      "\npartitions = ", c.nats.partitions, "\nlease_seconds = ", num(c.nats.lease_seconds),
      "\ninstance = ", Quote(c.nats.instance), "\nlease_bucket = ", Quote(c.nats.lease_bucket),
      "\nupdates_subject = ", Quote(c.nats.updates_subject),
      "\ncheckpoint_bucket = ", Quote(c.nats.checkpoint_bucket),
      "\ncheckpoint_seconds = ", num(c.nats.checkpoint_seconds),
      "\nexact_refits = ", c.nats.exact_refits ? "true" : "false", "\nreplicas = ", c.nats.replicas,
      "\nduplicate_window_seconds = ", num(c.nats.duplicate_window_seconds), "\n");
  absl::StrAppend(&o, "\n[publish]\nendpoint = ", Quote(c.publish.endpoint),
                  "\nencoding = ", Quote(WireEncodingName(c.publish.encoding)),
                  "\nhigh_water_mark = ", c.publish.high_water_mark,
                  "\nupdate_topics = ", Quote(UpdateTopicsName(c.publish.update_topics)),
                  "\nbatch_max_bytes = ", c.publish.batch_max_bytes,
                  "\nbatch_max_updates = ", c.publish.batch_max_updates, "\n");
  if (!c.publish.curve_secret_key.empty()) {
    absl::StrAppend(&o, "curve_secret_key = ", Quote(c.publish.curve_secret_key), "\n");
  }
  absl::StrAppend(&o, "\n[bars]\ninterval = ", Quote(FormatDuration(c.bars.interval_ns)),
                  "\ngrace = ", Quote(FormatDuration(c.bars.grace_ns)),
                  "\nmax_lateness = ", Quote(FormatDuration(c.bars.max_lateness_ns)), "\n");
  if (c.bars.session.enabled) {
    absl::StrAppend(&o, "session = { start = ", Quote(Clock(c.bars.session.start_minute)),
                    ", end = ", Quote(Clock(c.bars.session.end_minute)),
                    ", timezone_offset_minutes = ", c.bars.session.tz_offset_minutes, " }\n");
  }
  const ModelSpec& m = c.model.spec;
  absl::StrAppend(&o, "\n[model]\nmean = ", Quote(MeanKindName(m.mean)), "\n");
  if (m.mean == MeanKind::kArma) {
    absl::StrAppend(&o, "mean_order = [", m.ar_order, ", ", m.ma_order, "]\n");
  }
  absl::StrAppend(&o, "variance = ", Quote(VarianceKindName(m.variance)), "\n");
  if (m.arch_order > 0) absl::StrAppend(&o, "shock_lags = ", m.arch_order, "\n");
  if (m.variance == VarianceKind::kGjr) absl::StrAppend(&o, "asym_lags = ", m.asym_order, "\n");
  if (m.variance == VarianceKind::kGarch || m.variance == VarianceKind::kGjr) {
    absl::StrAppend(&o, "variance_lags = ", m.garch_order, "\n");
  }
  absl::StrAppend(&o, "innovations = ", Quote(InnovationsName(m.innovations)),
                  "\npresample = ", Quote(PresampleName(c.model.presample)), "\n");
  if (c.model.has_params) {
    absl::StrAppend(&o, "\n[model.params]\n");
    const std::vector<std::string> names = m.ParamNames();
    for (size_t i = 0; i < names.size() && i < c.model.params.values.size(); ++i) {
      absl::StrAppend(&o, names[i], " = ", num(c.model.params.values[i]), "\n");
    }
  }
  absl::StrAppend(&o, "\n[warmup]\newma_lambda = ", num(c.warmup.ewma_lambda),
                  "\nmin_bars = ", c.warmup.min_bars, "\nstart_bars = ", c.warmup.start_bars,
                  "\n");
  absl::StrAppend(&o, "\n[outputs]\nhorizons = [", absl::StrJoin(c.outputs.horizons, ", "),
                  "]\nrisk_levels = [");
  for (size_t i = 0; i < c.outputs.risk_levels.size(); ++i) {
    absl::StrAppend(&o, i ? ", " : "", num(c.outputs.risk_levels[i]));
  }
  absl::StrAppend(&o, "]\nperiods_per_year = ",
                  c.outputs.periods_per_year_auto ? "\"auto\"" : num(c.outputs.periods_per_year),
                  "\nreturn_units = ", Quote(ReturnUnitsName(c.outputs.return_units)),
                  "\ntarget_vol_ann = ", num(c.outputs.target_vol_ann),
                  "\nscale_cap = ", num(c.outputs.scale_cap), "\n");
  absl::StrAppend(&o, "\n[limits]\nmax_symbols = ", c.limits.max_symbols, "\n");
  const RefitConfig& r = c.refit;
  absl::StrAppend(
      &o, "\n[refit]\nevery_bars = ", r.every_bars, "\nevery_seconds = ", num(r.every_seconds),
      "\nwindow = ", r.window, "\nmin_bars = ", r.min_bars, "\nworkers = ", r.workers,
      "\nreidentify_every = ", r.reidentify_every, "\nmax_persistence = ", num(r.max_persistence),
      "\nholdout_bars = ", r.holdout_bars);
  absl::StrAppend(&o, "\nholdout_margin = ", num(r.holdout_margin),
                  "\nmax_failures = ", r.max_failures, "\napply_lag_bars = ", r.apply_lag_bars,
                  "\njitter_fraction = ", num(r.jitter_fraction),
                  "\nqueue_capacity = ", r.queue_capacity,
                  "\ndiagnostics_level = ", num(r.diagnostics_level),
                  "\ngroup_models = ", r.group_models ? "true" : "false", "\n");
  const SeasonalityConfig& sc = c.seasonality;
  absl::StrAppend(
      &o, "\n[seasonality]\nenabled = ",
      sc.enabled == SeasonalSwitch::kAuto ? "\"auto\""
                                          : (sc.enabled == SeasonalSwitch::kOn ? "true" : "false"),
      "\nmethod = ", Quote(SeasonalMethodName(sc.method)), "\nmin_sessions = ", sc.min_sessions,
      "\nsmoothing = ", num(sc.smoothing), "\nprior_sessions = ", num(sc.prior_sessions),
      "\nopening_return = ", Quote(OpeningReturnName(sc.opening_return)), "\n");
  auto alert_keys = [&](const AlertsConfig& a, bool feed_wide) {
    absl::StrAppend(&o, "shock_z = ", num(a.shock_z),
                    "\nshock_critical_z = ", num(a.shock_critical_z),
                    "\nshock_info_z = ", num(a.shock_info_z), "\ncooldown_bars = ", a.cooldown_bars,
                    "\ncooldown_seconds = ", num(a.cooldown_seconds));
    absl::StrAppend(&o, "\nregime_scale = ", num(a.regime_scale),
                    "\nregime_enter_evidence = ", num(a.regime_enter_evidence),
                    "\nregime_exit_evidence = ", num(a.regime_exit_evidence),
                    "\nregime_tail_nu = ", num(a.regime_tail_nu));
    absl::StrAppend(&o, "\nregime_warmup_bars = ", a.regime_warmup_bars,
                    "\npersistence_threshold = ", num(a.persistence_threshold),
                    "\nrefit_failures = ", a.refit_failures,
                    "\nstale_seconds = ", num(a.stale_seconds),
                    "\nstale_gap_multiple = ", num(a.stale_gap_multiple));
    absl::StrAppend(&o, "\nalert_during_warmup = ", a.alert_during_warmup ? "true" : "false", "\n");
    if (feed_wide) {
      absl::StrAppend(&o, "reject_burst = ", a.reject_burst,
                      "\nreject_window_seconds = ", num(a.reject_window_seconds), "\n");
    }
  };
  absl::StrAppend(&o, "\n[alerts]\n");
  alert_keys(c.alerts, true);
  for (const AlertGroupConfig& g : c.alert_groups) {
    absl::StrAppend(&o, "\n[alerts.groups.", Quote(g.name), "]\nsymbols = [");
    for (size_t i = 0; i < g.symbols.size(); ++i) {
      absl::StrAppend(&o, i ? ", " : "", Quote(g.symbols[i]));
    }
    absl::StrAppend(&o, "]\n");
    alert_keys(g.alerts, false);
  }
  {
    const TrackingConfig& t = c.tracking;
    const TrackerOptions& k = t.tracker;
    absl::StrAppend(&o, "\n[tracking]\nmode = ", Quote(TrackingModeName(t.mode)),
                    "\nforgetting = ", num(k.forgetting), "\nburn_in_bars = ", k.burn_in_bars,
                    "\nmax_step = ", num(k.max_step), "\nmax_persistence = ", num(k.max_persistence),
                    "\nmax_level_ratio = ", num(k.max_level_ratio), "\nridge = ", num(k.ridge),
                    "\nstability_decay = ", num(k.stability_decay),
                    "\nalert_threshold = ", num(t.alert_threshold),
                    "\nreport_every_bars = ", t.report_every_bars, "\n");
    for (const TrackingGroupConfig& g : t.groups) {
      absl::StrAppend(&o, "\n[tracking.groups.", Quote(g.name), "]\nsymbols = [");
      for (size_t i = 0; i < g.symbols.size(); ++i) {
        absl::StrAppend(&o, i ? ", " : "", Quote(g.symbols[i]));
      }
      absl::StrAppend(&o, "]\nmode = ", Quote(TrackingModeName(g.mode)), "\n");
    }
  }
  absl::StrAppend(&o, "\n[http]\nendpoint = ", Quote(c.http.endpoint),
                  "\nenabled = ", c.http.enabled ? "true" : "false", "\n");
  absl::StrAppend(&o, "\n[checkpoint]\npath = ", Quote(c.checkpoint.path),
                  "\nevery_seconds = ", num(c.checkpoint.every_seconds),
                  "\nslice_symbols = ", c.checkpoint.slice_symbols, "\n");
  absl::StrAppend(&o, "\n[log]\nlevel = ", Quote(LogLevelName(c.log.level)), "\n");
  return o;
}

}  // namespace aftershock
