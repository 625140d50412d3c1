// Innovation laws: the standardized (zero-mean, unit-variance) distributions of
// the shock z_t = eps_t / sigma_t, and the risk multipliers derived from them.
//
// Two laws are supported (PRODUCT.md C1):
//   normal:        z ~ N(0, 1).
//   standardized t: z = T * sqrt((nu - 2) / nu) with T ~ Student-t(nu), nu > 2, so
//                  Var(z) = 1. Density
//                    f(z) = Gamma((nu+1)/2) / (Gamma(nu/2) sqrt(pi (nu-2)))
//                           * (1 + z^2 / (nu-2))^(-(nu+1)/2).
//
// Sign convention for risk numbers: the left tail is the loss tail. For a tail
// probability a (a = 1 - level, e.g. 0.01 for the 99 % level) the standardized
// quantile q_a is negative and the expected shortfall multiplier
//   es_a = -E[z | z <= q_a] > 0.
// For a return r = mu + sigma z the loss numbers are positive:
//   VaR = -(mu + sigma * q_a),  ES = -mu + sigma * es_a.
//
// Closed forms used for es_a (both derived from the antiderivative of x f(x)):
//   normal: es_a = phi(q_a) / a;
//   t:      with t_a the Student-t(nu) quantile at a and f_nu its density,
//           E[T; T <= t] = -(nu + t^2) / (nu - 1) * f_nu(t), hence
//           es_a = sqrt((nu-2)/nu) * (nu + t_a^2) / (nu - 1) * f_nu(t_a) / a.
//
// All functions are pure and thread-safe. Library errors (Boost.Math domain or
// overflow) never escape: they come back as NaN and the factories validate input.
#ifndef AFTERSHOCK_INNOVATIONS_H_
#define AFTERSHOCK_INNOVATIONS_H_

#include <array>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/limits.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"

namespace aftershock {

// ---- Free functions on the standardized laws --------------------------------
// Each REQUIRES nu > 2 where nu appears; otherwise the result is NaN.

// log f(z) of the standard normal.
double LogDensityNormal(double z);
// log f(z) of the standardized t.
double LogDensityT(double z, double nu);
// d log f / d(z^2) of the standardized t: -(nu+1) / (2 (nu - 2 + z^2)).
// (The normal's is the constant -1/2.) d log f / dz = 2 z * this.
double DLogDensityTDz2(double z, double nu);
// d log f / d nu of the standardized t, analytic (digamma from Boost.Math):
//   1/2 psi((nu+1)/2) - 1/2 psi(nu/2) - 1/(2 (nu-2)) - 1/2 log(1 + z^2/(nu-2))
//   + (nu+1) z^2 / (2 (nu-2) (nu-2+z^2)).
double DLogDensityTDnu(double z, double nu);

// The part of LogDensityT that depends on nu only:
//   lgamma((nu+1)/2) - lgamma(nu/2) - 1/2 log(pi (nu-2)).
// LogDensityT(z, nu) = LogNormalizerT(nu) - (nu+1)/2 * log1p(z^2/(nu-2)).
double LogNormalizerT(double nu);

// The nu-only part of DLogDensityTDnu:
//   1/2 psi((nu+1)/2) - 1/2 psi(nu/2) - 1/(2 (nu-2)).
double DLogNormalizerTDnu(double nu);

// Its derivative, for the analytic Hessian:
//   1/4 psi'((nu+1)/2) - 1/4 psi'(nu/2) + 1/(2 (nu-2)^2).
double D2LogNormalizerTDnu2(double nu);

// ---- InnovationLaw -------------------------------------------------------------
// Value type naming one standardized law (kind + nu) with its density, cdf,
// quantile and expected shortfall. The nu-only constants are cached, so the
// per-observation calls (LogDensity, derivatives) cost one log1p for the t.
// Thread-safety: immutable after construction; safe to share and copy.
class InnovationLaw {
 public:
  // The standard normal law (so the type can be a default-constructed member).
  InnovationLaw();
  // The standard normal law.
  static InnovationLaw Normal();
  // Standardized t; InvalidArgument unless 2 < nu <= kMaxNu and finite.
  static absl::StatusOr<InnovationLaw> StudentT(double nu);
  // The law of a parameter set (its spec.innovations and, for t, its nu).
  static absl::StatusOr<InnovationLaw> FromParams(const ModelParams& params);

