#include "aftershock/innovations.h"

#include <boost/math/distributions/normal.hpp>
#include <boost/math/distributions/students_t.hpp>
#include <boost/math/special_functions/digamma.hpp>
#include <boost/math/special_functions/gamma.hpp>
#include <boost/math/special_functions/trigamma.hpp>
#include <cmath>
#include <limits>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

// Boost.Math reports errors by returning NaN / inf (never by throwing), so no
// exception can cross this module's boundary.
using NoThrowPolicy = boost::math::policies::policy<
    boost::math::policies::domain_error<boost::math::policies::ignore_error>,
    boost::math::policies::pole_error<boost::math::policies::ignore_error>,
    boost::math::policies::overflow_error<boost::math::policies::ignore_error>,
    boost::math::policies::underflow_error<boost::math::policies::ignore_error>,
    boost::math::policies::evaluation_error<boost::math::policies::ignore_error>,
    boost::math::policies::rounding_error<boost::math::policies::ignore_error>>;

using NormalDist = boost::math::normal_distribution<double, NoThrowPolicy>;
using StudentDist = boost::math::students_t_distribution<double, NoThrowPolicy>;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kPi = 3.14159265358979323846;
constexpr double kHalfLog2Pi = 0.91893853320467274178;  // 1/2 log(2 pi)

bool ValidNu(double nu) { return std::isfinite(nu) && nu > 2.0; }
bool ValidProb(double p) { return p > 0.0 && p < 1.0; }

}  // namespace

double LogDensityNormal(double z) { return -kHalfLog2Pi - 0.5 * z * z; }

double LogNormalizerT(double nu) {
  if (!ValidNu(nu)) return kNaN;
  // Boost's lgamma, not std::lgamma: the latter writes the global signgam,
  // a data race when refit workers evaluate likelihoods concurrently.
  return boost::math::lgamma(0.5 * (nu + 1.0), NoThrowPolicy()) -
         boost::math::lgamma(0.5 * nu, NoThrowPolicy()) - 0.5 * std::log(kPi * (nu - 2.0));
}

double DLogNormalizerTDnu(double nu) {
  if (!ValidNu(nu)) return kNaN;
  return 0.5 * boost::math::digamma(0.5 * (nu + 1.0), NoThrowPolicy()) -
         0.5 * boost::math::digamma(0.5 * nu, NoThrowPolicy()) - 0.5 / (nu - 2.0);
}

double D2LogNormalizerTDnu2(double nu) {
  if (!ValidNu(nu)) return kNaN;
  const double nm2 = nu - 2.0;
  return 0.25 * boost::math::trigamma(0.5 * (nu + 1.0), NoThrowPolicy()) -
         0.25 * boost::math::trigamma(0.5 * nu, NoThrowPolicy()) + 0.5 / (nm2 * nm2);
}

double LogDensityT(double z, double nu) {
  if (!ValidNu(nu)) return kNaN;
  return LogNormalizerT(nu) - 0.5 * (nu + 1.0) * std::log1p(z * z / (nu - 2.0));
}

double DLogDensityTDz2(double z, double nu) {
  if (!ValidNu(nu)) return kNaN;
  return -0.5 * (nu + 1.0) / (nu - 2.0 + z * z);
}

double DLogDensityTDnu(double z, double nu) {
  if (!ValidNu(nu)) return kNaN;
  const double z2 = z * z;
  const double nm2 = nu - 2.0;
  return DLogNormalizerTDnu(nu) - 0.5 * std::log1p(z2 / nm2) +
         0.5 * (nu + 1.0) * z2 / (nm2 * (nm2 + z2));
}

// ---- InnovationLaw -------------------------------------------------------------

InnovationLaw::InnovationLaw(Innovations kind, double nu) : kind_(kind), nu_(nu) {
  if (kind_ == Innovations::kNormal) {
    log_norm_ = -kHalfLog2Pi;
    dlog_norm_ = 0.0;
    scale_ = 1.0;
  } else {
    log_norm_ = LogNormalizerT(nu_);
    dlog_norm_ = DLogNormalizerTDnu(nu_);
    scale_ = std::sqrt((nu_ - 2.0) / nu_);
  }
}

InnovationLaw::InnovationLaw()
    : InnovationLaw(Innovations::kNormal, std::numeric_limits<double>::infinity()) {}

InnovationLaw InnovationLaw::Normal() {
  return InnovationLaw(Innovations::kNormal, std::numeric_limits<double>::infinity());
}

