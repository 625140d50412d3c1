#include "aftershock/stats.h"

#include <boost/math/distributions/chi_squared.hpp>
#include <boost/math/distributions/fisher_f.hpp>
#include <boost/math/distributions/normal.hpp>
#include <boost/math/distributions/students_t.hpp>
#include <cmath>
#include <exception>
#include <limits>

#include "absl/strings/str_cat.h"
#include "aftershock/least_squares.h"

namespace aftershock {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Boost.Math reports domain errors by throwing; the public functions return NaN
// instead so that no exception crosses the module boundary.
template <typename F>
double Guarded(F f) {
  try {
    return f();
  } catch (const std::exception&) {
    return kNaN;
  }
}

double Mean(absl::Span<const double> x) {
  double s = 0.0;
  for (double v : x) s += v;
  return s / static_cast<double>(x.size());
}

absl::Status CheckLags(int lags, int n, const char* what = "lags") {
  if (lags < 1 || lags >= n) {
    return absl::InvalidArgumentError(
        absl::StrCat(what, " must be in 1..", n - 1, " for ", n, " observations (got ", lags, ")"));
  }
  return absl::OkStatus();
}

// Biased autocorrelations of a validated series (lags 0..max_lag).
std::vector<double> Acf(absl::Span<const double> x, int max_lag) {
  const size_t n = x.size();
  const double mean = Mean(x);
  std::vector<double> d(n);
  for (size_t t = 0; t < n; ++t) d[t] = x[t] - mean;
  double c0 = 0.0;
  for (double v : d) c0 += v * v;
  std::vector<double> r(max_lag + 1);
  r[0] = 1.0;
  for (int k = 1; k <= max_lag; ++k) {
    double c = 0.0;
    for (size_t t = k; t < n; ++t) c += d[t] * d[t - k];
    r[k] = c / c0;
  }
  return r;
}

PortmanteauResult Portmanteau(const std::vector<double>& r, int n, int lags, int model_dof) {
  PortmanteauResult out;
  out.lags = lags;
  out.model_dof = model_dof;
  double q = 0.0;
  for (int k = 1; k <= lags; ++k) q += r[k] * r[k] / (n - k);
  out.statistic = static_cast<double>(n) * (n + 2.0) * q;
  out.df = lags - model_dof;
  out.p_value = ChiSquareSurvival(out.statistic, out.df);
  return out;
}

absl::Status CheckPortmanteauArgs(int n, int lags, int model_dof) {
  if (absl::Status s = CheckLags(lags, n); !s.ok()) return s;
  if (model_dof < 0 || model_dof >= lags) {
    return absl::InvalidArgumentError(absl::StrCat("model_dof must be in 0..", lags - 1,
                                                   " so that lags - model_dof > 0 (got ", model_dof,
                                                   " with ", lags, " lags)"));
  }
  return absl::OkStatus();
}

}  // namespace

double NormalCdf(double x) {
  if (std::isnan(x)) return kNaN;
  if (std::isinf(x)) return x > 0 ? 1.0 : 0.0;
  return Guarded([&] { return boost::math::cdf(boost::math::normal_distribution<double>(), x); });
}

double NormalQuantile(double p) {
  if (!(p > 0.0 && p < 1.0)) return kNaN;
  return Guarded(
      [&] { return boost::math::quantile(boost::math::normal_distribution<double>(), p); });
}

double StudentTCdf(double x, double df) {
  if (std::isnan(x) || !(df > 0.0)) return kNaN;
  if (std::isinf(x)) return x > 0 ? 1.0 : 0.0;
  return Guarded(
      [&] { return boost::math::cdf(boost::math::students_t_distribution<double>(df), x); });
}

double ChiSquareSurvival(double x, double df) {
  if (std::isnan(x) || !(df > 0.0) || std::isinf(df)) return kNaN;
  if (x <= 0.0) return 1.0;
  if (std::isinf(x)) return 0.0;
  return Guarded([&] {
    return boost::math::cdf(
        boost::math::complement(boost::math::chi_squared_distribution<double>(df), x));
  });
}

double ChiSquareQuantile(double p, double df) {
  if (!(p > 0.0 && p < 1.0) || !(df > 0.0) || std::isinf(df)) return kNaN;
  return Guarded(
      [&] { return boost::math::quantile(boost::math::chi_squared_distribution<double>(df), p); });
}