  Innovations kind() const { return kind_; }
  // nu for the t law; +infinity for the normal.
  double nu() const { return nu_; }

  // log f(z).
  double LogDensity(double z) const;
  // d log f / d(z^2): -1/2 for the normal.
  double DLogDensityDz2(double z) const;
  // d log f / dz.
  double DLogDensityDz(double z) const { return 2.0 * z * DLogDensityDz2(z); }
  // d log f / d nu; 0 for the normal (it has no nu).
  double DLogDensityDnu(double z) const;

  // Log-likelihood contribution of a residual eps with conditional variance
  // sigma2 (eps = sqrt(sigma2) z): LogDensity(eps / sqrt(sigma2)) - log(sigma2) / 2,
  // and its derivative with respect to sigma2,
  //   -(1 + 2 z^2 DLogDensityDz2(z)) / (2 sigma2),
  // the factor the estimator's chain rule multiplies by d sigma2 / d theta.
  // REQUIRES: sigma2 > 0.
  double LogLikelihood(double eps, double sigma2) const;
  double DLogLikelihoodDSigma2(double eps, double sigma2) const;

  // Density, cdf P(Z <= z) and quantile. REQUIRES: 0 < p < 1 for Quantile (NaN otherwise).
  double Density(double z) const;
  double Cdf(double z) const;
  double Quantile(double p) const;

  // Positive expected-shortfall multiplier es_a = -E[z | z <= q_a] at tail
  // probability a. REQUIRES: 0 < a < 1 (NaN otherwise).
  double ExpectedShortfall(double tail_prob) const;

  // Excess kurtosis of z: 6 / (nu - 4) for nu > 4, +inf for 2 < nu <= 4, 0 for normal.
  double ExcessKurtosis() const;

 private:
  InnovationLaw(Innovations kind, double nu);

  Innovations kind_;
  double nu_;
  double log_norm_;   // LogNormalizerT(nu) or -1/2 log(2 pi)
  double dlog_norm_;  // DLogNormalizerTDnu(nu) or 0
  double scale_;      // sqrt((nu-2)/nu): z = scale_ * T; 1 for the normal
};

// ---- RiskQuantiles -------------------------------------------------------------
// Precomputed VaR/ES multipliers of one law at a few confidence levels, so the
// per-bar cost is two multiply-adds per level and no allocation.
// Thread-safety: immutable after Create; safe to share and copy (fixed arrays).

class RiskQuantiles {
 public:
  // Empty (size() == 0), for default-constructed per-symbol state.
  RiskQuantiles() = default;

  // `levels` are confidence levels in (0.5, 1), e.g. {0.99, 0.975}; tail
  // probability a = 1 - level. InvalidArgument for more than kMaxRiskLevels
  // levels or a level outside (0.5, 1).
  static absl::StatusOr<RiskQuantiles> Create(const InnovationLaw& law,
                                              absl::Span<const double> levels);

  int size() const { return size_; }
  double level(int i) const { return level_[i]; }
  // Standardized left-tail quantile q_a (negative) at level i.
  double quantile(int i) const { return quantile_[i]; }
  // Positive ES multiplier es_a at level i.
  double es_multiplier(int i) const { return es_[i]; }

  // Positive loss numbers for a bar with conditional mean mu and conditional
  // standard deviation sigma. REQUIRES: 0 <= i < size().
  double VaR(int i, double mu, double sigma) const { return -(mu + sigma * quantile_[i]); }
  double ES(int i, double mu, double sigma) const { return sigma * es_[i] - mu; }

 private:
  int size_ = 0;
  std::array<double, kMaxRiskLevels> level_{};
  std::array<double, kMaxRiskLevels> quantile_{};
  std::array<double, kMaxRiskLevels> es_{};
};

}  // namespace aftershock

#endif  // AFTERSHOCK_INNOVATIONS_H_
