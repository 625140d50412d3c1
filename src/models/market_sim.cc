#include "aftershock/market_sim.h"

#include <algorithm>
#include <array>
#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <boost/random/student_t_distribution.hpp>
#include <boost/random/uniform_01.hpp>
#include <cmath>
#include <limits>
#include <set>

#include "absl/strings/str_cat.h"
#include "aftershock/engine_config.h"
#include "aftershock/forecast.h"

namespace aftershock {
namespace {

// The Halvard Sound desk: an invented harbour economy trading its energy,
// metals, crops, freight, carbon allowances and currency. Every name and
// number here is made up for demonstrations.
std::vector<InstrumentProfile> BuildUniverse() {
  auto p = [](const char* sym, const char* desc, double price, double vol, double pers,
              double alpha, double gamma, double nu, VarianceKind family) {
    InstrumentProfile x;
    x.symbol = sym;
    x.description = desc;
    x.start_price = price;
    x.vol_ann = vol;
    x.persistence = pers;
    x.alpha = alpha;
    x.gamma = gamma;
    x.nu = nu;
    x.family = family;
    return x;
  };
  const auto G = VarianceKind::kGarch;
  const auto J = VarianceKind::kGjr;
  return {
      p("BRANDR.NRG", "North Shelf crude blend, front month", 74.20, 0.32, 0.975, 0.05, 0.08, 6.0,
        J),
      p("SKJOLD.GAS", "Skjold hub natural gas, day-ahead", 3.15, 0.55, 0.96, 0.09, 0, 5.0, G),
      p("VARDE.PWR", "Varde grid baseload power, week-ahead", 61.80, 0.60, 0.93, 0.12, 0, 4.5, G),
      p("HALVARD.FX", "Halvard krona per reserve unit", 1.0840, 0.08, 0.985, 0.04, 0, 8.0, G),
      p("TIDEMARK.FX", "Tidemark mark per Halvard krona", 0.6725, 0.11, 0.98, 0.03, 0.04, 7.0, J),
      p("GRIMSTAD.FX", "Grimstad thaler per Halvard krona", 14.35, 0.14, 0.97, 0.07, 0, 5.0, G),
      p("JERNVIK.MTL", "Jernvik pig-iron index", 112.50, 0.26, 0.975, 0.04, 0.05, 6.0, J),
      p("SOLVBERG.MTL", "Solvberg refined silver", 27.40, 0.30, 0.97, 0.06, 0, 5.5, G),
      p("KORNHALL.AGR", "Kornhall milling barley", 6.42, 0.24, 0.96, 0.05, 0, 7.0, G),
      p("HUMLE.AGR", "Humle valley hops", 188.00, 0.34, 0.95, 0.08, 0, 5.0, G),
      p("ROSTRA.FRT", "Rostra coastal freight index", 1450.0, 0.45, 0.965, 0.07, 0.06, 4.5, J),
      p("ASKE.CRB", "Aske emission allowance", 68.90, 0.40, 0.965, 0.07, 0, 5.0, G),
  };
}

uint64_t SplitMix64(uint64_t x) {
  x += 0x9E3779B97F4A7C15ull;
  x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9ull;
  x = (x ^ (x >> 27)) * 0x94D049BB133111EBull;
  return x ^ (x >> 31);
}

absl::Status InstrumentError(const std::string& symbol, absl::string_view what) {
  return absl::InvalidArgumentError(absl::StrCat("instrument ", symbol, ": ", what));
}

}  // namespace

const std::vector<InstrumentProfile>& DefaultUniverse() {
  static const std::vector<InstrumentProfile>* universe =
      new std::vector<InstrumentProfile>(BuildUniverse());
  return *universe;
}

absl::StatusOr<std::vector<InstrumentProfile>> DefaultInstruments(int n) {
  if (n < 1 || n > kMaxMarketInstruments) {
    return absl::InvalidArgumentError(
        absl::StrCat("number of instruments must be in 1..", kMaxMarketInstruments, ", got ", n));
  }
  const auto& base = DefaultUniverse();
  const int nb = static_cast<int>(base.size());
  std::vector<InstrumentProfile> out;
  out.reserve(static_cast<size_t>(n));
  for (int i = 0; i < n; ++i) {
    InstrumentProfile x = base[static_cast<size_t>(i % nb)];
    if (i >= nb) {
      const int copy = i / nb + 1;
      const size_t dot = x.symbol.find('.');
      x.symbol = absl::StrCat(x.symbol.substr(0, dot), copy, x.symbol.substr(dot));
      // Deterministic spread of volatility in [0.8, 1.25] so copies differ.
      const double u = static_cast<double>((static_cast<uint64_t>(i) * 7919u) % 1000u) / 999.0;
      x.vol_ann *= 0.8 + 0.45 * u;
      x.description = absl::StrCat(x.description, " (variant ", copy, ")");
    }
    out.push_back(std::move(x));
  }
  return out;
}

absl::StatusOr<ModelParams> InstrumentModel(const InstrumentProfile& p, VarianceKind family,
                                            double periods_per_year) {
  if (!(std::isfinite(periods_per_year) && periods_per_year > 0)) {
    return InstrumentError(p.symbol, "periods per year must be > 0");
  }
  if (!(std::isfinite(p.vol_ann) && p.vol_ann > 0)) {
    return InstrumentError(p.symbol, absl::StrCat("vol_ann must be > 0, got ", p.vol_ann));
  }
  if (!std::isfinite(p.drift_ann)) return InstrumentError(p.symbol, "drift_ann must be finite");
  if (!(p.nu > 2 && p.nu <= kMaxNu)) {
    return InstrumentError(p.symbol, absl::StrCat("nu must be in (2, ", kMaxNu, "], got ", p.nu));
  }
  const double uvar = p.vol_ann * p.vol_ann / periods_per_year;
  const double mu = p.drift_ann / periods_per_year;
  std::vector<std::pair<std::string, double>> named = {{"mu", mu}};
  const char* variance = nullptr;
  if (family == VarianceKind::kConstant) {
    variance = "flat";
    named.push_back({"omega", uvar});
  } else if (family == VarianceKind::kGarch || family == VarianceKind::kGjr) {
    const bool gjr = family == VarianceKind::kGjr;
    if (!(p.persistence >= 0 && p.persistence < 1)) {
      return InstrumentError(p.symbol,
                             absl::StrCat("persistence must be in [0, 1), got ", p.persistence));
    }
    if (!(p.alpha >= 0)) return InstrumentError(p.symbol, "alpha must be >= 0");
    if (gjr && !(p.gamma >= 0)) return InstrumentError(p.symbol, "gamma must be >= 0");
    const double beta = p.persistence - p.alpha - (gjr ? 0.5 * p.gamma : 0.0);
    if (beta < 0) {
      return InstrumentError(p.symbol,
                             absl::StrCat("alpha", gjr ? " + gamma/2" : "",
                                          " exceeds the persistence (beta would be ", beta, ")"));
    }
    variance = gjr ? "gjr" : "garch";
    named.push_back({"omega", uvar * (1.0 - p.persistence)});
    named.push_back({"alpha_1", p.alpha});
    if (gjr) named.push_back({"gamma_1", p.gamma});
    named.push_back({"beta_1", beta});
  } else {
    return InstrumentError(p.symbol, "model family must be garch, gjr or flat");
  }
  named.push_back({"nu", p.nu});
  auto spec = MakeModelSpec("constant", {}, variance, {}, "student");
  if (!spec.ok()) return spec.status();
  auto params = ModelParams::FromNamed(*spec, named);
  if (!params.ok()) return params.status();
  if (auto s = params->CheckConstraints(); !s.ok()) return InstrumentError(p.symbol, s.message());
  return params;
}

double PeriodsPerYearForInterval(int64_t interval_ns) {
  const double seconds = static_cast<double>(interval_ns) * 1e-9;
  return std::max(252.0, 252.0 * 23400.0 / seconds);
}

uint64_t InstrumentSeed(uint64_t master_seed, absl::string_view symbol) {
  uint64_t h = 0xCBF29CE484222325ull;  // FNV-1a offset basis
  for (unsigned char c : symbol) {
    h ^= c;
    h *= 0x100000001B3ull;  // FNV prime
  }
  return SplitMix64(master_seed ^ SplitMix64(h));
}

// ---- Streaming generator ------------------------------------------------------
// Mirrors the recursion documented in simulate.h step by step (same presample,
// same single draw per bar, same regime rule), so its output equals Simulate's;
// market_sim_test checks this bit for bit.
namespace {

class InstrumentStream {
 public:
  InstrumentStream(const MarketInstrument& inst, uint64_t seed)
      : params_(inst.params),
        active_(inst.params),
        regimes_(inst.regimes),
        rng_(seed),
        aux_(SplitMix64(seed ^ 0x5EA5010A11D0C0DEull)),
        is_t_(inst.params.spec.innovations == Innovations::kStudentT),
        student_(is_t_ ? inst.params.nu() : 5.0),
        t_scale_(is_t_ ? std::sqrt((inst.params.nu() - 2.0) / inst.params.nu()) : 1.0) {
    const ModelSpec& spec = params_.spec;
    v0_ = params_.UnconditionalVariance();
    mu_ = spec.mean == MeanKind::kZero ? 0.0 : params_.mu();
    double ar_sum = 0.0;
    for (int i = 0; i < spec.ar_order; ++i) ar_sum += (ar_[i] = params_.ar(i));
    for (int j = 0; j < spec.ma_order; ++j) ma_[j] = params_.ma(j);
    r_lag_.fill(ar_sum < 1.0 ? mu_ / (1.0 - ar_sum) : mu_);
    st_.eps2.fill(v0_);
    st_.neg_eps2.fill(0.5 * v0_);
    st_.sigma2.fill(v0_);
  }

