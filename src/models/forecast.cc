#include "aftershock/forecast.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

constexpr double kInf = std::numeric_limits<double>::infinity();

// phi^n for n >= 0, phi >= 0 (0^0 = 1).
double PowN(double phi, int n) { return n == 0 ? 1.0 : std::pow(phi, n); }

// (1 - phi^h) / (1 - phi) for 0 <= phi < 1, accurate near phi = 1. Exactly 1
// for h = 1, so that the one-bar summed variance is the one-step forecast to
// the bit (expm1(log(phi)) / (1 - phi) may round a unit away from 1).
double GeometricSum(double phi, int h) {
  if (phi <= 0.0 || h == 1) return 1.0;
  return -std::expm1(h * std::log(phi)) / (1.0 - phi);
}

// Longest lag of each kind the recursion reads.
struct Lags {
  int eps2 = 0;
  int neg = 0;
  int sigma2 = 0;
};

Lags LagsOf(const ModelSpec& spec) {
  Lags l;
  switch (spec.variance) {
    case VarianceKind::kConstant:
      break;
    case VarianceKind::kEwma:
      l.eps2 = l.sigma2 = 1;
      break;
    case VarianceKind::kArch:
    case VarianceKind::kGarch:
    case VarianceKind::kGjr:
      l.eps2 = spec.arch_order;
      l.neg = spec.asym_order;
      l.sigma2 = spec.garch_order;
      break;
  }
  return l;
}

}  // namespace

double NextVariance(const ModelParams& params, const VarianceState& state) {
  const ModelSpec& spec = params.spec;
  switch (spec.variance) {
    case VarianceKind::kConstant:
      return params.omega();
    case VarianceKind::kEwma: {
      const double lam = params.lambda();
      return lam * state.sigma2[0] + (1.0 - lam) * state.eps2[0];
    }
    default:
      break;
  }
  double s = params.omega();
  for (int i = 0; i < spec.arch_order; ++i) s += params.alpha(i) * state.eps2[i];
  for (int k = 0; k < spec.asym_order; ++k) s += params.gamma(k) * state.neg_eps2[k];
  for (int j = 0; j < spec.garch_order; ++j) s += params.beta(j) * state.sigma2[j];
  return s;
}

absl::StatusOr<VarianceState> StateFromHistory(const ModelParams& params,
                                               absl::Span<const double> eps,
                                               absl::Span<const double> sigma2) {
  if (eps.size() != sigma2.size()) {
    return absl::InvalidArgumentError(absl::StrCat("residuals (", eps.size(), ") and variances (",
                                                   sigma2.size(), ") differ in length"));
  }
  const Lags lags = LagsOf(params.spec);
  const size_t need = static_cast<size_t>(std::max({lags.eps2, lags.neg, lags.sigma2}));
  if (eps.size() < need) {
    return absl::InvalidArgumentError(absl::StrCat("model ", params.spec.Label(), " needs ", need,
                                                   " observations of history, got ", eps.size()));
  }
  VarianceState st;
  const size_t T = eps.size();
  for (int i = 0; i < lags.eps2; ++i) st.eps2[i] = eps[T - 1 - i] * eps[T - 1 - i];
  for (int k = 0; k < lags.neg; ++k) {
    const double e = eps[T - 1 - k];
    st.neg_eps2[k] = e < 0.0 ? e * e : 0.0;
  }
  for (int j = 0; j < lags.sigma2; ++j) st.sigma2[j] = sigma2[T - 1 - j];
  st.next_variance = NextVariance(params, st);
  return st;
}

bool HasClosedFormForecast(const ModelSpec& spec) {
  switch (spec.variance) {
    case VarianceKind::kConstant:
    case VarianceKind::kEwma:
      return true;
    case VarianceKind::kArch:
      return spec.arch_order == 1;
    case VarianceKind::kGarch:
      return spec.arch_order == 1 && spec.garch_order <= 1;
    case VarianceKind::kGjr:
      return spec.arch_order == 1 && spec.asym_order == 1 && spec.garch_order <= 1;
  }
  return false;
}

