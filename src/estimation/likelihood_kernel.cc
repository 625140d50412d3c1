#include "estimation/likelihood_kernel.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "aftershock/innovations.h"

namespace aftershock::internal {
namespace {

constexpr double kLogTwoPi = 1.8378770664093454836;

// The order-one passes take the log of products of this many terms (of
// sigma2, and of 1 + u for Student-t) instead of a log per term: on
// unit-scaled data, with omega >= 1e-8, 16 variances multiply to far inside
// the double range; a product that overflows makes the point infeasible.
constexpr int kOrderOneChunk = 16;

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

// Workspace of the order-one passes without scores, one per thread and kept
// between kernels: a fit builds a kernel per window, and fresh columns of
// about 16 bytes x (K + 4) per bar would be new pages (page faults) on every
// fit. Used only inside one pass, which calls no other pass.
double* OrderOneScratch(size_t cells) {
  thread_local std::vector<double> scratch;
  if (scratch.size() < cells) scratch.resize(cells);
  return scratch.data();
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
      deps_(order_one_ ? 0 : static_cast<size_t>(n_) * nm_),  // order one: d eps / d mu = -1
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
  // (The order-one passes keep no deps_ rows: Presample() reads -1 for them.)
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
        for (int c2 = 0; c2 < nm_; ++c2) ds2_[c2] = c * c * 2.0 * e * MeanDerivative(pick, c2);
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
      for (int c = 0; c < nm_; ++c) ds2_[c] += 2.0 * eps_[k] * MeanDerivative(k, c);
    }
  }
  s2_ = s / m;
  for (int c = 0; c < nm_; ++c) ds2_[c] /= m;
  d2s2_ = 2.0;
}

void LikelihoodKernel::OrderOneResiduals(double mu, bool mu_grad) {
  const double* r = r_.data();
  if (presample_ == Presample::kMeanSquare) {
    // The mean-square presample in the same sweep (d eps / d mu = -1, so
    // d s2 / d mu = -2 mean(eps) and d^2 s2 / d mu^2 = 2); two accumulators
    // per sum break the dependency chain.
    // The pair of accumulators is one SSE2 register (even and odd bars).
    typedef double V2 __attribute__((vector_size(16)));
    V2 sq = {0, 0}, sum = {0, 0};
    int k = 0;
    for (; k + 1 < n_; k += 2) {
      V2 a;
      __builtin_memcpy(&a, r + k, sizeof a);
      a -= mu;
      __builtin_memcpy(&eps_[k], &a, sizeof a);
      sq += a * a;
      sum += a;
    }
    double sq0 = sq[0], sq1 = sq[1], sum0 = sum[0], sum1 = sum[1];
    for (; k < n_; ++k) {
      const double a = r[k] - mu;
      eps_[k] = a;
      sq0 += a * a;
      sum0 += a;
    }
    s2_ = (sq0 + sq1) / n_;
    if (mu_grad) ds2_[0] = -2.0 * (sum0 + sum1) / n_;
    d2s2_ = 2.0;
  } else {
    for (int k = 0; k < n_; ++k) eps_[k] = r[k] - mu;
    Presample(mu_grad);
  }
}

// The start both order-one passes share: the parameters unpacked from theta,
// the slots' full-vector indices, the residuals and presample variance (with
// their mu-derivatives as kLevel asks) and the density constants. Always
// inlined, so every field stays a compile-time-shaped local of the caller.
template <bool kMu, bool kGjr, bool kStudent, int kLevel>
__attribute__((always_inline)) inline LikelihoodKernel::OrderOneStart
LikelihoodKernel::OrderOneBegin(const double* theta) {
  constexpr bool kGrad = kLevel >= 1;
  constexpr bool kHess = kLevel >= 2;
  constexpr int kMuS = 0, kOm = 1, kAl = 2, kGa = 3, kBe = 4, kNu = 5;  // slots
  OrderOneStart st;
  const int v0 = spec_.VarianceOffset();
  st.mu = kMu ? theta[0] : 0.0;
  st.omega = theta[v0];
  st.alpha = theta[v0 + 1];
  st.gamma = kGjr ? theta[v0 + 2] : 0.0;
  st.beta = theta[v0 + (kGjr ? 3 : 2)];
  st.nu = kStudent ? theta[spec_.DistOffset()] : 0.0;
  {
    int c = 0;
    st.index[kMuS] = kMu ? c++ : -1;
    st.index[kOm] = c++;
    st.index[kAl] = c++;
    st.index[kGa] = kGjr ? c++ : -1;
    st.index[kBe] = c++;
    st.index[kNu] = kStudent ? c++ : -1;
  }
  OrderOneResiduals(st.mu, kMu && kGrad);
  st.s2 = s2_;
  st.ds2 = kMu && kGrad ? ds2_[0] : 0.0;  // d s2 / d mu
  st.d2s2 = kMu && kHess ? d2s2_ : 0.0;   // d^2 s2 / d mu^2
  // Density constants (innovations.h; NaN for an invalid nu, which makes the
  // log-likelihood NaN and the point infeasible for the optimizer).
  const double nu = st.nu;
  st.const_term = kStudent ? LogNormalizerT(nu) : -0.5 * kLogTwoPi;
  st.dconst = kStudent && kGrad ? DLogNormalizerTDnu(nu) : 0.0;
  st.d2const = kStudent && kHess ? D2LogNormalizerTDnu2(nu) : 0.0;
  st.nu2 = nu - 2.0;
  st.inv_nu2 = kStudent ? 1.0 / st.nu2 : 0.0;
  st.np1 = nu + 1.0;
  return st;
}

