// Multi-step conditional-variance forecasts of a fitted model from the state of
// its variance recursion at the end of the sample, sums of them over a horizon
// (the variance of an h-bar return), annualization and shock half-life.
//
// Time convention: bars 1..T are observed; the recursion has already produced
// sigma2_{T+1}, the variance of the next bar, which is known at time T. The
// h-step forecast is E_T[sigma2_{T+h}] (= E_T[eps^2_{T+h}]), h = 1, 2, ...
//
// Exact expected-value recursion (any order), for h >= 2:
//   E sigma2_{T+h} = omega + sum_i alpha_i E eps2_{T+h-i} + sum_k gamma_k E neg2_{T+h-k}
//                    + sum_j beta_j E sigma2_{T+h-j},
// where a lag that falls inside the sample (T+h-i <= T) takes its observed value
// from VarianceState, and a future lag uses E eps2_{T+k} = E sigma2_{T+k} and
// E neg2_{T+k} = E sigma2_{T+k} / 2 (neg2 = 1{eps<0} eps^2; exact for any
// innovation law symmetric about 0, i.e. both laws of innovations.h).
//
// "(1,1)-type" models: every lag is 1 (ARCH(1), GARCH(1,1), GARCH(1,0), GJR-GARCH(1,1),
// GJR(1,1,0)), plus constant variance (phi = 0) and EWMA (phi = 1). For them, with
// phi = persistence and s2 = sigma2_{T+1}, sbar2 = omega / (1 - phi):
//   E sigma2_{T+h}              = sbar2 + phi^(h-1) (s2 - sbar2),
//   sum_{k=1..h} E sigma2_{T+k} = h sbar2 + (s2 - sbar2) (1 - phi^h) / (1 - phi),
// and EWMA is flat: every E sigma2_{T+h} = s2 (sum = h s2).
//
// All functions are pure and thread-safe.
#ifndef AFTERSHOCK_FORECAST_H_
#define AFTERSHOCK_FORECAST_H_

#include <array>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/limits.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"