  // Advances one bar; `bar` is the output index (negative during burn-in).
  double Step(int64_t bar) {
    const ModelSpec& spec = params_.spec;
    if (next_change_ < regimes_.size() && regimes_[next_change_].bar == bar) {
      const VarianceRegimeChange& c = regimes_[next_change_];
      const bool stepped = c.shape == VarianceChangeShape::kStep;
      active_.values[spec.VarianceOffset()] = params_.omega() * (stepped ? 1.0 : c.multiplier);
      step_ = stepped ? c.multiplier : 1.0;
      ++next_change_;
    }
    double sigma2 = t_ == 0 ? v0_ : NextVariance(active_, st_);
    if (t_ == 0 && spec.variance == VarianceKind::kConstant) sigma2 = active_.omega();
    ++t_;
    const double z = is_t_ ? t_scale_ * student_(rng_) : normal_(rng_);
    const double e_base = std::sqrt(sigma2) * z;  // drives the variance recursion
    const double e = step_ == 1.0 ? e_base : std::sqrt(step_) * e_base;
    double cond_mean = mu_;
    for (int i = 0; i < spec.ar_order; ++i) cond_mean += ar_[i] * r_lag_[i];
    for (int j = 0; j < spec.ma_order; ++j) cond_mean += ma_[j] * e_lag_[j];
    const double r = cond_mean + e;
    for (int i = kMaxArmaOrder - 1; i > 0; --i) {
      r_lag_[i] = r_lag_[i - 1];
      e_lag_[i] = e_lag_[i - 1];
    }
    r_lag_[0] = r;
    e_lag_[0] = e;
    for (int i = kMaxArchOrder - 1; i > 0; --i) st_.eps2[i] = st_.eps2[i - 1];
    for (int i = kMaxGarchOrder - 1; i > 0; --i) {
      st_.neg_eps2[i] = st_.neg_eps2[i - 1];
      st_.sigma2[i] = st_.sigma2[i - 1];
    }
    st_.eps2[0] = e_base * e_base;
    st_.neg_eps2[0] = e_base < 0.0 ? e_base * e_base : 0.0;
    st_.sigma2[0] = sigma2;
    last_sigma2_ = step_ * sigma2;
    return r;
  }

