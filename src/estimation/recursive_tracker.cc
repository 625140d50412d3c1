#include "aftershock/recursive_tracker.h"

#include <algorithm>
#include <cmath>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

constexpr int kK = kMaxTrackedParams;
// Bars between two factorizations of the information matrices.
constexpr int64_t kRefactorBars = 8;

// Every loop below runs over k <= 4 coefficients with k a template argument.
// -O2 keeps such loops as loops (counter, compare, branch: about 10
// instructions per element of a 4x4 rank-one update); unrolled, the same
// arithmetic in the same order (so bit-identical results) takes about a third
// of the instructions. GCC and clang both read this pragma.
#define AFTERSHOCK_UNROLL _Pragma("GCC unroll 4")

// Lower Cholesky factor L of A + ridge * diag(A) for a k x k symmetric
// positive semi-definite A (lower triangle read, row-major, stride kK) and the
// inverse pivots 1 / L_ii; false when a pivot is not positive.
template <int k>
bool Factor(const double* a, double ridge, double* l, double* inv) {
  AFTERSHOCK_UNROLL
  for (int i = 0; i < k; ++i) {
    AFTERSHOCK_UNROLL
    for (int j = 0; j <= i; ++j) {
      double s = a[i * kK + j];
      if (i == j) s += ridge * a[i * kK + i];
      AFTERSHOCK_UNROLL
      for (int m = 0; m < j; ++m) s -= l[i * kK + m] * l[j * kK + m];
      if (i == j) {
        if (!(s > 0) || !std::isfinite(s)) return false;
        l[i * kK + i] = std::sqrt(s);
        inv[i] = 1.0 / l[i * kK + i];
      } else {
        l[i * kK + j] = s * inv[j];
      }
    }
  }
  return true;
}

// Solves L L' x = b with a factor from Factor (multiplications only).
template <int k>
inline void SolveFactored(const double* l, const double* inv, const double* b, double* x) {
  double y[kK];
  AFTERSHOCK_UNROLL
  for (int i = 0; i < k; ++i) {
    double s = b[i];
    AFTERSHOCK_UNROLL
    for (int m = 0; m < i; ++m) s -= l[i * kK + m] * y[m];
    y[i] = s * inv[i];
  }
  AFTERSHOCK_UNROLL
  for (int i = k - 1; i >= 0; --i) {
    double s = y[i];
    AFTERSHOCK_UNROLL
    for (int m = i + 1; m < k; ++m) s -= l[m * kK + i] * x[m];
    x[i] = s * inv[i];
  }
}

// a = decay * a + (1 - decay) * c g g' (lower triangle only).
template <int k>
inline void RankOneAverage(double* a, double decay, double c, const double* g) {
  const double f = (1.0 - decay) * c;
  AFTERSHOCK_UNROLL
  for (int i = 0; i < k; ++i) {
    AFTERSHOCK_UNROLL
    for (int j = 0; j <= i; ++j) a[i * kK + j] = decay * a[i * kK + j] + f * g[i] * g[j];
  }
}

}  // namespace

absl::Status ValidateTrackerOptions(const TrackerOptions& o) {
  auto bad = [](absl::string_view field, double v, absl::string_view range) {
    return absl::InvalidArgumentError(
        absl::StrCat("tracking ", field, " must be ", range, ", got ", v));
  };
  if (!(o.forgetting > 0 && o.forgetting < 1)) return bad("forgetting", o.forgetting, "in (0, 1)");
  if (o.burn_in_bars < 1) return bad("burn_in_bars", o.burn_in_bars, ">= 1");
  if (!(o.max_step > 0 && o.max_step <= 1)) return bad("max_step", o.max_step, "in (0, 1]");
  if (!(o.max_persistence > 0 && o.max_persistence <= kMaxPersistence)) {
    return bad("max_persistence", o.max_persistence, absl::StrCat("in (0, ", kMaxPersistence, "]"));
  }
  if (!(o.max_level_ratio > 1) || !std::isfinite(o.max_level_ratio)) {
    return bad("max_level_ratio", o.max_level_ratio, "> 1 and finite");
  }
  if (!(o.ridge >= 0) || !std::isfinite(o.ridge)) return bad("ridge", o.ridge, ">= 0 and finite");
  if (!(o.stability_decay > 0 && o.stability_decay < 1)) {
    return bad("stability_decay", o.stability_decay, "in (0, 1)");
  }
  return absl::OkStatus();
}

bool RecursiveTracker::Supports(const ModelSpec& s) {
  if (s.mean == MeanKind::kArma) return false;
  if (s.variance == VarianceKind::kGarch) return s.arch_order == 1 && s.garch_order == 1;
  if (s.variance == VarianceKind::kGjr) {
    return s.arch_order == 1 && s.asym_order == 1 && s.garch_order == 1;
  }
  return false;
}