namespace aftershock {

// End-of-sample state of the variance recursion. Arrays are most recent first:
// eps2[0] = eps_T^2, eps2[1] = eps_{T-1}^2, ...; sigma2[0] = sigma2_T, ...
// Only the first (order) entries a model uses are read; the rest are ignored.
// Plain value type (fixed size, no allocation).
struct VarianceState {
  double next_variance = 0.0;                     // sigma2_{T+1}, per-bar variance units
  std::array<double, kMaxArchOrder> eps2{};       // eps_{T-i}^2, i = 0..arch_order-1
  std::array<double, kMaxGarchOrder> neg_eps2{};  // 1{eps_{T-i}<0} eps_{T-i}^2, i < asym_order
  std::array<double, kMaxGarchOrder> sigma2{};    // sigma2_{T-i}, i = 0..garch_order-1
};

// Builds the state from in-sample residuals eps_1..eps_T and their conditional
// variances sigma2_1..sigma2_T (same length T), computing sigma2_{T+1} with the
// model's recursion. REQUIRES: params pass CheckConstraints (EWMA: 0<lambda<1);
// InvalidArgument when T is shorter than the longest lag the model uses, or the
// lengths differ.
absl::StatusOr<VarianceState> StateFromHistory(const ModelParams& params,
                                               absl::Span<const double> eps,
                                               absl::Span<const double> sigma2);

// One step of the variance recursion: sigma2_{t+1} from the lags in `state`
// (interpreted with T = t, ignoring state.next_variance). Used by
// StateFromHistory; exposed so simulators and tests share one definition.
double NextVariance(const ModelParams& params, const VarianceState& state);

// True when the model has the closed forms above (see "(1,1)-type").
bool HasClosedFormForecast(const ModelSpec& spec);

// Exact forecasts by the expected-value recursion: out[h-1] = E sigma2_{T+h} for
// h = 1..out.size(). Works for every variance kind (EWMA: flat; constant: omega).
// Allocation-free. REQUIRES: params pass CheckConstraints.
void ForecastVariances(const ModelParams& params, const VarianceState& state,
                       absl::Span<double> out);
// Convenience: returns the first `horizon` forecasts.
std::vector<double> ForecastVariances(const ModelParams& params, const VarianceState& state,
                                      int horizon);

// Sum of the first `horizon` forecasts (variance of the horizon-bar return when
// the mean is known), by the exact recursion. REQUIRES: horizon >= 1.
double SummedVarianceForecast(const ModelParams& params, const VarianceState& state, int horizon);

// Closed forms for (1,1)-type models, given persistence phi, the unconditional
// variance sbar2 (ignored when phi >= 1) and s2 = sigma2_{T+1}. phi >= 1 gives the
// flat (EWMA / integrated) forecast. REQUIRES: h >= 1, phi >= 0.
double ClosedFormVariance(double phi, double sbar2, double s2, int h);
double ClosedFormSummedVariance(double phi, double sbar2, double s2, int h);

// Annualization: per-bar variance times periods_per_year (e.g. 252 daily bars;
// 252 * 78 five-minute bars of a 6.5 h session), and its square root.
// REQUIRES: periods_per_year > 0, variance >= 0.
double AnnualizedVariance(double variance_per_bar, double periods_per_year);
double AnnualizedVolatility(double variance_per_bar, double periods_per_year);

// Bars until the effect of a variance shock on the forecast halves:
// log(0.5) / log(phi). 0 for phi <= 0, +infinity for phi >= 1.
double ShockHalfLife(double persistence);

// ---- HorizonTable -------------------------------------------------------------
// Precomputed per-horizon coefficients so that, for a (1,1)-type model,
//   E sigma2_{T+h}            = point_a(i) + point_b(i) * s2,
//   sum_{k<=h} E sigma2_{T+k} = sum_a(i)   + sum_b(i)   * s2,     s2 = sigma2_{T+1},
// one multiply-add per horizon on the hot path. For other models (higher
// orders) the forecast depends on the whole VarianceState, closed() is false and
// the filter must call ForecastVariances / SummedVarianceForecast instead.
// Thread-safety: immutable after Create; copyable fixed-size value.

class HorizonTable {
 public:
  // Empty (size() == 0, closed() false), for default-constructed per-symbol state.
  HorizonTable() = default;

  // horizons: 1..kMaxHorizons entries, each >= 1 (in bars). InvalidArgument
  // otherwise, or when params fail CheckConstraints.
  static absl::StatusOr<HorizonTable> Create(const ModelParams& params,
                                             absl::Span<const int> horizons);

  // Recomputes the closed-form coefficients for new persistence and
  // unconditional variance (drive mode of recursive tracking); no allocation.
  // Powers by repeated squaring and (1 - phi^h) / (1 - phi): equal to Create's
  // coefficients to about 1e-12 relative, not bit for bit.
  // REQUIRES: closed(), the table was created for a non-EWMA model, phi < 1.
  void Retune(double phi, double sbar2);

  bool closed() const { return closed_; }
  int size() const { return size_; }
  int horizon(int i) const { return horizon_[i]; }
  double point_a(int i) const { return point_a_[i]; }
  double point_b(int i) const { return point_b_[i]; }
  double sum_a(int i) const { return sum_a_[i]; }
  double sum_b(int i) const { return sum_b_[i]; }

  // REQUIRES: closed() and 0 <= i < size().
  double PointVariance(int i, double next_variance) const {
    return point_a_[i] + point_b_[i] * next_variance;
  }
  double SummedVariance(int i, double next_variance) const {
    return sum_a_[i] + sum_b_[i] * next_variance;
  }

 private:
  void SetClosed(int i, double phi, double sbar2);  // coefficients of horizon i

  bool closed_ = false;
  int size_ = 0;
  std::array<int, kMaxHorizons> horizon_{};
  std::array<double, kMaxHorizons> point_a_{};
  std::array<double, kMaxHorizons> point_b_{};
  std::array<double, kMaxHorizons> sum_a_{};
  std::array<double, kMaxHorizons> sum_b_{};
};

}  // namespace aftershock

#endif  // AFTERSHOCK_FORECAST_H_