void ForecastVariances(const ModelParams& params, const VarianceState& state,
                       absl::Span<double> out) {
  if (out.empty()) return;
  const ModelSpec& spec = params.spec;
  if (spec.variance == VarianceKind::kEwma) {
    std::fill(out.begin(), out.end(), state.next_variance);
    return;
  }
  out[0] = state.next_variance;
  const int H = static_cast<int>(out.size());
  const bool has_lags = spec.variance != VarianceKind::kConstant;
  for (int h = 2; h <= H; ++h) {
    double s = params.omega();
    if (has_lags) {
      // A lag L at horizon h refers to bar T+h-L: future when h-L >= 1 (its
      // expectation is out[h-L-1]), observed otherwise (state index L-h).
      for (int i = 1; i <= spec.arch_order; ++i) {
        const double e2 = h - i >= 1 ? out[h - i - 1] : state.eps2[i - h];
        s += params.alpha(i - 1) * e2;
      }
      for (int k = 1; k <= spec.asym_order; ++k) {
        const double n2 = h - k >= 1 ? 0.5 * out[h - k - 1] : state.neg_eps2[k - h];
        s += params.gamma(k - 1) * n2;
      }
      for (int j = 1; j <= spec.garch_order; ++j) {
        const double v = h - j >= 1 ? out[h - j - 1] : state.sigma2[j - h];
        s += params.beta(j - 1) * v;
      }
    }
    out[h - 1] = s;
  }
}

std::vector<double> ForecastVariances(const ModelParams& params, const VarianceState& state,
                                      int horizon) {
  std::vector<double> out(static_cast<size_t>(std::max(horizon, 0)));
  ForecastVariances(params, state, absl::MakeSpan(out));
  return out;
}

double SummedVarianceForecast(const ModelParams& params, const VarianceState& state, int horizon) {
  const auto f = ForecastVariances(params, state, horizon);
  double s = 0.0;
  for (double v : f) s += v;
  return s;
}

double ClosedFormVariance(double phi, double sbar2, double s2, int h) {
  if (phi >= 1.0) return s2;
  return sbar2 + PowN(phi, h - 1) * (s2 - sbar2);
}

double ClosedFormSummedVariance(double phi, double sbar2, double s2, int h) {
  if (phi >= 1.0) return h * s2;
  return h * sbar2 + (s2 - sbar2) * GeometricSum(phi, h);
}

double AnnualizedVariance(double variance_per_bar, double periods_per_year) {
  return variance_per_bar * periods_per_year;
}

double AnnualizedVolatility(double variance_per_bar, double periods_per_year) {
  return std::sqrt(variance_per_bar * periods_per_year);
}

double ShockHalfLife(double persistence) {
  if (persistence <= 0.0) return 0.0;
  if (persistence >= 1.0) return kInf;
  return std::log(0.5) / std::log(persistence);
}

absl::StatusOr<HorizonTable> HorizonTable::Create(const ModelParams& params,
                                                  absl::Span<const int> horizons) {
  if (auto s = params.CheckConstraints(); !s.ok()) return s;
  if (horizons.empty() || horizons.size() > static_cast<size_t>(kMaxHorizons)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "between 1 and ", kMaxHorizons, " forecast horizons are supported, got ", horizons.size()));
  }
  HorizonTable t;
  t.closed_ = HasClosedFormForecast(params.spec);
  const bool ewma = params.spec.variance == VarianceKind::kEwma;
  const double phi = ewma ? 1.0 : params.Persistence();
  const double sbar2 = ewma ? 0.0 : params.UnconditionalVariance();
  for (int h : horizons) {
    if (h < 1) {
      return absl::InvalidArgumentError(absl::StrCat("forecast horizon must be >= 1 bar, got ", h));
    }
    const int i = t.size_++;
    t.horizon_[i] = h;
    if (!t.closed_) continue;
    if (ewma) {
      t.point_a_[i] = 0.0;
      t.point_b_[i] = 1.0;
      t.sum_a_[i] = 0.0;
      t.sum_b_[i] = h;
    } else {
      t.SetClosed(i, phi, sbar2);
    }
  }
  return t;
}

void HorizonTable::SetClosed(int i, double phi, double sbar2) {
  const int h = horizon_[i];
  const double ph = PowN(phi, h - 1);
  const double g = GeometricSum(phi, h);
  point_a_[i] = sbar2 * (1.0 - ph);
  point_b_[i] = ph;
  sum_a_[i] = sbar2 * (h - g);
  sum_b_[i] = g;
}

void HorizonTable::Retune(double phi, double sbar2) {
  // Per bar in drive mode: integer powers by squaring and the plain geometric
  // sum instead of pow/expm1 (phi <= kMaxPersistence keeps 1 - phi^h away from
  // cancellation for the horizons allowed).
  for (int i = 0; i < size_; ++i) {
    const int h = horizon_[i];
    double ph = 1.0, b = phi;
    for (int n = h - 1; n > 0; n >>= 1) {
      if (n & 1) ph *= b;
      b *= b;
    }
    const double g = (1.0 - ph * phi) / (1.0 - phi);
    point_a_[i] = sbar2 * (1.0 - ph);
    point_b_[i] = ph;
    sum_a_[i] = sbar2 * (h - g);
    sum_b_[i] = g;
  }
}

}  // namespace aftershock
