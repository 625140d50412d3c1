#include "estimation/likelihood_kernel.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include <boost/math/special_functions/digamma.hpp>

namespace aftershock::internal {
namespace {

constexpr double kLogTwoPi = 1.8378770664093454836;
constexpr double kLogPi = 1.1447298858494001741;

}  // namespace

LikelihoodKernel::LikelihoodKernel(const ModelSpec& spec, std::vector<double> returns,
                                   enum Presample presample)
    : spec_(spec),
      r_(std::move(returns)),
      presample_(presample),
      p_(spec.ConditioningObs()),
      n_(static_cast<int>(r_.size()) - spec.ConditioningObs()),
      k_(spec.NumParams()),
      nm_(spec.NumMeanParams()),
      eps_(n_),
      sig2_(n_),
      deps_(static_cast<size_t>(n_) * nm_),
      dsig2_(static_cast<size_t>(n_) * k_),
      ds2_(nm_),
      work_(k_) {}

void LikelihoodKernel::MeanPass(const double* theta, bool with_grad) {
  const double* r = r_.data() + p_;  // r[k] is the return of likelihood term k
  switch (spec_.mean) {
    case MeanKind::kZero:
      std::copy(r, r + n_, eps_.begin());
      return;
    case MeanKind::kConstant: {
      const double mu = theta[0];
      for (int k = 0; k < n_; ++k) eps_[k] = r[k] - mu;
      if (with_grad) std::fill(deps_.begin(), deps_.end(), -1.0);
      return;
    }
    case MeanKind::kArma:
      break;
  }
  const int np = spec_.ar_order, nq = spec_.ma_order;
  const double mu = theta[0];
  const double* ar = theta + 1;
  const double* ma = theta + 1 + np;
  for (int k = 0; k < n_; ++k) {
    double m = mu;
    for (int i = 0; i < np; ++i) m += ar[i] * r[k - 1 - i];
    for (int j = 0; j < nq && j < k; ++j) m += ma[j] * eps_[k - 1 - j];
    eps_[k] = r[k] - m;
    if (!with_grad) continue;
    double* d = &deps_[static_cast<size_t>(k) * nm_];
    d[0] = -1.0;
    for (int i = 0; i < np; ++i) d[1 + i] = -r[k - 1 - i];
    for (int j = 0; j < nq; ++j) d[1 + np + j] = (j < k) ? -eps_[k - 1 - j] : 0.0;
    for (int l = 0; l < nq && l < k; ++l) {
      const double* dp = &deps_[static_cast<size_t>(k - 1 - l) * nm_];
      for (int c = 0; c < nm_; ++c) d[c] -= ma[l] * dp[c];
    }
  }
}

void LikelihoodKernel::Presample(bool with_grad) {
  std::fill(ds2_.begin(), ds2_.end(), 0.0);
  int m = n_;
  double decay = 1.0;
  if (presample_ == Presample::kBackcast) {
    m = std::min(n_, kBackcastSpan);
    decay = kBackcastDecay;
  }
  double wsum = 0, s = 0, w = 1.0;
  for (int k = 0; k < m; ++k) {
    wsum += w;
    s += w * eps_[k] * eps_[k];
    if (with_grad) {
      const double* d = &deps_[static_cast<size_t>(k) * nm_];
      for (int c = 0; c < nm_; ++c) ds2_[c] += w * 2.0 * eps_[k] * d[c];
    }
    w *= decay;
  }
  s2_ = s / wsum;
  for (int c = 0; c < nm_; ++c) ds2_[c] /= wsum;
}

double LikelihoodKernel::Evaluate(const double* theta, double* grad, double* scores) {
  const bool with_grad = grad != nullptr;
  MeanPass(theta, with_grad);
  Presample(with_grad);

  const int v0 = spec_.VarianceOffset();
  const int na = spec_.arch_order, no = spec_.asym_order, nb = spec_.garch_order;
  const VarianceKind vk = spec_.variance;
  const bool student = spec_.innovations == Innovations::kStudentT;
  const double nu = student ? theta[spec_.DistOffset()] : 0.0;

  // Density constants.
  double const_term, dconst_dnu = 0;
  if (student) {
    const_term = std::lgamma(0.5 * (nu + 1.0)) - std::lgamma(0.5 * nu) -
                 0.5 * (kLogPi + std::log(nu - 2.0));
    if (with_grad) {
      dconst_dnu = 0.5 * boost::math::digamma(0.5 * (nu + 1.0)) -
                   0.5 * boost::math::digamma(0.5 * nu) - 0.5 / (nu - 2.0);
    }
  } else {
    const_term = -0.5 * kLogTwoPi;
  }

  if (with_grad) std::fill(grad, grad + k_, 0.0);
  const double omega = vk == VarianceKind::kEwma ? 0.0 : theta[v0];
  const double* alpha = theta + v0 + 1;
  const double* gamma = alpha + na;
  const double* beta = gamma + no;
  const double lambda = vk == VarianceKind::kEwma ? theta[v0] : 0.0;
  const double s2 = s2_;

  double ll = 0;
  for (int k = 0; k < n_; ++k) {
    // ---- conditional variance (same summation order as the online filter) ----
    double v;
    double* g = with_grad ? &dsig2_[static_cast<size_t>(k) * k_] : nullptr;
    if (g) std::fill(g, g + k_, 0.0);
    switch (vk) {
      case VarianceKind::kConstant:
        v = omega;
        if (g) g[v0] = 1.0;
        break;
      case VarianceKind::kEwma: {
        const double prev_s = k > 0 ? sig2_[k - 1] : s2;
        const double prev_e = k > 0 ? eps_[k - 1] * eps_[k - 1] : s2;
        v = lambda * prev_s + (1.0 - lambda) * prev_e;
        if (g) {
          if (k > 0) {
            const double* gp = &dsig2_[static_cast<size_t>(k - 1) * k_];
            const double* d = &deps_[static_cast<size_t>(k - 1) * nm_];
            for (int c = 0; c < k_; ++c) g[c] = lambda * gp[c];
            for (int c = 0; c < nm_; ++c) g[c] += (1.0 - lambda) * 2.0 * eps_[k - 1] * d[c];
          } else {
            for (int c = 0; c < nm_; ++c) g[c] = ds2_[c];
          }
          g[v0] += prev_s - prev_e;
        }
        break;
      }
      default: {
        v = omega;
        if (g) g[v0] = 1.0;
        for (int i = 0; i < na; ++i) {
          const int s = k - 1 - i;
          const double e2 = s >= 0 ? eps_[s] * eps_[s] : s2;
          v += alpha[i] * e2;
          if (g) {
            g[v0 + 1 + i] += e2;
            if (s >= 0) {
              const double* d = &deps_[static_cast<size_t>(s) * nm_];
              const double f = alpha[i] * 2.0 * eps_[s];
              for (int c = 0; c < nm_; ++c) g[c] += f * d[c];
            } else {
              for (int c = 0; c < nm_; ++c) g[c] += alpha[i] * ds2_[c];
            }
          }
        }
        for (int i = 0; i < no; ++i) {
          const int s = k - 1 - i;
          const bool neg = s >= 0 && eps_[s] < 0.0;
          const double ne2 = s >= 0 ? (neg ? eps_[s] * eps_[s] : 0.0) : 0.5 * s2;
          v += gamma[i] * ne2;
          if (g) {
            g[v0 + 1 + na + i] += ne2;
            if (s >= 0) {
              if (neg) {
                const double* d = &deps_[static_cast<size_t>(s) * nm_];
                const double f = gamma[i] * 2.0 * eps_[s];
                for (int c = 0; c < nm_; ++c) g[c] += f * d[c];
              }
            } else {
              for (int c = 0; c < nm_; ++c) g[c] += gamma[i] * 0.5 * ds2_[c];
            }
          }
        }
        for (int j = 0; j < nb; ++j) {
          const int s = k - 1 - j;
          const double sv = s >= 0 ? sig2_[s] : s2;
          v += beta[j] * sv;
          if (g) {
            g[v0 + 1 + na + no + j] += sv;
            if (s >= 0) {
              const double* gp = &dsig2_[static_cast<size_t>(s) * k_];
              for (int c = 0; c < k_; ++c) g[c] += beta[j] * gp[c];
            } else {
              for (int c = 0; c < nm_; ++c) g[c] += beta[j] * ds2_[c];
            }
          }
        }
        break;
      }
    }
    sig2_[k] = v;
    if (!(v > 0.0) || !std::isfinite(v)) {
      if (with_grad) std::fill(grad, grad + k_, 0.0);
      return -std::numeric_limits<double>::infinity();
    }

    // ---- log density and its partial derivatives in eps, sigma2 and nu ----
    const double e = eps_[k];
    const double e2 = e * e;
    double dl_de, dl_dv;
    if (student) {
      const double u = e2 / (v * (nu - 2.0));
      const double l1u = std::log1p(u);
      ll += const_term - 0.5 * std::log(v) - 0.5 * (nu + 1.0) * l1u;
      if (!with_grad) continue;
      dl_de = -(nu + 1.0) * e / (v * (nu - 2.0) * (1.0 + u));
      dl_dv = -0.5 / v + 0.5 * (nu + 1.0) * u / (v * (1.0 + u));
      const double dl_dnu = dconst_dnu - 0.5 * l1u + 0.5 * (nu + 1.0) * u / ((nu - 2.0) * (1.0 + u));
      work_[spec_.DistOffset()] = dl_dnu;
    } else {
      ll += const_term - 0.5 * (e2 / v + std::log(v));
      if (!with_grad) continue;
      dl_de = -e / v;
      dl_dv = 0.5 * (e2 / v - 1.0) / v;
    }
    const int kv = student ? k_ - 1 : k_;
    for (int c = 0; c < kv; ++c) work_[c] = dl_dv * g[c];
    const double* d = &deps_[static_cast<size_t>(k) * nm_];
    for (int c = 0; c < nm_; ++c) work_[c] += dl_de * d[c];
    for (int c = 0; c < k_; ++c) grad[c] += work_[c];
    if (scores) std::copy(work_.begin(), work_.end(), scores + static_cast<size_t>(k) * k_);
  }
  return ll;
}

}  // namespace aftershock::internal
