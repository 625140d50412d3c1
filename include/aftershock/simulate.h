// Simulate: draws a synthetic return series from any ModelSpec (mean, variance
// recursion and innovation law) with a fixed seed, optionally with variance
// regime changes. Used by the desk simulator (PRODUCT.md C12) and by tests that
// need data from stated parameters.
//
// Model simulated, for bars t = 1..burn_in+n (the first burn_in are discarded):
//   r_t      = mu + sum_i ar_i r_{t-i} + sum_j ma_j eps_{t-j} + eps_t   (ARMA mean;
//              mu is the intercept; constant mean: r_t = mu + eps_t; zero: r_t = eps_t)
//   eps_t    = sqrt(sigma2_t) z_t,  z_t iid standardized (unit variance) law
//   sigma2_t = the model's variance recursion (forecast.h NextVariance), with
//              omega replaced by m_t * omega, where m_t is the multiplier of the
//              omega-shaped regime change in force at bar t (1 before the first
//              change and under a step-shaped change).
// EWMA has no omega; an omega-shaped change multiplies its variance by
// m_new / m_old at the change bar, after which the recursion carries the new
// level on. Constant variance: sigma2_t = m_t * omega.
// An omega-shaped change moves the unconditional variance by m at once, but the
// conditional variance only gets there gradually (about 1 / (1 - persistence)
// bars). A step-shaped change with multiplier s scales the process itself from
// its bar on: the recursion above runs on the unscaled shocks e_t, and
//   eps_t = sqrt(s) e_t,   sigma2_t (reported) = s * (the recursion's value),
// so every bar from the change on has s times the variance it would have had
// (same draws), an immediate and lasting jump. The mean recursion runs on the
// scaled eps and r.
//
// Presample: every lagged sigma2 and eps^2 equals the initial variance v0 (the
// lagged 1{eps<0}eps^2 equals v0 / 2, its expectation); lagged eps are 0 and lagged
// returns equal the unconditional mean mu / (1 - sum ar) (mu when sum ar >= 1).
//
// Random stream (reproducible across compilers and standard libraries, since no
// <random> distribution is involved): one boost::random::mt19937_64 engine seeded
// with options.seed; per bar exactly one draw, in bar order, burn-in included:
//   normal: boost::random::normal_distribution<double>(0, 1) (Boost 1.74 ziggurat);
//   t:      boost::random::student_t_distribution<double>(nu) times sqrt((nu-2)/nu).
// Thread-safety: Simulate is a pure function; safe to call concurrently.
#ifndef AFTERSHOCK_SIMULATE_H_
#define AFTERSHOCK_SIMULATE_H_

#include <cstdint>
#include <optional>
#include <vector>

#include "absl/status/statusor.h"
#include "aftershock/model_params.h"

namespace aftershock {

// How a regime change moves the variance (the model comment above has the
// recursion): kOmega multiplies omega, so the conditional variance ramps
// towards multiplier times its old level; kStep multiplies the variance of
// every bar from the change on at once.
enum class VarianceChangeShape : uint8_t { kOmega, kStep };

// From output bar `bar` on (0 = first kept bar), the variance is multiplied by
// `multiplier` in the given shape; the unconditional variance becomes
// multiplier times the base one. Multipliers are relative to the base process,
// not cumulative; a change ends the previous one (of either shape).
struct VarianceRegimeChange {
  int64_t bar = 0;                                          // output bar index, 0 <= bar < n
  double multiplier = 1.0;                                  // > 0, finite
  VarianceChangeShape shape = VarianceChangeShape::kOmega;  // default: omega-shaped
};

struct SimulationOptions {
  // Number of bars returned. Default 1000. Cost: O(n * model order) time, 4n doubles.
  int64_t n = 1000;
  // Seed of the mt19937_64 engine. Default 1.
  uint64_t seed = 1;
  // Bars simulated first and discarded, so the output does not depend on the
  // presample. Default 500.
  int64_t burn_in = 500;
  // Presample variance v0 (per-bar variance units). Default: the model's
  // unconditional variance; required (> 0) for EWMA, which has none.
  std::optional<double> initial_variance;
  // Variance regime changes, bars strictly increasing. Default none.
  std::vector<VarianceRegimeChange> regime_changes;
};

// The simulated bars (n entries each, burn-in removed).
struct SimulatedSeries {
  std::vector<double> returns;  // r_t
  std::vector<double> eps;      // r_t minus its conditional mean
  std::vector<double> sigma2;   // conditional variance of bar t (known at t-1)
  std::vector<double> z;        // eps_t / sqrt(sigma2_t), the standardized shock
};

// InvalidArgument (with the parameter's name) when params fail
// CheckConstraints, or when the options are inconsistent (n < 1, burn_in < 0,
// EWMA without initial_variance, bad regime list).
absl::StatusOr<SimulatedSeries> Simulate(const ModelParams& params,
                                         const SimulationOptions& options);

}  // namespace aftershock

#endif  // AFTERSHOCK_SIMULATE_H_
