// Distribution functions for p-values and the residual diagnostics of the
// identification pipeline (PRODUCT.md C3): ACF, PACF, Ljung-Box, McLeod-Li,
// Engle's ARCH-LM test, Jarque-Bera and the Engle-Ng sign-bias test.
//
// Conventions: the autocorrelation at lag k is the biased estimate
//   r_k = sum_{t=k}^{n-1} (x_t - xbar)(x_{t-k} - xbar) / sum_t (x_t - xbar)^2,
// so r_0 = 1; returned vectors hold lags 0..max_lag.
//
// Input checks are shared by every test: a series must be finite, have enough
// observations and non-zero variance, and lags must lie in their stated range;
// otherwise InvalidArgument with a message naming the problem.
//
// Thread-safety: free functions without shared state; safe to call concurrently.
#ifndef AFTERSHOCK_STATS_H_
#define AFTERSHOCK_STATS_H_

#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/types/span.h"

namespace aftershock {

// ---- Distribution functions (Boost.Math). Invalid arguments give NaN. -------

double NormalCdf(double x);
double NormalQuantile(double p);                     // REQUIRES: 0 < p < 1
double StudentTCdf(double x, double df);             // REQUIRES: df > 0
double ChiSquareSurvival(double x, double df);       // P(X > x); REQUIRES: df > 0
double ChiSquareQuantile(double p, double df);       // x with P(X <= x) = p; REQUIRES: 0 < p < 1
double FSurvival(double x, double df1, double df2);  // P(F > x)

// ---- Input validation used by every diagnostic --------------------------------

// OK when x has at least min_obs entries, all finite, and (if require_variance)
// is not constant. `what` names the series in messages, e.g. "residual series".
absl::Status ValidateSeries(absl::Span<const double> x, int min_obs, bool require_variance,
                            const char* what = "series");

// ---- Autocorrelation ------------------------------------------------------------

// Biased sample autocorrelations r_0..r_max_lag. REQUIRES: 1 <= max_lag < n.
absl::StatusOr<std::vector<double>> Autocorrelation(absl::Span<const double> x, int max_lag);

// Partial autocorrelations phi_00 = 1, phi_11, ..., phi_{max_lag,max_lag} by the
// Durbin-Levinson recursion on the biased autocorrelations.
// REQUIRES: 1 <= max_lag < n.
absl::StatusOr<std::vector<double>> PartialAutocorrelation(absl::Span<const double> x, int max_lag);

// ---- Portmanteau tests -----------------------------------------------------------

struct PortmanteauResult {
  int lags = 0;            // h: autocorrelations summed
  int model_dof = 0;       // fitted parameters subtracted from the degrees of freedom
  double statistic = 0.0;  // Q = n (n + 2) sum_{k=1}^h r_k^2 / (n - k)
  int df = 0;              // h - model_dof
  double p_value = 0.0;    // chi-square(df) survival of Q
};

// Ljung-Box Q on x. model_dof is the number of fitted ARMA parameters (p + q)
// when x are model residuals. REQUIRES: 1 <= lags < n, 0 <= model_dof < lags.
absl::StatusOr<PortmanteauResult> LjungBox(absl::Span<const double> x, int lags, int model_dof = 0);

// McLeod-Li: Ljung-Box on x_t^2 (the squares are demeaned by the autocorrelation,
// x itself is not). Same requirements as LjungBox.
absl::StatusOr<PortmanteauResult> McLeodLi(absl::Span<const double> x, int lags, int model_dof = 0);

// ---- Engle's ARCH-LM test ---------------------------------------------------------

struct ArchLmResult {
  int lags = 0;               // m
  int nobs = 0;               // n - m regression rows
  double r_squared = 0.0;     // of e_t^2 on 1, e_{t-1}^2..e_{t-m}^2
  double lm_statistic = 0.0;  // (nobs - ddof) * R^2
  double lm_p_value = 0.0;    // chi-square(m) survival
  double f_statistic = 0.0;   // (R^2 / m) / ((1 - R^2) / (nobs - m - 1))
  int f_df1 = 0;              // m
  int f_df2 = 0;              // nobs - m - 1
  double f_p_value = 0.0;     // F(m, nobs - m - 1) survival
};

// e are residuals (not demeaned here; pass demeaned data if the mean is not zero).
// ddof reduces the LM multiplier for residuals of an estimated model.
// REQUIRES: 1 <= lags, n >= 2 * lags + 2 (the regression on m + 1 columns needs
// spare rows), e^2 not constant, 0 <= ddof < n - lags.
absl::StatusOr<ArchLmResult> ArchLm(absl::Span<const double> e, int lags, int ddof = 0);

// ---- Normality ----------------------------------------------------------------------

struct JarqueBeraResult {
  double statistic = 0.0;  // n/6 (S^2 + (K - 3)^2 / 4)
  double p_value = 0.0;    // chi-square(2) survival
  double skewness = 0.0;   // S, moment (biased) estimate
  double kurtosis = 0.0;   // K, moment (biased) estimate, 3 for the normal (not excess)
};

// REQUIRES: n >= 3 and non-constant x.
absl::StatusOr<JarqueBeraResult> JarqueBera(absl::Span<const double> x);

// ---- Engle-Ng sign-bias test ------------------------------------------------------------

struct SignBiasTerm {
  double coefficient = 0.0;
  double t_statistic = 0.0;
  double p_value = 0.0;  // two-sided, Student-t with nobs - 4 degrees of freedom
};

struct SignBiasResult {
  int nobs = 0;                  // n - 1 regression rows
  SignBiasTerm sign;             // S^-_{t-1}
  SignBiasTerm negative_size;    // S^-_{t-1} z_{t-1}
  SignBiasTerm positive_size;    // S^+_{t-1} z_{t-1}
  double joint_statistic = 0.0;  // nobs * R^2
  double joint_p_value = 0.0;    // chi-square(3) survival
};

// z are standardized residuals; regresses z_t^2 on a constant, S^-_{t-1},
// S^-_{t-1} z_{t-1} and S^+_{t-1} z_{t-1}, where S^-_{t} = 1{z_t < 0} and
// S^+ = 1 - S^-. REQUIRES: n >= 10, both signs present among z_0..z_{n-2}.
absl::StatusOr<SignBiasResult> SignBias(absl::Span<const double> z);

}  // namespace aftershock

#endif  // AFTERSHOCK_STATS_H_
