// ModelSpec: which mean equation, variance equation and innovation law a model
// uses, and the canonical order and names of its parameters.
//
// Order conventions (stated once, used everywhere):
//   ARMA(p,q):        p autoregressive terms ar1..arp, q moving-average terms ma1..maq.
//   ARCH(m):          m squared-residual terms alpha1..alpham.
//   GARCH(p,q):       p ARCH terms alpha1..alphap, q lagged-variance terms beta1..betaq.
//   GJR-GARCH(p,o,q): as GARCH(p,q) plus o asymmetric terms gamma1..gammao
//                     (gamma_i multiplies 1{eps_{t-i} < 0} * eps_{t-i}^2).
//   EWMA(lambda):     sigma2_t = lambda * sigma2_{t-1} + (1 - lambda) * eps_{t-1}^2;
//                     lambda is fixed, never estimated.
//   constant:         sigma2_t = omega (no ARCH effect).
//
// Parameter vector layout (ParamNames() returns the names in this order):
//   [mu] [ar1..arp] [ma1..maq] | omega [alpha1..] [gamma1..] [beta1..] | lambda (EWMA) | [nu]
// `mu` is present for the constant and ARMA means, absent for the zero mean.
//
// Thread-safety: plain value type; safe to copy and share read-only.
#ifndef AFTERSHOCK_MODEL_SPEC_H_
#define AFTERSHOCK_MODEL_SPEC_H_

#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"

namespace aftershock {

// Largest supported orders (PRODUCT.md C1).
inline constexpr int kMaxArmaOrder = 5;
inline constexpr int kMaxArchOrder = 20;
inline constexpr int kMaxGarchOrder = 5;

enum class MeanKind { kZero, kConstant, kArma };
enum class VarianceKind { kConstant, kArch, kGarch, kGjr, kEwma };
enum class Innovations { kNormal, kStudentT };

// Presample rule for the variance recursion (PRODUCT.md C2):
//   kMeanSquare: every presample sigma2 and eps^2 equals the mean of the squared
//                residuals of the sample (the published benchmark's rule);
//   kBackcast:   both equal an exponentially weighted average of the first
//                squared residuals, weight kBackcastDecay^j for j = 0..kBackcastSpan-1.
enum class Presample { kMeanSquare, kBackcast };
inline constexpr double kBackcastDecay = 0.94;
inline constexpr int kBackcastSpan = 75;

struct ModelSpec {
  MeanKind mean = MeanKind::kConstant;
  int ar_order = 0;  // p of ARMA(p,q); 0 unless mean == kArma.
  int ma_order = 0;  // q of ARMA(p,q); 0 unless mean == kArma.

  VarianceKind variance = VarianceKind::kGarch;
  int arch_order = 1;   // alpha terms (m of ARCH(m), p of GARCH(p,q) and GJR(p,o,q)).
  int asym_order = 0;   // gamma terms (o of GJR(p,o,q)); 0 unless variance == kGjr.
  int garch_order = 1;  // beta terms (q of GARCH(p,q) and GJR(p,o,q)).

  Innovations innovations = Innovations::kNormal;

  // Number of entries of each block of the parameter vector.
  int NumMeanParams() const;
  int NumVarianceParams() const;  // includes lambda for EWMA
  int NumDistParams() const;      // 1 for Student-t (nu), else 0
  int NumParams() const { return NumMeanParams() + NumVarianceParams() + NumDistParams(); }

  // Index of the first variance parameter (omega, or lambda for EWMA) and of nu.
  int VarianceOffset() const { return NumMeanParams(); }
  int DistOffset() const { return NumMeanParams() + NumVarianceParams(); }

  // Observations consumed before the first likelihood term (the AR order:
  // the ARMA recursion conditions on the first p returns).
  int ConditioningObs() const { return ar_order; }

  // Parameter names in vector order, e.g. {"mu","omega","alpha1","beta1"}.
  std::vector<std::string> ParamNames() const;

  // Short human label, e.g. "ARMA(1,1)-GJR(1,1,1)-t".
  std::string Label() const;

  // OK if the orders are consistent with the kinds and within the limits.
  absl::Status Validate() const;

  bool operator==(const ModelSpec& o) const;
  bool operator!=(const ModelSpec& o) const { return !(*this == o); }
};

// Names used by the CLI, the configuration and JSON output.
absl::string_view MeanKindName(MeanKind k);          // "zero" | "constant" | "arma"
absl::string_view VarianceKindName(VarianceKind k);  // "constant"|"arch"|"garch"|"gjr"|"ewma"
absl::string_view InnovationsName(Innovations k);    // "normal" | "t"
absl::string_view PresampleName(Presample p);        // "mean-square" | "backcast"

absl::StatusOr<MeanKind> ParseMeanKind(absl::string_view s);
absl::StatusOr<VarianceKind> ParseVarianceKind(absl::string_view s);
absl::StatusOr<Innovations> ParseInnovations(absl::string_view s);
absl::StatusOr<Presample> ParsePresample(absl::string_view s);

// Builds a spec from the CLI/config words. `mean_order` is {p,q} for ARMA
// (ignored otherwise); `variance_order` is {m} for ARCH, {p,q} for GARCH,
// {p,o,q} for GJR and ignored for constant/EWMA. Empty orders take the
// defaults ARMA(1,1), ARCH(1), GARCH(1,1), GJR(1,1,1).
absl::StatusOr<ModelSpec> MakeModelSpec(absl::string_view mean, const std::vector<int>& mean_order,
                                        absl::string_view variance,
                                        const std::vector<int>& variance_order,
                                        absl::string_view innovations);

}  // namespace aftershock

#endif  // AFTERSHOCK_MODEL_SPEC_H_