double FSurvival(double x, double df1, double df2) {
  if (std::isnan(x) || !(df1 > 0.0) || !(df2 > 0.0)) return kNaN;
  if (x <= 0.0) return 1.0;
  if (std::isinf(x)) return 0.0;
  return Guarded([&] {
    return boost::math::cdf(
        boost::math::complement(boost::math::fisher_f_distribution<double>(df1, df2), x));
  });
}

absl::Status ValidateSeries(absl::Span<const double> x, int min_obs, bool require_variance,
                            const char* what) {
  if (static_cast<int>(x.size()) < min_obs) {
    return absl::InvalidArgumentError(
        absl::StrCat(what, " has ", x.size(), " observations; at least ", min_obs, " are needed"));
  }
  for (size_t i = 0; i < x.size(); ++i) {
    if (!std::isfinite(x[i])) {
      return absl::InvalidArgumentError(absl::StrCat(what, " has a non-finite value at index ", i));
    }
  }
  if (require_variance) {
    bool constant = true;
    for (size_t i = 1; i < x.size() && constant; ++i) constant = x[i] == x[0];
    if (constant) {
      return absl::InvalidArgumentError(absl::StrCat(what, " is constant (zero variance)"));
    }
  }
  return absl::OkStatus();
}

absl::StatusOr<std::vector<double>> Autocorrelation(absl::Span<const double> x, int max_lag) {
  if (absl::Status s = ValidateSeries(x, 2, true); !s.ok()) return s;
  if (absl::Status s = CheckLags(max_lag, static_cast<int>(x.size()), "max_lag"); !s.ok()) {
    return s;
  }
  return Acf(x, max_lag);
}

absl::StatusOr<std::vector<double>> PartialAutocorrelation(absl::Span<const double> x,
                                                           int max_lag) {
  absl::StatusOr<std::vector<double>> r = Autocorrelation(x, max_lag);
  if (!r.ok()) return r.status();
  // Durbin-Levinson: phi holds the AR(k) coefficients of the best linear
  // predictor; its last entry is the partial autocorrelation at lag k.
  std::vector<double> pacf(max_lag + 1);
  pacf[0] = 1.0;
  std::vector<double> phi(max_lag + 1, 0.0), prev(max_lag + 1, 0.0);
  double v = 1.0;  // prediction error variance relative to r_0
  for (int k = 1; k <= max_lag; ++k) {
    double num = (*r)[k];
    for (int j = 1; j < k; ++j) num -= prev[j] * (*r)[k - j];
    const double a = num / v;
    phi[k] = a;
    for (int j = 1; j < k; ++j) phi[j] = prev[j] - a * prev[k - j];
    v *= (1.0 - a * a);
    pacf[k] = a;
    prev = phi;
  }
  return pacf;
}

absl::StatusOr<PortmanteauResult> LjungBox(absl::Span<const double> x, int lags, int model_dof) {
  if (absl::Status s = ValidateSeries(x, 3, true); !s.ok()) return s;
  const int n = static_cast<int>(x.size());
  if (absl::Status s = CheckPortmanteauArgs(n, lags, model_dof); !s.ok()) return s;
  return Portmanteau(Acf(x, lags), n, lags, model_dof);
}

absl::StatusOr<PortmanteauResult> McLeodLi(absl::Span<const double> x, int lags, int model_dof) {
  if (absl::Status s = ValidateSeries(x, 3, false); !s.ok()) return s;
  std::vector<double> sq(x.size());
  for (size_t i = 0; i < x.size(); ++i) sq[i] = x[i] * x[i];
  if (absl::Status s = ValidateSeries(sq, 3, true, "squared series"); !s.ok()) return s;
  const int n = static_cast<int>(x.size());
  if (absl::Status s = CheckPortmanteauArgs(n, lags, model_dof); !s.ok()) return s;
  return Portmanteau(Acf(sq, lags), n, lags, model_dof);
}

