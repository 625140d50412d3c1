#include "aftershock/least_squares.h"

#include <Eigen/Dense>
#include <cmath>

#include "absl/status/status.h"
#include "absl/strings/str_cat.h"

namespace aftershock {

absl::StatusOr<OlsResult> OrdinaryLeastSquares(absl::Span<const double> y,
                                               absl::Span<const double> x, int num_cols,
                                               const OlsOptions& options) {
  if (num_cols < 0 || (num_cols == 0 && !options.add_intercept)) {
    return absl::InvalidArgumentError(absl::StrCat("regression needs at least one regressor (got ",
                                                   num_cols, " columns and no intercept)"));
  }
  const int n = static_cast<int>(y.size());
  const int m = num_cols;
  if (x.size() != static_cast<size_t>(n) * static_cast<size_t>(m)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "design matrix has ", x.size(), " entries; expected ", n, " rows x ", m, " columns"));
  }
  const int k = m + (options.add_intercept ? 1 : 0);
  if (n < k + 1) {
    return absl::InvalidArgumentError(absl::StrCat("regression has ", n, " observations and ", k,
                                                   " parameters; at least ", k + 1,
                                                   " observations are needed"));
  }
  for (int i = 0; i < n; ++i) {
    if (!std::isfinite(y[i])) {
      return absl::InvalidArgumentError(absl::StrCat("regressand is not finite at row ", i));
    }
  }
  for (size_t i = 0; i < x.size(); ++i) {
    if (!std::isfinite(x[i])) {
      return absl::InvalidArgumentError(
          absl::StrCat("design matrix is not finite at row ", i / m, ", column ", i % m));
    }
  }

  using Matrix = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic>;
  Eigen::Map<const Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>> xm(
      x.data(), n, m);
  Eigen::Map<const Eigen::VectorXd> ym(y.data(), n);

  // Centring (with an intercept) removes the collinearity between the constant
  // and regressors with a large mean; unit column norms make the rank tolerance
  // scale-free.
  Eigen::VectorXd xbar = Eigen::VectorXd::Zero(m);
  double ybar = 0.0;
  if (options.add_intercept) {
    xbar = xm.colwise().mean().transpose();
    ybar = ym.mean();
  }
  Matrix xc = xm.rowwise() - xbar.transpose();
  Eigen::VectorXd yc = ym.array() - ybar;

  OlsResult out;
  out.nobs = n;
  out.num_params = k;
  Eigen::VectorXd beta = Eigen::VectorXd::Zero(m);
  Matrix cov_unit = Matrix::Zero(m, m);  // (Xc'Xc)^-1
  if (m > 0) {
    Eigen::VectorXd scale(m);
    for (int j = 0; j < m; ++j) {
      scale(j) = xc.col(j).norm();
      if (!(scale(j) > 0.0)) {
        return absl::InvalidArgumentError(absl::StrCat(
            "design matrix is rank deficient: column ", j,
            options.add_intercept ? " is constant (collinear with the intercept)" : " is zero"));
      }
      xc.col(j) /= scale(j);
    }
    Eigen::ColPivHouseholderQR<Matrix> qr(xc);
    qr.setThreshold(options.rank_tolerance);
    if (qr.rank() < m) {
      return absl::InvalidArgumentError(absl::StrCat("design matrix is rank deficient: rank ",
                                                     qr.rank() + (options.add_intercept ? 1 : 0),
                                                     " of ", k, " columns"));
    }
    Eigen::VectorXd b_scaled = qr.solve(yc);
    // (Xs'Xs)^-1 = P R^-1 R^-T P' for Xs P = Q R.
    Matrix r = qr.matrixR().topLeftCorner(m, m).triangularView<Eigen::Upper>();
    Matrix rinv = r.triangularView<Eigen::Upper>().solve(Matrix::Identity(m, m));
    Matrix inner = rinv * rinv.transpose();
    Matrix perm = qr.colsPermutation();
    Matrix cov_scaled = perm * inner * perm.transpose();
    for (int i = 0; i < m; ++i) {
      beta(i) = b_scaled(i) / scale(i);
      for (int j = 0; j < m; ++j) cov_unit(i, j) = cov_scaled(i, j) / (scale(i) * scale(j));
    }
    // Residuals from the scaled problem (better conditioned than re-using xm).
    Eigen::VectorXd res = yc - xc * b_scaled;
    out.residuals.assign(res.data(), res.data() + n);
  } else {
    out.residuals.assign(yc.data(), yc.data() + n);
  }

  double rss = 0.0;
  for (double e : out.residuals) rss += e * e;
  const double s2 = rss / (n - k);
  double tss = 0.0;
  for (int i = 0; i < n; ++i) {
    const double d = options.add_intercept ? y[i] - ybar : y[i];
    tss += d * d;
  }
  out.rss = rss;
  out.residual_sd = std::sqrt(s2);
  out.r_squared = tss > 0.0 ? 1.0 - rss / tss : 0.0;

  if (options.add_intercept) {
    const double b0 = ybar - xbar.dot(beta);
    const double var0 = s2 / n + s2 * xbar.dot(cov_unit * xbar);
    out.coefficients.push_back(b0);
    out.std_errors.push_back(std::sqrt(var0));
  }
  for (int j = 0; j < m; ++j) {
    out.coefficients.push_back(beta(j));
    out.std_errors.push_back(std::sqrt(s2 * cov_unit(j, j)));
  }
  out.t_statistics.resize(k);
  for (int j = 0; j < k; ++j) {
    out.t_statistics[j] = out.std_errors[j] > 0.0 ? out.coefficients[j] / out.std_errors[j]
                                                  : std::copysign(HUGE_VAL, out.coefficients[j]);
  }
  return out;
}

}  // namespace aftershock