absl::StatusOr<InnovationLaw> InnovationLaw::StudentT(double nu) {
  if (!(std::isfinite(nu) && nu > 2.0 && nu <= kMaxNu)) {
    return absl::InvalidArgumentError(
        absl::StrCat("standardized t needs nu in (2, ", kMaxNu, "], got ", nu));
  }
  return InnovationLaw(Innovations::kStudentT, nu);
}

absl::StatusOr<InnovationLaw> InnovationLaw::FromParams(const ModelParams& params) {
  if (params.spec.innovations == Innovations::kNormal) return Normal();
  if (static_cast<int>(params.values.size()) != params.spec.NumParams()) {
    return absl::InvalidArgumentError(absl::StrCat("model ", params.spec.Label(), " needs ",
                                                   params.spec.NumParams(), " parameters, got ",
                                                   params.values.size()));
  }
  return StudentT(params.nu());
}

double InnovationLaw::LogDensity(double z) const {
  if (kind_ == Innovations::kNormal) return log_norm_ - 0.5 * z * z;
  return log_norm_ - 0.5 * (nu_ + 1.0) * std::log1p(z * z / (nu_ - 2.0));
}

double InnovationLaw::DLogDensityDz2(double z) const {
  if (kind_ == Innovations::kNormal) return -0.5;
  return -0.5 * (nu_ + 1.0) / (nu_ - 2.0 + z * z);
}

double InnovationLaw::DLogDensityDnu(double z) const {
  if (kind_ == Innovations::kNormal) return 0.0;
  const double z2 = z * z;
  const double nm2 = nu_ - 2.0;
  return dlog_norm_ - 0.5 * std::log1p(z2 / nm2) + 0.5 * (nu_ + 1.0) * z2 / (nm2 * (nm2 + z2));
}

double InnovationLaw::LogLikelihood(double eps, double sigma2) const {
  return LogDensity(eps / std::sqrt(sigma2)) - 0.5 * std::log(sigma2);
}

double InnovationLaw::DLogLikelihoodDSigma2(double eps, double sigma2) const {
  const double z2 = eps * eps / sigma2;
  const double z = std::sqrt(z2);  // DLogDensityDz2 depends on z^2 only
  return -(1.0 + 2.0 * z2 * DLogDensityDz2(z)) / (2.0 * sigma2);
}

double InnovationLaw::Density(double z) const { return std::exp(LogDensity(z)); }

double InnovationLaw::Cdf(double z) const {
  if (std::isnan(z)) return kNaN;
  if (kind_ == Innovations::kNormal) return boost::math::cdf(NormalDist(0.0, 1.0), z);
  return boost::math::cdf(StudentDist(nu_), z / scale_);
}

double InnovationLaw::Quantile(double p) const {
  if (!ValidProb(p)) return kNaN;
  if (kind_ == Innovations::kNormal) return boost::math::quantile(NormalDist(0.0, 1.0), p);
  return scale_ * boost::math::quantile(StudentDist(nu_), p);
}

double InnovationLaw::ExpectedShortfall(double a) const {
  if (!ValidProb(a)) return kNaN;
  if (kind_ == Innovations::kNormal) {
    const NormalDist n(0.0, 1.0);
    return boost::math::pdf(n, boost::math::quantile(n, a)) / a;
  }
  const StudentDist t(nu_);
  const double ta = boost::math::quantile(t, a);
  return scale_ * (nu_ + ta * ta) / (nu_ - 1.0) * boost::math::pdf(t, ta) / a;
}

double InnovationLaw::ExcessKurtosis() const {
  if (kind_ == Innovations::kNormal) return 0.0;
  if (nu_ <= 4.0) return std::numeric_limits<double>::infinity();
  return 6.0 / (nu_ - 4.0);
}

// ---- RiskQuantiles -------------------------------------------------------------

absl::StatusOr<RiskQuantiles> RiskQuantiles::Create(const InnovationLaw& law,
                                                    absl::Span<const double> levels) {
  if (levels.size() > static_cast<size_t>(kMaxRiskLevels)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "at most ", kMaxRiskLevels, " risk levels are supported, got ", levels.size()));
  }
  RiskQuantiles r;
  for (double level : levels) {
    if (!(level > 0.5 && level < 1.0)) {
      return absl::InvalidArgumentError(
          absl::StrCat("risk level must be in (0.5, 1), e.g. 0.99; got ", level));
    }
    const double a = 1.0 - level;
    r.level_[r.size_] = level;
    r.quantile_[r.size_] = law.Quantile(a);
    r.es_[r.size_] = law.ExpectedShortfall(a);
    ++r.size_;
  }
  return r;
}

}  // namespace aftershock
