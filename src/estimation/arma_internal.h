// Test hook of the ARMA module: the exact filter run as interleaved lanes (the
// Levenberg-Marquardt Jacobian's passes) or one parameter set at a time, so
// tests can check that both give the same values to the bit.
// Not part of the public API.
//
// Thread-safety: pure function.
#ifndef AFTERSHOCK_ESTIMATION_ARMA_INTERNAL_H_
#define AFTERSHOCK_ESTIMATION_ARMA_INTERNAL_H_

#include <vector>

#include "absl/status/status.h"
#include "absl/types/span.h"
#include "aftershock/arma.h"

namespace aftershock::internal {

// One parameter set's filter output at sigma2 = 1.
struct ArmaLaneOutput {
  double sum_log_f = 0.0;              // sum of log F_t
  double sum_sq = 0.0;                 // sum of v_t^2 / F_t
  std::vector<double> residuals;       // v_t
  std::vector<double> variance_ratio;  // F_t
};

// Filters every set of `sets` over y, all in one batch of interleaved lanes
// (batch = true) or one at a time (false). REQUIRES: the sets share p and q
// and are valid (stationary AR, invertible MA). InvalidArgument otherwise,
// Internal when a filter fails.
absl::Status ArmaFilterLanesForTest(absl::Span<const double> y, const std::vector<ArmaParams>& sets,
                                    bool batch, std::vector<ArmaLaneOutput>* out);

}  // namespace aftershock::internal

#endif  // AFTERSHOCK_ESTIMATION_ARMA_INTERNAL_H_
