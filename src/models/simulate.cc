#include "aftershock/simulate.h"

#include <algorithm>
#include <array>
#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <boost/random/student_t_distribution.hpp>
#include <cmath>

#include "absl/strings/str_cat.h"
#include "aftershock/forecast.h"

namespace aftershock {
namespace {

// Draws standardized shocks in the documented order.
class ShockSource {
 public:
  ShockSource(const ModelParams& params, uint64_t seed)
      : rng_(seed),
        is_t_(params.spec.innovations == Innovations::kStudentT),
        student_(is_t_ ? params.nu() : 5.0),
        scale_(is_t_ ? std::sqrt((params.nu() - 2.0) / params.nu()) : 1.0) {}

  double Next() { return is_t_ ? scale_ * student_(rng_) : normal_(rng_); }

 private:
  boost::random::mt19937_64 rng_;
  bool is_t_;
  boost::random::normal_distribution<double> normal_{0.0, 1.0};
  boost::random::student_t_distribution<double> student_;
  double scale_;
};

absl::Status CheckOptions(const ModelParams& params, const SimulationOptions& o) {
  if (o.n < 1) return absl::InvalidArgumentError(absl::StrCat("n must be >= 1, got ", o.n));
  if (o.burn_in < 0) {
    return absl::InvalidArgumentError(absl::StrCat("burn_in must be >= 0, got ", o.burn_in));
  }
  if (o.initial_variance.has_value()) {
    const double v = *o.initial_variance;
    if (!(std::isfinite(v) && v > 0.0)) {
      return absl::InvalidArgumentError(
          absl::StrCat("initial variance must be finite and > 0, got ", v));
    }
  } else if (params.spec.variance == VarianceKind::kEwma) {
    return absl::InvalidArgumentError(
        "EWMA has no unconditional variance: set the initial variance explicitly");
  }
  int64_t prev = -1;
  for (const auto& c : o.regime_changes) {
    if (c.bar < 0 || c.bar >= o.n) {
      return absl::InvalidArgumentError(
          absl::StrCat("regime change bar must be in [0, ", o.n, "), got ", c.bar));
    }
    if (c.bar <= prev) {
      return absl::InvalidArgumentError("regime change bars must be strictly increasing");
    }
    if (!(std::isfinite(c.multiplier) && c.multiplier > 0.0)) {
      return absl::InvalidArgumentError(
          absl::StrCat("regime multiplier must be finite and > 0, got ", c.multiplier));
    }
    prev = c.bar;
  }
  return absl::OkStatus();
}

}  // namespace

absl::StatusOr<SimulatedSeries> Simulate(const ModelParams& params,
                                         const SimulationOptions& options) {
  if (auto s = params.CheckConstraints(); !s.ok()) return s;
  if (auto s = CheckOptions(params, options); !s.ok()) return s;

  const ModelSpec& spec = params.spec;
  const bool ewma = spec.variance == VarianceKind::kEwma;
  const double v0 = options.initial_variance.value_or(params.UnconditionalVariance());

  // Mean-equation coefficients.
  const double mu = spec.mean == MeanKind::kZero ? 0.0 : params.mu();
  std::array<double, kMaxArmaOrder> ar{}, ma{};
  double ar_sum = 0.0;
  for (int i = 0; i < spec.ar_order; ++i) ar_sum += (ar[i] = params.ar(i));
  for (int j = 0; j < spec.ma_order; ++j) ma[j] = params.ma(j);
  const double mean_level = ar_sum < 1.0 ? mu / (1.0 - ar_sum) : mu;
  // Lags, most recent first.
  std::array<double, kMaxArmaOrder> r_lag{}, e_lag{};
  r_lag.fill(mean_level);

  VarianceState st;
  st.eps2.fill(v0);
  st.neg_eps2.fill(0.5 * v0);
  st.sigma2.fill(v0);

  // Parameters with the regime's omega (copy changed only at regime bars).
  ModelParams active = params;
  const int omega_index = spec.VarianceOffset();
  double multiplier = 1.0;  // of the omega-shaped change in force
  double step = 1.0;        // of the step-shaped change in force
  size_t next_change = 0;

  ShockSource shocks(params, options.seed);
  SimulatedSeries out;
  const auto n = static_cast<size_t>(options.n);
  out.returns.resize(n);
  out.eps.resize(n);
  out.sigma2.resize(n);
  out.z.resize(n);

  const int64_t total = options.burn_in + options.n;
  for (int64_t t = 0; t < total; ++t) {
    const int64_t bar = t - options.burn_in;  // output index once >= 0
    double ewma_jump = 1.0;
    if (next_change < options.regime_changes.size() &&
        options.regime_changes[next_change].bar == bar) {
      const VarianceRegimeChange& c = options.regime_changes[next_change];
      const bool stepped = c.shape == VarianceChangeShape::kStep;
      const double m = stepped ? 1.0 : c.multiplier;
      step = stepped ? c.multiplier : 1.0;
      if (ewma) {
        ewma_jump = m / multiplier;
      } else {
        active.values[omega_index] = params.omega() * m;
      }
      multiplier = m;
      ++next_change;
    }
    // The first bar's variance is the presample level v0 (times a regime jump);
    // afterwards the recursion runs on the stored lags.
    double sigma2 = t == 0 ? v0 : NextVariance(active, st);
    if (t == 0 && spec.variance == VarianceKind::kConstant) sigma2 = active.omega();
    sigma2 *= ewma_jump;

    const double z = shocks.Next();
    const double e_base = std::sqrt(sigma2) * z;  // drives the variance recursion
    const double e = step == 1.0 ? e_base : std::sqrt(step) * e_base;
    double cond_mean = mu;
    for (int i = 0; i < spec.ar_order; ++i) cond_mean += ar[i] * r_lag[i];
    for (int j = 0; j < spec.ma_order; ++j) cond_mean += ma[j] * e_lag[j];
    const double r = cond_mean + e;

    // Shift lags (most recent first).
    for (int i = kMaxArmaOrder - 1; i > 0; --i) {
      r_lag[i] = r_lag[i - 1];
      e_lag[i] = e_lag[i - 1];
    }
    r_lag[0] = r;
    e_lag[0] = e;
    for (int i = kMaxArchOrder - 1; i > 0; --i) st.eps2[i] = st.eps2[i - 1];
    for (int i = kMaxGarchOrder - 1; i > 0; --i) {
      st.neg_eps2[i] = st.neg_eps2[i - 1];
      st.sigma2[i] = st.sigma2[i - 1];
    }
    st.eps2[0] = e_base * e_base;
    st.neg_eps2[0] = e_base < 0.0 ? e_base * e_base : 0.0;
    st.sigma2[0] = sigma2;

    if (bar >= 0) {
      const auto k = static_cast<size_t>(bar);
      out.returns[k] = r;
      out.eps[k] = e;
      out.sigma2[k] = step * sigma2;
      out.z[k] = z;
    }
  }
  return out;
}

}  // namespace aftershock
