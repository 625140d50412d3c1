#include "aftershock/stats.h"

#include <algorithm>
#include <boost/math/distributions/chi_squared.hpp>
#include <boost/math/distributions/fisher_f.hpp>
#include <boost/math/distributions/normal.hpp>
#include <boost/math/distributions/students_t.hpp>
#include <cmath>
#include <exception>
#include <limits>
#include <optional>

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

// sum_i x[i] x[i + k], i = 0..n-1-k, with four partial sums (the products
// pipeline instead of waiting on one running sum).
double LaggedProductSum(const double* x, int n, int k) {
  double s0 = 0.0, s1 = 0.0, s2 = 0.0, s3 = 0.0;
  const int m = n - k;
  int i = 0;
  for (; i + 4 <= m; i += 4) {
    s0 += x[i] * x[i + k];
    s1 += x[i + 1] * x[i + 1 + k];
    s2 += x[i + 2] * x[i + 2 + k];
    s3 += x[i + 3] * x[i + 3 + k];
  }
  for (; i < m; ++i) s0 += x[i] * x[i + k];
  return (s0 + s1) + (s2 + s3);
}

// Biased autocorrelations of a validated series (lags 0..max_lag).
std::vector<double> Acf(absl::Span<const double> x, int max_lag) {
  const size_t n = x.size();
  const double mean = Mean(x);
  std::vector<double> d(n);
  for (size_t t = 0; t < n; ++t) d[t] = x[t] - mean;
  const double c0 = LaggedProductSum(d.data(), static_cast<int>(n), 0);
  std::vector<double> r(max_lag + 1);
  r[0] = 1.0;
  for (int k = 1; k <= max_lag; ++k) r[k] = LaggedProductSum(d.data(), static_cast<int>(n), k) / c0;
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

// R^2 of the ARCH-LM regression of sq[t] on 1, sq[t-1], ..., sq[t-lags]
// (t = lags..n-1) from the centred cross-products of the regressand and the
// lag columns, scaled to unit diagonal, and the Cholesky factor of that small
// (lags+1) x (lags+1) matrix with the regressand last: its last pivot is
// RSS / TSS (the Schur complement of the lag block). The cross-product of
// columns a >= b (lags a and b, column 0 the regressand) is a lag-(a-b)
// product sum of the whole series less the few terms outside the rows, so
// the series is read lags + 1 times, never copied into a design matrix.
// The same R^2 as the QR of the centred design to round-off wherever the lag
// columns are well conditioned; nullopt where a column has no variance or a
// lag pivot falls below kGramPivotFloor (nearly collinear lags), and the
// caller then takes the QR, which also says why a design is rank deficient.
constexpr double kGramPivotFloor = 1e-4;

std::optional<double> ArchLmRSquaredByGram(const std::vector<double>& sq, int lags) {
  const int n = static_cast<int>(sq.size());
  const int rows = n - lags;
  const int m1 = lags + 1;  // column 0: regressand sq[t]; column a: lag a
  // Deviations from the overall mean; column a (entries d[t - a], t = lags..n-1)
  // has mean delta[a], and sum_t (d_a - delta_a)(d_b - delta_b) =
  // sum_t d_a d_b - rows delta_a delta_b.
  double mean = 0.0;
  for (double v : sq) mean += v;
  mean /= n;
  std::vector<double> d(n);
  for (int i = 0; i < n; ++i) d[i] = sq[i] - mean;
  std::vector<double> delta(m1);
  double col_sum = 0.0;  // column 0: d[lags..n-1]
  for (int i = lags; i < n; ++i) col_sum += d[i];
  delta[0] = col_sum / rows;
  for (int a = 1; a < m1; ++a) {
    col_sum += d[lags - a] - d[n - a];  // column a: d[lags-a..n-1-a]
    delta[a] = col_sum / rows;
  }
  std::vector<double> full(m1);  // lag-k product sums over the whole series
  for (int k = 0; k < m1; ++k) full[k] = LaggedProductSum(d.data(), n, k);
  // g[a * m1 + b], a >= b: sum over i = lags-a .. n-1-a of d[i] d[i + a - b].
  std::vector<double> g(static_cast<size_t>(m1) * m1);
  for (int a = 0; a < m1; ++a) {
    for (int b = 0; b <= a; ++b) {
      const int k = a - b;
      double edge = 0.0;
      for (int i = 0; i < lags - a; ++i) edge += d[i] * d[i + k];
      for (int i = n - a; i < n - k; ++i) edge += d[i] * d[i + k];
      g[static_cast<size_t>(a) * m1 + b] = full[k] - edge - rows * delta[a] * delta[b];
    }
  }
  auto at = [&](int a, int b) {
    return a >= b ? g[static_cast<size_t>(a) * m1 + b] : g[static_cast<size_t>(b) * m1 + a];
  };
  std::vector<double> scale(m1);
  for (int a = 0; a < m1; ++a) {
    const double v = at(a, a);
    if (!(v > 0.0) || !std::isfinite(v)) return std::nullopt;
    scale[a] = 1.0 / std::sqrt(v);
  }
  // Correlation matrix with the regressand moved last (position m1 - 1), then
  // an in-place Cholesky factorisation of its lower triangle.
  std::vector<double> c(static_cast<size_t>(m1) * m1);
  auto col = [&](int i) { return i == m1 - 1 ? 0 : i + 1; };  // position -> Gram column
  for (int i = 0; i < m1; ++i) {
    for (int j = 0; j <= i; ++j) {
      const int a = col(i), b = col(j);
      c[static_cast<size_t>(i) * m1 + j] = i == j ? 1.0 : at(a, b) * scale[a] * scale[b];
    }
  }
  for (int j = 0; j < m1; ++j) {
    double* rj = &c[static_cast<size_t>(j) * m1];
    double pivot = rj[j];
    for (int k = 0; k < j; ++k) pivot -= rj[k] * rj[k];
    if (j == m1 - 1) return 1.0 - std::max(pivot, 0.0);  // RSS / TSS: the regressand's pivot
    if (!(pivot >= kGramPivotFloor)) return std::nullopt;
    const double l = std::sqrt(pivot);
    rj[j] = l;
    for (int i = j + 1; i < m1; ++i) {
      double* ri = &c[static_cast<size_t>(i) * m1];
      double sum = ri[j];
      for (int k = 0; k < j; ++k) sum -= ri[k] * rj[k];
      ri[j] = sum / l;
    }
  }
  return std::nullopt;  // not reached: the loop returns at the last column
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
  std::optional<double> r2 = ArchLmRSquaredByGram(sq, lags);
  if (!r2.has_value()) {
    // Nearly collinear lags: the column-pivoted QR of the whole design.
    std::vector<double> y(rows), x(static_cast<size_t>(rows) * lags);
    for (int t = 0; t < rows; ++t) {
      y[t] = sq[t + lags];
      for (int j = 1; j <= lags; ++j) {
        x[static_cast<size_t>(t) * lags + (j - 1)] = sq[t + lags - j];
      }
    }
    absl::StatusOr<OlsResult> ols = OrdinaryLeastSquares(y, x, lags);
    if (!ols.ok()) {
      return absl::InvalidArgumentError(
          absl::StrCat("ARCH-LM regression failed: ", ols.status().message()));
    }
    r2 = ols->r_squared;
  }
  ArchLmResult out;
  out.lags = lags;
  out.nobs = rows;
  out.r_squared = *r2;
  out.lm_statistic = (rows - ddof) * out.r_squared;
  out.lm_p_value = ChiSquareSurvival(out.lm_statistic, lags);
  out.f_df1 = lags;
  out.f_df2 = rows - lags - 1;
  out.f_statistic = (out.r_squared / lags) / ((1.0 - out.r_squared) / out.f_df2);
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
