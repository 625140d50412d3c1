// The per-bar streaming filter (PRODUCT.md C4/C6): a compiled, immutable
// FilterModel per parameter version and a small fixed-size FilterState per
// symbol. FilterStep() turns one bar return into one BarUpdate with no
// allocation, no locks and no I/O.
//
// Timing convention, per bar t with return r_t:
//   mu  = mean forecast made at t-1;     eps = r_t - mu
//   var = sigma2_t made at t-1;          z   = eps / sqrt(var)
//   then the recursions of likelihood.h advance to var_next = sigma2_{t+1} and
//   the next mean forecast; var_h, VaR, ES and scale refer to the bars ahead.
// The arithmetic is the same, in the same order, as the likelihood's
// recursion, so a filtered series equals the estimator's conditional variances
// given the same starting state.
//
// Thread-safety: FilterModel is immutable and may be shared across threads;
// a FilterState belongs to one thread (the ingest thread).
#ifndef AFTERSHOCK_ONLINE_FILTER_H_
#define AFTERSHOCK_ONLINE_FILTER_H_

#include <cstdint>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/bar_update.h"
#include "aftershock/forecast.h"
#include "aftershock/innovations.h"
#include "aftershock/model_params.h"
#include "aftershock/seasonal_profile.h"
#include "aftershock/state_codec.h"

namespace aftershock {

// What every update reports besides z and the variances.
struct OutputOptions {
  // Horizons (bars) of var_h, the variance of the return summed over h bars.
  // At most kMaxHorizons entries, each in 1..kMaxHorizonBars. Default {1, 5, 20}.
  std::vector<int> horizons = {1, 5, 20};
  // Confidence levels of VaR and ES (next bar), each in (0.5, 1). At most
  // kMaxRiskLevels. Default {0.99, 0.975}.
  std::vector<double> risk_levels = {0.99, 0.975};
  // Bars per year for annualization (252 for daily bars). Default 252.
  double periods_per_year = 252.0;
  // Annualized volatility target of the position-sizing scale, in the units of
  // the returns (0.10 = 10 % for fractional returns). Default 0.10.
  double target_vol_ann = 0.10;
  // Upper cap of the scale. Default 3.
  double scale_cap = 3.0;
};

// Longest horizon the filter forecasts (bars).
inline constexpr int kMaxHorizonBars = 512;

struct FilterState;

// Compiled coefficients of one model version. Cheap to copy (fixed size).
class FilterModel {
 public:
  FilterModel() = default;  // empty: REQUIRES Create/Ewma before use

  // REQUIRES nothing; InvalidArgument when params fail CheckConstraints or the
  // output options are out of range.
  static absl::StatusOr<FilterModel> Create(const ModelParams& params,
                                            const OutputOptions& outputs, uint32_t version);
  // The EWMA warm-up/fallback model (zero mean, fixed decay, normal law).
  static absl::StatusOr<FilterModel> Ewma(double lambda, const OutputOptions& outputs,
                                          uint32_t version);

  const ModelParams& params() const { return params_; }
  uint32_t version() const { return version_; }
  bool is_ewma() const { return params_.spec.variance == VarianceKind::kEwma; }
  // sigma2 the state starts from: the unconditional variance (not for EWMA).
  double unconditional_variance() const { return params_.UnconditionalVariance(); }

  // Drive mode of recursive tracking (recursive_tracker.h): replaces the
  // variance coefficients of a GARCH(1,1) or GJR(1,1,1) model in place: the
  // compiled coefficients, params().values, persistence and horizon table
  // (gamma is ignored for GARCH). Hot path: no allocation.
  // REQUIRES: RecursiveTracker::Supports(params().spec); the new values
  // satisfy CheckConstraints (the tracker's projection guarantees it).
  void RetuneVariance(double omega, double alpha, double gamma, double beta);
  // Makes room for n parameter values, so that copying a model of at most n
  // parameters into this one later does not allocate.
  void ReserveParams(size_t n) { params_.values.reserve(n); }

 private:
  friend void FilterStep(const FilterModel&, FilterState*, double, BarUpdate*);
  friend void InitFilterState(const FilterModel&, double, FilterState*);
  friend void AdvanceState(const FilterModel&, FilterState*, double);
  friend void SeasonalizeUpdate(const FilterModel&, const FilterState&, double, double,
                                const SeasonalAhead&, BarUpdate*);
  friend class FilterBank;  // copies the compiled coefficients (filter_bank.h)