void RecursiveTracker::Anchor(const ModelParams& p, double next_variance, const TrackerOptions& o) {
  // Checks by hand (CheckConstraints builds name strings: this must not allocate).
  bool ok = Supports(p.spec) && p.values.size() == static_cast<size_t>(p.spec.NumParams()) &&
            next_variance > 0 && std::isfinite(next_variance);
  for (size_t i = 0; ok && i < p.values.size(); ++i) ok = std::isfinite(p.values[i]);
  const bool gjr = p.spec.variance == VarianceKind::kGjr;
  const bool student = p.spec.innovations == Innovations::kStudentT;
  if (ok) {
    const double pers = p.Persistence();
    ok = p.omega() > 0 && p.alpha(0) >= 0 && p.beta(0) >= 0 && (!gjr || p.gamma(0) >= 0) &&
         pers < 1.0 && (!student || p.nu() > 2.0);
  }
  if (!ok) {
    const uint64_t resets = resets_;
    Clear();
    resets_ = resets;
    return;
  }
  const int k = gjr ? 4 : 3;
  const bool same = k_ == k && gjr_ == gjr && student_ == student;
  k_ = k;
  gjr_ = gjr;
  student_ = student;
  burn_in_ = o.burn_in_bars;
  mu_ = p.spec.mean == MeanKind::kZero ? 0.0 : p.mu();
  nu_ = student ? p.nu() : 0.0;
  info_c_ = student ? nu_ / (2.0 * (nu_ + 3.0)) : 0.5;
  inv_nu2_ = student ? 1.0 / (nu_ - 2.0) : 0.0;
  s0_ = p.UnconditionalVariance();
  wa_[0] = 1.0;  // the level: omega = level * s0 * (1 - persistence)
  wa_[1] = p.alpha(0);
  if (gjr) wa_[2] = p.gamma(0);
  wa_[k - 1] = p.beta(0);
  if (!same) {
    std::fill(std::begin(r_), std::end(r_), 0.0);
    std::fill(std::begin(j_), std::end(j_), 0.0);
    std::fill(std::begin(sum_), std::end(sum_), 0.0);
    n_info_ = 0;
    n_j_ = 0;
    q_ = 0;
    r_factor_ok_ = j_factor_ok_ = false;
  }
  ResetToAnchor();
  v_ = va_ = next_variance;
  bars_ = 0;
}

void RecursiveTracker::ResetToAnchor() {
  std::copy(std::begin(wa_), std::end(wa_), std::begin(w_));
  // psi starts at its stationary mean under the anchor: E psi = (d omega /
  // d theta + E(0, eps^2, eps^2 1{eps<0}, sigma2)) / (1 - beta) = s0 (1 - p,
  // 0, 0, 0) / (1 - beta) (the level moves every variance; a change of a
  // dynamic coefficient at a fixed level moves the variance only through its
  // fluctuations, which average out).
  const double pa = wa_[1] + (gjr_ ? 0.5 * wa_[2] : 0.0) + wa_[k_ - 1];
  for (int i = 0; i < k_; ++i) psi_[i] = 0.0;
  psi_[0] = s0_ * (1.0 - pa) / (1.0 - wa_[k_ - 1]);
  std::copy(std::begin(psi_), std::end(psi_), std::begin(psia_));
  v_ = va_;
}

template <int k>
double RecursiveTracker::PersistenceK() const {
  // persistence() with the coefficient count known (the same sum: gamma_1 is
  // 0.0 for GARCH(1,1), added all the same).
  return w_[1] + 0.5 * (k == 4 ? w_[2] : 0.0) + w_[k - 1];
}

template <int k>
void RecursiveTracker::ProjectK(const TrackerOptions& o) {
  if (!(w_[0] >= 1e-6)) w_[0] = 1e-6;
  AFTERSHOCK_UNROLL
  for (int i = 1; i < k; ++i) {
    if (!(w_[i] >= 0)) w_[i] = 0;
  }
  const double p = PersistenceK<k>();
  if (p > o.max_persistence) {
    const double f = o.max_persistence / p;
    AFTERSHOCK_UNROLL
    for (int i = 1; i < k; ++i) w_[i] *= f;
  }
}

void RecursiveTracker::Step(double x, const TrackerOptions& o) {
  // Compile-time sizes let the compiler unroll the 3x3 / 4x4 algebra.
  if (k_ == 3) {
    StepK<3>(x, o);
  } else if (k_ == 4) {
    StepK<4>(x, o);
  }
}

