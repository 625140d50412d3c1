// Replay evaluation (PRODUCT.md C8): forecast losses, Mincer-Zarnowitz
// regressions, VaR exception backtests (Kupiec, Christoffersen, Basel traffic
// light over bars or trading days), an ES ratio check, the calibration of the
// shocks by the probability integral transform, figures by time of day, and
// alert/refit statistics over the per-symbol history a replay collects.
//
// Alignment convention (read this before filling a SymbolHistory):
//   * var[t] and mu[t] are BarUpdate::var / BarUpdate::mu of bar t: they were
//     made at bar t-1 for bar t, so they are compared with r[t] as they are.
//   * var_risk_next[k][t] and es_next[k][t] are BarUpdate::var_risk[k] /
//     es[k] of bar t, which refer to the NEXT bar t+1. The evaluator lags them
//     itself: the VaR tested against r[t] is var_risk_next[k][t-1]. Bar 0 has no
//     VaR forecast and never enters a VaR backtest. Do not pre-shift them.
//   AppendBarUpdate() fills a history straight from BarUpdate records.
//
// Bars whose flags carry kFlagFirstBar (no return), or kFlagWarmup when
// EvaluationOptions::exclude_warmup is set, or whose inputs are not finite
// (var <= 0, NaN return) are left out of every statistic. The remaining bars
// are treated as one consecutive sequence (Christoffersen transitions, rolling
// windows).
//
// All functions are pure and thread-safe; errors come back as Status values.
#ifndef AFTERSHOCK_EVALUATION_H_
#define AFTERSHOCK_EVALUATION_H_

#include <cstdint>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/bar_update.h"
#include "aftershock/innovations.h"

namespace aftershock {

// ---- Input records ---------------------------------------------------------

// One refit outcome: the fit offered to the quality gate and what the gate said.
struct ModelSwapRecord {
  int64_t t_ns = 0;                      // bar end at which the swap (or rejection) happened
  uint32_t version = 0;                  // version number given to the parameters (if accepted)
  std::string model;                     // ModelSpec::Label(), e.g. "const/GARCH(1,1)/student"
  std::vector<std::string> param_names;  // in ModelSpec::ParamNames() order
  std::vector<double> values;            // same length as param_names
  std::vector<double> std_errors;        // same length, or empty; NaN where unknown
  double loglik = 0;                     // log-likelihood of the fit on its window
  bool accepted = false;                 // true when the gate passed and the swap happened
  std::string gate_reason;               // why the gate failed (empty when accepted)
};

// One published alert.
struct AlertRecord {
  int64_t t_ns = 0;      // bar end of the triggering bar
  std::string kind;      // e.g. "shock", "regime", "persistence", "model", "feed"
  std::string severity;  // e.g. "info", "warning", "critical"
  double value = 0;      // the number that crossed its bound (|z|, variance ratio, ...)
  std::string message;   // human-readable text (free text: escaped by the report)
};

// A volatility regime flagged by the alert rules, [start_ns, end_ns].
struct RegimePeriod {
  int64_t start_ns = 0;
  int64_t end_ns = 0;  // end of the last bar inside the regime (>= start_ns)
  int direction = 1;   // +1: high-volatility regime, -1: low-volatility regime
};

// The recursive tracker of one symbol at one moment (README "Parameter
// tracking between refits"): its coefficients next to the refit model's, in
// the vocabulary of the `m.` tracking records. Plain value type.
struct TrackedParameters {
  std::string mode;                // "track" or "drive" ([tracking] mode of the symbol)
  std::string variance;            // "GARCH(1,1)" or "GJR-GARCH(1,1)"
  std::vector<std::string> names;  // omega, alpha_1, [gamma_1,] beta_1
  std::vector<double> values;      // tracked coefficients, in `names` order
  std::vector<double> refit;       // the refit model's (the tracker's anchor), same order
  double persistence = 0;          // tracked alpha_1 + gamma_1/2 + beta_1
  double refit_persistence = 0;    // the refit model's
  double level_ratio = 1;          // tracked unconditional variance over the refit model's
  double instability = 0;          // instability statistic Q (0 during its warm-up)
  int64_t bars_since_refit = 0;    // bars since the tracker was last anchored on a refit
  bool stepping = false;           // past the burn-in: the coefficients move
  uint64_t resets = 0;             // divergence resets to the refit model
  // Instability alerts raised over the period reported on; -1 when not known
  // (a checkpoint keeps the statistic, not the alert history).
  int64_t instability_alerts = -1;

