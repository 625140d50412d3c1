// Ordinary least squares by a column-pivoted Householder QR decomposition.
//
// The design matrix is passed row-major as a flat vector (nobs rows of
// num_cols entries). With an intercept the columns are centred before the
// decomposition, which keeps badly scaled problems such as the NIST StRD
// Longley data accurate to about ten digits; the intercept and its standard
// error are then recovered exactly from the centred fit.
//
// Thread-safety: free functions without shared state; safe to call concurrently.
#ifndef AFTERSHOCK_LEAST_SQUARES_H_
#define AFTERSHOCK_LEAST_SQUARES_H_

#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"

namespace aftershock {

struct OlsOptions {
  // Prepend a constant regressor; its coefficient is reported first. Default true.
  bool add_intercept = true;
  // A column whose pivot in the QR of the (centred, unit-norm) design is below
  // this fraction of the largest pivot makes the design rank deficient, which is
  // an error. Default 1e-10.
  double rank_tolerance = 1e-10;
};

struct OlsResult {
  int nobs = 0;        // observations used
  int num_params = 0;  // k: regressors including the intercept when added
  // Coefficients, intercept first when OlsOptions::add_intercept; k entries.
  std::vector<double> coefficients;
  // Conventional standard errors sqrt(diag(s^2 (X'X)^-1)), s^2 = RSS/(n-k); k entries.
  std::vector<double> std_errors;
  // t statistics coefficient / standard error; k entries.
  std::vector<double> t_statistics;
  std::vector<double> residuals;  // y - X b; nobs entries
  double rss = 0.0;               // residual sum of squares
  double residual_sd = 0.0;       // sqrt(RSS / (n - k))
  // Coefficient of determination: centred (1 - RSS/TSS about the mean) with an
  // intercept, uncentred (1 - RSS/sum y^2) without one.
  double r_squared = 0.0;
};

// Regresses y on the columns of x.
// REQUIRES: x.size() == y.size() * num_cols, num_cols >= 0 (0 only with an intercept).
// Errors (InvalidArgument): sizes inconsistent, non-finite entries, fewer
// observations than k + 1, or a rank-deficient design ("design matrix is rank
// deficient: rank r of k columns").
absl::StatusOr<OlsResult> OrdinaryLeastSquares(absl::Span<const double> y,
                                               absl::Span<const double> x, int num_cols,
                                               const OlsOptions& options = OlsOptions());

}  // namespace aftershock

#endif  // AFTERSHOCK_LEAST_SQUARES_H_
