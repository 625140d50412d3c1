// MarketSim: a synthetic market of invented instruments for the desk tools
// (PRODUCT.md C12). Each instrument follows its own GARCH-family model with
// Student-t shocks; the simulator emits ticks bar by bar, with prices
// cumulated from the simulated log returns.
//
// Definitions (bar i = 0, 1, ..., all instruments share the clock):
//   y_i     = the instrument's simulated model return of bar i (fraction)
//   r_i     = s(k_i) * y_i, the bar's log return, where k_i is the bar of the
//             session and s the intraday profile (IntradayMultiplier; s = 1
//             without a profile)
//   o_i     = the overnight move added before the first bar of every session
//             but the first (0 without a session): sqrt(overnight_bars * h_i)
//             * z with z ~ N(0, 1) and h_i the model's conditional variance of
//             bar i (the first return of a session spans the night)
//   price   = start_price * exp(o_0 + r_0 + ... + o_i + r_i) at the bar's last
//             tick (start_price is the close before bar 0, so a price feed
//             yields the returns r_1, r_2, ...)
//   time_i  = without a session: start_ns + i * interval_ns. With a session:
//             bar k of a session starts at the session open + k * interval_ns;
//             a session has K = BarsPerSession(session, interval) bars (the
//             last one may be shorter: it ends at the session close); the
//             clock then jumps to the next session's open, skipping nights and,
//             with skip_weekends, sessions opening on a local Saturday or
//             Sunday. Bar 0 is the first bar starting at or after start_ns.
// Ticks: with ticks_per_bar == 1 each instrument's tick is stamped at the bar
// start, and within a bar the ticks come in the order of the instrument list.
// With ticks_per_bar = N > 1 each instrument has N ticks at independent
// uniformly random times inside the bar; the prices follow a Brownian bridge
// (variance s(k)^2 * h_i over the bar) from the previous close (plus o_i) to
// the bar's close, which is the price of the bar's LAST tick, so a bar builder
// with the same interval and session recovers exactly r_i (o_i + r_i for the
// first bar of a session). The bar's ticks of all instruments are emitted in
// time order (instrument order on ties). Return ticks carry the log-price
// increments between an instrument's consecutive ticks.
//
// Without profile, session and extra ticks, the returns of one instrument are
// exactly those of
//   Simulate(params, {n = bars, seed = InstrumentSeed(seed, symbol),
//                     burn_in = burn_in, regime_changes = the instrument's})
// (aftershock/simulate.h), but generated one bar at a time, so memory does not
// grow with the number of bars; y_i always equals those returns. Overnight
// moves, tick times and bridge points come from a second random stream per
// instrument, so they never change y. The per-instrument seed depends only on
// the master seed and the symbol, so an instrument's path does not change when
// other instruments are added to or removed from the universe.
//
// Thread-safety: a MarketSim is used by one thread at a time. The free
// functions are pure.
#ifndef AFTERSHOCK_MARKET_SIM_H_
#define AFTERSHOCK_MARKET_SIM_H_

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/bar_builder.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"
#include "aftershock/simulate.h"
#include "aftershock/wire.h"