absl::StatusOr<ArchLmResult> ArchLm(absl::Span<const double> e, int lags, int ddof) {
  if (absl::Status s = ValidateSeries(e, 4, false, "residual series"); !s.ok()) return s;
  const int n = static_cast<int>(e.size());
  if (lags < 1 || n < 2 * lags + 2) {
    return absl::InvalidArgumentError(absl::StrCat("ARCH-LM lags must be in 1..", (n - 2) / 2,
                                                   " for ", n, " observations (got ", lags, ")"));
  }
  const int rows = n - lags;
  if (ddof < 0 || ddof >= rows) {
    return absl::InvalidArgumentError(
        absl::StrCat("ddof must be in 0..", rows - 1, " (got ", ddof, ")"));
  }
  std::vector<double> sq(n);
  for (int i = 0; i < n; ++i) sq[i] = e[i] * e[i];
  if (absl::Status s = ValidateSeries(sq, 4, true, "squared residual series"); !s.ok()) return s;
  std::vector<double> y(rows), x(static_cast<size_t>(rows) * lags);
  for (int t = 0; t < rows; ++t) {
    y[t] = sq[t + lags];
    for (int j = 1; j <= lags; ++j) x[static_cast<size_t>(t) * lags + (j - 1)] = sq[t + lags - j];
  }
  absl::StatusOr<OlsResult> ols = OrdinaryLeastSquares(y, x, lags);
  if (!ols.ok()) {
    return absl::InvalidArgumentError(
        absl::StrCat("ARCH-LM regression failed: ", ols.status().message()));
  }
  ArchLmResult out;
  out.lags = lags;
  out.nobs = rows;
  out.r_squared = ols->r_squared;
  out.lm_statistic = (rows - ddof) * ols->r_squared;
  out.lm_p_value = ChiSquareSurvival(out.lm_statistic, lags);
  out.f_df1 = lags;
  out.f_df2 = rows - lags - 1;
  out.f_statistic = (ols->r_squared / lags) / ((1.0 - ols->r_squared) / out.f_df2);
  out.f_p_value = FSurvival(out.f_statistic, out.f_df1, out.f_df2);
  return out;
}

absl::StatusOr<JarqueBeraResult> JarqueBera(absl::Span<const double> x) {
  if (absl::Status s = ValidateSeries(x, 3, true); !s.ok()) return s;
  const double n = static_cast<double>(x.size());
  const double mean = Mean(x);
  double m2 = 0.0, m3 = 0.0, m4 = 0.0;
  for (double v : x) {
    const double d = v - mean;
    const double d2 = d * d;
    m2 += d2;
    m3 += d2 * d;
    m4 += d2 * d2;
  }
  m2 /= n;
  m3 /= n;
  m4 /= n;
  JarqueBeraResult out;
  out.skewness = m3 / std::pow(m2, 1.5);
  out.kurtosis = m4 / (m2 * m2);
  const double ek = out.kurtosis - 3.0;
  out.statistic = n / 6.0 * (out.skewness * out.skewness + 0.25 * ek * ek);
  out.p_value = ChiSquareSurvival(out.statistic, 2.0);
  return out;
}

absl::StatusOr<SignBiasResult> SignBias(absl::Span<const double> z) {
  if (absl::Status s = ValidateSeries(z, 10, true, "standardized residual series"); !s.ok()) {
    return s;
  }
  const int n = static_cast<int>(z.size());
  const int rows = n - 1;
  std::vector<double> y(rows), x(static_cast<size_t>(rows) * 3);
  int negatives = 0;
  for (int t = 0; t < rows; ++t) {
    const double prev = z[t];
    const double neg = prev < 0.0 ? 1.0 : 0.0;
    negatives += prev < 0.0;
    y[t] = z[t + 1] * z[t + 1];
    x[3 * t + 0] = neg;
    x[3 * t + 1] = neg * prev;
    x[3 * t + 2] = (1.0 - neg) * prev;
  }
  if (negatives == 0 || negatives == rows) {
    return absl::InvalidArgumentError(
        "sign-bias test needs both negative and non-negative lagged residuals");
  }
  absl::StatusOr<OlsResult> ols = OrdinaryLeastSquares(y, x, 3);
  if (!ols.ok()) {
    return absl::InvalidArgumentError(
        absl::StrCat("sign-bias regression failed: ", ols.status().message()));
  }
  const double df = rows - 4;
  auto term = [&](int j) {
    SignBiasTerm t;
    t.coefficient = ols->coefficients[j];
    t.t_statistic = ols->t_statistics[j];
    t.p_value = 2.0 * StudentTCdf(-std::fabs(t.t_statistic), df);
    return t;
  };
  SignBiasResult out;
  out.nobs = rows;
  out.sign = term(1);
  out.negative_size = term(2);
  out.positive_size = term(3);
  out.joint_statistic = rows * ols->r_squared;
  out.joint_p_value = ChiSquareSurvival(out.joint_statistic, 3.0);
  return out;
}

}  // namespace aftershock
