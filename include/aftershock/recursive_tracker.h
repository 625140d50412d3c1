// RecursiveTracker: per-symbol recursive quasi-maximum-likelihood tracking of
// the variance parameters between refits, and a score-based parameter
// instability statistic for the model in force.
//
// Method (recursive prediction-error / recursive Gauss-Newton with a forgetting
// factor, Ljung & Soederstroem (1983), "Theory and Practice of Recursive
// Identification", ch. 3-4): with theta = (L, alpha_1[, gamma_1], beta_1) and
// omega = L * s0 * (1 - p), p = alpha_1 + gamma_1/2 + beta_1, s0 = the
// unconditional variance of the anchor model (so L is the level relative to
// the anchor's, every coordinate is of order one whatever the return units,
// and the level is decoupled from the dynamics, which a raw omega is not), on
// each bar t
//   psi_t  = d sigma2_t / d theta, propagated with the current estimate:
//            psi_{t+1} = d omega / d theta + (0, eps_t^2, 1{eps_t<0} eps_t^2,
//                        sigma2_t) + beta_t psi_t
//   score  s_t = dl_t/dsigma2_t * psi_t       (quasi log-likelihood term l_t)
//   info   R_t = lambda R_{t-1} + (1 - lambda) c psi_t psi_t' / sigma2_t^2
//   step   theta_t = Proj(theta_{t-1} + (1 - lambda) (R_t + ridge)^-1 s_t), each
//          coordinate capped at max_step per bar,
// where c is the expected information of log sigma2 per bar: 1/2 for Gaussian
// innovations, nu / (2 (nu + 3)) for standardized Student-t (the t law's
// information for a log-scale parameter, 2 nu / (nu + 3), over 4). Proj keeps
// omega > 0, alpha, gamma, beta >= 0 and alpha + gamma/2 + beta <=
// max_persistence (it clips at zero, then scales alpha, gamma, beta down
// together). The mean (mu) and nu are held at the anchor's values.
//
// Guards: the first burn_in_bars after the first anchor only accumulate R (no
// steps); a non-finite value, or a level L outside [1 / max_level_ratio,
// max_level_ratio], resets theta, the recursions and the burn-in to the anchor
// (counted in resets()). Anchor() restarts theta
// from the model in force (after each swap); R is kept when the spec is
// unchanged, so tracking resumes at once.
//
// Instability statistic (score-based, in the spirit of the parameter-
// constancy tests of Nyblom (1989) and Hansen (1992), made recursive): under
// the anchor's parameters, the scores s^a_t are a martingale difference with
// covariance J (the per-bar expected information). Their exponentially weighted
// sum S_t = kappa S_{t-1} + s^a_t has covariance J / (1 - kappa^2) in steady
// state, so Q_t = (1 - kappa^2) S_t' J^-1 S_t is approximately chi-square with
// K degrees of freedom while the parameters fit, and grows when they no longer
// do. J is estimated as the kappa-weighted average of c psi psi' / sigma2^2
// under the anchor. S and J are kept across anchors of the same spec (refits
// every few bars would otherwise never let S build up, and a refit on a
// window that lags a change does not fit either); Q is 0 until J has averaged
// 1 / (1 - kappa) bars.
//
// Supported models: zero or constant mean with GARCH(1,1) or GJR(1,1,1),
// Gaussian or Student-t innovations (Supports()). Cost per bar: two rank-one
// updates and a triangular solve of a 3x3/4x4 system; the Cholesky factor of
// R is refreshed every 8 bars (R moves by 1 - lambda a bar), and Q is
// evaluated every 8 bars with a fresh factor of J (held in between, so an
// alarm comes at most 7 bars later).
// No allocation, no I/O.
//
// Thread-safety: plain fixed-size value; one thread owns it.
#ifndef AFTERSHOCK_RECURSIVE_TRACKER_H_
#define AFTERSHOCK_RECURSIVE_TRACKER_H_

#include <cstdint>

#include "absl/status/status.h"
#include "aftershock/model_params.h"
#include "aftershock/state_codec.h"