// An infeasible point: zero gradient and Hessian (those kGrad/kHess ask for),
// -inf log-likelihood.
template <bool kGrad, bool kHess>
__attribute__((always_inline)) inline double LikelihoodKernel::OrderOneFail(double* grad,
                                                                            double* hess) {
  if (kGrad) std::fill(grad, grad + k_, 0.0);
  if (kHess) std::fill(hess, hess + static_cast<size_t>(k_) * k_, 0.0);
  return -std::numeric_limits<double>::infinity();
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
  const OrderOneStart start = OrderOneBegin<kMu, kGjr, kStudent, kLevel>(theta);
  const double omega = start.omega, alpha = start.alpha, gamma = start.gamma, beta = start.beta;
  const int* const index = start.index;  // full-vector index of each slot (-1: absent)
  const double s2 = start.s2, ds2 = start.ds2, d2s2 = start.d2s2;
  const double const_term = start.const_term, dconst = start.dconst, d2const = start.d2const,
               nu2 = start.nu2, inv_nu2 = start.inv_nu2, np1 = start.np1;
  auto fail = [&]() { return OrderOneFail<kGrad, kHess>(grad, hess); };

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
  constexpr int kChunk = kOrderOneChunk;
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

// The order-one pass without per-term scores, by reverse accumulation: the
// forward sweep computes sigma2 and the per-term derivatives, and stores
// l_v = d l_k / d sigma2_k; a backward sweep then gives the gradient as sums
// over the inputs of the variance recursion. For any input sequence x_k of
// d sigma2_k / d p = x_k + beta d sigma2_{k-1} / d p,
//   sum_k l_v,k d sigma2_k / d p = sum_k w_k x_k + beta w_0 d sigma2_{-1} / d p,
//   w_k = l_v,k + beta w_{k+1} (w_n = 0),
// so none of the derivative recursions run forward, and the second
// derivatives of sigma2 (all of them, again recursions with coefficient beta,
// whose inputs are first derivatives) come the same way with a second adjoint
//   z_j = w_{j+1} + beta z_{j+1} (z_{n-1} = 0):
//   sum_k w_k d sigma2_{k-1} / d p = sum_j z_j x_j + d sigma2_{-1} / d p (w_0 + beta z_0).
// Each sweep is one short dependency chain per bar (a multiply and an add)
// with the per-term work beside it, where the forward recursions cost five
// (gradient) to thirteen (Hessian) chains. The value, the forward sums and
// the order of the value's terms are those of OrderOne(), so the value is the
// same to the last bit; the gradient and the Hessian sum in another order.
template <bool kMu, bool kGjr, bool kStudent, int kLevel>
double LikelihoodKernel::OrderOneAdjoint(const double* theta, double* grad, double* hess,
                                         double* opg) {
  constexpr bool kGrad = kLevel >= 1;
  constexpr bool kHess = kLevel >= 2;
  constexpr bool kOpg = kLevel >= 3;
  constexpr int kMuS = 0, kOm = 1, kAl = 2, kGa = 3, kBe = 4, kNu = 5;  // slots
  constexpr bool kHas[6] = {kMu, true, true, kGjr, true, kStudent};
  const OrderOneStart start = OrderOneBegin<kMu, kGjr, kStudent, kLevel>(theta);
  const double omega = start.omega, alpha = start.alpha, gamma = start.gamma, beta = start.beta;
  const int* const index = start.index;  // full-vector index of each slot (-1: absent)
  const double s2 = start.s2, ds2 = start.ds2, d2s2 = start.d2s2;
  const double const_term = start.const_term, dconst = start.dconst, d2const = start.d2const,
               nu2 = start.nu2, inv_nu2 = start.inv_nu2, np1 = start.np1;
  auto fail = [&]() { return OrderOneFail<kGrad, kHess>(grad, hess); };

  const double* eps = eps_.data();
  double* sig2 = sig2_.data();
  // Per-bar columns in the thread's scratch: l_v, then for the Hessian the
  // derivative columns of sigma2 (one per slot but nu).
  double* lv = OrderOneScratch(static_cast<size_t>(n_) * (kHess ? k_ + 1 : 1));

  // ---- forward sweep ----
  double e2p = s2, ne2p = 0.5 * s2, vp = s2;
  double de2p = ds2, dne2p = 0.5 * ds2;  // mu-derivatives of e2p, ne2p
  // d sigma2_{k-1} / d slot: only the Hessian's outer products need them.
  double dv[5] = {ds2, 0, 0, 0, 0};
  double H[6][6] = {};
  double J[6][6] = {};  // kOpg: the scores' outer products
  // Hessian columns (n each): d sigma2_k / d slot.
  double* col_dv[5] = {};
  if (kHess) {
    double* c = lv + n_;
    for (int i = 0; i < 5; ++i) {
      if (kHas[i]) {
        col_dv[i] = c;
        c += n_;
      }
    }
  }
  double g_nu_rest = 0;
  double e_sum = 0;  // sum of -d l_k / d eps_k (= d l / d mu through eps)
  double quad = 0, log_sum = 0, log_u_sum = 0;
  double prod_v = 1.0, prod_u = 1.0;
  // Bad variances are caught after the sweep: a non-positive one by the
  // minimum, NaN and inf (and an overflowing product) by the chunk products.
  double v_min = std::numeric_limits<double>::infinity();
  bool chunk_bad = false;
  auto step = [&](int k) __attribute__((always_inline)) {
    double v = omega;
    v += alpha * e2p;
    if (kGjr) v += gamma * ne2p;
    v += beta * vp;
    sig2[k] = v;
    v_min = v < v_min ? v : v_min;
    const double e = eps[k];
    const double e2 = e * e;
    prod_v *= v;
    double l_v = 0;
    if (kStudent) {
      const double s = e2 * inv_nu2;
      const double vs = v + s;
      const double rr = 1.0 / (v * vs);
      const double inv_v = vs * rr;
      const double iw = v * v * rr;  // 1 / (1 + u)
      const double u = s * inv_v;
      prod_u *= 1.0 + u;
      if (kGrad) {
        if (kMu) e_sum += np1 * e * inv_v * inv_nu2 * iw;
        l_v = (-0.5 + 0.5 * np1 * u * iw) * inv_v;
        g_nu_rest += 0.5 * np1 * u * inv_nu2 * iw;
      }
    } else {
      const double inv_v = 1.0 / v;
      const double q = e2 * inv_v;
      quad += q;
      if (kGrad) {
        if (kMu) e_sum += e * inv_v;
        l_v = 0.5 * (q - 1.0) * inv_v;
      }
    }
    if (kGrad) lv[k] = l_v;
    if (kHess) {
      // The derivatives of sigma2_k (k = 0 from the presample's) go to
      // columns; the per-term second derivatives and the outer products come
      // below in a loop over pairs of bars.
      if (kMu) dv[kMuS] = alpha * de2p + (kGjr ? gamma * dne2p : 0.0) + beta * dv[kMuS];
      dv[kOm] = 1.0 + beta * dv[kOm];
      dv[kAl] = e2p + beta * dv[kAl];
      if (kGjr) dv[kGa] = ne2p + beta * dv[kGa];
      dv[kBe] = vp + beta * dv[kBe];
#pragma GCC unroll 5
      for (int i = 0; i < 5; ++i) {
        if (kHas[i]) col_dv[i][k] = dv[i];
      }
      if (kMu) {
        de2p = -2.0 * e;
        dne2p = e < 0.0 ? -2.0 * e : 0.0;
      }
    }
    e2p = e2;
    ne2p = e < 0.0 ? e2 : 0.0;
    vp = v;
  };
  // Logs of products of kOrderOneChunk terms; full chunks unrolled.
  for (int k0 = 0; k0 < n_; k0 += kOrderOneChunk) {
    if (k0 + kOrderOneChunk <= n_) {
#pragma GCC unroll 16
      for (int k = k0; k < k0 + kOrderOneChunk; ++k) step(k);
    } else {
      for (int k = k0; k < n_; ++k) step(k);
    }
    chunk_bad |= !(prod_v < std::numeric_limits<double>::infinity());
    log_sum += std::log(prod_v);
    prod_v = 1.0;
    if (kStudent) {
      log_u_sum += std::log(prod_u);
      prod_u = 1.0;
    }
  }
  if (!(v_min > 0.0) || chunk_bad) return fail();
  double ll;
  if (kStudent) {
    ll = n_ * const_term - 0.5 * log_sum - 0.5 * np1 * log_u_sum;
  } else {
    ll = n_ * const_term - 0.5 * (quad + log_sum);
  }
  if (!std::isfinite(ll)) return kGrad ? fail() : ll;
  if (!kGrad) return ll;

  // ---- backward sweep: bars n-1 .. 1 read the inputs of bar k from bar k-1 ----
  // Sums of w_k (and z_k) times the inputs: 1, a = eps_{k-1}^2, the negative
  // part na, vp = sigma2_{k-1}, and for mu eps_{k-1} and its negative part
  // (d a / d mu = -2 eps_{k-1}); wn1 sums w_k over the bars whose eps_{k-1} < 0.
  double w = 0, z = 0;
  double sw = 0, swa = 0, swna = 0, swv = 0, swe = 0, swne = 0, wn1 = 0;
  double sz = 0, sza = 0, szna = 0, szv = 0, sze = 0, szne = 0;
  auto add = [&](int k, double w, double z) __attribute__((always_inline)) {
    const double ep = eps[k - 1];
    const double a = ep * ep;
    const double vprev = sig2[k - 1];
    const bool neg = ep < 0.0;
    sw += w;
    swa += w * a;
    swv += w * vprev;
    if (kGjr) swna += neg ? w * a : 0.0;
    if (kMu) swe += w * ep;
    if (kMu && kGjr) swne += neg ? w * ep : 0.0;
    if (kHess) {
      sz += z;
      sza += z * a;
      szv += z * vprev;
      if (kGjr) szna += neg ? z * a : 0.0;
      if (kMu) sze += z * ep;
      if (kMu && kGjr) szne += neg ? z * ep : 0.0;
      if (kMu && kGjr) wn1 += neg ? w : 0.0;
    }
  };
  // Two bars a step, both from w_{k+1} (and z_{k+1}), so that the chain
  // carries one multiply-add per two bars:
  //   w_k = l_k + beta w_{k+1},  w_{k-1} = (l_{k-1} + beta l_k) + beta^2 w_{k+1},
  //   z_k = w_{k+1} + beta z_{k+1},  z_{k-1} = (l_k + 2 beta w_{k+1}) + beta^2 z_{k+1}
  // (l = l_v). The sums differ from the one-bar recursion in round-off only.
  const double beta2 = beta * beta;
  int k = n_ - 1;
  for (; k >= 2; k -= 2) {
    const double w1 = w;  // w_{k+1}
    const double z1 = z;  // z_{k+1}
    const double wk = lv[k] + beta * w1;
    const double wk1 = (lv[k - 1] + beta * lv[k]) + beta2 * w1;
    double zk = 0, zk1 = 0;
    if (kHess) {
      zk = w1 + beta * z1;
      zk1 = (lv[k] + 2.0 * beta * w1) + beta2 * z1;
    }
    add(k, wk, zk);
    add(k - 1, wk1, zk1);
    w = wk1;
    z = zk1;
  }
  for (; k >= 1; --k) {
    if (kHess) z = w + beta * z;
    w = lv[k] + beta * w;
    add(k, w, z);
  }
  // Bar 0: inputs from the presample (a = s2, na = s2 / 2, vp = s2; their
  // mu-derivatives ds2 and ds2 / 2; second ones d2s2 and d2s2 / 2).
  const double sw1 = sw;  // sum over bars >= 1
  if (kHess) z = w + beta * z;
  w = lv[0] + beta * w;
  const double w0 = w, z0 = z;
  sw += w0;
  swa += w0 * s2;
  swv += w0 * s2;
  if (kGjr) swna += w0 * 0.5 * s2;
  // d a_k / d mu and d na_k / d mu summed against w.
  const double swda = kMu ? -2.0 * swe + w0 * ds2 : 0.0;
  const double swdna = kMu && kGjr ? -2.0 * swne + w0 * 0.5 * ds2 : 0.0;
  double g[6] = {0, 0, 0, 0, 0, 0};
  g[kOm] = sw;
  g[kAl] = swa;
  if (kGjr) g[kGa] = swna;
  g[kBe] = swv;
  if (kMu) g[kMuS] = e_sum + alpha * swda + (kGjr ? gamma * swdna : 0.0) + beta * ds2 * w0;
  if (kStudent) g[kNu] = n_ * dconst - 0.5 * log_u_sum + g_nu_rest;
  for (int i = 0; i < 6; ++i) {
    if (index[i] >= 0) grad[index[i]] = g[i];
  }
  if (!kHess) return ll;

  // The per-term second derivatives in eps, sigma2 and nu (from sigma2_k and
  // eps_k again, the same formulas for a double and a pair of them), the
  // outer products l_vv dsigma2 dsigma2' and the e- and nu-terms, two bars a
  // step (SSE2 lanes; the lanes are added at the end, so the sum does not
  // depend on the instruction set).
  {
    typedef double V2 __attribute__((vector_size(16)));
    auto load = [](const double* p) {
      V2 x;
      __builtin_memcpy(&x, p, sizeof x);
      return x;
    };
    // With kOpg also l_e = d l / d eps and (Student-t) u and nu_rest, the
    // part of d l / d nu other than dconst - log(1 + u) / 2, as OrderOne()
    // computes them for the scores.
    auto terms = [&](auto v, auto e, auto* l_ee, auto* l_ev, auto* l_vv, auto* l_enu, auto* l_vnu,
                     auto* l_nunu, auto* l_e, auto* u_out, auto* nu_rest)
        __attribute__((always_inline)) {
      const auto e2 = e * e;
      if (kStudent) {
        const auto s = e2 * inv_nu2;
        const auto vs = v + s;
        const auto rr = 1.0 / (v * vs);
        const auto inv_v = vs * rr;
        const auto iw = v * v * rr;
        const auto u = s * inv_v;
        const auto iw2 = iw * iw;
        const auto w = 1.0 + u;
        *l_ee = np1 * (u - 1.0) * inv_v * inv_nu2 * iw2;
        *l_ev = np1 * e * inv_v * inv_v * inv_nu2 * iw2;
        *l_vv = (0.5 - np1 * u * (1.0 + 0.5 * u) * iw2) * inv_v * inv_v;
        *l_enu = -e * inv_v * (nu2 * w - np1) * inv_nu2 * inv_nu2 * iw2;
        *l_vnu = 0.5 * inv_v * (u * iw - np1 * u * inv_nu2 * iw2);
        *l_nunu = u * inv_nu2 * iw - 0.5 * np1 * u * (w + 1.0) * inv_nu2 * inv_nu2 * iw2;
        if (kOpg) {
          *l_e = -np1 * e * inv_v * inv_nu2 * iw;
          *u_out = u;
          *nu_rest = 0.5 * np1 * u * inv_nu2 * iw;
        }
      } else {
        const auto inv_v = 1.0 / v;
        const auto q = e2 * inv_v;
        *l_ee = -inv_v;
        *l_ev = e * inv_v * inv_v;
        *l_vv = (0.5 - q) * inv_v * inv_v;
        if (kOpg) *l_e = -e * inv_v;
      }
    };
    // The scores' outer products (kOpg): s_i = l_v d sigma2 / d p_i, less
    // l_e for mu; s_nu = dconst - log(1 + u) / 2 + nu_rest.
    V2 jacc[6][6] = {};
    V2 acc[6][6] = {};
    V2 ee2 = {0, 0}, enu2 = {0, 0}, nunu2 = {0, 0};
    int k = 0;
    for (; k + 2 <= n_; k += 2) {
      V2 l_ee, l_ev, l_vv, l_enu, l_vnu, l_nunu, l_e, u, nu_rest;
      terms(load(sig2 + k), load(eps + k), &l_ee, &l_ev, &l_vv, &l_enu, &l_vnu, &l_nunu, &l_e, &u,
            &nu_rest);
      V2 d[5];
#pragma GCC unroll 5
      for (int i = 0; i < 5; ++i) {
        if (kHas[i]) d[i] = load(col_dv[i] + k);
      }
      if (kOpg) {
        const V2 l_v = load(lv + k);
        V2 sc[6];
#pragma GCC unroll 5
        for (int i = 0; i < 5; ++i) {
          if (kHas[i]) sc[i] = l_v * d[i];
        }
        if (kMu) sc[kMuS] -= l_e;
        if (kStudent) {
          const V2 log_w = {std::log1p(u[0]), std::log1p(u[1])};
          sc[kNu] = dconst - 0.5 * log_w + nu_rest;
        }
#pragma GCC unroll 6
        for (int i = 0; i < 6; ++i) {
          if (!kHas[i]) continue;
#pragma GCC unroll 6
          for (int j = 0; j <= i; ++j) {
            if (kHas[j]) jacc[i][j] += sc[i] * sc[j];
          }
        }
      }
#pragma GCC unroll 5
      for (int i = 0; i < 5; ++i) {
        if (!kHas[i]) continue;
        const V2 a = l_vv * d[i];
#pragma GCC unroll 5
        for (int j = 0; j <= i; ++j) {
          if (kHas[j]) acc[i][j] += a * d[j];
        }
      }
      if (kMu) {
        ee2 += l_ee;
        acc[kMuS][kMuS] -= 2.0 * l_ev * d[kMuS];
#pragma GCC unroll 5
        for (int i = 1; i < 5; ++i) {
          if (kHas[i]) acc[i][kMuS] -= l_ev * d[i];
        }
      }
      if (kStudent) {
#pragma GCC unroll 5
        for (int i = 0; i < 5; ++i) {
          if (kHas[i]) acc[kNu][i] += l_vnu * d[i];
        }
        if (kMu) enu2 += l_enu;
        nunu2 += l_nunu;
      }
    }
    for (int i = 0; i < 6; ++i) {
      for (int j = 0; j <= i; ++j) {
        H[i][j] = acc[i][j][0] + acc[i][j][1];
        if (kOpg) J[i][j] = jacc[i][j][0] + jacc[i][j][1];
      }
    }
    double l_ee_sum = ee2[0] + ee2[1], l_enu_sum = enu2[0] + enu2[1],
           l_nunu_sum = nunu2[0] + nunu2[1];
    for (; k < n_; ++k) {  // an odd last bar
      double l_ee = 0, l_ev = 0, l_vv = 0, l_enu = 0, l_vnu = 0, l_nunu = 0, l_e = 0, u = 0,
             nu_rest = 0;
      terms(sig2[k], eps[k], &l_ee, &l_ev, &l_vv, &l_enu, &l_vnu, &l_nunu, &l_e, &u, &nu_rest);
      if (kOpg) {
        double sc[6] = {0, 0, 0, 0, 0, 0};
        for (int i = 0; i < 5; ++i) {
          if (kHas[i]) sc[i] = lv[k] * col_dv[i][k];
        }
        if (kMu) sc[kMuS] -= l_e;
        if (kStudent) sc[kNu] = dconst - 0.5 * std::log1p(u) + nu_rest;
        for (int i = 0; i < 6; ++i) {
          if (!kHas[i]) continue;
          for (int j = 0; j <= i; ++j) {
            if (kHas[j]) J[i][j] += sc[i] * sc[j];
          }
        }
      }
      for (int i = 0; i < 5; ++i) {
        if (!kHas[i]) continue;
        const double a = l_vv * col_dv[i][k];
        for (int j = 0; j <= i; ++j) {
          if (kHas[j]) H[i][j] += a * col_dv[j][k];
        }
      }
      if (kMu) {
        l_ee_sum += l_ee;
        H[kMuS][kMuS] -= 2.0 * l_ev * col_dv[kMuS][k];
        for (int i = 1; i < 5; ++i) {
          if (kHas[i]) H[i][kMuS] -= l_ev * col_dv[i][k];
        }
      }
      if (kStudent) {
        for (int i = 0; i < 5; ++i) {
          if (kHas[i]) H[kNu][i] += l_vnu * col_dv[i][k];
        }
        if (kMu) l_enu_sum += l_enu;
        l_nunu_sum += l_nunu;
      }
    }
    if (kMu) H[kMuS][kMuS] += l_ee_sum;
    if (kStudent) {
      if (kMu) H[kNu][kMuS] -= l_enu_sum;
      H[kNu][kNu] += l_nunu_sum;
    }
  }

  // The second derivatives of sigma2 that are not identically zero: the
  // (beta, p) ones have inputs d sigma2_{k-1} / d p (z sums); (mu, alpha) and
  // (mu, gamma) have inputs d a / d mu and d na / d mu, (mu, mu) alpha d^2 a / d mu^2
  // + gamma d^2 na / d mu^2 with d sigma2_{-1} / d mu^2 = d2s2.
  sz += z0;
  sza += z0 * s2;
  szv += z0 * s2;
  if (kGjr) szna += z0 * 0.5 * s2;
  const double tail = w0 + beta * z0;  // multiplies d sigma2_{-1} / d p
  H[kBe][kOm] += sz;
  H[kBe][kAl] += sza;
  if (kGjr) H[kBe][kGa] += szna;
  H[kBe][kBe] += 2.0 * szv;
  if (kMu) {
    const double szda = -2.0 * sze + z0 * ds2;
    const double szdna = kGjr ? -2.0 * szne + z0 * 0.5 * ds2 : 0.0;
    H[kBe][kMuS] += alpha * szda + (kGjr ? gamma * szdna : 0.0) + ds2 * tail;
    H[kAl][kMuS] += swda;
    if (kGjr) H[kGa][kMuS] += swdna;
    const double swd2a = 2.0 * sw1 + w0 * d2s2;
    const double swd2na = kGjr ? 2.0 * wn1 + w0 * 0.5 * d2s2 : 0.0;
    H[kMuS][kMuS] += alpha * swd2a + (kGjr ? gamma * swd2na : 0.0) + beta * d2s2 * w0;
  }
  if (kStudent) H[kNu][kNu] += n_ * d2const;
  for (int i = 0; i < 6; ++i) {
    if (index[i] < 0) continue;
    for (int j = 0; j <= i; ++j) {
      if (index[j] < 0) continue;
      hess[static_cast<size_t>(index[i]) * k_ + index[j]] = H[i][j];
      hess[static_cast<size_t>(index[j]) * k_ + index[i]] = H[i][j];
      if (kOpg) {
        opg[static_cast<size_t>(index[i]) * k_ + index[j]] = J[i][j];
        opg[static_cast<size_t>(index[j]) * k_ + index[i]] = J[i][j];
      }
    }
  }
  return ll;
}

// Value passes of kBatch points that share the mean parameters: one residual
// sweep and presample, and the points' variance recursions interleaved in one
// loop so that their dependency chains (a multiply and an add per bar each)
// overlap. Each point's operations and their order are those of
// OrderOneAdjoint<..., 0>, so out[j] is its value to the bit.
template <bool kMu, bool kGjr, bool kStudent>
void LikelihoodKernel::OrderOneBatch(const double* const* thetas, double* out) {
  constexpr int kB = kBatch;
  const int v0 = spec_.VarianceOffset();
  OrderOneResiduals(kMu ? thetas[0][0] : 0.0, false);
  const double s2 = s2_;
  double omega[kB], alpha[kB], gamma[kB], beta[kB], nu[kB], inv_nu2[kB], np1[kB];
  double vp[kB], quad[kB], log_sum[kB], log_u_sum[kB], prod_v[kB], prod_u[kB];
  bool bad[kB];
  for (int j = 0; j < kB; ++j) {
    const double* th = thetas[j];
    omega[j] = th[v0];
    alpha[j] = th[v0 + 1];
    gamma[j] = kGjr ? th[v0 + 2] : 0.0;
    beta[j] = th[v0 + (kGjr ? 3 : 2)];
    nu[j] = kStudent ? th[spec_.DistOffset()] : 0.0;
    inv_nu2[j] = kStudent ? 1.0 / (nu[j] - 2.0) : 0.0;
    np1[j] = nu[j] + 1.0;
    vp[j] = s2;
    quad[j] = log_sum[j] = log_u_sum[j] = 0.0;
    prod_v[j] = prod_u[j] = 1.0;
    bad[j] = false;
  }
  const double* eps = eps_.data();
  double e2p = s2, ne2p = 0.5 * s2;
  double v_min[kB];
  for (int j = 0; j < kB; ++j) v_min[j] = std::numeric_limits<double>::infinity();
  auto step = [&](int k) __attribute__((always_inline)) {
    const double e = eps[k];
    const double e2 = e * e;
#pragma GCC unroll 8
    for (int j = 0; j < kB; ++j) {
      double v = omega[j];
      v += alpha[j] * e2p;
      if (kGjr) v += gamma[j] * ne2p;
      v += beta[j] * vp[j];
      vp[j] = v;
      v_min[j] = v < v_min[j] ? v : v_min[j];
      prod_v[j] *= v;
      if (kStudent) {
        const double s = e2 * inv_nu2[j];
        const double vs = v + s;
        const double rr = 1.0 / (v * vs);
        const double inv_v = vs * rr;
        const double u = s * inv_v;
        prod_u[j] *= 1.0 + u;
      } else {
        const double inv_v = 1.0 / v;
        quad[j] += e2 * inv_v;
      }
    }
    e2p = e2;
    ne2p = e < 0.0 ? e2 : 0.0;
  };
  // A point that failed keeps running (its value is discarded): no branch
  // out of the interleaved loop.
  for (int k0 = 0; k0 < n_; k0 += kOrderOneChunk) {
    if (k0 + kOrderOneChunk <= n_) {
      for (int k = k0; k < k0 + kOrderOneChunk; ++k) step(k);
    } else {
      for (int k = k0; k < n_; ++k) step(k);
    }
#pragma GCC unroll 8
    for (int j = 0; j < kB; ++j) {
      bad[j] |= !(prod_v[j] < std::numeric_limits<double>::infinity());
      log_sum[j] += std::log(prod_v[j]);
      prod_v[j] = 1.0;
      if (kStudent) {
        log_u_sum[j] += std::log(prod_u[j]);
        prod_u[j] = 1.0;
      }
    }
  }
  for (int j = 0; j < kB; ++j) bad[j] |= !(v_min[j] > 0.0);
  for (int j = 0; j < kB; ++j) {
    if (bad[j]) {
      out[j] = -std::numeric_limits<double>::infinity();
      continue;
    }
    if (kStudent) {
      out[j] = n_ * LogNormalizerT(nu[j]) - 0.5 * log_sum[j] - 0.5 * np1[j] * log_u_sum[j];
    } else {
      out[j] = n_ * (-0.5 * kLogTwoPi) - 0.5 * (quad[j] + log_sum[j]);
    }
  }
}

void LikelihoodKernel::EvaluateBatch(const double* const* thetas, int m, double* out) {
  // Only the order-one passes are batched; other kernels (the general orders
  // also have a Hessian) evaluate the points one by one.
  if (!order_one_) {
    for (int j = 0; j < m; ++j) out[j] = Evaluate(thetas[j], nullptr, nullptr);
    return;
  }
  const bool mu = spec_.mean == MeanKind::kConstant;
  const bool gjr = spec_.variance == VarianceKind::kGjr;
  const bool t = spec_.innovations == Innovations::kStudentT;
  for (int first = 0; first < m; first += kBatch) {
    // A short last group repeats its last point in the unused lanes.
    const double* group[kBatch];
    double values[kBatch];
    for (int j = 0; j < kBatch; ++j) group[j] = thetas[std::min(first + j, m - 1)];
    if (mu) {
      if (gjr) {
        t ? OrderOneBatch<true, true, true>(group, values)
          : OrderOneBatch<true, true, false>(group, values);
      } else {
        t ? OrderOneBatch<true, false, true>(group, values)
          : OrderOneBatch<true, false, false>(group, values);
      }
    } else {
      if (gjr) {
        t ? OrderOneBatch<false, true, true>(group, values)
          : OrderOneBatch<false, true, false>(group, values);
      } else {
        t ? OrderOneBatch<false, false, true>(group, values)
          : OrderOneBatch<false, false, false>(group, values);
      }
    }
    for (int j = 0; j < kBatch && first + j < m; ++j) out[first + j] = values[j];
  }
}

double LikelihoodKernel::EvaluateOrderOne(const double* theta, double* grad, double* scores,
                                          double* hess, double* opg) {
  const bool mu = spec_.mean == MeanKind::kConstant;
  const bool gjr = spec_.variance == VarianceKind::kGjr;
  const bool t = spec_.innovations == Innovations::kStudentT;
  const int level = hess ? (opg ? 3 : 2) : grad ? 1 : 0;
  // 2 x 2 x 2 x 4 instantiations of each pass, chosen once per call; the
  // forward recursions of OrderOne() only where per-term scores are asked.
#define AFTERSHOCK_ORDER_ONE(M, G, T)                                 \
  switch (level) {                                                    \
    case 0:                                                           \
      return OrderOneAdjoint<M, G, T, 0>(theta, grad, hess);          \
    case 1:                                                           \
      return scores ? OrderOne<M, G, T, 1>(theta, grad, scores, hess) \
                    : OrderOneAdjoint<M, G, T, 1>(theta, grad, hess); \
    case 2:                                                           \
      return scores ? OrderOne<M, G, T, 2>(theta, grad, scores, hess) \
                    : OrderOneAdjoint<M, G, T, 2>(theta, grad, hess); \
    default:                                                          \
      return OrderOneAdjoint<M, G, T, 3>(theta, grad, hess, opg);     \
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

double LikelihoodKernel::EvaluateHessianOpg(const double* theta, double* grad, double* hess,
                                            double* opg) {
  if (order_one_) return EvaluateOrderOne(theta, grad, nullptr, hess, opg);
  // The general orders: the scores into a scratch matrix, then their products.
  std::vector<double> scores(static_cast<size_t>(n_) * k_);
  const double ll = EvaluateZeroMeanGeneral(theta, grad, scores.data(), hess);
  std::fill(opg, opg + static_cast<size_t>(k_) * k_, 0.0);
  for (int t = 0; t < n_; ++t) {
    const double* row = &scores[static_cast<size_t>(t) * k_];
    for (int a = 0; a < k_; ++a) {
      for (int b = 0; b <= a; ++b) opg[static_cast<size_t>(a) * k_ + b] += row[a] * row[b];
    }
  }
  for (int a = 0; a < k_; ++a) {
    for (int b = 0; b < a; ++b) {
      opg[static_cast<size_t>(b) * k_ + a] = opg[static_cast<size_t>(a) * k_ + b];
    }
  }
  return ll;
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