  // Conditional variance of the last Step's bar.
  double last_sigma2() const { return last_sigma2_; }
  // Second random stream: overnight moves, tick times, bridge points.
  boost::random::mt19937_64& aux() { return aux_; }

 private:
  ModelParams params_;
  ModelParams active_;  // params_ with the regime's omega
  std::vector<VarianceRegimeChange> regimes_;
  size_t next_change_ = 0;
  double step_ = 1.0;  // multiplier of the step-shaped change in force (simulate.h)
  boost::random::mt19937_64 rng_;
  boost::random::mt19937_64 aux_;
  bool is_t_;
  boost::random::normal_distribution<double> normal_{0.0, 1.0};
  boost::random::student_t_distribution<double> student_;
  double t_scale_;
  double last_sigma2_ = 0;
  double v0_ = 0;
  double mu_ = 0;
  int64_t t_ = 0;
  std::array<double, kMaxArmaOrder> ar_{}, ma_{}, r_lag_{}, e_lag_{};
  VarianceState st_;
};

}  // namespace

// One tick of the bar being emitted.
struct PendingTick {
  int64_t t_ns;
  int32_t inst;
  double price;
  double ret;  // log-price increment since the instrument's previous tick
};

struct MarketSim::Impl {
  std::vector<MarketInstrument> instruments;
  MarketSimOptions options;
  std::vector<InstrumentStream> streams;
  std::vector<double> log_price;  // per instrument, at its last tick
  int64_t bar = 0;                // next bar to generate
  int64_t emitted = 0;
  // Session clock (session.enabled): open of the current session (UTC ns),
  // its local day, the bar of the session the next bar has, bars per session.
  int64_t session_open_ns = 0;
  int64_t session_day = 0;
  int64_t session_k = 0;
  int64_t session_bars = 0;
  int64_t session_length_ns = 0;
  std::vector<double> profile;  // s(k) per bar of the session (empty: flat)
  // The bar being emitted.
  std::vector<PendingTick> pending;
  size_t pending_next = 0;
  std::vector<double> uniforms;  // scratch, ticks_per_bar