namespace aftershock {

// Settings of the recursive estimator and the instability statistic.
struct TrackerOptions {
  // Forgetting factor lambda of the information matrix and the gain 1 - lambda;
  // the estimator's memory is about 1 / (1 - lambda) bars. (0, 1). Default 0.999
  // (1,000 bars).
  double forgetting = 0.999;
  // Bars after the first anchor that only accumulate the information matrix
  // before the first step, >= 1. Default 100.
  int burn_in_bars = 100;
  // Largest change of one coordinate per bar: alpha, gamma, beta by this much,
  // the level L (unconditional variance over the anchor's) by this much. (0, 1].
  // A safety cap, not a tuning knob: a cap that binds often biases the
  // estimate (the scores are skewed: many small negative, few large positive).
  // Default 0.05.
  double max_step = 0.05;
  // Upper bound of alpha + gamma/2 + beta kept by the projection,
  // (0, kMaxPersistence]. Default 0.999.
  double max_persistence = 0.999;
  // Divergence guard: the level L (tracked unconditional variance over the
  // anchor's) must stay within this factor of 1, else reset to the anchor. > 1.
  // Default 4.
  double max_level_ratio = 4.0;
  // Ridge added to the information matrix before solving, as a fraction of
  // its diagonal, >= 0. Default 1e-3.
  double ridge = 1e-3;
  // Decay kappa of the instability statistic's score sum (memory about
  // 1 / (1 - kappa) bars), (0, 1). Default 0.99 (100 bars).
  double stability_decay = 0.99;
};

// OK when every field is in range (InvalidArgument naming the field).
absl::Status ValidateTrackerOptions(const TrackerOptions& options);

// Largest number of tracked coefficients (omega, alpha_1, gamma_1, beta_1).
inline constexpr int kMaxTrackedParams = 4;

class RecursiveTracker {
 public:
  RecursiveTracker() = default;  // inactive until Anchor()

  // Whether the tracker handles this model.
  static bool Supports(const ModelSpec& spec);

  // (Re)starts from `params` (the model in force) with `next_variance` the
  // filter's variance prediction for the next bar. Keeps the information
  // matrix and the instability statistic's sums when the spec is unchanged.
  // An unsupported spec (or params outside the constraints) deactivates the
  // tracker. Called on the ingest thread after a swap; allocates nothing.
  // REQUIRES: options validated; next_variance > 0.
  void Anchor(const ModelParams& params, double next_variance, const TrackerOptions& options);
  // Deactivates (active() false).
  void Clear() { *this = RecursiveTracker(); }

  // One bar with filter input x (the same value the filter consumes). Hot
  // path: no allocation. No effect while inactive.
  void Step(double x, const TrackerOptions& options);

  // Makes the tracker's variance prediction `v` (drive mode: the filter's own,
  // so both agree after a reset). REQUIRES: v > 0 and finite.
  void SetNextVariance(double v) { v_ = v; }

  bool active() const { return k_ > 0; }
  bool stepping() const { return n_info_ >= burn_in_; }
  int num_params() const { return k_; }
  bool gjr() const { return gjr_; }
  // Tracked coefficients in parameter order: omega, alpha_1, [gamma_1,] beta_1.
  double omega() const { return w_[0] * s0_ * (1.0 - persistence()); }
  double coefficient(int i) const { return i == 0 ? omega() : w_[i]; }
  double anchor_coefficient(int i) const {
    return i == 0 ? s0_ * (1.0 - (wa_[1] + (gjr_ ? 0.5 * wa_[2] : 0.0) + wa_[k_ - 1])) : wa_[i];
  }
  double alpha() const { return w_[1]; }
  double gamma() const { return gjr_ ? w_[2] : 0.0; }
  double beta() const { return w_[k_ - 1]; }
  double persistence() const { return alpha() + 0.5 * gamma() + beta(); }
  // Tracked unconditional variance over the anchor's (1 = no level drift).
  double level_ratio() const { return w_[0]; }
  // Variance prediction for the next bar under the tracked parameters.
  double next_variance() const { return v_; }
  // The instability statistic Q (0 during its warm-up; evaluated every 8 bars).
  double instability() const { return q_; }
  // Bars since the last Anchor().
  int64_t bars_since_anchor() const { return bars_; }
  // Divergence resets since the tracker was created or restored.
  uint64_t resets() const { return resets_; }
  // Writes the tracked parameters as a full parameter vector of the anchor's
  // spec (mean and nu from the anchor) into values[0..spec.NumParams()).
  // REQUIRES: active(); values has room for NumParams() entries.
  void TrackedValues(const ModelSpec& spec, double* values) const;