  // values[i] - refit[i].
  double drift(size_t i) const { return values[i] - refit[i]; }
};

// Everything a replay collected for one symbol. Per-bar vectors all have the
// length of t_ns (rv may be empty). Ownership: plain value type.
struct SymbolHistory {
  std::string symbol;
  std::vector<int64_t> t_ns;     // bar ends, ns since the Unix epoch, nondecreasing
  std::vector<double> r;         // bar return
  std::vector<double> mu;        // mean forecast for the bar (made at t-1)
  std::vector<double> var;       // variance used to standardize the bar (made at t-1)
  std::vector<double> z;         // standardized shock
  std::vector<double> var_next;  // variance forecast for the next bar
  // Realized variance of each bar (same units as r^2), NaN where absent; empty
  // when the feed has none.
  std::vector<double> rv;
  // Confidence levels of the VaR/ES columns, e.g. {0.99, 0.975}.
  std::vector<double> risk_levels;
  // [level][bar]: BarUpdate::var_risk / es of bar t, i.e. the forecasts FOR BAR
  // t+1 (positive losses). The evaluator lags them by one bar (see top).
  std::vector<std::vector<double>> var_risk_next;
  std::vector<std::vector<double>> es_next;
  std::vector<uint32_t> ver;    // model version used for the bar
  std::vector<uint32_t> flags;  // UpdateFlag bits
  // Bar-of-session index of each bar (ClosedBar::session_bar; -1 for none);
  // empty when not recorded. The report's time-of-day table uses it.
  std::vector<int32_t> session_bar;
  // The intraday profile s(k)^2 in force at the end (seasonal_profile.h);
  // empty when the symbol had none.
  std::vector<double> seasonal_factors;
  // Innovation law of the latest model (the PIT calibration test uses it).
  InnovationLaw law;
  std::vector<ModelSwapRecord> swaps;  // in time order
  std::vector<AlertRecord> alerts;     // in time order
  std::vector<RegimePeriod> regimes;   // in time order
  // Recursive tracking at the end ([tracking] track or drive); absent when the
  // symbol was not tracked (mode off, or a model the tracker does not handle).
  std::optional<TrackedParameters> tracking;
};

// Appends one BarUpdate to *history (its risk levels must match the history's;
// the first call sets them). `rv` is the bar's realized variance, or NaN.
// InvalidArgument when the levels differ from the earlier bars'.
absl::Status AppendBarUpdate(const BarUpdate& update, double rv, SymbolHistory* history);

// ---- Options -----------------------------------------------------------------

struct EvaluationOptions {
  // Leave out bars flagged kFlagWarmup (EWMA before the first fitted model).
  // Default true: warm-up numbers are not the model under test.
  bool exclude_warmup = true;
  // Confidence level whose exceptions get the Basel traffic light. Default 0.99.
  double traffic_light_level = 0.99;
  // Window of the traffic light, in evaluated bars. Default 250 (Basel 1996).
  int traffic_light_window = 250;
  // Exceptions in the window from which the zone is yellow / red. Defaults 5 and
  // 10 (Basel Committee 1996: green 0-4, yellow 5-9, red 10+ at 250 days, 99 %).
  // Used for a window of traffic_light_window bars (daily bars, or intraday
  // bars labelled as bars); see zone_window_days for intraday bars.
  int yellow_from = 5;
  int red_from = 10;
  // Intraday bars: the zone counts every exception over the bars of the last
  // zone_window_days trading days, with thresholds scaled to that bar count by
  // the binomial rule of the published table (ZoneThresholds). A trading day is
  // a session (bar-of-session indices restart) or, without session indices, a
  // UTC calendar date. With fewer trading days than this, or 0, the zone is
  // over the last traffic_light_window bars and labelled as bars. Default 250.
  int zone_window_days = 250;
  // Cumulative binomial probabilities at which the scaled zones turn yellow and
  // red: the first count k with P(X <= k) >= the value. Defaults 0.95 and
  // 0.9999 (Basel Committee 1996, Table 1; at 250 draws and 1 % they give
  // exactly the 5 and 10 above).
  double zone_yellow_probability = 0.95;
  double zone_red_probability = 0.9999;
  // Bins of the probability-integral-transform histogram and its chi-square
  // test (>= 2). Default 20. A failed PIT test becomes a warning only with at
  // least 5 bars expected a bin.
  int pit_bins = 20;
  // Significance level below which a test p-value becomes a warning. Default 0.05.
  double warn_p_value = 0.05;
};

// ---- Results -----------------------------------------------------------------

// Mincer-Zarnowitz regression y = a + b h + u (ordinary least squares).
struct MincerZarnowitz {
  int64_t n = 0;
  double intercept = 0, slope = 0;
  // Classical OLS standard errors (homoskedastic u).
  double intercept_se = 0, slope_se = 0;
  // White (HC0) heteroskedasticity-robust standard errors. Under a correct
  // variance forecast u_t = y_t - h_t is a martingale difference whose variance
  // grows with h_t, so these are the ones to judge a = 0, b = 1 with.
  double intercept_se_robust = 0, slope_se_robust = 0;
  double r_squared = 0;
};

// Losses of variance forecasts h against a proxy y (r^2 or realized variance).
struct ForecastLoss {
  std::string target;  // "r2" or "rv"
  int64_t n = 0;       // bars used
  // QLIKE in the form L = log h + y / h (defined for y = 0 too), mean over bars.
  // It differs from Patton's (2011) normalized form y/h - log(y/h) - 1 by
  // log y + 1 per bar, which does not depend on the forecast, so rankings agree.
  double qlike = 0;
  // Patton's normalized form y/h - log(y/h) - 1 (>= 0, 0 when h = y), mean over
  // the bars with y > 0 only (the form is undefined at y = 0); n_normalized counts them.
  double qlike_normalized = 0;
  int64_t n_normalized = 0;
  double mse = 0;  // mean of (y - h)^2
  // The regression of y on h; mz.n == 0 and NaN fields when h has no spread.
  MincerZarnowitz mz;
};

// Kupiec and Christoffersen statistics of one exception sequence.
struct ExceptionTests {
  int64_t n = 0;           // bars
  int64_t exceptions = 0;  // x
  double rate = 0;         // x / n
  double tail_prob = 0;    // p = 1 - level, the expected rate
  // Kupiec (1995) proportion of failures:
  //   LR = -2 ln[(1-p)^(n-x) p^x] + 2 ln[(1-x/n)^(n-x) (x/n)^x], chi2(1).
  double lr_pof = 0, p_pof = 1;
  // Christoffersen (1998) first-order Markov transition counts over the n-1
  // consecutive pairs (n_ij: state i followed by state j, 1 = exception).
  int64_t n00 = 0, n01 = 0, n10 = 0, n11 = 0;
  // Independence LR = -2 ln L(pi) + 2 ln L(pi01, pi11), chi2(1), with
  // pi01 = n01/(n00+n01), pi11 = n11/(n10+n11), pi = (n01+n11)/(n-1).
  double lr_ind = 0, p_ind = 1;
  // Conditional coverage LR = lr_pof + lr_ind, chi2(2).
  double lr_cc = 0, p_cc = 1;
};
// Every 0 * log 0 is taken as 0, so x = 0, x = n and empty transition rows are
// well defined (the affected likelihood factors are 1).

enum class TrafficLightZone { kGreen, kYellow, kRed, kNotApplicable };
// "green", "yellow", "red", "n/a".
const char* ZoneName(TrafficLightZone zone);

// What the traffic-light window counts.
enum class ZoneBasis {
  kDailyBars,    // at most one bar a trading day: the last N bars are N days
  kTradingDays,  // intraday: all bars of the last N trading days, scaled thresholds
  kBars,         // intraday with fewer than N trading days: the last N bars, read as bars
};
// "daily_bars", "trading_days", "bars".
const char* ZoneBasisName(ZoneBasis basis);

struct TrafficLight {
  TrafficLightZone zone = TrafficLightZone::kNotApplicable;  // of the last window
  ZoneBasis basis = ZoneBasis::kDailyBars;
  int64_t window = 0;             // bars in the last window (<= the option's window)
  int64_t window_days = 0;        // trading days in the last window (kTradingDays), else 0
  int64_t window_exceptions = 0;  // exceptions in the last window
  // Thresholds applied to the last window: yellow from, red from (exceptions).
  int64_t yellow_from = 0, red_from = 0;
  // Over all full rolling windows (one per end bar, or per end day for
  // kTradingDays): how many, and the share of windows in each zone (0 when
  // there is no full window).
  int64_t n_windows = 0;
  double share_green = 0, share_yellow = 0, share_red = 0;
};

// Calibration of the shocks by the probability integral transform (Diebold,
// Gunther & Tay 1998): u_t = F(z_t) under the innovation law is i.i.d.
// uniform on (0, 1) when the model is right.
struct PitTest {
  int64_t n = 0;                // bars
  std::vector<int64_t> counts;  // histogram of u over equal bins of (0, 1)
  // Pearson chi-square of the counts against n / bins each, bins - 1 degrees
  // of freedom, and its upper-tail p-value.
  double chi2 = 0, chi2_p = 1;
  int chi2_dof = 0;
  // Kolmogorov-Smirnov distance sup |F_n(u) - u| and its p-value from the
  // limiting Kolmogorov distribution of sqrt(n) D (asymptotic; n >= 35 or so).
  double ks_d = 0, ks_p = 1;
};

// The bars of the session in up to 12 equal segments (needs bar-of-session
// indices): mean z^2 and the VaR exceptions by time of day.
struct TimeOfDaySegment {
  int first_bar = 0, last_bar = 0;  // bar-of-session indices covered
  int64_t bars = 0;                 // bars with a finite z
  double mean_z2 = 0;               // NaN when bars == 0
  double profile_s2 = 0;            // mean intraday profile factor (NaN without a profile)
  // Per risk level (SymbolHistory::risk_levels order): bars whose previous bar
  // of the same session gave a VaR limit, and the exceptions among them.
  std::vector<int64_t> eligible, exceptions;
};
struct TimeOfDay {
  int session_bars = 0;                    // K, bars a session
  bool profile = false;                    // a seasonal profile was in force at the end
  bool deseasonalized_only = false;        // statistics over the deseasonalized bars only
  std::vector<TimeOfDaySegment> segments;  // empty when not intraday
};

// Backtest of one confidence level.
struct LevelBacktest {
  double level = 0;
  ExceptionTests tests;
  // Only for EvaluationOptions::traffic_light_level; kNotApplicable otherwise,
  // and also when fewer bars than the window were evaluated.
  TrafficLight traffic_light;
  // Mean of loss / ES over the exception bars (loss = -r > VaR); about 1 when
  // the ES forecasts are right. NaN when there is no exception with ES > 0.
  double es_ratio = 0;
  int64_t es_n = 0;  // exception bars used in es_ratio
  // Every exception counted in `tests`, in bar order: the history index of
  // the bar whose loss -r exceeded the VaR limit forecast at the bar before.
  std::vector<int64_t> exception_bars;
};

struct AlertCount {
  std::string kind;
  std::string severity;
  int64_t count = 0;
};

struct SwapSummary {
  int64_t attempts = 0;  // records in SymbolHistory::swaps
  int64_t accepted = 0;
  int64_t rejected = 0;
  uint32_t last_version = 0;  // highest accepted version (0 when none)
  // Rejections by gate_reason (reason, count), sorted by reason.
  std::vector<std::pair<std::string, int64_t>> reject_reasons;
};

// Sample moments of z over the evaluated bars.
struct ShockMoments {
  int64_t n = 0;
  double mean = 0, variance = 0, skewness = 0, excess_kurtosis = 0;
  double max_abs = 0;
};

struct SymbolEvaluation {
  std::string symbol;
  int64_t bars = 0;       // all bars in the history
  int64_t evaluated = 0;  // bars that passed the exclusion rules
  int64_t warmup_bars = 0, fallback_bars = 0;
  // Against the squared return about its forecast mean, (r - mu)^2 (r^2 for a
  // zero mean), target "r2".
  ForecastLoss vs_r2;
  std::optional<ForecastLoss> vs_rv;  // against realized variance (bars with rv), "rv"
  std::vector<LevelBacktest> levels;  // one per SymbolHistory::risk_levels entry
  ShockMoments z;
  PitTest pit;                     // under SymbolHistory::law (the latest model's law)
  TimeOfDay time_of_day;           // segments empty without bar-of-session indices
  std::vector<AlertCount> alerts;  // sorted by kind, then severity
  int64_t alerts_total = 0;
  SwapSummary swaps;
  double last_var_next = 0;  // var_next of the last bar (NaN if none)
  // Plain-language findings (a red zone, a rejected test, fallback bars ...).
  std::vector<std::string> warnings;
};

// ---- Functions ---------------------------------------------------------------

// Every VaR exception of `eval` (computed from `hist`) as CSV with the header
// "symbol,time,bar,return,limit,level": time ISO-8601 UTC, bar the index in
// the history, limit the VaR (a positive loss) the bar was tested against.
// With `header` false the header line is left out (to append symbols).
std::string VarExceptionsCsv(const SymbolHistory& hist, const SymbolEvaluation& eval, bool header);

// Kupiec/Christoffersen on exceptions[t] in {0, 1}. InvalidArgument when empty,
// when an entry is not 0/1, or tail_prob is not in (0, 1).
absl::StatusOr<ExceptionTests> TestExceptions(absl::Span<const uint8_t> exceptions,
                                              double tail_prob);

// Zone of `exceptions` in one window under the options' thresholds.
TrafficLightZone ZoneOf(int64_t exceptions, const EvaluationOptions& options);

// Last-window zone and rolling-window shares of an exception sequence, over
// windows of options.traffic_light_window bars with the fixed thresholds
// (basis kDailyBars). InvalidArgument on an empty sequence or a window < 1.
absl::StatusOr<TrafficLight> EvaluateTrafficLight(absl::Span<const uint8_t> exceptions,
                                                  const EvaluationOptions& options);

// Zone thresholds for `bars` draws at tail probability `tail_prob`: yellow
// from the first k with P(X <= k) >= options.zone_yellow_probability, red from
// the first k with P(X <= k) >= options.zone_red_probability, X ~ Binomial(bars,
// tail_prob). REQUIRES: bars >= 1, 0 < tail_prob < 1.
std::pair<int64_t, int64_t> ZoneThresholds(int64_t bars, double tail_prob,
                                           const EvaluationOptions& options);

// The zone over the bars of the last options.zone_window_days trading days:
// day[i] is the trading-day number of exceptions[i] (nondecreasing). Rolling
// windows end at each day. Basis kTradingDays; zone n/a with fewer days.
// InvalidArgument on empty or mismatched input or zone_window_days < 1.
absl::StatusOr<TrafficLight> EvaluateTrafficLightByDays(absl::Span<const uint8_t> exceptions,
                                                        absl::Span<const int64_t> day,
                                                        double tail_prob,
                                                        const EvaluationOptions& options);

// Trading-day number of every bar of `history` (0 for the first bar): a new
// day where the bar-of-session index restarts (both bars have one), else where
// the UTC calendar date changes.
std::vector<int64_t> TradingDays(const SymbolHistory& history);

// PIT histogram and uniformity tests of `z` under `law`. InvalidArgument when
// no z is finite or bins < 2. Non-finite z (and cdf values) are skipped.
absl::StatusOr<PitTest> TestPit(absl::Span<const double> z, const InnovationLaw& law, int bins);

// Upper tail of the limiting Kolmogorov distribution, P(K > x) =
// 2 sum_{k>=1} (-1)^(k-1) exp(-2 k^2 x^2); 1 for x <= 0.
double KolmogorovSurvival(double x);

// OLS of y on h with both standard errors. InvalidArgument when the lengths
// differ, n < 3, a value is not finite, or h has no spread.
absl::StatusOr<MincerZarnowitz> MincerZarnowitzRegression(absl::Span<const double> y,
                                                          absl::Span<const double> h);

// QLIKE, MSE and Mincer-Zarnowitz of forecasts h against proxy y (y >= 0,
// h > 0, finite). InvalidArgument on mismatched lengths, fewer than 3 bars or
// a value out of range.
absl::StatusOr<ForecastLoss> EvaluateVarianceForecasts(absl::Span<const double> y,
                                                       absl::Span<const double> h,
                                                       const std::string& target);

// Indices of the bars that enter the statistics, in order (the exclusion rules
// at the top of this file). REQUIRES: the per-bar vectors of `history` have
// equal lengths (EvaluateSymbol checks this; call it first).
std::vector<int64_t> UsableBars(const SymbolHistory& history, const EvaluationOptions& options);

// Full evaluation of one symbol. InvalidArgument (naming the symbol and the
// field) when the per-bar vectors have different lengths, the history is
// empty, timestamps decrease, a risk level is outside (0.5, 1), or fewer than 3
// bars survive the exclusion rules.
absl::StatusOr<SymbolEvaluation> EvaluateSymbol(const SymbolHistory& history,
                                                const EvaluationOptions& options);

// chi-square upper tail P(X > x) with `dof` degrees of freedom (Boost.Math);
// 1 for x <= 0.
double ChiSquaredSurvival(double x, double dof);

}  // namespace aftershock

#endif  // AFTERSHOCK_EVALUATION_H_
