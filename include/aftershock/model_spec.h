// ModelSpec: which mean equation, variance equation and innovation law a model
// uses, and the canonical order and names of its parameters.
//
// Orders are named counts (the configuration's [model] shock_lags, asym_lags,
// variance_lags), never positions:
//   ARMA(p,q):  p autoregressive terms ar_1..ar_p, q moving-average terms ma_1..ma_q.
//   ARCH(p):    p = shock lags, terms alpha_1..alpha_p on lagged squared shocks.
//   GARCH(p,q): p shock lags alpha_1..alpha_p, q variance lags beta_1..beta_q.
//   GJR-GARCH:  as GARCH(p,q) plus asym lags gamma_1..gamma_o (gamma_i multiplies
//               1{eps_{t-i} < 0} * eps_{t-i}^2); o = p by default.
//   EWMA:       sigma2_t = lambda * sigma2_{t-1} + (1 - lambda) * eps_{t-1}^2;
//               lambda is fixed, never estimated.
//   flat:       sigma2_t = omega (no volatility clustering).
//
// Parameter vector layout (ParamNames() returns the names in this order):
//   [mu] [ar_1..ar_p] [ma_1..ma_q] | omega [alpha_1..] [gamma_1..] [beta_1..] | lambda (EWMA)
//   | [nu]
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
// The numeric values are stored in checkpoints: append, never reorder.
enum class VarianceKind { kConstant, kArch, kGarch, kGjr, kEwma };  // kConstant: "flat"
enum class Innovations { kNormal, kStudentT };                      // "gaussian", "student"

// Presample rule for the variance recursion (PRODUCT.md C2):
//   kMeanSquare:  every presample sigma2 and eps^2 equals the mean of the squared
//                 residuals of the sample (the published benchmark's rule);
//   kRobustStart: both equal (kRobustStartConsistency * m)^2, m the weighted median
//                 of |eps_j| over the first kRobustStartSpan residuals with weights
//                 2^(-j / kRobustStartHalfLife): a scale of the first bars that one
//                 outlier cannot move (README "Models" gives the reasons).
enum class Presample { kMeanSquare, kRobustStart };
inline constexpr double kRobustStartHalfLife = 10.0;  // bars
inline constexpr int kRobustStartSpan = 50;           // bars: five half-lives (3 % weight left)
// 1 / Phi^-1(3/4): (1.4826 * median |e|)^2 estimates the variance of Gaussian e.
inline constexpr double kRobustStartConsistency = 1.482602218505602;

struct ModelSpec {
  MeanKind mean = MeanKind::kConstant;
  int ar_order = 0;  // p of ARMA(p,q); 0 unless mean == kArma.
  int ma_order = 0;  // q of ARMA(p,q); 0 unless mean == kArma.

  VarianceKind variance = VarianceKind::kGarch;
  int arch_order = 1;   // shock lags: alpha terms (p of ARCH(p), GARCH(p,q), GJR-GARCH(p,q)).
  int asym_order = 0;   // asym lags: gamma terms; 0 unless variance == kGjr.
  int garch_order = 1;  // variance lags: beta terms (q of GARCH(p,q) and GJR-GARCH(p,q)).

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

  // Parameter names in vector order, e.g. {"mu","omega","alpha_1","beta_1"}.
  std::vector<std::string> ParamNames() const;

  // Compact label "<mean>/<variance>/<law>" (README "Models"), e.g.
  // "const/GARCH(1,1)/student", "ARMA(1,1)/GJR-GARCH(1,1)/gaussian",
  // "zero/flat/gaussian"; GJR-GARCH(p,q;o) when the asym lags o differ from p.
  // ParseSpecLabel (model_store.h) reads it back.
  std::string Label() const;

  // OK if the orders are consistent with the kinds and within the limits.
  absl::Status Validate() const;

  bool operator==(const ModelSpec& o) const;
  bool operator!=(const ModelSpec& o) const { return !(*this == o); }
};

// Names used by the CLI, the configuration and JSON output.
absl::string_view MeanKindName(MeanKind k);          // "zero" | "constant" | "arma"
absl::string_view VarianceKindName(VarianceKind k);  // "flat"|"arch"|"garch"|"gjr"|"ewma"
absl::string_view InnovationsName(Innovations k);    // "gaussian" | "student"
absl::string_view PresampleName(Presample p);        // "mean-square" | "robust-start"

// InvalidArgument for an unknown word; a retired word (renames.h) names its
// replacement.
absl::StatusOr<MeanKind> ParseMeanKind(absl::string_view s);
absl::StatusOr<VarianceKind> ParseVarianceKind(absl::string_view s);
absl::StatusOr<Innovations> ParseInnovations(absl::string_view s);
absl::StatusOr<Presample> ParsePresample(absl::string_view s);

// The lag counts of the variance equation by name (the configuration's [model]
// shock_lags, variance_lags, asym_lags); -1 = not given, the kind's default.
struct VarianceLags {
  int shock = -1;     // alpha terms on lagged squared shocks; default 1
  int variance = -1;  // beta terms on lagged variances (garch, gjr); default 1
  int asym = -1;      // gamma terms (gjr only); default: as many as shock lags
};

// Builds a spec from the CLI/config words. `mean_order` is {p,q} for ARMA
// (empty: ARMA(1,1)); any other mean takes none. Lags given for a variance
// kind that has no such terms (e.g. asym lags with garch, any with flat or
// ewma) are an error naming the lag.
absl::StatusOr<ModelSpec> MakeModelSpec(absl::string_view mean, const std::vector<int>& mean_order,
                                        absl::string_view variance, const VarianceLags& lags,
                                        absl::string_view innovations);

}  // namespace aftershock

#endif  // AFTERSHOCK_MODEL_SPEC_H_