  // Checkpoint encoding (every field, exact bits).
  void Save(StateWriter* w) const;
  // Reads what Save wrote; a bad value sets the reader's error naming `what`.
  static RecursiveTracker Restore(StateReader* r, absl::string_view what);

 private:
  void ResetToAnchor();
  // persistence() and the projection onto the constraints for K coefficients.
  template <int K>
  double PersistenceK() const;
  template <int K>
  void ProjectK(const TrackerOptions& o);
  template <int K>
  void StepK(double x, const TrackerOptions& o);  // Step for K coefficients
  // d l / d sigma2 of one quasi-likelihood term (inv_v = 1 / sigma2).
  double DlDv(double e2, double inv_v) const {
    if (student_) {
      const double u = e2 * inv_v * inv_nu2_;
      return (-0.5 + 0.5 * (nu_ + 1.0) * u / (1.0 + u)) * inv_v;
    }
    return 0.5 * (e2 * inv_v - 1.0) * inv_v;
  }

  // Model constants (set by Anchor).
  int k_ = 0;  // tracked coefficients, 0 = inactive
  bool gjr_ = false;
  bool student_ = false;
  int burn_in_ = 0;
  double mu_ = 0;                      // mean (0 for the zero mean)
  double nu_ = 0;                      // Student-t degrees of freedom
  double info_c_ = 0.5;                // expected information of log sigma2 per bar
  double inv_nu2_ = 0;                 // 1 / (nu - 2)
  double s0_ = 0;                      // anchor's unconditional variance
  double wa_[kMaxTrackedParams] = {};  // anchor theta: level 1, alpha_1, [gamma_1,] beta_1
  // Tracked recursion.
  double w_[kMaxTrackedParams] = {};    // tracked theta: level, alpha_1, [gamma_1,] beta_1
  double v_ = 0;                        // sigma2 of the next bar
  double psi_[kMaxTrackedParams] = {};  // d v_ / d theta
  double r_[kMaxTrackedParams * kMaxTrackedParams] = {};  // information, lower triangle
  // Its Cholesky factor (with the ridge) and inverse pivots, refreshed every
  // few bars; r_factor_ok_ false: refresh before the next step.
  double rl_[kMaxTrackedParams * kMaxTrackedParams] = {};
  double rinv_[kMaxTrackedParams] = {};
  bool r_factor_ok_ = false;
  int64_t n_info_ = 0;  // bars in r_ since the last reset
  // Anchor recursion and instability statistic.
  double va_ = 0;
  double psia_[kMaxTrackedParams] = {};
  double sum_[kMaxTrackedParams] = {};                    // S_t
  double j_[kMaxTrackedParams * kMaxTrackedParams] = {};  // J_t, lower triangle
  bool j_factor_ok_ = false;
  int64_t n_j_ = 0;  // bars in j_
  double q_ = 0;
  int64_t bars_ = 0;
  uint64_t resets_ = 0;
  // J's factor, as rl_, read and written only every few bars: last, so that
  // the other bars do not touch its cache lines (every field above is used on
  // every bar; the step is memory-bound with many symbols).
  double jl_[kMaxTrackedParams * kMaxTrackedParams] = {};
  double jinv_[kMaxTrackedParams] = {};
};

}  // namespace aftershock

#endif  // AFTERSHOCK_RECURSIVE_TRACKER_H_
