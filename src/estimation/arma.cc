#include "aftershock/arma.h"

#include <Eigen/Dense>
#include <algorithm>
#include <array>
#include <cmath>
#include <exception>
#include <limits>
#include <map>
#include <nlopt.hpp>
#include <type_traits>
#include <utility>

#include "absl/strings/str_cat.h"
#include "aftershock/least_squares.h"
#include "aftershock/model_spec.h"
#include "aftershock/stats.h"
#include "estimation/arma_internal.h"

namespace aftershock {
namespace {

constexpr int kMaxState = kMaxArmaOrder + 1;  // r = max(p, q + 1)
constexpr double kLog2Pi = 1.8378770664093454836;
// Bound of the unconstrained coordinates; u / sqrt(1 + u^2) at 200 is 0.99999.
constexpr double kMaxUnconstrained = 200.0;
// The filter switches to the steady-state gain once trace(P_t - R R') falls
// below this (P_t - R R' is positive semi-definite, so every entry is bounded).
constexpr double kSteadyTolerance = 1e-14;

absl::Status CheckOrders(int p, int q) {
  if (p < 0 || q < 0 || p > kMaxArmaOrder || q > kMaxArmaOrder) {
    return absl::InvalidArgumentError(
        absl::StrCat("ARMA orders must be in 0..", kMaxArmaOrder, " (got p=", p, ", q=", q, ")"));
  }
  return absl::OkStatus();
}

int MinObs(int p, int q) { return 20 + 4 * (p + q); }

// Partial autocorrelations of the polynomial 1 - sum a_i z^i by the reverse
// Durbin-Levinson recursion; false when some |r_k| >= 1 (not stationary).
bool ToPartials(const std::vector<double>& a, std::vector<double>* r) {
  const int p = static_cast<int>(a.size());
  std::vector<double> cur = a;
  r->assign(p, 0.0);
  for (int k = p; k >= 1; --k) {
    const double rk = cur[k - 1];
    if (!(std::fabs(rk) < 1.0)) return false;
    (*r)[k - 1] = rk;
    std::vector<double> next(k - 1);
    const double d = 1.0 - rk * rk;
    for (int j = 0; j < k - 1; ++j) next[j] = (cur[j] + rk * cur[k - 2 - j]) / d;
    cur = std::move(next);
  }
  return true;
}

// Forward Durbin-Levinson: partials (|r| < 1) to stationary coefficients.
void FromPartials(const double* r, int p, double* a) {
  std::array<double, kMaxArmaOrder> prev{};
  for (int k = 0; k < p; ++k) {
    a[k] = r[k];
    for (int j = 0; j < k; ++j) a[j] = prev[j] - r[k] * prev[k - 1 - j];
    for (int j = 0; j <= k; ++j) prev[j] = a[j];
  }
}

bool Stationary(const std::vector<double>& a) {
  std::vector<double> r;
  return ToPartials(a, &r);
}

std::vector<double> Negated(const std::vector<double>& v) {
  std::vector<double> out(v.size());
  for (size_t i = 0; i < v.size(); ++i) out[i] = -v[i];
  return out;
}

// The MA polynomial 1 + sum m_j z^j is invertible iff the "AR" coefficients
// -m are stationary.
bool Invertible(const std::vector<double>& ma) { return Stationary(Negated(ma)); }

// Multiplies coefficient j (1-based) by 0.9^j until the polynomial is valid.
void ShrinkUntil(std::vector<double>* c, bool (*valid)(const std::vector<double>&)) {
  for (int it = 0; it < 200 && !valid(*c); ++it) {
    double f = 1.0;
    for (double& v : *c) {
      f *= 0.9;
      v *= f;
    }
  }
  if (!valid(*c)) std::fill(c->begin(), c->end(), 0.0);
}

// Sums over the sample of log F_t and of v_t^2 / F_t (filter at sigma2 = 1).
struct FilterSums {
  double sum_log_f = 0.0;
  double sum_sq = 0.0;
};

// The state-space form of one parameter set: the mean, the first column phi of
// the transition (the AR coefficients), R = (1, ma_1, .., ma_q)' and the
// stationary state covariance P_0 (row-major r x r), r = max(p, q + 1).
struct FilterSetup {
  int r = 1;
  double mu = 0.0;
  std::array<double, kMaxState> phi{}, rv{};
  std::array<double, kMaxState * kMaxState> pm{};
};

// Fills `s` for validated parameters (stationary AR, invertible MA).
void SetupFilter(double mu, const double* ar, int p, const double* ma, int q, FilterSetup* s) {
  const int r = std::max(p, q + 1);
  s->r = r;
  s->mu = mu;
  s->phi.fill(0.0);
  s->rv.fill(0.0);
  s->pm.fill(0.0);
  std::array<double, kMaxState>& phi = s->phi;
  std::array<double, kMaxState>& rv = s->rv;
  for (int i = 0; i < p; ++i) phi[i] = ar[i];
  rv[0] = 1.0;
  for (int j = 0; j < q; ++j) rv[j + 1] = ma[j];

  // Stationary state covariance: (I - T (x) T) vec(P) = vec(R R').
  if (r == 1) {
    s->pm[0] = 1.0 / (1.0 - phi[0] * phi[0]);
  } else {
    using Mat = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, 0, kMaxState * kMaxState,
                              kMaxState * kMaxState>;
    using Vec = Eigen::Matrix<double, Eigen::Dynamic, 1, 0, kMaxState * kMaxState, 1>;
    const auto tm = [&](int i, int k) { return k == 0 ? phi[i] : (k == i + 1 ? 1.0 : 0.0); };
    const int r2 = r * r;
    Mat a = Mat::Identity(r2, r2);
    Vec b(r2);
    for (int i = 0; i < r; ++i) {
      for (int j = 0; j < r; ++j) {
        b(i * r + j) = rv[i] * rv[j];
        for (int k = 0; k < r; ++k) {
          const double tik = tm(i, k);
          if (tik == 0.0) continue;
          for (int l = 0; l < r; ++l) a(i * r + j, k * r + l) -= tik * tm(j, l);
        }
      }
    }
    Vec sol = a.partialPivLu().solve(b);
    for (int i = 0; i < r2; ++i) s->pm[i] = sol(i);
  }
}

// One parameter set's filter in progress: the state, the running sums, the
// next observation and where the errors and variance ratios go (null: not kept).
template <int R>
struct FilterLane {
  double st[R] = {};
  double gain[R] = {};  // steady-state gain T R
  double sum_log_f = 0.0, sum_sq = 0.0;
  int t = 0;
  double* resid = nullptr;
  double* ratio = nullptr;
};

// The time-varying phase of the filter for state dimension R (a compile-time
// constant so the small loops unroll), from P_0 until trace(P_t - R R') falls
// below kSteadyTolerance (P_t - R R' is positive semi-definite, so every entry
// is then bounded) or the sample ends; lane->t is then the first observation of
// the steady state. False when some F_t is not positive and finite.
template <int R>
bool FilterTransient(absl::Span<const double> y, const FilterSetup& s, FilterLane<R>* lane) {
  const int n = static_cast<int>(y.size());
  const double mu = s.mu;
  const std::array<double, kMaxState>& phi = s.phi;
  const std::array<double, kMaxState>& rv = s.rv;
  std::array<double, kMaxState* kMaxState> pm = s.pm;
  double st[R] = {}, tp0[R] = {}, m[R * R];
  double sum_log_f = 0.0, sum_sq = 0.0;
  double* resid = lane->resid;
  double* ratio = lane->ratio;
  int t = 0;
  for (; t < n; ++t) {
    const double v = y[t] - mu - st[0];
    const double f = pm[0];
    if (!(f > 0.0) || !std::isfinite(f)) return false;
    sum_log_f += std::log(f);
    sum_sq += v * v / f;
    if (resid) resid[t] = v;
    if (ratio) ratio[t] = f;
    // M = T P; (T P)_{i.} = phi_i P_{0.} + P_{i+1,.}.
    for (int i = 0; i < R; ++i) {
      for (int j = 0; j < R; ++j) {
        m[i * R + j] = phi[i] * pm[j] + (i + 1 < R ? pm[(i + 1) * R + j] : 0.0);
      }
    }
    for (int i = 0; i < R; ++i) tp0[i] = m[i * R];  // T P Z'
    const double s0 = st[0];
    for (int i = 0; i < R; ++i) {
      st[i] = phi[i] * s0 + (i + 1 < R ? st[i + 1] : 0.0) + tp0[i] / f * v;
    }
    // P_{t+1} = M T' + R R' - K K' f, with (M T')_{ij} = phi_j M_{i0} + M_{i,j+1}.
    double excess = 0.0;
    for (int i = 0; i < R; ++i) {
      for (int j = 0; j < R; ++j) {
        const double mt = phi[j] * m[i * R] + (j + 1 < R ? m[i * R + j + 1] : 0.0);
        pm[i * R + j] = mt + rv[i] * rv[j] - tp0[i] * tp0[j] / f;
      }
      excess += pm[i * R + i] - rv[i] * rv[i];
    }
    if (excess < kSteadyTolerance) {
      ++t;
      break;
    }
  }
  for (int i = 0; i < R; ++i) lane->st[i] = st[i];
  // Steady state: F = 1 and the gain is T R, so a_{t+1} = T a_t + T R v_t.
  for (int i = 0; i < R; ++i) lane->gain[i] = phi[i] + (i + 1 < R ? rv[i + 1] : 0.0);
  lane->sum_log_f = sum_log_f;
  lane->sum_sq = sum_sq;
  lane->t = t;
  return true;
}

// The steady state of B lanes over observations [lane->t, end), the lanes'
// recursions interleaved so that their dependency chains (a subtraction, a
// multiplication and an addition per observation) overlap. Each lane's
// operations are those of a lane run alone, in the same order, so the values
// do not depend on B or on the other lanes. REQUIRES: every lane->t == from.
template <int R, int B, bool kKeep>
void FilterSteady(absl::Span<const double> y, const FilterSetup* const* s,
                  FilterLane<R>* const* lanes, int from, int end) {
  double st[B][R], gain[B][R], phi[B][R], mu[B], sum_sq[B];
  double* resid[B];
  double* ratio[B];
  for (int b = 0; b < B; ++b) {
    for (int i = 0; i < R; ++i) {
      st[b][i] = lanes[b]->st[i];
      gain[b][i] = lanes[b]->gain[i];
      phi[b][i] = s[b]->phi[i];
    }
    mu[b] = s[b]->mu;
    sum_sq[b] = lanes[b]->sum_sq;
    resid[b] = lanes[b]->resid;
    ratio[b] = lanes[b]->ratio;
  }
  for (int t = from; t < end; ++t) {
    const double yt = y[t];
#pragma GCC unroll 8
    for (int b = 0; b < B; ++b) {
      const double v = yt - mu[b] - st[b][0];
      sum_sq[b] += v * v;
      if (kKeep) {
        resid[b][t] = v;
        ratio[b][t] = 1.0;
      }
      const double s0 = st[b][0];
#pragma GCC unroll 8
      for (int i = 0; i < R; ++i) {
        st[b][i] = phi[b][i] * s0 + (i + 1 < R ? st[b][i + 1] : 0.0) + gain[b][i] * v;
      }
    }
  }
  for (int b = 0; b < B; ++b) {
    for (int i = 0; i < R; ++i) lanes[b]->st[i] = st[b][i];
    lanes[b]->sum_sq = sum_sq[b];
    lanes[b]->t = end;
  }
}

// Filters B parameter sets of state dimension R (their setups s[0..B-1]) over
// y: each lane's time-varying phase alone, then the steady states, each alone
// up to the latest switch and interleaved from there. Lane b's outputs go to
// sums[b], resid[b] and ratio[b] (all null or all non-null). Returns the number of lanes
// that succeeded before the first failure (B when all did).
template <int R, int B>
int FilterLanes(absl::Span<const double> y, const FilterSetup* const* s, FilterSums* sums,
                double* const* resid, double* const* ratio) {
  const int n = static_cast<int>(y.size());
  FilterLane<R> lane[B];
  FilterLane<R>* ptr[B];
  int latest = 0;
  for (int b = 0; b < B; ++b) {
    lane[b].resid = resid[b];
    lane[b].ratio = ratio[b];
    if (!FilterTransient<R>(y, *s[b], &lane[b])) return b;
    latest = std::max(latest, lane[b].t);
    ptr[b] = &lane[b];
  }
  // REQUIRES (callers): errors and ratios kept for every lane or for none.
  const bool keep = resid[0] != nullptr;
  const auto steady = [&](const FilterSetup* const* ls, FilterLane<R>* const* ll, int from, int end,
                          auto lanes_tag) {
    constexpr int kLanes = decltype(lanes_tag)::value;
    if (keep) {
      FilterSteady<R, kLanes, true>(y, ls, ll, from, end);
    } else {
      FilterSteady<R, kLanes, false>(y, ls, ll, from, end);
    }
  };
  if (B > 1) {
    for (int b = 0; b < B; ++b) {
      if (lane[b].t < latest)
        steady(&s[b], &ptr[b], lane[b].t, latest, std::integral_constant<int, 1>());
    }
  }
  if (latest < n) steady(s, ptr, latest, n, std::integral_constant<int, B>());
  for (int b = 0; b < B; ++b) {
    sums[b].sum_log_f = lane[b].sum_log_f;
    sums[b].sum_sq = lane[b].sum_sq;
    if (!(std::isfinite(sums[b].sum_sq) && std::isfinite(sums[b].sum_log_f))) return b;
  }
  return B;
}

template <int B>
int FilterLanesOfOrder(int r, absl::Span<const double> y, const FilterSetup* const* s,
                       FilterSums* sums, double* const* resid, double* const* ratio) {
  switch (r) {
    case 1:
      return FilterLanes<1, B>(y, s, sums, resid, ratio);
    case 2:
      return FilterLanes<2, B>(y, s, sums, resid, ratio);
    case 3:
      return FilterLanes<3, B>(y, s, sums, resid, ratio);
    case 4:
      return FilterLanes<4, B>(y, s, sums, resid, ratio);
    case 5:
      return FilterLanes<5, B>(y, s, sums, resid, ratio);
    default:
      return FilterLanes<6, B>(y, s, sums, resid, ratio);
  }
}

// Exact filter at sigma2 = 1 for validated parameters (stationary AR,
// invertible MA). Fills the sums and optionally (both or neither) the errors
// and variance ratios.
bool RunFilter(absl::Span<const double> y, double mu, const double* ar, int p, const double* ma,
               int q, FilterSums* sums, std::vector<double>* resid, std::vector<double>* ratio) {
  FilterSetup setup;
  SetupFilter(mu, ar, p, ma, q, &setup);
  const FilterSetup* s = &setup;
  double* e = resid ? resid->data() : nullptr;
  double* f = ratio ? ratio->data() : nullptr;
  return FilterLanesOfOrder<1>(setup.r, y, &s, sums, &e, &f) == 1;
}

// RunFilter for `count` parameter sets of the same orders (setups s[0..count-1])
// in groups of up to four interleaved lanes, as even as possible; each lane's
// values are those of RunFilter alone. Returns the number of parameter sets
// filtered before the first failure (count when none failed).
int RunFilterBatch(absl::Span<const double> y, int count, const FilterSetup* const* s,
                   FilterSums* sums, double* const* resid, double* const* ratio) {
  int done = 0;
  while (done < count) {
    // Groups as even as possible (5 = 3 + 2, not 4 + 1: a lone lane runs at
    // the latency of its chain, as long as a group of three or four).
    const int groups = (count - done + 3) / 4;
    const int b = (count - done + groups - 1) / groups;
    const int r = s[done]->r;
    int ok = 0;
    switch (b) {
      case 1:
        ok = FilterLanesOfOrder<1>(r, y, s + done, sums + done, resid + done, ratio + done);
        break;
      case 2:
        ok = FilterLanesOfOrder<2>(r, y, s + done, sums + done, resid + done, ratio + done);
        break;
      case 3:
        ok = FilterLanesOfOrder<3>(r, y, s + done, sums + done, resid + done, ratio + done);
        break;
      default:
        ok = FilterLanesOfOrder<4>(r, y, s + done, sums + done, resid + done, ratio + done);
        break;
    }
    done += ok;
    if (ok < b) return done;
  }
  return done;
}

absl::Status ValidateParams(const ArmaParams& params) {
  if (absl::Status s = CheckOrders(params.p(), params.q()); !s.ok()) return s;
  if (!std::isfinite(params.mu)) return absl::InvalidArgumentError("mu is not finite");
  for (double v : params.ar) {
    if (!std::isfinite(v)) return absl::InvalidArgumentError("an AR coefficient is not finite");
  }
  for (double v : params.ma) {
    if (!std::isfinite(v)) return absl::InvalidArgumentError("an MA coefficient is not finite");
  }
  if (!(params.sigma2 > 0.0) || !std::isfinite(params.sigma2)) {
    return absl::InvalidArgumentError(
        absl::StrCat("sigma2 must be positive and finite (got ", params.sigma2, ")"));
  }
  if (!Stationary(params.ar)) {
    return absl::InvalidArgumentError("AR coefficients are not stationary");
  }
  if (!Invertible(params.ma)) {
    return absl::InvalidArgumentError("MA coefficients are not invertible");
  }
  return absl::OkStatus();
}

// Long-autoregression residuals (first Hannan-Rissanen stage): entries before
// index m are undefined (0). The regression on a constant and m lags is solved
// by the normal equations (Cholesky of the centred cross-product, a blocked
// matrix product): these residuals only seed the starting values, and this is
// several times faster than the pivoted QR of OrdinaryLeastSquares, which
// remains the fallback when the cross-product is not positive definite.
absl::StatusOr<std::vector<double>> LongArResiduals(absl::Span<const double> y, int m) {
  const int n = static_cast<int>(y.size());
  const int rows = n - m;
  double mean = 0.0;
  for (double v : y) mean += v;
  mean /= n;
  Eigen::MatrixXd x(rows, m);
  Eigen::VectorXd yy(rows);
  for (int t = 0; t < rows; ++t) {
    yy(t) = y[t + m] - mean;
    for (int j = 1; j <= m; ++j) x(t, j - 1) = y[t + m - j] - mean;
  }
  // Exact centring of every column makes the intercept drop out.
  const Eigen::RowVectorXd xbar = x.colwise().mean();
  x.rowwise() -= xbar;
  const double ybar = yy.mean();
  yy.array() -= ybar;
  Eigen::MatrixXd xtx(m, m);
  xtx.setZero();
  xtx.selfadjointView<Eigen::Lower>().rankUpdate(x.transpose());
  Eigen::LLT<Eigen::MatrixXd> llt(xtx.selfadjointView<Eigen::Lower>());
  std::vector<double> e(n, 0.0);
  if (llt.info() == Eigen::Success) {
    const Eigen::VectorXd b = llt.solve(x.transpose() * yy);
    if (b.allFinite()) {
      const Eigen::VectorXd res = yy - x * b;
      for (int t = 0; t < rows; ++t) e[t + m] = res(t);
      return e;
    }
  }
  std::vector<double> yv(rows), xv(static_cast<size_t>(rows) * m);
  for (int t = 0; t < rows; ++t) {
    yv[t] = y[t + m];
    for (int j = 1; j <= m; ++j) xv[static_cast<size_t>(t) * m + j - 1] = y[t + m - j];
  }
  absl::StatusOr<OlsResult> ols = OrdinaryLeastSquares(yv, xv, m);
  if (!ols.ok()) {
    return absl::InvalidArgumentError(
        absl::StrCat("Hannan-Rissanen long autoregression failed: ", ols.status().message()));
  }
  for (int t = 0; t < rows; ++t) e[t + m] = ols->residuals[t];
  return e;
}

int LongArOrder(int n, int p, int q, const ArmaFitOptions& options) {
  if (options.long_ar_order > 0) return options.long_ar_order;
  return std::max(1, std::min(std::max(20, 2 * std::max(p, q)), n / 4));
}

absl::StatusOr<ArmaParams> HannanRissanenImpl(absl::Span<const double> y, int p, int q,
                                              const std::vector<double>* long_resid, int m) {
  const int n = static_cast<int>(y.size());
  double mean = 0.0;
  for (double v : y) mean += v;
  mean /= n;
  ArmaParams out;
  out.mu = mean;
  out.ar.assign(p, 0.0);
  out.ma.assign(q, 0.0);
  if (p + q == 0) {
    double s = 0.0;
    for (double v : y) s += (v - mean) * (v - mean);
    out.sigma2 = s / n;
    return out;
  }
  // q == 0: ordinary least squares on p lags; otherwise the residuals of the
  // long autoregression enter as regressors from index m on.
  const int start = q == 0 ? p : m + std::max(p, q);
  const int rows = n - start;
  const int k = p + q;
  if (rows < k + 2) {
    return absl::InvalidArgumentError(absl::StrCat("series too short for ARMA(", p, ",", q,
                                                   ") starting values (", n, " observations)"));
  }
  std::vector<double> yy(rows), x(static_cast<size_t>(rows) * k);
  for (int t = 0; t < rows; ++t) {
    const int s = t + start;
    yy[t] = y[s];
    for (int i = 1; i <= p; ++i) x[static_cast<size_t>(t) * k + i - 1] = y[s - i];
    for (int j = 1; j <= q; ++j) x[static_cast<size_t>(t) * k + p + j - 1] = (*long_resid)[s - j];
  }
  absl::StatusOr<OlsResult> ols = OrdinaryLeastSquares(yy, x, k);
  if (!ols.ok()) {
    return absl::InvalidArgumentError(
        absl::StrCat("Hannan-Rissanen regression failed: ", ols.status().message()));
  }
  for (int i = 0; i < p; ++i) out.ar[i] = ols->coefficients[1 + i];
  for (int j = 0; j < q; ++j) out.ma[j] = ols->coefficients[1 + p + j];
  ShrinkUntil(&out.ar, &Stationary);
  ShrinkUntil(&out.ma, &Invertible);
  out.sigma2 = ols->rss / rows;
  return out;
}

absl::Status CheckFitInput(absl::Span<const double> y, int p, int q) {
  if (absl::Status s = CheckOrders(p, q); !s.ok()) return s;
  return ValidateSeries(y, MinObs(p, q), true);
}

// Unconstrained coordinates of the optimizer: [(mu - mean) / sd, u_ar, u_ma],
// partial autocorrelation r = u / sqrt(1 + u^2).
struct Problem {
  absl::Span<const double> y;
  int p = 0, q = 0;
  double mean = 0.0, sd = 1.0;
  int evaluations = 0;
};

double ToPartial(double u) { return u / std::sqrt(1.0 + u * u); }
double FromPartial(double r) { return r / std::sqrt(1.0 - r * r); }

void Decode(const Problem& pr, const double* x, double* mu, double* ar, double* ma) {
  *mu = pr.mean + pr.sd * x[0];
  std::array<double, kMaxArmaOrder> r{};
  for (int i = 0; i < pr.p; ++i) r[i] = ToPartial(x[1 + i]);
  FromPartials(r.data(), pr.p, ar);
  for (int j = 0; j < pr.q; ++j) r[j] = ToPartial(x[1 + pr.p + j]);
  FromPartials(r.data(), pr.q, ma);
  for (int j = 0; j < pr.q; ++j) ma[j] = -ma[j];
}

// Concentrated log-likelihood (sigma2 = sum v^2/F / n) per observation.
double ConcentratedLoglikPerObs(const FilterSums& s, int n) {
  const double sigma2 = s.sum_sq / n;
  return -0.5 * (kLog2Pi + std::log(sigma2) + 1.0) - 0.5 * s.sum_log_f / n;
}

double Objective(unsigned dim, const double* x, double* grad, void* data) {
  auto* pr = static_cast<Problem*>(data);
  ++pr->evaluations;
  double mu, ar[kMaxArmaOrder], ma[kMaxArmaOrder];
  Decode(*pr, x, &mu, ar, ma);
  FilterSums sums;
  if (!RunFilter(pr->y, mu, ar, pr->p, ma, pr->q, &sums, nullptr, nullptr) ||
      !(sums.sum_sq > 0.0)) {
    return 1e10;
  }
  return -ConcentratedLoglikPerObs(sums, static_cast<int>(pr->y.size()));
}

ArmaFit FinishFit(absl::Span<const double> y, const ArmaParams& params, const ArmaParams& start,
                  const ArmaFilterOutput& f) {
  ArmaFit fit;
  fit.nobs = static_cast<int>(y.size());
  fit.params = params;
  fit.start = start;
  fit.loglik = f.loglik;
  const double k = params.p() + params.q() + 2.0;
  fit.aic = -2.0 * f.loglik + 2.0 * k;
  fit.bic = -2.0 * f.loglik + std::log(static_cast<double>(fit.nobs)) * k;
  fit.residuals = f.residuals;
  return fit;
}

// Unconstrained coordinates of a valid parameter set (mu, ar, ma used).
std::vector<double> Encode(const Problem& pr, const ArmaParams& a) {
  std::vector<double> x(1 + pr.p + pr.q, 0.0);
  x[0] = (a.mu - pr.mean) / pr.sd;
  std::vector<double> partials;
  ToPartials(a.ar, &partials);
  for (int i = 0; i < pr.p; ++i) x[1 + i] = FromPartial(partials[i]);
  ToPartials(Negated(a.ma), &partials);
  for (int j = 0; j < pr.q; ++j) x[1 + pr.p + j] = FromPartial(partials[j]);
  x[0] = std::clamp(x[0], -9.0, 9.0);
  for (double& v : x) v = std::clamp(v, -0.9 * kMaxUnconstrained, 0.9 * kMaxUnconstrained);
  return x;
}

// The exact concentrated likelihood as a sum of squares: with v_t, F_t the
// filter's errors and variance ratios and g = exp(sum log F_t / (2 n)),
// w_t = g v_t / sqrt(F_t) gives sum w_t^2 = (sum v_t^2 / F_t) prod F_t^(1/n),
// and the concentrated log-likelihood is -n/2 (log(2 pi) + 1 + log(sum w^2 / n)):
// maximizing it is minimizing sum w^2. False where the filter fails.
// Weights the filter's errors w (in place) by g / sqrt(F_t) and sums their
// squares; false when that sum is not finite or sum v^2 / F is not positive.
bool WeightErrors(const FilterSums& sums, int n, double* w, const double* ratio, double* ss) {
  if (!(sums.sum_sq > 0.0)) return false;
  const double g = std::exp(sums.sum_log_f / (2.0 * n));
  double acc = 0.0;
  for (int t = 0; t < n; ++t) {
    const double f = ratio[t];
    w[t] *= f == 1.0 ? g : g / std::sqrt(f);
    acc += w[t] * w[t];
  }
  *ss = acc;
  return std::isfinite(acc);
}

// WeightErrors for B lanes whose sums v^2 / F are positive, their loops
// interleaved; each lane's operations are those of WeightErrors alone.
template <int B>
void WeightLanes(const FilterSums* sums, int n, double* const* w, const double* const* ratio,
                 double* ss) {
  double g[B], acc[B];
  for (int b = 0; b < B; ++b) {
    g[b] = std::exp(sums[b].sum_log_f / (2.0 * n));
    acc[b] = 0.0;
  }
  for (int t = 0; t < n; ++t) {
#pragma GCC unroll 4
    for (int b = 0; b < B; ++b) {
      const double f = ratio[b][t];
      w[b][t] *= f == 1.0 ? g[b] : g[b] / std::sqrt(f);
      acc[b] += w[b][t] * w[b][t];
    }
  }
  for (int b = 0; b < B; ++b) ss[b] = acc[b];
}

bool WeightedErrors(const Problem& pr, const double* x, std::vector<double>* w,
                    std::vector<double>* ratio, double* ss) {
  double mu, ar[kMaxArmaOrder], ma[kMaxArmaOrder];
  Decode(pr, x, &mu, ar, ma);
  FilterSums sums;
  if (!RunFilter(pr.y, mu, ar, pr.p, ma, pr.q, &sums, w, ratio)) return false;
  return WeightErrors(sums, static_cast<int>(pr.y.size()), w->data(), ratio->data(), ss);
}

// WeightedErrors at `count` points xs[0..count-1] (the filters interleaved by
// RunFilterBatch; each point's values are those of WeightedErrors alone): the
// errors of point k go to w[k] and the variance ratios to ratio[k] (n entries
// each). Returns the number of points before the first failure (count when
// none failed).
int WeightedErrorsBatch(const Problem& pr, int count, const double* const* xs, double* const* w,
                        double* const* ratio, double* ss) {
  constexpr int kMaxBatch = 1 + 2 * kMaxArmaOrder;
  std::array<FilterSetup, kMaxBatch> setups;
  std::array<const FilterSetup*, kMaxBatch> sp;
  std::array<FilterSums, kMaxBatch> sums;
  for (int k = 0; k < count; ++k) {
    double mu, ar[kMaxArmaOrder], ma[kMaxArmaOrder];
    Decode(pr, xs[k], &mu, ar, ma);
    SetupFilter(mu, ar, pr.p, ma, pr.q, &setups[k]);
    sp[k] = &setups[k];
  }
  const int filtered = RunFilterBatch(pr.y, count, sp.data(), sums.data(), w, ratio);
  const int n = static_cast<int>(pr.y.size());
  // The points up to the first whose sum v^2 / F is not positive are weighted,
  // up to four at a time with their sums of squares interleaved.
  int weighted = 0;
  while (weighted < filtered && sums[weighted].sum_sq > 0.0) ++weighted;
  for (int k = 0; k < weighted;) {
    const int b = std::min(4, weighted - k);
    switch (b) {
      case 1:
        WeightLanes<1>(sums.data() + k, n, w + k, ratio + k, ss + k);
        break;
      case 2:
        WeightLanes<2>(sums.data() + k, n, w + k, ratio + k, ss + k);
        break;
      case 3:
        WeightLanes<3>(sums.data() + k, n, w + k, ratio + k, ss + k);
        break;
      default:
        WeightLanes<4>(sums.data() + k, n, w + k, ratio + k, ss + k);
        break;
    }
    k += b;
  }
  for (int k = 0; k < weighted; ++k) {
    if (!std::isfinite(ss[k])) return k;
  }
  return weighted;
}

// Levenberg-Marquardt on the sum of squares above, in the optimizer's
// unconstrained coordinates, with a forward-difference Jacobian (dim + 1
// filter passes per iteration): near the optimum the Gauss-Newton steps
// converge in a few iterations where a derivative-free search needs hundreds
// of evaluations on a flat ridge. x is updated to the best point found.
// Converged when two accepted steps running lower the objective per
// observation by no more than ftol_rel relative, or a step below 1e-6 in every
// coordinate lowers sum w^2 by no more than 1e-13 relative or finds no lower
// point (the forward-difference Jacobian leaves steps of about 1e-7 at the
// minimum; the objective is quadratic there, so the log-likelihood is then
// within about 1e-9 of it). Returns false (x still the best point) when the
// iterations or the evaluation budget run out or no step is accepted.
bool RefineByLevenbergMarquardt(Problem* pr, std::vector<double>* x, const double* lb,
                                const double* ub, int max_iterations, int max_evaluations,
                                double ftol_rel) {
  const int n = static_cast<int>(pr->y.size());
  const int dim = static_cast<int>(x->size());
  std::vector<double> w(n), ratio(n), wt(n), ws(n), xt(dim);
  double ss = 0.0;
  ++pr->evaluations;
  if (!WeightedErrors(*pr, x->data(), &w, &ratio, &ss)) return false;
  Eigen::MatrixXd jac(n, dim);
  std::vector<double> ratios(static_cast<size_t>(n) * dim), steps(dim), ss_cols(dim);
  std::vector<std::vector<double>> xs(dim);
  std::vector<const double*> xp(dim);
  std::vector<double*> wp(dim), rp(dim);
  double lambda = 1e-3;
  int ftol_run = 0;  // accepted steps running within the objective tolerance
  for (int it = 0; it < max_iterations; ++it) {
    // An iteration needs at least dim + 1 passes: stop within the budget.
    if (pr->evaluations + dim + 1 > max_evaluations) return false;
    // The dim shifted points' filters run interleaved, their weighted errors
    // straight into the Jacobian's columns.
    for (int i = 0; i < dim; ++i) {
      xs[i] = *x;
      steps[i] = 1e-7 * std::max(1.0, std::fabs(xs[i][i]));
      xs[i][i] += steps[i];
      xp[i] = xs[i].data();
      wp[i] = jac.col(i).data();
      rp[i] = &ratios[static_cast<size_t>(i) * n];
    }
    const int done = WeightedErrorsBatch(*pr, dim, xp.data(), wp.data(), rp.data(), ss_cols.data());
    // As many evaluations as one point at a time up to the first failure.
    pr->evaluations += std::min(done + 1, dim);
    if (done < dim) return false;
    for (int i = 0; i < dim; ++i) {
      const double h = steps[i];
      double* col = jac.col(i).data();
      for (int t = 0; t < n; ++t) col[t] = (col[t] - w[t]) / h;
    }
    const Eigen::Map<const Eigen::VectorXd> wv(w.data(), n);
    // J'J entry by entry (vectorized dot products of the columns): a general
    // matrix product packs both n x dim operands first, which costs more than
    // the products at these sizes.
    Eigen::MatrixXd a(dim, dim);
    for (int i = 0; i < dim; ++i) {
      for (int j = 0; j <= i; ++j) a(i, j) = a(j, i) = jac.col(i).dot(jac.col(j));
    }
    const Eigen::VectorXd g = jac.transpose() * wv;
    bool accepted = false;
    for (int tries = 0; tries < 12 && !accepted; ++tries) {
      Eigen::MatrixXd damped = a;
      for (int i = 0; i < dim; ++i) damped(i, i) += lambda * std::max(a(i, i), 1e-12);
      const Eigen::VectorXd step = damped.ldlt().solve(-g);
      if (!step.allFinite()) return false;
      bool small = true;
      for (int i = 0; i < dim; ++i) {
        xt[i] = std::clamp((*x)[i] + step[i], lb[i], ub[i]);
        small = small && std::fabs(xt[i] - (*x)[i]) <= 1e-6 * std::max(1.0, std::fabs((*x)[i]));
      }
      double ss_t = 0.0;
      ++pr->evaluations;
      bool ok = WeightedErrors(*pr, xt.data(), &wt, &ratio, &ss_t);
      // Gauss-Newton ignores the curvature of w itself, which matters along a
      // flat ridge (near-cancelling AR and MA roots): the steps overshoot and
      // alternate. The minimum of the quadratic through ss(0), its slope
      // 2 g'step and ss(1) corrects the length (one more pass).
      if (ok && !small) {
        double slope = 0.0;
        for (int i = 0; i < dim; ++i) slope += 2.0 * g[i] * (xt[i] - (*x)[i]);
        const double curv = ss_t - ss - slope;
        const double t_min = curv > 0 ? -slope / (2.0 * curv) : 1.0;
        if (t_min > 0.05 && t_min < 0.9) {
          std::vector<double> xs(dim);
          for (int i = 0; i < dim; ++i) xs[i] = (*x)[i] + t_min * (xt[i] - (*x)[i]);
          double ss_s = 0.0;
          ++pr->evaluations;
          if (WeightedErrors(*pr, xs.data(), &ws, &ratio, &ss_s) && ss_s < ss_t) {
            xt.swap(xs);
            wt.swap(ws);
            ss_t = ss_s;
          }
        }
      }
      if (ok && ss_t <= ss) {
        accepted = true;
        const bool flat = ss - ss_t <= 1e-13 * ss;
        // The objective per observation, 0.5 (log(2 pi) + 1 + log(ss / n)),
        // fell by at most ftol_rel relative (the derivative-free search's
        // objective tolerance).
        const double f = 0.5 * (kLog2Pi + 1.0 + std::log(ss_t / n));
        const bool within_ftol = 0.5 * std::log(ss / ss_t) <= ftol_rel * std::fabs(f);
        ftol_run = within_ftol ? ftol_run + 1 : 0;
        *x = xt;
        w.swap(wt);
        ss = ss_t;
        lambda = std::max(lambda * 0.1, 1e-12);
        // Converged: a small step that gains nothing, or two steps running
        // within the objective tolerance (the remaining gain of the linearly
        // converging steps is then of the same order).
        if ((flat && small) || ftol_run >= 2) return true;
      } else {
        if (small) return true;  // no lower point within round-off of x
        lambda *= 10.0;
      }
    }
    if (!accepted) return false;
  }
  return false;
}

// BOBYQA from x (updated to the best point found) with the given budget.
nlopt::result SearchByBobyqa(Problem* pr, std::vector<double>* x, const std::vector<double>& lb,
                             const std::vector<double>& ub, const ArmaFitOptions& options,
                             int max_evaluations, std::string* message) {
  const unsigned dim = static_cast<unsigned>(x->size());
  nlopt::opt opt(nlopt::LN_BOBYQA, dim);
  opt.set_lower_bounds(lb);
  opt.set_upper_bounds(ub);
  opt.set_min_objective(&Objective, pr);
  opt.set_xtol_rel(options.xtol_rel);
  opt.set_ftol_rel(options.ftol_rel);
  opt.set_maxeval(max_evaluations);
  std::vector<double> step(dim, 0.1);
  opt.set_initial_step(step);
  double fval = 0.0;
  nlopt::result res = nlopt::FAILURE;
  try {
    res = opt.optimize(*x, fval);
    *message = absl::StrCat("nlopt result code ", static_cast<int>(res));
  } catch (const nlopt::roundoff_limited& e) {
    // Round-off limited stops arrive as exceptions; x then holds the best
    // point found, which is still a valid parameter vector, at the optimum
    // to machine precision.
    *message = absl::StrCat("optimizer stopped (round-off limited): ", e.what());
    res = nlopt::ROUNDOFF_LIMITED;
  } catch (const std::exception& e) {
    // Any other failure: x holds the best point found (or the start); the fit
    // is reported as not converged.
    *message = absl::StrCat("optimizer failed: ", e.what());
    res = nlopt::FAILURE;
  }
  return res;
}

// Fits ARMA(p,q) from the better (by likelihood) of the Hannan-Rissanen values
// and the `warm` parameter sets, which are zero-padded to the orders (a smaller
// model's optimum is a point of the larger model with the same likelihood).
absl::StatusOr<ArmaFit> FitArmaImpl(absl::Span<const double> y, int p, int q,
                                    const ArmaFitOptions& options,
                                    std::map<int, std::vector<double>>* long_cache,
                                    const std::vector<ArmaParams>& warm = {}) {
  const int n = static_cast<int>(y.size());
  const int m = LongArOrder(n, p, q, options);
  const std::vector<double>* long_resid = nullptr;
  if (q > 0) {
    auto it = long_cache->find(m);
    if (it == long_cache->end()) {
      absl::StatusOr<std::vector<double>> e = LongArResiduals(y, m);
      if (!e.ok()) return e.status();
      it = long_cache->emplace(m, *std::move(e)).first;
    }
    long_resid = &it->second;
  }
  absl::StatusOr<ArmaParams> start = HannanRissanenImpl(y, p, q, long_resid, m);
  if (!start.ok()) return start.status();

  double mean = start->mu, var = 0.0;
  for (double v : y) var += (v - mean) * (v - mean);
  var /= n;

  ArmaParams est = *start;
  bool converged = true;
  int evaluations = 0;
  std::string message = "closed form";
  if (p + q > 0) {
    Problem pr;
    pr.y = y;
    pr.p = p;
    pr.q = q;
    pr.mean = mean;
    pr.sd = std::sqrt(var);
    const int dim = 1 + p + q;
    std::vector<double> x = Encode(pr, *start);
    double best = Objective(dim, x.data(), nullptr, &pr);
    for (const ArmaParams& w : warm) {
      if (w.p() > p || w.q() > q) continue;
      ArmaParams padded = w;
      padded.ar.resize(p, 0.0);
      padded.ma.resize(q, 0.0);
      if (!Stationary(padded.ar) || !Invertible(padded.ma)) continue;
      std::vector<double> xw = Encode(pr, padded);
      const double fw = Objective(dim, xw.data(), nullptr, &pr);
      if (fw < best) {
        best = fw;
        x = std::move(xw);
      }
    }
    std::vector<double> lb(dim, -kMaxUnconstrained), ub(dim, kMaxUnconstrained);
    lb[0] = -10.0;  // mu within 10 sample standard deviations of the mean
    ub[0] = 10.0;
    // Gauss-Newton steps first; BOBYQA from their best point where they do
    // not converge.
    nlopt::result res = nlopt::FAILURE;
    const int evals_before = pr.evaluations;
    const bool lm =
        options.gauss_newton_iterations > 0 &&
        RefineByLevenbergMarquardt(&pr, &x, lb.data(), ub.data(), options.gauss_newton_iterations,
                                   options.max_evaluations, options.ftol_rel);
    const int lm_evals = pr.evaluations - evals_before;
    if (lm) {
      res = nlopt::SUCCESS;
      message = "Levenberg-Marquardt converged";
    } else {
      res = SearchByBobyqa(&pr, &x, lb, ub, options,
                           std::max(1, options.max_evaluations - lm_evals), &message);
    }
    converged = res == nlopt::SUCCESS || res == nlopt::FTOL_REACHED || res == nlopt::XTOL_REACHED ||
                res == nlopt::ROUNDOFF_LIMITED;
    evaluations = pr.evaluations;
    double ar[kMaxArmaOrder], ma[kMaxArmaOrder];
    Decode(pr, x.data(), &est.mu, ar, ma);
    est.ar.assign(ar, ar + p);
    est.ma.assign(ma, ma + q);
    // One pass at the optimum gives sigma2 (concentrated out) and the errors
    // ArmaFilter(y, est) would give: the errors do not depend on sigma2.
    ArmaFilterOutput f;
    f.residuals.resize(n);
    f.variance_ratio.resize(n);
    FilterSums sums;
    if (!RunFilter(y, est.mu, ar, p, ma, q, &sums, &f.residuals, &f.variance_ratio)) {
      return absl::InternalError(
          absl::StrCat("ARMA(", p, ",", q, ") likelihood failed at the optimum"));
    }
    est.sigma2 = sums.sum_sq / n;
    if (absl::Status s = ValidateParams(est); !s.ok()) return s;
    f.loglik =
        -0.5 * (n * kLog2Pi + n * std::log(est.sigma2) + sums.sum_log_f + sums.sum_sq / est.sigma2);
    ArmaFit fit = FinishFit(y, est, *start, f);
    fit.converged = converged;
    fit.evaluations = evaluations;
    fit.optimizer_message = message;
    return fit;
  }
  absl::StatusOr<ArmaFilterOutput> f = ArmaFilter(y, est);
  if (!f.ok()) return f.status();
  ArmaFit fit = FinishFit(y, est, *start, *f);
  fit.converged = converged;
  fit.evaluations = evaluations;
  fit.optimizer_message = message;
  return fit;
}

}  // namespace

absl::StatusOr<ArmaFilterOutput> ArmaFilter(absl::Span<const double> y, const ArmaParams& params) {
  if (absl::Status s = ValidateParams(params); !s.ok()) return s;
  if (absl::Status s = ValidateSeries(y, 2, false); !s.ok()) return s;
  const int n = static_cast<int>(y.size());
  ArmaFilterOutput out;
  out.residuals.resize(n);
  out.variance_ratio.resize(n);
  FilterSums sums;
  if (!RunFilter(y, params.mu, params.ar.data(), params.p(), params.ma.data(), params.q(), &sums,
                 &out.residuals, &out.variance_ratio)) {
    return absl::InvalidArgumentError("ARMA filter failed (state covariance not positive)");
  }
  out.loglik = -0.5 * (n * kLog2Pi + n * std::log(params.sigma2) + sums.sum_log_f +
                       sums.sum_sq / params.sigma2);
  return out;
}

absl::StatusOr<double> ArmaExactLogLikelihood(absl::Span<const double> y,
                                              const ArmaParams& params) {
  absl::StatusOr<ArmaFilterOutput> f = ArmaFilter(y, params);
  if (!f.ok()) return f.status();
  return f->loglik;
}

absl::StatusOr<ArmaParams> HannanRissanen(absl::Span<const double> y, int p, int q,
                                          const ArmaFitOptions& options) {
  if (absl::Status s = CheckFitInput(y, p, q); !s.ok()) return s;
  const int m = LongArOrder(static_cast<int>(y.size()), p, q, options);
  std::vector<double> e;
  if (q > 0) {
    absl::StatusOr<std::vector<double>> r = LongArResiduals(y, m);
    if (!r.ok()) return r.status();
    e = *std::move(r);
  }
  return HannanRissanenImpl(y, p, q, &e, m);
}

absl::StatusOr<ArmaFit> FitArma(absl::Span<const double> y, int p, int q,
                                const ArmaFitOptions& options) {
  if (absl::Status s = CheckFitInput(y, p, q); !s.ok()) return s;
  std::map<int, std::vector<double>> cache;
  return FitArmaImpl(y, p, q, options, &cache);
}

absl::StatusOr<std::vector<double>> ArmaStandardErrors(absl::Span<const double> y,
                                                       const ArmaParams& params) {
  if (absl::Status s = ValidateParams(params); !s.ok()) return s;
  const int p = params.p(), q = params.q();
  const int k = p + q + 2;
  std::vector<double> theta;
  theta.push_back(params.mu);
  theta.insert(theta.end(), params.ar.begin(), params.ar.end());
  theta.insert(theta.end(), params.ma.begin(), params.ma.end());
  theta.push_back(params.sigma2);
  const double sd = std::sqrt(params.sigma2);
  std::vector<double> h(k);
  h[0] = 1e-4 * sd;
  for (int i = 1; i <= p + q; ++i) h[i] = 1e-4 * std::max(std::fabs(theta[i]), 0.1);
  h[k - 1] = 1e-4 * params.sigma2;
  auto eval = [&](const std::vector<double>& th) -> absl::StatusOr<double> {
    ArmaParams a;
    a.mu = th[0];
    a.ar.assign(th.begin() + 1, th.begin() + 1 + p);
    a.ma.assign(th.begin() + 1 + p, th.begin() + 1 + p + q);
    a.sigma2 = th[k - 1];
    return ArmaExactLogLikelihood(y, a);
  };
  Eigen::MatrixXd hess(k, k);
  absl::StatusOr<double> f0 = eval(theta);
  if (!f0.ok()) return f0.status();
  for (int i = 0; i < k; ++i) {
    for (int j = i; j < k; ++j) {
      double acc = 0.0;
      const int si[4] = {1, 1, -1, -1}, sj[4] = {1, -1, 1, -1};
      for (int c = 0; c < 4; ++c) {
        std::vector<double> th = theta;
        th[i] += si[c] * h[i];
        th[j] += sj[c] * h[j];
        absl::StatusOr<double> f = eval(th);
        if (!f.ok()) {
          return absl::FailedPreconditionError(
              absl::StrCat("numerical Hessian left the admissible region: ", f.status().message()));
        }
        acc += si[c] * sj[c] * *f;
      }
      hess(i, j) = hess(j, i) = acc / (4.0 * h[i] * h[j]);
    }
  }
  Eigen::LLT<Eigen::MatrixXd> llt(-hess);
  if (llt.info() != Eigen::Success) {
    return absl::FailedPreconditionError(
        "Hessian of the log-likelihood is not negative definite (not a maximum)");
  }
  Eigen::MatrixXd cov = llt.solve(Eigen::MatrixXd::Identity(k, k));
  std::vector<double> se(k);
  for (int i = 0; i < k; ++i) se[i] = std::sqrt(cov(i, i));
  return se;
}

namespace internal {

absl::Status ArmaFilterLanesForTest(absl::Span<const double> y, const std::vector<ArmaParams>& sets,
                                    bool batch, std::vector<ArmaLaneOutput>* out) {
  const int count = static_cast<int>(sets.size());
  if (count == 0 || count > 4 * kMaxState) {
    return absl::InvalidArgumentError("1 to 24 parameter sets");
  }
  const int n = static_cast<int>(y.size());
  std::vector<FilterSetup> setups(count);
  std::vector<const FilterSetup*> sp(count);
  std::vector<FilterSums> sums(count);
  out->assign(count, ArmaLaneOutput());
  std::vector<double*> resid(count), ratio(count);
  for (int k = 0; k < count; ++k) {
    const ArmaParams& a = sets[k];
    if (absl::Status s = ValidateParams(a); !s.ok()) return s;
    if (a.p() != sets[0].p() || a.q() != sets[0].q()) {
      return absl::InvalidArgumentError("the parameter sets must share p and q");
    }
    SetupFilter(a.mu, a.ar.data(), a.p(), a.ma.data(), a.q(), &setups[k]);
    sp[k] = &setups[k];
    (*out)[k].residuals.assign(n, 0.0);
    (*out)[k].variance_ratio.assign(n, 0.0);
    resid[k] = (*out)[k].residuals.data();
    ratio[k] = (*out)[k].variance_ratio.data();
  }
  int done = 0;
  if (batch) {
    done = RunFilterBatch(y, count, sp.data(), sums.data(), resid.data(), ratio.data());
  } else {
    while (done < count && RunFilter(y, sets[done].mu, sets[done].ar.data(), sets[done].p(),
                                     sets[done].ma.data(), sets[done].q(), &sums[done],
                                     &(*out)[done].residuals, &(*out)[done].variance_ratio)) {
      ++done;
    }
  }
  if (done < count) return absl::InternalError("a filter failed");
  for (int k = 0; k < count; ++k) {
    (*out)[k].sum_log_f = sums[k].sum_log_f;
    (*out)[k].sum_sq = sums[k].sum_sq;
  }
  return absl::OkStatus();
}

}  // namespace internal

absl::StatusOr<ArmaSelection> SelectArmaOrder(absl::Span<const double> y, int max_p, int max_q,
                                              InfoCriterion criterion,
                                              const ArmaFitOptions& options) {
  if (max_p < 0 || max_q < 0 || max_p > kMaxArmaOrder || max_q > kMaxArmaOrder) {
    return absl::InvalidArgumentError(absl::StrCat(
        "maximum ARMA orders must be in 0..", kMaxArmaOrder, " (got ", max_p, ",", max_q, ")"));
  }
  if (absl::Status s = ValidateSeries(y, MinObs(0, 0), true); !s.ok()) return s;
  ArmaSelection out;
  out.criterion = criterion;
  std::map<int, std::vector<double>> cache;
  std::map<std::pair<int, int>, ArmaParams> fitted;
  bool have = false, have_converged = false;
  double best_value = std::numeric_limits<double>::infinity();
  for (int p = 0; p <= max_p; ++p) {
    for (int q = 0; q <= max_q; ++q) {
      ArmaCandidate c;
      c.p = p;
      c.q = q;
      absl::StatusOr<ArmaFit> fit = absl::InvalidArgumentError("");
      c.status = CheckFitInput(y, p, q);
      if (c.status.ok()) {
        // Warm starts from the fitted neighbours (p-1,q) and (p,q-1).
        std::vector<ArmaParams> warm;
        for (const auto& [wp, wq] : {std::pair{p - 1, q}, std::pair{p, q - 1}}) {
          if (wp < 0 || wq < 0) continue;
          const auto it = fitted.find({wp, wq});
          if (it != fitted.end()) warm.push_back(it->second);
        }
        fit = FitArmaImpl(y, p, q, options, &cache, warm);
        c.status = fit.status();
      }
      if (c.status.ok()) {
        c.loglik = fit->loglik;
        c.aic = fit->aic;
        c.bic = fit->bic;
        c.converged = fit->converged;
        c.evaluations = fit->evaluations;
        fitted[{p, q}] = fit->params;
        const double value = criterion == InfoCriterion::kAic ? c.aic : c.bic;
        // A converged candidate always beats a non-converged one.
        const bool better = !have || (c.converged && !have_converged) ||
                            (c.converged == have_converged && value < best_value);
        if (better) {
          out.best = *std::move(fit);
          best_value = value;
          have = true;
          have_converged = c.converged;
        }
      }
      out.candidates.push_back(std::move(c));
    }
  }
  if (!have) {
    return absl::InvalidArgumentError(absl::StrCat("no ARMA candidate could be fitted: ",
                                                   out.candidates.front().status.message()));
  }
  return out;
}

}  // namespace aftershock