template <int k>
void RecursiveTracker::StepK(double x, const TrackerOptions& o) {
  constexpr bool gjr = k == 4;
  const double e = x - mu_;
  const double e2 = e * e;
  const double ne2 = e < 0.0 ? e2 : 0.0;
  ++bars_;

  // ---- tracked parameters: information, score, damped projected step ----
  const double v = v_;
  double g[kK];
  const double inv_v = 1.0 / v;
  AFTERSHOCK_UNROLL
  for (int i = 0; i < k; ++i) g[i] = psi_[i] * inv_v;
  const double decay =
      n_info_ < burn_in_ ? 1.0 - 1.0 / static_cast<double>(n_info_ + 1) : o.forgetting;
  RankOneAverage<k>(r_, decay, info_c_, g);
  ++n_info_;
  if (n_info_ > burn_in_) {
    // The factor of R is refreshed every kRefactorBars bars (R moves by a
    // fraction 1 - lambda a bar; this keeps square roots and divisions off
    // most bars).
    if (!r_factor_ok_ || n_info_ % kRefactorBars == 0) {
      r_factor_ok_ = Factor<k>(r_, o.ridge, rl_, rinv_);
    }
    const double dl = DlDv(e2, inv_v);
    double s[kK] = {}, d[kK] = {};
    AFTERSHOCK_UNROLL
    for (int i = 0; i < k; ++i) s[i] = dl * psi_[i];
    if (r_factor_ok_) {
      SolveFactored<k>(rl_, rinv_, s, d);
      const double gain = 1.0 - o.forgetting;
      const double cap = o.max_step;
      AFTERSHOCK_UNROLL
      for (int i = 0; i < k; ++i) w_[i] += std::clamp(gain * d[i], -cap, cap);
      ProjectK<k>(o);
    }
  }
  // Next prediction and its derivative under the new estimate (the filter's
  // summation order: omega + alpha e2 + gamma ne2 + beta v).
  const double beta = w_[k - 1];
  const double pers = PersistenceK<k>();
  const double ls0 = w_[0] * s0_;
  double vn = ls0 * (1.0 - pers);
  vn += w_[1] * e2;
  if (gjr) vn += w_[2] * ne2;
  vn += beta * v;
  // d omega / d theta = s0 (1 - p), -level s0, [-level s0 / 2,] -level s0.
  psi_[0] = s0_ * (1.0 - pers) + beta * psi_[0];
  psi_[1] = e2 - ls0 + beta * psi_[1];
  if (gjr) psi_[2] = ne2 - 0.5 * ls0 + beta * psi_[2];
  psi_[k - 1] = v - ls0 + beta * psi_[k - 1];
  v_ = vn;

  // ---- the anchor's scores: instability statistic ----
  const double va = va_;
  const double inv_va = 1.0 / va;
  AFTERSHOCK_UNROLL
  for (int i = 0; i < k; ++i) g[i] = psia_[i] * inv_va;
  const double kappa = o.stability_decay;
  // J averages its first 1 / (1 - kappa) bars equally, then decays by kappa.
  const bool j_warm = static_cast<double>(n_j_) * (1.0 - kappa) >= 1.0;
  const double dj = j_warm ? kappa : 1.0 - 1.0 / static_cast<double>(n_j_ + 1);
  RankOneAverage<k>(j_, dj, info_c_, g);
  ++n_j_;
  const double dla = DlDv(e2, inv_va);
  AFTERSHOCK_UNROLL
  for (int i = 0; i < k; ++i) sum_[i] = kappa * sum_[i] + dla * psia_[i];
  // Q is evaluated every kRefactorBars bars with a fresh factor of J and held
  // in between: with a factor older than J, one large shock enters S at once
  // but J's factor only later, which inflated Q (more false alarms).
  if (!j_warm) {
    q_ = 0;
  } else if (!j_factor_ok_ || n_j_ % kRefactorBars == 0) {
    j_factor_ok_ = Factor<k>(j_, o.ridge, jl_, jinv_);
    q_ = 0;
    if (j_factor_ok_) {
      double y[kK];
      SolveFactored<k>(jl_, jinv_, sum_, y);
      double qq = 0;
      AFTERSHOCK_UNROLL
      for (int i = 0; i < k; ++i) qq += sum_[i] * y[i];
      q_ = (1.0 - kappa * kappa) * qq;
    }
  }
  const double ba = wa_[k - 1];
  const double pa = wa_[1] + (gjr ? 0.5 * wa_[2] : 0.0) + ba;
  double van = s0_ * (1.0 - pa);
  van += wa_[1] * e2;
  if (gjr) van += wa_[2] * ne2;
  van += ba * va;
  psia_[0] = s0_ * (1.0 - pa) + ba * psia_[0];
  psia_[1] = e2 - s0_ + ba * psia_[1];
  if (gjr) psia_[2] = ne2 - 0.5 * s0_ + ba * psia_[2];
  psia_[k - 1] = va - s0_ + ba * psia_[k - 1];
  va_ = van;

  // ---- divergence guard ----
  const double level = level_ratio();
  bool diverged = !std::isfinite(v_) || !(v_ > 0) || !std::isfinite(level) ||
                  level > o.max_level_ratio || level * o.max_level_ratio < 1.0;
  AFTERSHOCK_UNROLL
  for (int i = 0; i < k; ++i) diverged |= !std::isfinite(psi_[i]);
  if (!std::isfinite(va_) || !(va_ > 0)) {
    // Only an absurd input can do this under a valid anchor: start afresh.
    va_ = s0_;
    std::fill(std::begin(sum_), std::end(sum_), 0.0);
    diverged = true;
  }
  if (!std::isfinite(q_)) q_ = 0;
  if (diverged) {
    ResetToAnchor();
    std::fill(std::begin(r_), std::end(r_), 0.0);
    n_info_ = 0;
    r_factor_ok_ = false;
    ++resets_;
  }
}

