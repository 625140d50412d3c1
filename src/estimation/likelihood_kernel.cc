#include "estimation/likelihood_kernel.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "aftershock/innovations.h"

namespace aftershock::internal {
namespace {

constexpr double kLogTwoPi = 1.8378770664093454836;

// Partial derivatives of one likelihood term log f(e / sqrt(v)) - log(v) / 2 in
// eps, sigma2 and (Student-t) nu, for the general path.
struct TermDerivatives {
  double de, dv, dnu;
};

// Standardized t: u = e^2 / (v (nu - 2)), l1u = log1p(u), inv_v = 1 / v.
// inv_nu2 = 1 / (nu - 2).
inline TermDerivatives StudentTerm(double e, double inv_v, double u, double l1u, double nu,
                                   double inv_nu2, double dconst_dnu) {
  const double inv = 1.0 / (1.0 + u);
  return {-(nu + 1.0) * e * inv_v * inv_nu2 * inv, (-0.5 + 0.5 * (nu + 1.0) * u * inv) * inv_v,
          dconst_dnu - 0.5 * l1u + 0.5 * (nu + 1.0) * u * inv_nu2 * inv};
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
      zero_mean_general_(!order_one_ && spec.mean == MeanKind::kZero &&
                         (spec.variance == VarianceKind::kArch ||
                          spec.variance == VarianceKind::kGarch ||
                          spec.variance == VarianceKind::kGjr)),
      eps_(n_),
      sig2_(n_),
      deps_(static_cast<size_t>(n_) * nm_),
      dsig2_(order_one_ ? 0 : static_cast<size_t>(n_) * k_),  // the fast path keeps no rows
      ds2_(nm_),
      work_(k_),
      order_(std::min(std::max(n_, 0), kRobustStartSpan)),
      weight_(order_.size()) {
  for (size_t j = 0; j < weight_.size(); ++j) {
    weight_[j] = std::exp2(-static_cast<double>(j) / kRobustStartHalfLife);
  }
  if (zero_mean_general_) {
    const int kv = spec.NumVarianceParams(), nb = spec.garch_order, slots = nb + 1;
    zdv_.assign(static_cast<size_t>(slots) * kv, 0.0);
    zd2v_.assign(static_cast<size_t>(slots) * nb * kv, 0.0);
    zhb_.assign(static_cast<size_t>(nb) * kv, 0.0);
    zh_.assign(static_cast<size_t>(kv + 1) * (kv + 1), 0.0);
    // The residuals (the returns) and s2 do not depend on the parameters:
    // squares padded in front with the presample values, once.
    MeanPass(nullptr, false);
    Presample(false);
    zpad_ = std::max({spec.arch_order, spec.asym_order, nb});
    ze2_.assign(static_cast<size_t>(zpad_) + n_, s2_);
    zne2_.assign(static_cast<size_t>(zpad_) + n_, 0.5 * s2_);
    zv_.assign(static_cast<size_t>(zpad_) + n_, s2_);
    for (int k = 0; k < n_; ++k) {
      const double e = eps_[k];
      ze2_[zpad_ + k] = e * e;
      zne2_[zpad_ + k] = e < 0.0 ? e * e : 0.0;
    }
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
      d2s2_ = 2.0 * c * c;
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
  d2s2_ = 2.0;
}

// The order-one recursion, by template so that the value-only, gradient and
// Hessian passes each compile to straight-line code without the terms they do
// not need. Parameter slots: mu, omega, alpha, gamma, beta, nu (absent ones are
// compiled out). Per term only one division: with s = e^2 / (nu - 2) (Student)
// or s = 0 (normal), R = 1 / (v (v + s)) gives 1/v = (v + s) R and
// 1/(v + s) = v R. Logs are taken of products of 8 terms (on unit-scaled data
// these stay far inside the double range), also for the gradient's
// sum of log(1 + u), so no log is taken per term unless per-term scores are asked.
template <bool kMu, bool kGjr, bool kStudent, int kLevel>
double LikelihoodKernel::OrderOne(const double* theta, double* grad, double* scores, double* hess) {
  constexpr bool kGrad = kLevel >= 1;
  constexpr bool kHess = kLevel >= 2;
  constexpr int kMuS = 0, kOm = 1, kAl = 2, kGa = 3, kBe = 4, kNu = 5;  // slots
  // Loops over slots are unrolled (pragmas) and skip absent slots at compile
  // time, so that the accumulators live in registers.
  constexpr bool kHas[6] = {kMu, true, true, kGjr, true, kStudent};
  const int v0 = spec_.VarianceOffset();
  const double mu = kMu ? theta[0] : 0.0;
  const double omega = theta[v0], alpha = theta[v0 + 1];
  const double gamma = kGjr ? theta[v0 + 2] : 0.0;
  const double beta = theta[v0 + (kGjr ? 3 : 2)];
  const double nu = kStudent ? theta[spec_.DistOffset()] : 0.0;
  // Full-vector index of each slot (-1: absent).
  int index[6];
  {
    int c = 0;
    index[kMuS] = kMu ? c++ : -1;
    index[kOm] = c++;
    index[kAl] = c++;
    index[kGa] = kGjr ? c++ : -1;
    index[kBe] = c++;
    index[kNu] = kStudent ? c++ : -1;
  }
  auto fail = [&]() {
    if (kGrad) std::fill(grad, grad + k_, 0.0);
    if (kHess) std::fill(hess, hess + static_cast<size_t>(k_) * k_, 0.0);
    return -std::numeric_limits<double>::infinity();
  };
  const double* r = r_.data();
  if (presample_ == Presample::kMeanSquare) {
    // The mean-square presample in the same sweep (d eps / d mu = -1, so
    // d s2 / d mu = -2 mean(eps) and d^2 s2 / d mu^2 = 2); two accumulators
    // per sum break the dependency chain.
    double sq0 = 0, sq1 = 0, sum0 = 0, sum1 = 0;
    int k = 0;
    for (; k + 1 < n_; k += 2) {
      const double a = r[k] - mu, b = r[k + 1] - mu;
      eps_[k] = a;
      eps_[k + 1] = b;
      sq0 += a * a;
      sq1 += b * b;
      sum0 += a;
      sum1 += b;
    }
    for (; k < n_; ++k) {
      const double a = r[k] - mu;
      eps_[k] = a;
      sq0 += a * a;
      sum0 += a;
    }
    s2_ = (sq0 + sq1) / n_;
    if (kMu) ds2_[0] = -2.0 * (sum0 + sum1) / n_;
    d2s2_ = 2.0;
  } else {
    for (int k = 0; k < n_; ++k) eps_[k] = r[k] - mu;
    Presample(kMu && kGrad);
  }
  const double s2 = s2_;
  const double ds2 = kMu && kGrad ? ds2_[0] : 0.0;  // d s2 / d mu
  const double d2s2 = kMu && kHess ? d2s2_ : 0.0;   // d^2 s2 / d mu^2

  // Density constants (innovations.h; NaN for an invalid nu, which makes the
  // log-likelihood NaN and the point infeasible for the optimizer).
  const double const_term = kStudent ? LogNormalizerT(nu) : -0.5 * kLogTwoPi;
  const double dconst = kStudent && kGrad ? DLogNormalizerTDnu(nu) : 0.0;
  const double d2const = kStudent && kHess ? D2LogNormalizerTDnu2(nu) : 0.0;
  const double nu2 = nu - 2.0;
  const double inv_nu2 = kStudent ? 1.0 / nu2 : 0.0;
  const double np1 = nu + 1.0;

  // Previous-term state: eps2, negative-part eps2, sigma2 and their mu-derivatives.
  double e2p = s2, ne2p = 0.5 * s2, vp = s2;
  double de2p = ds2, dne2p = 0.5 * ds2;
  double d2e2p = d2s2, d2ne2p = 0.5 * d2s2;
  // d sigma2_{k-1} / d slot (nu: 0), and the second derivatives that are not
  // identically zero (the others stay 0 from the presample on).
  double dv[5] = {ds2, 0, 0, 0, 0};
  double h_mumu = d2s2, h_mual = 0, h_muga = 0, h_mube = 0, h_ombe = 0, h_albe = 0, h_gabe = 0,
         h_bebe = 0;
  double g[6] = {0, 0, 0, 0, 0, 0};
  double H[6][6] = {};
  double g_nu_rest = 0;  // the part of d ll / d nu other than the log sum
  double quad = 0;       // sum of e2/v (normal)
  double log_sum = 0;    // sum of log v, accumulated through products
  double log_u_sum = 0;  // sum of log(1+u) (Student-t)
  double prod_v = 1.0, prod_u = 1.0;
  constexpr int kChunk = 8;
  int in_chunk = 0;
  for (int k = 0; k < n_; ++k) {
    double v = omega;
    v += alpha * e2p;
    if (kGjr) v += gamma * ne2p;
    v += beta * vp;
    sig2_[k] = v;
    if (!(v > 0.0) || !std::isfinite(v)) return fail();
    const double e = eps_[k];
    const double e2 = e * e;
    prod_v *= v;
    // Per-term derivatives in e, v and nu.
    double l_e = 0, l_v = 0, l_nu = 0, l_ee = 0, l_ev = 0, l_vv = 0, l_enu = 0, l_vnu = 0,
           l_nunu = 0;
    if (kStudent) {
      const double s = e2 * inv_nu2;
      const double vs = v + s;  // v (1 + u)
      const double rr = 1.0 / (v * vs);
      const double inv_v = vs * rr;
      const double iw = v * v * rr;  // 1 / (1 + u)
      const double u = s * inv_v;
      prod_u *= 1.0 + u;
      if (kGrad) {
        l_e = -np1 * e * inv_v * inv_nu2 * iw;
        l_v = (-0.5 + 0.5 * np1 * u * iw) * inv_v;
        g_nu_rest += 0.5 * np1 * u * inv_nu2 * iw;
        if (scores) l_nu = dconst - 0.5 * std::log1p(u) + 0.5 * np1 * u * inv_nu2 * iw;
      }
      if (kHess) {
        const double iw2 = iw * iw;
        const double w = 1.0 + u;
        l_ee = np1 * (u - 1.0) * inv_v * inv_nu2 * iw2;
        l_ev = np1 * e * inv_v * inv_v * inv_nu2 * iw2;
        l_vv = (0.5 - np1 * u * (1.0 + 0.5 * u) * iw2) * inv_v * inv_v;
        l_enu = -e * inv_v * (nu2 * w - np1) * inv_nu2 * inv_nu2 * iw2;
        l_vnu = 0.5 * inv_v * (u * iw - np1 * u * inv_nu2 * iw2);
        l_nunu = u * inv_nu2 * iw - 0.5 * np1 * u * (w + 1.0) * inv_nu2 * inv_nu2 * iw2;
      }
    } else {
      const double inv_v = 1.0 / v;
      const double q = e2 * inv_v;
      quad += q;
      if (kGrad) {
        l_e = -e * inv_v;
        l_v = 0.5 * (q - 1.0) * inv_v;
      }
      if (kHess) {
        l_ee = -inv_v;
        l_ev = e * inv_v * inv_v;
        l_vv = (0.5 - q) * inv_v * inv_v;
      }
    }
    if (++in_chunk == kChunk) {
      log_sum += std::log(prod_v);
      prod_v = 1.0;
      if (kStudent) {
        log_u_sum += std::log(prod_u);
        prod_u = 1.0;
      }
      in_chunk = 0;
    }
    if (kGrad) {
      // Second derivatives of sigma2_k from the previous first derivatives.
      if (kHess) {
        if (kMu) {
          h_mumu = alpha * d2e2p + (kGjr ? gamma * d2ne2p : 0.0) + beta * h_mumu;
          h_mual = de2p + beta * h_mual;
          if (kGjr) h_muga = dne2p + beta * h_muga;
          h_mube = dv[kMuS] + beta * h_mube;
        }
        h_ombe = dv[kOm] + beta * h_ombe;
        h_albe = dv[kAl] + beta * h_albe;
        if (kGjr) h_gabe = dv[kGa] + beta * h_gabe;
        h_bebe = 2.0 * dv[kBe] + beta * h_bebe;
      }
      // First derivatives of sigma2_k (k = 0 uses the presample derivatives).
      if (kMu) dv[kMuS] = alpha * de2p + (kGjr ? gamma * dne2p : 0.0) + beta * dv[kMuS];
      dv[kOm] = 1.0 + beta * dv[kOm];
      dv[kAl] = e2p + beta * dv[kAl];
      if (kGjr) dv[kGa] = ne2p + beta * dv[kGa];
      dv[kBe] = vp + beta * dv[kBe];
      double sc[5] = {0, 0, 0, 0, 0};
#pragma GCC unroll 5
      for (int i = 0; i < 5; ++i) {
        if (!kHas[i]) continue;
        sc[i] = l_v * dv[i];
        if (i == kMuS) sc[i] -= l_e;
        g[i] += sc[i];
      }
      if (scores) {
        double* row = scores + static_cast<size_t>(k) * k_;
#pragma GCC unroll 5
        for (int i = 0; i < 5; ++i) {
          if (kHas[i]) row[index[i]] = sc[i];
        }
        if (kStudent) row[index[kNu]] = l_nu;
      }
      if (kHess) {
        // l_vv dv dv' + l_v d2v, plus the e-terms of mu (d e / d mu = -1) and nu.
#pragma GCC unroll 5
        for (int i = 0; i < 5; ++i) {
          if (!kHas[i]) continue;
          const double a = l_vv * dv[i];
#pragma GCC unroll 5
          for (int j = 0; j <= i; ++j) {
            if (kHas[j]) H[i][j] += a * dv[j];
          }
        }
        if (kMu) {
          H[kMuS][kMuS] += l_ee - 2.0 * l_ev * dv[kMuS] + l_v * h_mumu;
          H[kAl][kMuS] += -l_ev * dv[kAl] + l_v * h_mual;
          if (kGjr) H[kGa][kMuS] += -l_ev * dv[kGa] + l_v * h_muga;
          H[kBe][kMuS] += -l_ev * dv[kBe] + l_v * h_mube;
          H[kOm][kMuS] += -l_ev * dv[kOm];
        }
        H[kBe][kOm] += l_v * h_ombe;
        H[kBe][kAl] += l_v * h_albe;
        if (kGjr) H[kBe][kGa] += l_v * h_gabe;
        H[kBe][kBe] += l_v * h_bebe;
        if (kStudent) {
#pragma GCC unroll 5
          for (int i = 0; i < 5; ++i) {
            if (kHas[i]) H[kNu][i] += l_vnu * dv[i];
          }
          if (kMu) H[kNu][kMuS] -= l_enu;
          H[kNu][kNu] += l_nunu;
        }
      }
      de2p = -2.0 * e;
      dne2p = e < 0.0 ? -2.0 * e : 0.0;
      if (kHess) d2ne2p = e < 0.0 ? 2.0 : 0.0;
      d2e2p = 2.0;
    }
    e2p = e2;
    ne2p = e < 0.0 ? e2 : 0.0;
    vp = v;
  }
  log_sum += std::log(prod_v);
  double ll;
  if (kStudent) {
    log_u_sum += std::log(prod_u);
    ll = n_ * const_term - 0.5 * log_sum - 0.5 * np1 * log_u_sum;
  } else {
    ll = n_ * const_term - 0.5 * (quad + log_sum);
  }
  if (!std::isfinite(ll)) return kGrad ? fail() : ll;
  if (kGrad) {
    g[kNu] = n_ * dconst - 0.5 * log_u_sum + g_nu_rest;
    for (int i = 0; i < 6; ++i) {
      if (index[i] >= 0) grad[index[i]] = g[i];
    }
  }
  if (kHess) {
    H[kNu][kNu] += n_ * d2const;
    for (int i = 0; i < 6; ++i) {
      if (index[i] < 0) continue;
      for (int j = 0; j <= i; ++j) {
        if (index[j] < 0) continue;
        hess[static_cast<size_t>(index[i]) * k_ + index[j]] = H[i][j];
        hess[static_cast<size_t>(index[j]) * k_ + index[i]] = H[i][j];
      }
    }
  }
  return ll;
}

double LikelihoodKernel::EvaluateOrderOne(const double* theta, double* grad, double* scores,
                                          double* hess) {
  const bool mu = spec_.mean == MeanKind::kConstant;
  const bool gjr = spec_.variance == VarianceKind::kGjr;
  const bool t = spec_.innovations == Innovations::kStudentT;
  const int level = hess ? 2 : grad ? 1 : 0;
  // 2 x 2 x 2 x 3 instantiations, chosen once per call.
#define AFTERSHOCK_ORDER_ONE(M, G, T)                         \
  switch (level) {                                            \
    case 0:                                                   \
      return OrderOne<M, G, T, 0>(theta, grad, scores, hess); \
    case 1:                                                   \
      return OrderOne<M, G, T, 1>(theta, grad, scores, hess); \
    default:                                                  \
      return OrderOne<M, G, T, 2>(theta, grad, scores, hess); \
  }
  if (mu) {
    if (gjr) {
      if (t) {
        AFTERSHOCK_ORDER_ONE(true, true, true)
      } else {
        AFTERSHOCK_ORDER_ONE(true, true, false)
      }
    } else {
      if (t) {
        AFTERSHOCK_ORDER_ONE(true, false, true)
      } else {
        AFTERSHOCK_ORDER_ONE(true, false, false)
      }
    }
  } else {
    if (gjr) {
      if (t) {
        AFTERSHOCK_ORDER_ONE(false, true, true)
      } else {
        AFTERSHOCK_ORDER_ONE(false, true, false)
      }
    } else {
      if (t) {
        AFTERSHOCK_ORDER_ONE(false, false, true)
      } else {
        AFTERSHOCK_ORDER_ONE(false, false, false)
      }
    }
  }
#undef AFTERSHOCK_ORDER_ONE
}

template <bool kStudent, int KV, int NB>
double LikelihoodKernel::ZeroMeanGeneral(const double* theta, double* grad, double* scores,
                                         double* hess) {
  // The residuals are the returns and s2 does not depend on the parameters:
  // eps, the padded squares and s2 were set up once by the constructor.
  const int na = spec_.arch_order, no = spec_.asym_order;
  const int nb = NB >= 0 ? NB : spec_.garch_order;
  const int kv = KV > 0 ? KV : 1 + na + no + nb;  // variance parameters; nu is slot kv
  const int hk = kStudent ? kv + 1 : kv;
  const int slots = nb + 1;
  const int pad = zpad_;
  const bool with_hess = hess != nullptr;
  const bool d2 = with_hess && nb > 0;  // second derivatives of sigma2 are not all zero
  const double omega = theta[0];
  const double* alpha = theta + 1;
  const double* gamma = alpha + na;
  const double* beta = gamma + no;
  const double nu = kStudent ? theta[kv] : 0.0;
  const double const_term = kStudent ? LogNormalizerT(nu) : -0.5 * kLogTwoPi;
  const double dconst = kStudent ? DLogNormalizerTDnu(nu) : 0.0;
  const double d2const = kStudent && with_hess ? D2LogNormalizerTDnu2(nu) : 0.0;
  const double nu2 = nu - 2.0;
  const double inv_nu2 = kStudent ? 1.0 / nu2 : 0.0;
  const double np1 = nu + 1.0;
  auto fail = [&]() {
    std::fill(grad, grad + k_, 0.0);
    if (with_hess) std::fill(hess, hess + static_cast<size_t>(k_) * k_, 0.0);
    return -std::numeric_limits<double>::infinity();
  };
  // Terms before the sample use the presample s2, constant here, so their
  // derivatives are zero: lags before the sample are skipped.
  const double* e2p = ze2_.data() + pad;    // e2p[k] = eps_k^2, s2 before the sample
  const double* ne2p = zne2_.data() + pad;  // negative part; s2 / 2 before the sample
  double* vpad = zv_.data() + pad;          // sigma2_k; s2 before the sample
  if (with_hess) std::fill(zh_.begin(), zh_.end(), 0.0);
  if (d2) std::fill(zhb_.begin(), zhb_.end(), 0.0);
  double* g = work_.data();
  std::fill(g, g + k_, 0.0);
  double* hacc = zh_.data();
  double* hb = zhb_.data();    // nb x kv: sum of l_v d2 sigma2 in the beta rows
  const int b0 = 1 + na + no;  // slot of beta_1
  double g_nu_rest = 0, quad = 0, log_sum = 0, log_u_sum = 0, prod_v = 1.0, prod_u = 1.0;
  constexpr int kChunk = 8;
  int in_chunk = 0;
  int head = 0;  // ring slot of term k
  for (int k = 0; k < n_; ++k) {
    double* dv = &zdv_[static_cast<size_t>(head) * kv];
    // Value and the direct part of d sigma2 (same summation order as the
    // general path).
    double v = omega;
    dv[0] = 1.0;
    for (int i = 0; i < na; ++i) {
      const double e2 = e2p[k - 1 - i];
      v += alpha[i] * e2;
      dv[1 + i] = e2;
    }
    for (int i = 0; i < no; ++i) {
      const double ne2 = ne2p[k - 1 - i];
      v += gamma[i] * ne2;
      dv[1 + na + i] = ne2;
    }
    for (int j = 0; j < nb; ++j) {
      const double sv = vpad[k - 1 - j];
      v += beta[j] * sv;
      dv[b0 + j] = sv;
    }
    vpad[k] = v;
    sig2_[k] = v;
    if (!(v > 0.0) || !std::isfinite(v)) return fail();
    // d sigma2_k = x_k + sum_j beta_j d sigma2_{k-1-j}. Second derivatives are
    // non-zero only in the beta rows and columns: row r of D_k (d2 sigma2_k /
    // d beta_r d .) = sum_l beta_l D_{k-1-l}[r] + d sigma2_{k-1-r}
    //                 + (column beta_l: d sigma2_{k-1-l} / d beta_r).
    double* dd = d2 ? &zd2v_[static_cast<size_t>(head) * nb * kv] : nullptr;
    if (dd) std::fill(dd, dd + static_cast<size_t>(nb) * kv, 0.0);
    for (int j = 0; j < nb && j < k; ++j) {
      int slot = head - 1 - j;
      if (slot < 0) slot += slots;
      const double* dp = &zdv_[static_cast<size_t>(slot) * kv];
      const double b = beta[j];
#pragma GCC unroll 8
      for (int c = 0; c < kv; ++c) dv[c] += b * dp[c];
      if (dd) {
        const double* dpp = &zd2v_[static_cast<size_t>(slot) * nb * kv];
#pragma GCC unroll 8
        for (int c = 0; c < nb * kv; ++c) dd[c] += b * dpp[c];
        double* row = dd + static_cast<size_t>(j) * kv;
#pragma GCC unroll 8
        for (int c = 0; c < kv; ++c) row[c] += dp[c];
#pragma GCC unroll 4
        for (int r = 0; r < nb; ++r) dd[static_cast<size_t>(r) * kv + b0 + j] += dp[b0 + r];
      }
    }
    // Per-term derivatives in v and nu (as on the order-one path).
    const double e2 = e2p[k];
    prod_v *= v;
    double l_v, l_vv = 0, l_nu = 0, l_vnu = 0, l_nunu = 0;
    if (kStudent) {
      const double sq = e2 * inv_nu2;
      const double vs = v + sq;
      const double rr = 1.0 / (v * vs);
      const double inv_v = vs * rr;
      const double iw = v * v * rr;  // 1 / (1 + u)
      const double u = sq * inv_v;
      prod_u *= 1.0 + u;
      l_v = (-0.5 + 0.5 * np1 * u * iw) * inv_v;
      g_nu_rest += 0.5 * np1 * u * inv_nu2 * iw;
      if (scores) l_nu = dconst - 0.5 * std::log1p(u) + 0.5 * np1 * u * inv_nu2 * iw;
      if (with_hess) {
        const double iw2 = iw * iw;
        l_vv = (0.5 - np1 * u * (1.0 + 0.5 * u) * iw2) * inv_v * inv_v;
        l_vnu = 0.5 * inv_v * (u * iw - np1 * u * inv_nu2 * iw2);
        l_nunu = u * inv_nu2 * iw - 0.5 * np1 * u * (2.0 + u) * inv_nu2 * inv_nu2 * iw2;
      }
    } else {
      const double inv_v = 1.0 / v;
      const double q = e2 * inv_v;
      quad += q;
      l_v = 0.5 * (q - 1.0) * inv_v;
      if (with_hess) l_vv = (0.5 - q) * inv_v * inv_v;
    }
    if (++in_chunk == kChunk) {
      log_sum += std::log(prod_v);
      prod_v = 1.0;
      if (kStudent) {
        log_u_sum += std::log(prod_u);
        prod_u = 1.0;
      }
      in_chunk = 0;
    }
#pragma GCC unroll 8
    for (int c = 0; c < kv; ++c) g[c] += l_v * dv[c];
    if (scores) {
      double* row = scores + static_cast<size_t>(k) * k_;
      for (int c = 0; c < kv; ++c) row[c] = l_v * dv[c];
      if (kStudent) row[kv] = l_nu;
    }
    if (with_hess) {
      // Lower triangle of l_vv dv dv', the nu row, and l_v D in the beta rows.
#pragma GCC unroll 8
      for (int a = 0; a < kv; ++a) {
        const double la = l_vv * dv[a];
        double* hrow = hacc + static_cast<size_t>(a) * hk;
#pragma GCC unroll 8
        for (int b = 0; b <= a; ++b) hrow[b] += la * dv[b];
      }
      if (kStudent) {
        double* hrow = hacc + static_cast<size_t>(kv) * hk;
#pragma GCC unroll 8
        for (int b = 0; b < kv; ++b) hrow[b] += l_vnu * dv[b];
        hrow[kv] += l_nunu;
      }
      if (dd) {
#pragma GCC unroll 8
        for (int c = 0; c < nb * kv; ++c) hb[c] += l_v * dd[c];
      }
    }
    head = head + 1 == slots ? 0 : head + 1;
  }
  log_sum += std::log(prod_v);
  double ll;
  if (kStudent) {
    log_u_sum += std::log(prod_u);
    ll = n_ * const_term - 0.5 * log_sum - 0.5 * np1 * log_u_sum;
    g[kv] = n_ * dconst - 0.5 * log_u_sum + g_nu_rest;
  } else {
    ll = n_ * const_term - 0.5 * (quad + log_sum);
  }
  if (!std::isfinite(ll)) return fail();
  std::copy(g, g + k_, grad);
  if (with_hess) {
    if (kStudent) hacc[static_cast<size_t>(kv) * hk + kv] += n_ * d2const;
    // Beta rows: every column up to the diagonal (the beta slots are last
    // among the variance parameters, so this is the whole lower triangle).
    for (int r = 0; r < nb && d2; ++r) {
      for (int c = 0; c <= b0 + r; ++c) {
        hacc[static_cast<size_t>(b0 + r) * hk + c] += hb[static_cast<size_t>(r) * kv + c];
      }
    }
    for (int a = 0; a < hk; ++a) {
      for (int b = 0; b <= a; ++b) {
        const double x = hacc[static_cast<size_t>(a) * hk + b];
        hess[static_cast<size_t>(a) * k_ + b] = x;
        hess[static_cast<size_t>(b) * k_ + a] = x;
      }
    }
  }
  return ll;
}

double LikelihoodKernel::EvaluateZeroMeanGeneral(const double* theta, double* grad, double* scores,
                                                 double* hess) {
  const bool t = spec_.innovations == Innovations::kStudentT;
  // Compile-time parameter and beta-lag counts for the identification's
  // candidates (ARCH(1) to ARCH(5), GARCH(1,2), GARCH(2,1)) so the small loops
  // unroll; other orders at run time.
  const int kv = spec_.NumVarianceParams(), nb = spec_.garch_order;
#define AFTERSHOCK_ZERO_MEAN(KV, NB)                                      \
  if (kv == KV && nb == NB) {                                             \
    return t ? ZeroMeanGeneral<true, KV, NB>(theta, grad, scores, hess)   \
             : ZeroMeanGeneral<false, KV, NB>(theta, grad, scores, hess); \
  }
  AFTERSHOCK_ZERO_MEAN(2, 0)
  AFTERSHOCK_ZERO_MEAN(3, 0)
  AFTERSHOCK_ZERO_MEAN(4, 0)
  AFTERSHOCK_ZERO_MEAN(5, 0)
  AFTERSHOCK_ZERO_MEAN(6, 0)
  AFTERSHOCK_ZERO_MEAN(4, 1)
  AFTERSHOCK_ZERO_MEAN(4, 2)
  return t ? ZeroMeanGeneral<true, 0, -1>(theta, grad, scores, hess)
           : ZeroMeanGeneral<false, 0, -1>(theta, grad, scores, hess);
#undef AFTERSHOCK_ZERO_MEAN
}

double LikelihoodKernel::EvaluateHessian(const double* theta, double* grad, double* hess,
                                         double* scores) {
  if (zero_mean_general_) return EvaluateZeroMeanGeneral(theta, grad, scores, hess);
  return EvaluateOrderOne(theta, grad, scores, hess);
}

double LikelihoodKernel::Evaluate(const double* theta, double* grad, double* scores) {
  if (order_one_) return EvaluateOrderOne(theta, grad, scores, nullptr);
  if (zero_mean_general_ && grad != nullptr) {
    return EvaluateZeroMeanGeneral(theta, grad, scores, nullptr);
  }
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
  const int dist = spec_.DistOffset();
  const double inv_nu2 = student ? 1.0 / (nu - 2.0) : 0.0;

  // Logs of products of 8 terms instead of a log per term (as on the
  // order-one path); per-term log(1 + u) only where per-term scores need it.
  double quad = 0;       // sum of e2/v (normal)
  double log_sum = 0;    // sum of log v
  double log_u_sum = 0;  // sum of log(1 + u) (Student-t)
  double prod_v = 1.0, prod_u = 1.0;
  constexpr int kChunk = 8;
  int in_chunk = 0;
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
    prod_v *= v;
    double u = 0, q = 0;
    if (student) {
      u = e2 * inv_v * inv_nu2;
      prod_u *= 1.0 + u;
    } else {
      q = e2 * inv_v;
      quad += q;
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
    if (!with_grad) continue;
    TermDerivatives t;
    if (student) {
      // Without scores the -log(1 + u) / 2 part of d/dnu is added once at the end.
      t = StudentTerm(e, inv_v, u, scores ? std::log1p(u) : 0.0, nu, inv_nu2, dconst_dnu);
      work_[dist] = t.dnu;
    } else {
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
  log_sum += std::log(prod_v);
  double ll;
  if (student) {
    log_u_sum += std::log(prod_u);
    ll = n_ * const_term - 0.5 * log_sum - 0.5 * (nu + 1.0) * log_u_sum;
    if (with_grad && !scores) grad[dist] -= 0.5 * log_u_sum;
  } else {
    ll = n_ * const_term - 0.5 * (quad + log_sum);
  }
  return ll;
}

}  // namespace aftershock::internal