namespace aftershock {

// An instrument described in desk terms; InstrumentModel turns it into per-bar
// model parameters. Plain value type.
struct InstrumentProfile {
  std::string symbol;          // 1..32 bytes of [A-Za-z0-9._:-]
  std::string description;     // one line for listings; may be empty
  double start_price = 100.0;  // close before bar 0; > 0
  double vol_ann = 0.20;       // annualized unconditional volatility (fraction); > 0
  double drift_ann = 0.0;      // annualized log drift (fraction); the constant mean
  double persistence = 0.97;   // alpha + gamma/2 + beta; in [0, 1)
  double alpha = 0.05;         // ARCH loading (GARCH and GJR); >= 0
  double gamma = 0.0;          // asymmetry loading (GJR only); >= 0
  double nu = 6.0;             // Student-t degrees of freedom; > 2
  VarianceKind family = VarianceKind::kGarch;  // kGarch, kGjr or kConstant ("flat")
};

// The built-in universe: twelve invented instruments of the fictional
// Halvard Sound commodities-and-currency desk (energy, metals, agriculture,
// freight, carbon and the local currency pairs). See market_sim.cc.
const std::vector<InstrumentProfile>& DefaultUniverse();

// The first n instruments of the default universe; beyond twelve, further
// invented instruments are derived from the twelve in turn (symbol stem with a
// number, e.g. "BRANDR2.NRG", volatility scaled by 0.8..1.25 deterministically).
// REQUIRES: 1 <= n <= kMaxMarketInstruments, else InvalidArgument.
inline constexpr int kMaxMarketInstruments = 10000;
absl::StatusOr<std::vector<InstrumentProfile>> DefaultInstruments(int n);

// Per-bar parameters of a profile for a variance family, with a constant mean
// mu = drift_ann / periods_per_year and unconditional variance
// vol_ann^2 / periods_per_year:
//   garch:    GARCH(1,1),     alpha_1 = alpha, beta_1 = persistence - alpha
//   gjr:      GJR-GARCH(1,1), alpha_1 = alpha, gamma_1 = gamma,
//                             beta_1 = persistence - alpha - gamma / 2
//   flat:     constant variance with Student shocks (no clustering)
// omega = unconditional variance * (1 - persistence) (flat: the variance).
// InvalidArgument naming the field when the profile is inconsistent (e.g. a
// negative beta) or the family is not one of the three.
absl::StatusOr<ModelParams> InstrumentModel(const InstrumentProfile& profile, VarianceKind family,
                                            double periods_per_year);

// Bars per year used to annualize a bar interval: 252 trading days of 6.5 hours,
// i.e. 252 * 23400 s / interval, but never below 252 (daily or longer bars).
// REQUIRES: interval_ns > 0.
double PeriodsPerYearForInterval(int64_t interval_ns);

// Seed of one instrument's random stream: SplitMix64 of the master seed mixed
// with the 64-bit FNV-1a hash of the symbol.
uint64_t InstrumentSeed(uint64_t master_seed, absl::string_view symbol);

// One simulated instrument.
struct MarketInstrument {
  std::string symbol;                         // valid wire symbol
  double start_price = 100.0;                 // > 0
  ModelParams params;                         // per-bar model; passes CheckConstraints
  std::vector<VarianceRegimeChange> regimes;  // bars strictly increasing, < bars
};

// Standard-deviation multiplier of bar k of a K-bar session under the
// U-shaped intraday profile with amplitude a >= 0:
//   x_k    = (2k + 1) / K - 1                   (bar midpoint on [-1, 1])
//   s(k)^2 = (1 + a * x_k^2) / (1 + a * (K^2 - 1) / (3 K^2))
// The denominator is the session mean of 1 + a x^2, so the mean of s(k)^2
// over the session is 1 (the day's variance does not depend on a); the first
// and last bars' variance is about (1 + a) times the midday bar's.
// a = 0 is flat (s = 1). REQUIRES: 0 <= k < K, a >= 0.
double IntradayMultiplier(int64_t k, int64_t bars_per_session, double amplitude);

struct MarketSimOptions {
  int64_t bars = 390;    // bars per instrument; >= 1; default 390 (one 6.5 h session of 1m)
  uint64_t seed = 1;     // master seed; default 1
  int64_t start_ns = 0;  // time of bar 0 (with a session: no bar before it), ns; >= 0
  int64_t interval_ns = 60000000000;  // bar spacing, ns; > 0; default 1 minute
  int64_t burn_in = 500;              // bars simulated and discarded per instrument; default 500
  // Trading session (local time, as [bars] session of the engine); default
  // disabled: a continuous clock.
  SessionWindow session;
  bool skip_weekends = true;  // with a session: no session opens on a local Sat/Sun; default true
  // U-shape amplitude a of IntradayMultiplier, >= 0; 0 = flat (default).
  // REQUIRES a session when > 0.
  double intraday_amplitude = 0;
  // Variance of the overnight move in bars of the conditional variance, >= 0;
  // used only with a session; default 0 (no move).
  double overnight_bars = 0;
  // Ticks per instrument and bar, 1..kMaxTicksPerBar; default 1 (at the bar
  // start). Memory O(instruments * ticks_per_bar).
  int ticks_per_bar = 1;
};
inline constexpr int kMaxTicksPerBar = 1000;

// Streaming generator of the market's ticks. Cost per tick: one shock draw and
// one variance step; memory O(instruments).
class MarketSim {
 public:
  // InvalidArgument (naming the instrument) on an empty list, a bad or repeated
  // symbol, a bad start price, parameters failing CheckConstraints or a bad
  // regime list; or on inconsistent options.
  static absl::StatusOr<std::unique_ptr<MarketSim>> Create(
      std::vector<MarketInstrument> instruments, const MarketSimOptions& options);
  ~MarketSim();
  MarketSim(const MarketSim&) = delete;
  MarketSim& operator=(const MarketSim&) = delete;

  // Writes the next tick (price or log return, as `field`) and returns true;
  // false once bars * instruments ticks have been produced. tick->size is 0 and
  // tick->rv is NaN.
  bool Next(Tick::Kind field, Tick* tick);

  int64_t total_ticks() const;  // bars * number of instruments * ticks_per_bar
  int64_t ticks_emitted() const;
  const std::vector<MarketInstrument>& instruments() const;
  const MarketSimOptions& options() const;

 private:
  struct Impl;
  explicit MarketSim(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_MARKET_SIM_H_
