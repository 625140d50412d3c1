#include "estimation/likelihood_kernel.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "aftershock/innovations.h"

namespace aftershock::internal {
namespace {

constexpr double kLogTwoPi = 1.8378770664093454836;

// Partial derivatives of one likelihood term log f(e / sqrt(v)) - log(v) / 2 in
// eps, sigma2 and (Student-t) nu; shared by the fast and the general path.
struct TermDerivatives {
  double de, dv, dnu;
};

// Standardized t: u = e^2 / (v (nu - 2)), l1u = log1p(u), inv_v = 1 / v.
inline TermDerivatives StudentTerm(double e, double inv_v, double u, double l1u, double nu,
                                   double dconst_dnu) {
  const double inv = 1.0 / (1.0 + u);
  return {-(nu + 1.0) * e * inv_v / (nu - 2.0) * inv,
          (-0.5 + 0.5 * (nu + 1.0) * u * inv) * inv_v,
          dconst_dnu - 0.5 * l1u + 0.5 * (nu + 1.0) * u / (nu - 2.0) * inv};
}

// Normal: q = e^2 / v.
inline TermDerivatives NormalTerm(double e, double inv_v, double q) {
  return {-e * inv_v, 0.5 * (q - 1.0) * inv_v, 0.0};
}

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
      order_one_(spec.mean != MeanKind::kArma &&
                 ((spec.variance == VarianceKind::kGarch && spec.arch_order == 1 &&
                   spec.garch_order == 1) ||
                  (spec.variance == VarianceKind::kGjr && spec.arch_order == 1 &&
                   spec.asym_order == 1 && spec.garch_order == 1))),
      eps_(n_),
      sig2_(n_),
      deps_(static_cast<size_t>(n_) * nm_),
      dsig2_(static_cast<size_t>(n_) * k_),
      ds2_(nm_),
      work_(k_),
      order_(std::min(std::max(n_, 0), kRobustStartSpan)),
      weight_(order_.size()) {
  for (size_t j = 0; j < weight_.size(); ++j) {
    weight_[j] = std::exp2(-static_cast<double>(j) / kRobustStartHalfLife);
  }
  // d eps_t / d mu = -1 for the constant mean, whatever the parameters.
  if (spec_.mean == MeanKind::kConstant) std::fill(deps_.begin(), deps_.end(), -1.0);
}

void LikelihoodKernel::MeanPass(const double* theta, bool with_grad) {
  const double* r = r_.data() + p_;  // r[k] is the return of likelihood term k
  switch (spec_.mean) {
    case MeanKind::kZero:
      std::copy(r, r + n_, eps_.begin());
      return;
    case MeanKind::kConstant: {
      const double mu = theta[0];
      for (int k = 0; k < n_; ++k) eps_[k] = r[k] - mu;
      return;  // deps_ holds the constant -1 since construction

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
  if (presample_ == Presample::kRobustStart) {
    // Weighted median of |eps_j| over the first span residuals, weights
    // 2^(-j / half-life): the smallest |eps| whose cumulative weight (in
    // ascending order of |eps|) reaches half the total. The value is one
    // residual's |eps_k|, so its derivative is sign(eps_k) d eps_k.
    const int m = std::min(n_, kRobustStartSpan);
    for (int k = 0; k < m; ++k) order_[k] = k;
    std::sort(order_.begin(), order_.begin() + m, [&](int a, int b) {
      const double fa = std::fabs(eps_[a]), fb = std::fabs(eps_[b]);
      return fa < fb || (fa == fb && a < b);
    });
    double half = 0.0;
    for (int k = 0; k < m; ++k) half += weight_[k];
    half *= 0.5;
    int pick = order_[m - 1];
    double cum = 0.0;
    for (int i = 0; i < m; ++i) {
      cum += weight_[order_[i]];
      if (cum >= half) {
        pick = order_[i];
        break;
      }
    }
    const double c = kRobustStartConsistency;
    const double e = eps_[pick];
    s2_ = c * c * e * e;
    // A series whose first residuals are mostly zero would start at zero
    // variance; fall back to their mean square then.
    if (s2_ > 0.0) {
      if (with_grad) {
        const double* d = &deps_[static_cast<size_t>(pick) * nm_];
        for (int c2 = 0; c2 < nm_; ++c2) ds2_[c2] = c * c * 2.0 * e * d[c2];
      }
      return;
    }
  }
  const int m = n_;
  double s = 0;
  for (int k = 0; k < m; ++k) {
    s += eps_[k] * eps_[k];
    if (with_grad) {
      const double* d = &deps_[static_cast<size_t>(k) * nm_];
      for (int c = 0; c < nm_; ++c) ds2_[c] += 2.0 * eps_[k] * d[c];
    }
  }
  s2_ = s / m;
  for (int c = 0; c < nm_; ++c) ds2_[c] /= m;
}

double LikelihoodKernel::EvaluateOrderOne(const double* theta, double* grad, double* scores) {
  const bool with_grad = grad != nullptr;
  const bool has_mu = spec_.mean == MeanKind::kConstant;
  const bool gjr = spec_.variance == VarianceKind::kGjr;
  const bool student = spec_.innovations == Innovations::kStudentT;
  const int v0 = spec_.VarianceOffset();
  const double mu = has_mu ? theta[0] : 0.0;
  const double omega = theta[v0], alpha = theta[v0 + 1];
  const double gamma = gjr ? theta[v0 + 2] : 0.0;
  const double beta = theta[v0 + (gjr ? 3 : 2)];
  const double nu = student ? theta[spec_.DistOffset()] : 0.0;
  const double* r = r_.data();
  for (int k = 0; k < n_; ++k) eps_[k] = r[k] - mu;
  Presample(has_mu && with_grad);
  const double s2 = s2_;
  const double ds2 = has_mu ? ds2_[0] : 0.0;  // d s2 / d mu

  // Density constants (innovations.h; NaN for an invalid nu, which makes the
  // log-likelihood NaN and the point infeasible for the optimizer).
  const double const_term = student ? LogNormalizerT(nu) : -0.5 * kLogTwoPi;
  const double dconst_dnu = student && with_grad ? DLogNormalizerTDnu(nu) : 0.0;
  const double nu2 = nu - 2.0;

  // Previous-term state: eps2, negative-part eps2, sigma2 and their d/dmu.
  double e2p = s2, ne2p = 0.5 * s2, vp = s2;
  double de2p = ds2, dne2p = 0.5 * ds2;
  // d sigma2_{k-1} / d (mu, omega, alpha, gamma, beta).
  double dv_mu = ds2, dv_om = 0, dv_al = 0, dv_ga = 0, dv_be = 0;
  double g_mu = 0, g_om = 0, g_al = 0, g_ga = 0, g_be = 0, g_nu = 0;
  double quad = 0;           // sum of e2/v (normal) 
  double log_sum = 0;        // sum of log v, accumulated through products
  double log_u_sum = 0;      // sum of log(1+u) (Student-t)
  double prod_v = 1.0, prod_u = 1.0;
  constexpr int kChunk = 8;  // on unit-scaled data 8 products stay far inside double range
  int in_chunk = 0;
  for (int k = 0; k < n_; ++k) {
    double v = omega;
    v += alpha * e2p;
    if (gjr) v += gamma * ne2p;
    v += beta * vp;
    sig2_[k] = v;
    if (!(v > 0.0) || !std::isfinite(v)) {
      if (with_grad) std::fill(grad, grad + k_, 0.0);
      return -std::numeric_limits<double>::infinity();
    }
    const double e = eps_[k];
    const double e2 = e * e;
    prod_v *= v;
    double dl_de = 0, dl_dv = 0, dl_dnu = 0;
    const double inv_v = 1.0 / v;
    if (student) {
      const double u = e2 * inv_v / nu2;
      prod_u *= 1.0 + u;
      if (with_grad) {
        const TermDerivatives t = StudentTerm(e, inv_v, u, std::log1p(u), nu, dconst_dnu);
        dl_de = t.de;
        dl_dv = t.dv;
        dl_dnu = t.dnu;
      }
    } else {
      const double q = e2 * inv_v;
      quad += q;
      if (with_grad) {
        const TermDerivatives t = NormalTerm(e, inv_v, q);
        dl_de = t.de;
        dl_dv = t.dv;
      }
    }
    if (++in_chunk == kChunk) {
      log_sum += std::log(prod_v);
      prod_v = 1.0;
      if (student) {
        log_u_sum += std::log(prod_u);
        prod_u = 1.0;
      }
      in_chunk = 0;
    }
    if (with_grad) {
      // d sigma2_k from the recursion (k = 0 uses the presample derivatives).
      const double nmu = alpha * de2p + (gjr ? gamma * dne2p : 0.0) + beta * dv_mu;
      const double nom = 1.0 + beta * dv_om;
      const double nal = e2p + beta * dv_al;
      const double nga = ne2p + beta * dv_ga;
      const double nbe = vp + beta * dv_be;
      dv_mu = nmu; dv_om = nom; dv_al = nal; dv_ga = nga; dv_be = nbe;
      const double s_mu = dl_dv * dv_mu - dl_de;
      const double s_om = dl_dv * dv_om, s_al = dl_dv * dv_al, s_ga = dl_dv * dv_ga,
                   s_be = dl_dv * dv_be;
      g_mu += s_mu; g_om += s_om; g_al += s_al; g_ga += s_ga; g_be += s_be; g_nu += dl_dnu;
      if (scores) {
        double* row = scores + static_cast<size_t>(k) * k_;
        int c = 0;
        if (has_mu) row[c++] = s_mu;
        row[c++] = s_om;
        row[c++] = s_al;
        if (gjr) row[c++] = s_ga;
        row[c++] = s_be;
        if (student) row[c++] = dl_dnu;
      }
      de2p = -2.0 * e;
      dne2p = e < 0.0 ? -2.0 * e : 0.0;
    }
    e2p = e2;
    ne2p = e < 0.0 ? e2 : 0.0;
    vp = v;
  }
  log_sum += std::log(prod_v);
  double ll;
  if (student) {
    log_u_sum += std::log(prod_u);
    ll = n_ * const_term - 0.5 * log_sum - 0.5 * (nu + 1.0) * log_u_sum;
  } else {
    ll = n_ * const_term - 0.5 * (quad + log_sum);
  }
  if (with_grad) {
    int c = 0;
    if (has_mu) grad[c++] = g_mu;
    grad[c++] = g_om;
    grad[c++] = g_al;
    if (gjr) grad[c++] = g_ga;
    grad[c++] = g_be;
    if (student) grad[c++] = g_nu;
  }
  return ll;
}

double LikelihoodKernel::Evaluate(const double* theta, double* grad, double* scores) {
  if (order_one_) return EvaluateOrderOne(theta, grad, scores);
  const bool with_grad = grad != nullptr;
  MeanPass(theta, with_grad);
  Presample(with_grad);

  const int v0 = spec_.VarianceOffset();
  const int na = spec_.arch_order, no = spec_.asym_order, nb = spec_.garch_order;
  const VarianceKind vk = spec_.variance;
  const bool student = spec_.innovations == Innovations::kStudentT;
  const double nu = student ? theta[spec_.DistOffset()] : 0.0;

  // Density constants.
  // Density constants (innovations.h; NaN for an invalid nu, which makes the
  // log-likelihood NaN and the point infeasible for the optimizer).
  const double const_term = student ? LogNormalizerT(nu) : -0.5 * kLogTwoPi;
  const double dconst_dnu = student && with_grad ? DLogNormalizerTDnu(nu) : 0.0;

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
    const double inv_v = 1.0 / v;
    TermDerivatives t;
    if (student) {
      const double u = e2 * inv_v / (nu - 2.0);
      const double l1u = std::log1p(u);
      ll += const_term - 0.5 * std::log(v) - 0.5 * (nu + 1.0) * l1u;
      if (!with_grad) continue;
      t = StudentTerm(e, inv_v, u, l1u, nu, dconst_dnu);
      work_[spec_.DistOffset()] = t.dnu;
    } else {
      const double q = e2 * inv_v;
      ll += const_term - 0.5 * (q + std::log(v));
      if (!with_grad) continue;
      t = NormalTerm(e, inv_v, q);
    }
    const double dl_de = t.de, dl_dv = t.dv;
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
