// ModelParams: one immutable parameter set for a ModelSpec, with the derived
// quantities every consumer needs (persistence, unconditional variance) and the
// constraint check of PRODUCT.md C2.
//
// Thread-safety: plain value type; safe to share read-only across threads.
#ifndef AFTERSHOCK_MODEL_PARAMS_H_
#define AFTERSHOCK_MODEL_PARAMS_H_

#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/model_spec.h"
#include "aftershock/state_codec.h"

namespace aftershock {

// Bounds used by the constraint check and by the estimator.
inline constexpr double kMinOmega = 1e-12;        // relative to the data variance when fitting
inline constexpr double kMaxPersistence = 0.99999; // persistence must stay strictly below 1
inline constexpr double kMinNu = 2.05;             // nu > 2 for a finite variance
inline constexpr double kMaxNu = 500.0;

struct ModelParams {
  ModelSpec spec;
  std::vector<double> values;  // spec.NumParams() entries, layout of model_spec.h

  // Named accessors; REQUIRES: the block exists for spec (e.g. mu() needs a mean with mu).
  double mu() const;
  double ar(int i) const;  // i in [0, ar_order)
  double ma(int i) const;  // i in [0, ma_order)
  double omega() const;    // REQUIRES: variance is not EWMA
  double alpha(int i) const;
  double gamma(int i) const;
  double beta(int i) const;
  double lambda() const;   // REQUIRES: variance == kEwma
  double nu() const;       // REQUIRES: innovations == kStudentT

  // Sum of alpha + gamma/2 + beta (the gamma term is halved because a symmetric
  // innovation is negative half the time). 1 for EWMA, 0 for constant variance.
  double Persistence() const;

  // omega / (1 - persistence); +inf when persistence >= 1 (EWMA).
  double UnconditionalVariance() const;

  // Value of the named parameter, or NotFound.
  absl::StatusOr<double> Get(absl::string_view name) const;

  // OK when values has the right size, all values are finite and the
  // constraints hold: omega > 0; alpha, gamma, beta >= 0; persistence < 1
  // (strictly, <= kMaxPersistence); 2 < nu <= kMaxNu; 0 < lambda < 1; the AR
  // part stationary is NOT required here (the estimator keeps it inside by a
  // bound on the sum of |ar|).
  absl::Status CheckConstraints() const;

  // Builds params for spec from a name -> value list; every parameter of the
  // spec must be given exactly once and no other name may appear.
  static absl::StatusOr<ModelParams> FromNamed(
      const ModelSpec& spec, const std::vector<std::pair<std::string, double>>& named);
};

// Checkpoint encoding (state_codec.h) of a parameter set: the spec's kinds and
// orders, then the values' exact bit patterns.
void SaveModelParams(const ModelParams& params, StateWriter* w);
// Reads what SaveModelParams wrote. A spec that fails ModelSpec::Validate or
// values that fail CheckConstraints set the reader's error (DataLoss naming
// `what`); the result is then meaningless. Check r->ok() after the record.
ModelParams RestoreModelParams(StateReader* r, absl::string_view what);

}  // namespace aftershock

#endif  // AFTERSHOCK_MODEL_PARAMS_H_