  int64_t OpenOf(int64_t day) const {
    return day * kNanosPerDay + options.session.start_minute * kNanosPerMinute -
           static_cast<int64_t>(options.session.tz_offset_minutes) * kNanosPerMinute;
  }
  bool Trades(int64_t day) const {
    // 1970-01-01 (day 0) was a Thursday: (day + 4) mod 7 is 0 on Sundays.
    const int64_t dow = ((day + 4) % 7 + 7) % 7;
    return !options.skip_weekends || (dow != 0 && dow != 6);
  }
  void FillBar();
};

void MarketSim::Impl::FillBar() {
  const MarketSimOptions& o = options;
  const bool session = o.session.enabled;
  int64_t bar_start = 0;
  int64_t bar_length = o.interval_ns;
  bool new_session = false;
  double scale = 1.0;
  if (session) {
    if (session_k == session_bars) {  // the clock jumps to the next session's open
      do {
        ++session_day;
      } while (!Trades(session_day));
      session_open_ns = OpenOf(session_day);
      session_k = 0;
    }
    new_session = session_k == 0 && bar > 0;
    bar_start = session_open_ns + session_k * o.interval_ns;
    bar_length = std::min(o.interval_ns, session_open_ns + session_length_ns - bar_start);
    if (!profile.empty()) scale = profile[static_cast<size_t>(session_k)];
    ++session_k;
  } else {
    bar_start = o.start_ns + bar * o.interval_ns;
  }
  pending.clear();
  pending_next = 0;
  const int n = o.ticks_per_bar;
  boost::random::normal_distribution<double> normal(0.0, 1.0);
  boost::random::uniform_01<double> uniform;
  for (size_t j = 0; j < streams.size(); ++j) {
    InstrumentStream& s = streams[j];
    const double y = s.Step(bar);
    const double r = scale * y;
    double overnight = 0.0;
    if (new_session && o.overnight_bars > 0) {
      overnight = std::sqrt(o.overnight_bars * s.last_sigma2()) * normal(s.aux());
    }
    const double base = log_price[j] + overnight;
    if (n == 1) {
      log_price[j] += overnight + r;
      pending.push_back(
          {bar_start, static_cast<int32_t>(j), std::exp(log_price[j]), overnight + r});
      continue;
    }
    for (double& u : uniforms) u = uniform(s.aux());
    std::sort(uniforms.begin(), uniforms.end());
    const double last_u = uniforms.back();
    // Brownian bridge from 0 (the previous close plus the overnight move) to
    // r at the last tick, over bridge time tau = u / u_last in [0, 1].
    const double var = scale * scale * s.last_sigma2();
    double x = 0.0, tau = 0.0, prev_x = 0.0;
    for (int m = 0; m < n; ++m) {
      const double u = uniforms[static_cast<size_t>(m)];
      if (m == n - 1) {
        x = r;
      } else {
        const double next_tau =
            last_u > 0 ? u / last_u : static_cast<double>(m + 1) / static_cast<double>(n);
        const double dt = next_tau - tau;
        const double rest = 1.0 - tau;
        const double mean = x + (r - x) * dt / rest;
        const double v = std::max(0.0, var * dt * (1.0 - next_tau) / rest);
        x = mean + std::sqrt(v) * normal(s.aux());
        tau = next_tau;
      }
      const int64_t t =
          bar_start + std::min<int64_t>(bar_length - 1,
                                        static_cast<int64_t>(u * static_cast<double>(bar_length)));
      pending.push_back({t, static_cast<int32_t>(j), std::exp(base + x),
                         (m == 0 ? overnight : 0.0) + (x - prev_x)});
      prev_x = x;
    }
    log_price[j] = base + r;
  }
  if (n > 1) {
    std::stable_sort(pending.begin(), pending.end(),
                     [](const PendingTick& a, const PendingTick& b) { return a.t_ns < b.t_ns; });
  }
  ++bar;
}

MarketSim::MarketSim(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}
MarketSim::~MarketSim() = default;

double IntradayMultiplier(int64_t k, int64_t bars_per_session, double amplitude) {
  const double kk = static_cast<double>(bars_per_session);
  const double x = (2.0 * static_cast<double>(k) + 1.0) / kk - 1.0;
  const double mean = 1.0 + amplitude * (kk * kk - 1.0) / (3.0 * kk * kk);
  return std::sqrt((1.0 + amplitude * x * x) / mean);
}

absl::StatusOr<std::unique_ptr<MarketSim>> MarketSim::Create(
    std::vector<MarketInstrument> instruments, const MarketSimOptions& o) {
  if (instruments.empty()) return absl::InvalidArgumentError("the market has no instruments");
  if (o.bars < 1)
    return absl::InvalidArgumentError(absl::StrCat("bars must be >= 1, got ", o.bars));
  if (o.burn_in < 0) {
    return absl::InvalidArgumentError(absl::StrCat("burn_in must be >= 0, got ", o.burn_in));
  }
  if (o.interval_ns <= 0) {
    return absl::InvalidArgumentError(
        absl::StrCat("bar interval must be > 0 ns, got ", o.interval_ns));
  }
  if (o.ticks_per_bar < 1 || o.ticks_per_bar > kMaxTicksPerBar) {
    return absl::InvalidArgumentError(
        absl::StrCat("ticks per bar must be in 1..", kMaxTicksPerBar, ", got ", o.ticks_per_bar));
  }
  if (!(std::isfinite(o.intraday_amplitude) && o.intraday_amplitude >= 0)) {
    return absl::InvalidArgumentError("intraday amplitude must be a number >= 0");
  }
  if (!(std::isfinite(o.overnight_bars) && o.overnight_bars >= 0)) {
    return absl::InvalidArgumentError("overnight variance (bars) must be a number >= 0");
  }
  if (o.intraday_amplitude > 0 && !o.session.enabled) {
    return absl::InvalidArgumentError("an intraday profile needs a session");
  }
  if (o.start_ns < 0 || o.start_ns > kMaxBarTimeNs) {
    return absl::InvalidArgumentError("start time must be in [0, 2^62] ns");
  }
  if (!o.session.enabled) {
    if (o.bars - 1 > (kMaxBarTimeNs - o.start_ns) / o.interval_ns) {
      return absl::InvalidArgumentError("start time + bars * interval overflows the ns clock");
    }
  } else {
    const SessionWindow& w = o.session;
    if (w.start_minute < 0 || w.start_minute > 1439 || w.end_minute < 1 || w.end_minute > 1440 ||
        w.start_minute == w.end_minute % 1440 || w.tz_offset_minutes < -1440 ||
        w.tz_offset_minutes > 1440) {
      return absl::InvalidArgumentError(
          "bad session (start 00:00..23:59, end 00:01..24:00, "
          "start != end, UTC offset within a day)");
    }
    if (o.interval_ns > kNanosPerDay) {
      return absl::InvalidArgumentError("with a session the bar interval must be at most 1 day");
    }
    // Calendar days needed, with room for weekends and the partial first day.
    const int64_t sessions = o.bars / BarsPerSession(w, o.interval_ns) + 2;
    if (sessions > (kMaxBarTimeNs - o.start_ns) / kNanosPerDay / 2) {
      return absl::InvalidArgumentError("start time + bars overflows the ns clock");
    }
  }
  std::set<std::string> seen;
  for (const auto& inst : instruments) {
    if (!IsValidSymbol(inst.symbol)) {
      return absl::InvalidArgumentError(
          absl::StrCat("bad symbol '", inst.symbol, "' (1..32 characters of A-Z a-z 0-9 . _ : -)"));
    }
    if (!seen.insert(inst.symbol).second) {
      return absl::InvalidArgumentError(absl::StrCat("symbol ", inst.symbol, " appears twice"));
    }
    if (!(std::isfinite(inst.start_price) && inst.start_price > 0)) {
      return InstrumentError(inst.symbol, "start price must be finite and > 0");
    }
    if (inst.params.spec.variance == VarianceKind::kEwma) {
      return InstrumentError(inst.symbol, "EWMA has no unconditional level to simulate from");
    }
    if (auto s = inst.params.CheckConstraints(); !s.ok()) {
      return InstrumentError(inst.symbol, s.message());
    }
    int64_t prev = -1;
    for (const auto& c : inst.regimes) {
      if (c.bar < 0 || c.bar >= o.bars) {
        return InstrumentError(
            inst.symbol, absl::StrCat("regime bar must be in [0, ", o.bars, "), got ", c.bar));
      }
      if (c.bar <= prev) {
        return InstrumentError(inst.symbol, "regime bars must be strictly increasing");
      }
      if (!(std::isfinite(c.multiplier) && c.multiplier > 0)) {
        return InstrumentError(inst.symbol,
                               absl::StrCat("regime multiplier must be > 0, got ", c.multiplier));
      }
      prev = c.bar;
    }
  }
  auto impl = std::make_unique<Impl>();
  impl->options = o;
  impl->streams.reserve(instruments.size());
  for (const auto& inst : instruments) {
    impl->streams.emplace_back(inst, InstrumentSeed(o.seed, inst.symbol));
    // Burn-in: bars before output bar 0 are drawn and discarded.
    for (int64_t b = -o.burn_in; b < 0; ++b) impl->streams.back().Step(b);
    impl->log_price.push_back(std::log(inst.start_price));
  }
  if (o.session.enabled) {
    Impl& m = *impl;
    m.session_bars = BarsPerSession(o.session, o.interval_ns);
    m.session_length_ns = SessionLengthNs(o.session);
    // The first trading session whose last bar starts at or after start_ns
    // (it may have opened the local day before, over midnight).
    const int64_t local =
        o.start_ns + static_cast<int64_t>(o.session.tz_offset_minutes) * kNanosPerMinute;
    int64_t day = local / kNanosPerDay - 1;
    for (;; ++day) {
      if (!m.Trades(day)) continue;
      const int64_t open = m.OpenOf(day);
      if (open + (m.session_bars - 1) * o.interval_ns >= o.start_ns) {
        m.session_day = day;
        m.session_open_ns = open;
        m.session_k =
            open >= o.start_ns ? 0 : (o.start_ns - open + o.interval_ns - 1) / o.interval_ns;
        break;
      }
    }
    if (m.session_open_ns < 0) {
      return absl::InvalidArgumentError("the first session opens before the Unix epoch");
    }
    if (o.intraday_amplitude > 0) {
      for (int64_t k = 0; k < m.session_bars; ++k) {
        m.profile.push_back(IntradayMultiplier(k, m.session_bars, o.intraday_amplitude));
      }
    }
  }
  impl->uniforms.resize(static_cast<size_t>(o.ticks_per_bar));
  impl->pending.reserve(instruments.size() * static_cast<size_t>(o.ticks_per_bar));
  impl->instruments = std::move(instruments);
  return std::unique_ptr<MarketSim>(new MarketSim(std::move(impl)));
}

bool MarketSim::Next(Tick::Kind field, Tick* tick) {
  Impl& m = *impl_;
  if (m.pending_next == m.pending.size()) {
    if (m.bar >= m.options.bars) return false;
    m.FillBar();
  }
  const PendingTick& p = m.pending[m.pending_next++];
  tick->symbol.assign(m.instruments[static_cast<size_t>(p.inst)].symbol);
  tick->t_ns = p.t_ns;
  tick->kind = field;
  tick->value = field == Tick::kPrice ? p.price : p.ret;
  tick->size = 0;
  tick->rv = std::numeric_limits<double>::quiet_NaN();
  ++m.emitted;
  return true;
}

int64_t MarketSim::total_ticks() const {
  return impl_->options.bars * static_cast<int64_t>(impl_->instruments.size()) *
         impl_->options.ticks_per_bar;
}
int64_t MarketSim::ticks_emitted() const { return impl_->emitted; }
const std::vector<MarketInstrument>& MarketSim::instruments() const { return impl_->instruments; }
const MarketSimOptions& MarketSim::options() const { return impl_->options; }

}  // namespace aftershock