  // Consumes r: shifts the lags, advances the variance and mean recursions and
  // returns eps. Leaves sd_next stale (callers set it).
  double Advance(FilterState* s, double r) const;

  ModelParams params_;  // owns a small vector; never touched on the hot path
  uint32_t version_ = 0;
  MeanKind mean_ = MeanKind::kZero;
  VarianceKind variance_ = VarianceKind::kEwma;
  int np_ = 0, nq_ = 0, na_ = 0, no_ = 0, nb_ = 0;
  double mu_ = 0;
  double ar_[kMaxArmaOrder] = {};
  double ma_[kMaxArmaOrder] = {};
  double omega_ = 0, lambda_ = 0;
  double alpha_[kMaxArchOrder] = {};
  double gamma_[kMaxGarchOrder] = {};
  double beta_[kMaxGarchOrder] = {};
  double sqrt_ppy_ = 0;       // sqrt(periods_per_year)
  double scale_num_ = 0;      // target_vol_ann / sqrt(periods_per_year)
  double scale_cap_ = 0;
  int max_horizon_ = 0;       // largest horizon (bars)
  double phi_ = 1;            // persistence (closed forms; >= 1: flat forecast)
  double sbar2_ = 0;          // unconditional variance (closed forms, phi < 1)
  HorizonTable horizons_;
  RiskQuantiles risk_;
};

// Per-symbol recursion state. Plain fixed-size value.
struct FilterState {
  double r_hist[kMaxArmaOrder] = {};    // r_{t-1}, r_{t-2}, ... (most recent first)
  double eps_hist[kMaxArmaOrder] = {};  // eps_{t-1}, ...
  VarianceState var;                    // eps2/neg_eps2/sigma2 lags and next_variance
  double sd_next = 0;                   // sqrt(var.next_variance)
  double mu_next = 0;                   // mean forecast for the next bar
  int64_t bars = 0;                     // bars filtered since InitFilterState
};

// Checkpoint encoding of a filter state (every lag, exact bits).
void SaveFilterState(const FilterState& state, StateWriter* w);
// Reads what SaveFilterState wrote; non-finite values or a negative variance
// set the reader's error naming `what`.
FilterState RestoreFilterState(StateReader* r, absl::string_view what);

// Starts a state at `variance` (the unconditional variance when given <= 0 and
// the model has one): every variance and squared-residual lag equals it (the
// negative-part lags half of it), residual lags are 0, return lags equal the
// unconditional mean; the first bar's variance is the recursion applied to
// those lags (the likelihood's presample rule), which for the unconditional
// variance is that variance again.
// REQUIRES: model created; variance > 0 for EWMA.
void InitFilterState(const FilterModel& model, double variance, FilterState* state);

// One bar: fills *out (everything but symbol and t_ns, which the caller owns;
// flags are ORed, not cleared) and advances *state. Hot path: no allocation.
void FilterStep(const FilterModel& model, FilterState* state, double r, BarUpdate* out);

// Advances *state by one bar without producing outputs (for re-running a window
// tail after a parameter swap).
void AdvanceState(const FilterModel& model, FilterState* state, double r);

// Intraday seasonality (seasonal_profile.h): FilterStep ran on the
// deseasonalized return x = r / s(k) and wrote *out in x units; this puts the
// outputs back in return units: r = the raw return, mu and eps times s(k),
// var = s(k)^2 h (z unchanged, = eps / sqrt(var)), var_next = s(k+1)^2 h_next,
// var_h = sum_{j=1..H} s(k+j)^2 E h_{T+j} (the h-step forecasts weighted by the
// factors of the bars ahead), VaR/ES/vol_ann/scale from s(k+1)^2 h_next.
// s2_now = s(k)^2; ahead.at(j - 1) = s(k+j)^2 (SeasonalProfile::ahead(k)).
// *state is the state after the step. Hot path: no allocation; cost one
// multiply-add per bar of the largest horizon.
void SeasonalizeUpdate(const FilterModel& model, const FilterState& state, double r, double s2_now,
                       const SeasonalAhead& ahead, BarUpdate* out);

// Offline run: InitFilterState(model, initial_variance) then FilterStep over
// `returns`. Used by tests and replay tooling as the reference of the stream.
std::vector<BarUpdate> FilterSeries(const FilterModel& model, double initial_variance,
                                    absl::Span<const double> returns);

}  // namespace aftershock

#endif  // AFTERSHOCK_ONLINE_FILTER_H_