void RecursiveTracker::TrackedValues(const ModelSpec& spec, double* values) const {
  const int v0 = spec.VarianceOffset();
  if (spec.mean != MeanKind::kZero) values[0] = mu_;
  for (int i = 0; i < k_; ++i) values[v0 + i] = coefficient(i);
  if (student_) values[spec.DistOffset()] = nu_;
}

void RecursiveTracker::Save(StateWriter* w) const {
  w->U32(static_cast<uint32_t>(k_));
  if (k_ == 0) {
    w->U64(resets_);
    return;
  }
  w->Bool(gjr_);
  w->Bool(student_);
  w->U32(static_cast<uint32_t>(burn_in_));
  for (double x : {mu_, nu_, info_c_, s0_, v_, va_, q_}) w->F64(x);
  for (const double* a : {wa_, w_, psi_, psia_, sum_}) {
    for (int i = 0; i < kK; ++i) w->F64(a[i]);
  }
  for (double x : r_) w->F64(x);
  for (double x : j_) w->F64(x);
  w->Bool(r_factor_ok_);
  w->Bool(j_factor_ok_);
  for (const double* a : {rl_, jl_}) {
    for (int i = 0; i < kK * kK; ++i) w->F64(a[i]);
  }
  for (const double* a : {rinv_, jinv_}) {
    for (int i = 0; i < kK; ++i) w->F64(a[i]);
  }
  w->I64(n_info_);
  w->I64(n_j_);
  w->I64(bars_);
  w->U64(resets_);
}

RecursiveTracker RecursiveTracker::Restore(StateReader* r, absl::string_view what) {
  RecursiveTracker t;
  const std::string f = absl::StrCat(what, " tracker");
  const uint32_t k = r->U32(f);
  if (!r->ok()) return t;
  if (k == 0) {
    t.resets_ = r->U64(f);
    return t;
  }
  t.gjr_ = r->Bool(f);
  t.student_ = r->Bool(f);
  const uint32_t burn = r->U32(f);
  if (!r->ok()) return t;
  if (k != (t.gjr_ ? 4u : 3u) || burn < 1 || burn > (1u << 30)) {
    r->Fail(f, "an inconsistent coefficient count or burn-in");
    return t;
  }
  t.k_ = static_cast<int>(k);
  t.burn_in_ = static_cast<int>(burn);
  bool finite = true;
  auto read = [&](double* v) {
    *v = r->F64(f);
    finite = finite && std::isfinite(*v);
  };
  for (double* x : {&t.mu_, &t.nu_, &t.info_c_, &t.s0_, &t.v_, &t.va_, &t.q_}) read(x);
  t.inv_nu2_ = t.student_ ? 1.0 / (t.nu_ - 2.0) : 0.0;
  for (double* a : {t.wa_, t.w_, t.psi_, t.psia_, t.sum_}) {
    for (int i = 0; i < kK; ++i) read(&a[i]);
  }
  for (double& x : t.r_) read(&x);
  for (double& x : t.j_) read(&x);
  t.r_factor_ok_ = r->Bool(f);
  t.j_factor_ok_ = r->Bool(f);
  for (double* a : {t.rl_, t.jl_}) {
    for (int i = 0; i < kK * kK; ++i) read(&a[i]);
  }
  for (double* a : {t.rinv_, t.jinv_}) {
    for (int i = 0; i < kK; ++i) read(&a[i]);
  }
  t.n_info_ = r->I64(f);
  t.n_j_ = r->I64(f);
  t.bars_ = r->I64(f);
  t.resets_ = r->U64(f);
  if (!r->ok()) return t;
  if (!finite) {
    r->Fail(f, "a non-finite value");
  } else if (!(t.s0_ > 0) || !(t.v_ > 0) || !(t.va_ > 0) || t.n_info_ < 0 || t.n_j_ < 0 ||
             t.bars_ < 0 || (t.student_ && !(t.nu_ > 2))) {
    r->Fail(f, "a non-positive variance, nu or a negative count");
  }
  return t;
}

}  // namespace aftershock
