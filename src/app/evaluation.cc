#include "aftershock/evaluation.h"

#include <algorithm>
#include <boost/math/distributions/binomial.hpp>
#include <boost/math/distributions/chi_squared.hpp>
#include <cmath>
#include <limits>
#include <map>
#include <tuple>
#include <utility>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/time/time.h"

namespace aftershock {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// k * log(q) with 0 * log(anything) = 0: the likelihood factor q^k is 1 when k = 0.
double XLogY(double k, double q) { return k == 0.0 ? 0.0 : k * std::log(q); }

// Bernoulli log-likelihood of k successes in m trials at probability q.
double BernoulliLogLik(double k, double m, double q) { return XLogY(m - k, 1.0 - q) + XLogY(k, q); }

bool IsFinite(double v) { return std::isfinite(v); }

// Counts the zones of the rolling windows of a traffic light and stores their
// shares; shared by the bar and the trading-day windows.
struct ZoneTally {
  int64_t green = 0, yellow = 0, red = 0;
  void Add(TrafficLightZone z) {
    if (z == TrafficLightZone::kGreen) {
      ++green;
    } else if (z == TrafficLightZone::kYellow) {
      ++yellow;
    } else {
      ++red;
    }
  }
  // REQUIRES: n_windows > 0 (the number of windows added).
  void Store(int64_t n_windows, TrafficLight* tl) const {
    tl->n_windows = n_windows;
    const double nw = static_cast<double>(n_windows);
    tl->share_green = green / nw;
    tl->share_yellow = yellow / nw;
    tl->share_red = red / nw;
  }
};

}  // namespace

const char* ZoneName(TrafficLightZone zone) {
  switch (zone) {
    case TrafficLightZone::kGreen:
      return "green";
    case TrafficLightZone::kYellow:
      return "yellow";
    case TrafficLightZone::kRed:
      return "red";
    case TrafficLightZone::kNotApplicable:
      break;
  }
  return "n/a";
}

const char* ZoneBasisName(ZoneBasis basis) {
  switch (basis) {
    case ZoneBasis::kDailyBars:
      return "daily_bars";
    case ZoneBasis::kTradingDays:
      return "trading_days";
    case ZoneBasis::kBars:
      break;
  }
  return "bars";
}

double KolmogorovSurvival(double x) {
  if (!(x > 0.0)) return 1.0;
  // For x < 0.18, P(K <= x) = sqrt(2 pi) / x sum exp(-(2k-1)^2 pi^2 / (8 x^2))
  // is below 1e-15: the tail is 1 in double precision, and the alternating
  // series below would converge slowly there.
  if (x < 0.18) return 1.0;
  double sum = 0.0;
  for (int k = 1; k <= 200; ++k) {
    const double term = std::exp(-2.0 * k * k * x * x);
    sum += (k % 2 == 1 ? term : -term);
    if (term < 1e-17) break;
  }
  return std::clamp(2.0 * sum, 0.0, 1.0);
}

std::pair<int64_t, int64_t> ZoneThresholds(int64_t bars, double tail_prob,
                                           const EvaluationOptions& options) {
  const boost::math::binomial_distribution<double> d(static_cast<double>(bars), tail_prob);
  // Smallest k in [0, bars] with P(X <= k) >= q (the cdf is nondecreasing in k);
  // bars + 1 when even P(X <= bars) = 1 falls short (q > 1).
  auto first_at = [&](double q) -> int64_t {
    int64_t lo = 0, hi = bars + 1;
    while (lo < hi) {
      const int64_t mid = lo + (hi - lo) / 2;
      if (boost::math::cdf(d, static_cast<double>(mid)) >= q) {
        hi = mid;
      } else {
        lo = mid + 1;
      }
    }
    return lo;
  };
  return {first_at(options.zone_yellow_probability), first_at(options.zone_red_probability)};
}

double ChiSquaredSurvival(double x, double dof) {
  if (!(x > 0.0)) return 1.0;
  if (std::isinf(x)) return 0.0;
  try {
    boost::math::chi_squared_distribution<double> d(dof);
    return boost::math::cdf(boost::math::complement(d, x));
  } catch (...) {
    return kNaN;
  }
}

absl::StatusOr<ExceptionTests> TestExceptions(absl::Span<const uint8_t> exceptions,
                                              double tail_prob) {
  if (exceptions.empty()) {
    return absl::InvalidArgumentError("exception backtest: the exception sequence is empty");
  }
  if (!(tail_prob > 0.0 && tail_prob < 1.0)) {
    return absl::InvalidArgumentError(
        absl::StrCat("exception backtest: tail probability ", tail_prob, " is not in (0, 1)"));
  }
  ExceptionTests t;
  t.n = static_cast<int64_t>(exceptions.size());
  t.tail_prob = tail_prob;
  for (size_t i = 0; i < exceptions.size(); ++i) {
    const uint8_t e = exceptions[i];
    if (e > 1) {
      return absl::InvalidArgumentError(absl::StrCat("exception backtest: entry ", i, " is ",
                                                     static_cast<int>(e), ", expected 0 or 1"));
    }
    t.exceptions += e;
    if (i > 0) {
      const uint8_t prev = exceptions[i - 1];
      if (prev == 0 && e == 0) ++t.n00;
      if (prev == 0 && e == 1) ++t.n01;
      if (prev == 1 && e == 0) ++t.n10;
      if (prev == 1 && e == 1) ++t.n11;
    }
  }
  const double n = static_cast<double>(t.n);
  const double x = static_cast<double>(t.exceptions);
  t.rate = x / n;
  // Kupiec POF: restricted (p) against unrestricted (x/n) Bernoulli likelihood.
  t.lr_pof =
      std::max(0.0, -2.0 * BernoulliLogLik(x, n, tail_prob) + 2.0 * BernoulliLogLik(x, n, t.rate));
  t.p_pof = ChiSquaredSurvival(t.lr_pof, 1.0);

  // Christoffersen independence on the n-1 transitions.
  const double n00 = static_cast<double>(t.n00), n01 = static_cast<double>(t.n01);
  const double n10 = static_cast<double>(t.n10), n11 = static_cast<double>(t.n11);
  const double row0 = n00 + n01, row1 = n10 + n11, pairs = row0 + row1;
  if (pairs > 0) {
    const double pi = (n01 + n11) / pairs;
    const double pi01 = row0 > 0 ? n01 / row0 : 0.0;  // unused when row0 == 0 (k = 0 terms)
    const double pi11 = row1 > 0 ? n11 / row1 : 0.0;
    const double l0 = BernoulliLogLik(n01 + n11, pairs, pi);
    const double l1 = BernoulliLogLik(n01, row0, pi01) + BernoulliLogLik(n11, row1, pi11);
    t.lr_ind = std::max(0.0, -2.0 * l0 + 2.0 * l1);
  }
  t.p_ind = ChiSquaredSurvival(t.lr_ind, 1.0);
  t.lr_cc = t.lr_pof + t.lr_ind;
  t.p_cc = ChiSquaredSurvival(t.lr_cc, 2.0);
  return t;
}

TrafficLightZone ZoneOf(int64_t exceptions, const EvaluationOptions& options) {
  if (exceptions >= options.red_from) return TrafficLightZone::kRed;
  if (exceptions >= options.yellow_from) return TrafficLightZone::kYellow;
  return TrafficLightZone::kGreen;
}

absl::StatusOr<TrafficLight> EvaluateTrafficLight(absl::Span<const uint8_t> exceptions,
                                                  const EvaluationOptions& options) {
  if (exceptions.empty()) {
    return absl::InvalidArgumentError("traffic light: the exception sequence is empty");
  }
  if (options.traffic_light_window < 1) {
    return absl::InvalidArgumentError(
        absl::StrCat("traffic light: window ", options.traffic_light_window, " is < 1"));
  }
  const int64_t n = static_cast<int64_t>(exceptions.size());
  const int64_t w = options.traffic_light_window;
  TrafficLight tl;
  tl.window = std::min(n, w);
  tl.yellow_from = options.yellow_from;
  tl.red_from = options.red_from;
  for (int64_t i = n - tl.window; i < n; ++i) tl.window_exceptions += exceptions[i];
  if (n < w) return tl;  // zone stays n/a: the framework needs a full window
  tl.zone = ZoneOf(tl.window_exceptions, options);
  int64_t in_window = 0;
  ZoneTally tally;
  for (int64_t i = 0; i < n; ++i) {
    in_window += exceptions[i];
    if (i >= w) in_window -= exceptions[i - w];
    if (i + 1 < w) continue;
    tally.Add(ZoneOf(in_window, options));
  }
  tally.Store(n - w + 1, &tl);
  return tl;
}

absl::StatusOr<TrafficLight> EvaluateTrafficLightByDays(absl::Span<const uint8_t> exceptions,
                                                        absl::Span<const int64_t> day,
                                                        double tail_prob,
                                                        const EvaluationOptions& options) {
  if (exceptions.empty() || exceptions.size() != day.size()) {
    return absl::InvalidArgumentError(absl::StrCat("traffic light by days: ", exceptions.size(),
                                                   " exception entries and ", day.size(),
                                                   " day numbers"));
  }
  if (options.zone_window_days < 1) {
    return absl::InvalidArgumentError(
        absl::StrCat("traffic light by days: window ", options.zone_window_days, " is < 1"));
  }
  if (!(tail_prob > 0.0 && tail_prob < 1.0)) {
    return absl::InvalidArgumentError(
        absl::StrCat("traffic light by days: tail probability ", tail_prob, " is not in (0, 1)"));
  }
  // Per distinct day (in order): bars and exceptions.
  std::vector<int64_t> bars_of, exc_of;
  for (size_t i = 0; i < day.size(); ++i) {
    if (i > 0 && day[i] < day[i - 1]) {
      return absl::InvalidArgumentError(
          absl::StrCat("traffic light by days: day numbers decrease at entry ", i));
    }
    if (i == 0 || day[i] != day[i - 1]) {
      bars_of.push_back(0);
      exc_of.push_back(0);
    }
    ++bars_of.back();
    exc_of.back() += exceptions[i] ? 1 : 0;
  }
  const int64_t nd = static_cast<int64_t>(bars_of.size());
  const int64_t w = options.zone_window_days;
  TrafficLight tl;
  tl.basis = ZoneBasis::kTradingDays;
  tl.window_days = std::min(nd, w);
  for (int64_t d = nd - tl.window_days; d < nd; ++d) {
    tl.window += bars_of[d];
    tl.window_exceptions += exc_of[d];
  }
  std::map<int64_t, std::pair<int64_t, int64_t>> cache;  // window bars -> thresholds
  auto thresholds = [&](int64_t bars) {
    auto it = cache.find(bars);
    if (it == cache.end()) it = cache.emplace(bars, ZoneThresholds(bars, tail_prob, options)).first;
    return it->second;
  };
  std::tie(tl.yellow_from, tl.red_from) = thresholds(tl.window);
  if (nd < w) return tl;  // zone stays n/a: the framework needs a full window
  auto zone_of = [&](int64_t x, int64_t bars) {
    const auto [y, r] = thresholds(bars);
    return x >= r ? TrafficLightZone::kRed
                  : (x >= y ? TrafficLightZone::kYellow : TrafficLightZone::kGreen);
  };
  tl.zone = zone_of(tl.window_exceptions, tl.window);
  int64_t in_bars = 0, in_exc = 0;
  ZoneTally tally;
  for (int64_t d = 0; d < nd; ++d) {
    in_bars += bars_of[d];
    in_exc += exc_of[d];
    if (d >= w) {
      in_bars -= bars_of[d - w];
      in_exc -= exc_of[d - w];
    }
    if (d + 1 < w) continue;
    tally.Add(zone_of(in_exc, in_bars));
  }
  tally.Store(nd - w + 1, &tl);
  return tl;
}

std::vector<int64_t> TradingDays(const SymbolHistory& h) {
  const size_t n = h.t_ns.size();
  const bool sessions = h.session_bar.size() == n;
  std::vector<int64_t> day(n, 0);
  auto utc_day = [](int64_t t_ns) {
    // Floor division: bars before 1970 still get distinct, ordered days.
    constexpr int64_t kDayNs = 86400LL * 1000000000LL;
    return t_ns >= 0 ? t_ns / kDayNs : -((-t_ns + kDayNs - 1) / kDayNs);
  };
  for (size_t i = 1; i < n; ++i) {
    bool new_day;
    if (sessions && h.session_bar[i] >= 0 && h.session_bar[i - 1] >= 0) {
      new_day = h.session_bar[i] <= h.session_bar[i - 1];
    } else {
      new_day = utc_day(h.t_ns[i]) != utc_day(h.t_ns[i - 1]);
    }
    day[i] = day[i - 1] + (new_day ? 1 : 0);
  }
  return day;
}

absl::StatusOr<PitTest> TestPit(absl::Span<const double> z, const InnovationLaw& law, int bins) {
  if (bins < 2) {
    return absl::InvalidArgumentError(absl::StrCat("PIT test: ", bins, " bins, expected >= 2"));
  }
  std::vector<double> u;
  u.reserve(z.size());
  for (double v : z) {
    if (!IsFinite(v)) continue;
    const double p = law.Cdf(v);
    if (IsFinite(p)) u.push_back(std::clamp(p, 0.0, 1.0));
  }
  if (u.empty()) return absl::InvalidArgumentError("PIT test: no finite shock");
  PitTest t;
  t.n = static_cast<int64_t>(u.size());
  t.counts.assign(bins, 0);
  for (double v : u) {
    ++t.counts[std::min(bins - 1, static_cast<int>(std::floor(v * bins)))];
  }
  const double n = static_cast<double>(t.n);
  const double expected = n / bins;
  for (int64_t c : t.counts) t.chi2 += (c - expected) * (c - expected) / expected;
  t.chi2_dof = bins - 1;
  t.chi2_p = ChiSquaredSurvival(t.chi2, t.chi2_dof);
  // D = max over the order statistics of max(i/n - u_(i), u_(i) - (i-1)/n).
  std::sort(u.begin(), u.end());
  for (size_t i = 0; i < u.size(); ++i) {
    const double above = static_cast<double>(i + 1) / n - u[i];
    const double below = u[i] - static_cast<double>(i) / n;
    t.ks_d = std::max({t.ks_d, above, below});
  }
  t.ks_p = KolmogorovSurvival(std::sqrt(n) * t.ks_d);
  return t;
}

namespace {

// The bars of the session in up to 12 segments: mean z^2, the profile and the
// exceptions at every level (the VaR of the previous bar of the same session).
// Warm-up bars are left out under exclude_warmup; once the filter ran
// deseasonalized, only those bars count (the table then shows how well the
// profile in force calibrates each time of day).
TimeOfDay ComputeTimeOfDay(const SymbolHistory& h, const EvaluationOptions& options) {
  TimeOfDay tod;
  const size_t n = h.t_ns.size();
  if (h.session_bar.size() != n || n == 0) return tod;
  int K = static_cast<int>(h.seasonal_factors.size());
  for (int32_t k : h.session_bar) K = std::max(K, k + 1);
  if (K < 2) return tod;
  tod.session_bars = K;
  tod.profile = !h.seasonal_factors.empty();
  const int segs = std::min(K, 12);
  auto seg_of = [&](int k) { return static_cast<int>(static_cast<int64_t>(k) * segs / K); };
  for (uint32_t f : h.flags)
    tod.deseasonalized_only = tod.deseasonalized_only || (f & kFlagSeasonal);
  const size_t nl = h.risk_levels.size();
  tod.segments.resize(segs);
  std::vector<double> z2(segs, 0.0), s2(segs, 0.0);
  std::vector<int64_t> ns2(segs, 0);
  for (int g = 0; g < segs; ++g) {
    TimeOfDaySegment& sg = tod.segments[g];
    sg.first_bar = static_cast<int>((static_cast<int64_t>(g) * K + segs - 1) / segs);
    sg.last_bar = static_cast<int>((static_cast<int64_t>(g + 1) * K + segs - 1) / segs) - 1;
    sg.eligible.assign(nl, 0);
    sg.exceptions.assign(nl, 0);
  }
  for (size_t i = 0; i < n; ++i) {
    const int k = h.session_bar[i];
    if (k < 0 || k >= K) continue;
    if (options.exclude_warmup && (h.flags[i] & kFlagWarmup)) continue;
    if (tod.deseasonalized_only && !(h.flags[i] & kFlagSeasonal)) continue;
    TimeOfDaySegment& sg = tod.segments[seg_of(k)];
    if (IsFinite(h.z[i])) {
      z2[seg_of(k)] += h.z[i] * h.z[i];
      ++sg.bars;
    }
    if (i == 0 || (h.flags[i] & kFlagGap)) continue;
    for (size_t l = 0; l < nl; ++l) {
      const double v = h.var_risk_next[l][i - 1];
      if (!IsFinite(v)) continue;
      ++sg.eligible[l];
      if (h.r[i] < -v) ++sg.exceptions[l];
    }
  }
  for (int k = 0; k < static_cast<int>(h.seasonal_factors.size()); ++k) {
    s2[seg_of(k)] += h.seasonal_factors[k];
    ++ns2[seg_of(k)];
  }
  for (int g = 0; g < segs; ++g) {
    TimeOfDaySegment& sg = tod.segments[g];
    sg.mean_z2 = sg.bars > 0 ? z2[g] / static_cast<double>(sg.bars) : kNaN;
    sg.profile_s2 = ns2[g] > 0 ? s2[g] / static_cast<double>(ns2[g]) : kNaN;
  }
  return tod;
}

}  // namespace

absl::StatusOr<MincerZarnowitz> MincerZarnowitzRegression(absl::Span<const double> y,
                                                          absl::Span<const double> h) {
  if (y.size() != h.size()) {
    return absl::InvalidArgumentError(
        absl::StrCat("Mincer-Zarnowitz: ", y.size(), " targets but ", h.size(), " forecasts"));
  }
  if (y.size() < 3) {
    return absl::InvalidArgumentError(
        absl::StrCat("Mincer-Zarnowitz: needs at least 3 bars, got ", y.size()));
  }
  const size_t n = y.size();
  double sy = 0, sh = 0;
  for (size_t i = 0; i < n; ++i) {
    if (!IsFinite(y[i]) || !IsFinite(h[i])) {
      return absl::InvalidArgumentError(
          absl::StrCat("Mincer-Zarnowitz: value at bar ", i, " is not finite"));
    }
    sy += y[i];
    sh += h[i];
  }
  const double dn = static_cast<double>(n);
  const double ybar = sy / dn, hbar = sh / dn;
  // Centred sums (two-pass) keep the variance-sized numbers accurate.
  double shh = 0, shy = 0, syy = 0;
  for (size_t i = 0; i < n; ++i) {
    const double dh = h[i] - hbar, dy = y[i] - ybar;
    shh += dh * dh;
    shy += dh * dy;
    syy += dy * dy;
  }
  if (!(shh > 0.0)) {
    return absl::InvalidArgumentError("Mincer-Zarnowitz: the forecasts have no spread");
  }
  MincerZarnowitz mz;
  mz.n = static_cast<int64_t>(n);
  mz.slope = shy / shh;
  mz.intercept = ybar - mz.slope * hbar;
  double sse = 0, meat_hh = 0, meat_h = 0, meat_1 = 0;  // sums of u^2 dh^2, u^2 dh, u^2
  for (size_t i = 0; i < n; ++i) {
    const double u = y[i] - mz.intercept - mz.slope * h[i];
    const double dh = h[i] - hbar;
    const double u2 = u * u;
    sse += u2;
    meat_hh += u2 * dh * dh;
    meat_h += u2 * dh;
    meat_1 += u2;
  }
  mz.r_squared = syy > 0 ? 1.0 - sse / syy : 0.0;
  const double s2 = sse / (dn - 2.0);
  mz.slope_se = std::sqrt(s2 / shh);
  mz.intercept_se = std::sqrt(s2 * (1.0 / dn + hbar * hbar / shh));
  // HC0 sandwich in the centred parametrization y = c + b (h - hbar) + u, where
  // X'X = diag(n, shh); a = c - b hbar, so
  //   Var(b) = sum u^2 dh^2 / shh^2,
  //   Var(c) = sum u^2 / n^2,  Cov(c, b) = sum u^2 dh / (n shh),
  //   Var(a) = Var(c) - 2 hbar Cov(c, b) + hbar^2 Var(b).
  const double var_b = meat_hh / (shh * shh);
  const double var_c = meat_1 / (dn * dn);
  const double cov_cb = meat_h / (dn * shh);
  mz.slope_se_robust = std::sqrt(var_b);
  mz.intercept_se_robust =
      std::sqrt(std::max(0.0, var_c - 2.0 * hbar * cov_cb + hbar * hbar * var_b));
  return mz;
}

absl::StatusOr<ForecastLoss> EvaluateVarianceForecasts(absl::Span<const double> y,
                                                       absl::Span<const double> h,
                                                       const std::string& target) {
  if (y.size() != h.size()) {
    return absl::InvalidArgumentError(absl::StrCat("forecast evaluation (", target, "): ", y.size(),
                                                   " targets but ", h.size(), " forecasts"));
  }
  if (y.size() < 3) {
    return absl::InvalidArgumentError(
        absl::StrCat("forecast evaluation (", target, "): needs at least 3 bars, got ", y.size()));
  }
  ForecastLoss f;
  f.target = target;
  f.n = static_cast<int64_t>(y.size());
  double ql = 0, qn = 0, se = 0;
  for (size_t i = 0; i < y.size(); ++i) {
    if (!(IsFinite(y[i]) && y[i] >= 0.0)) {
      return absl::InvalidArgumentError(absl::StrCat("forecast evaluation (", target,
                                                     "): target at bar ", i, " is ", y[i],
                                                     ", expected finite and >= 0"));
    }
    if (!(IsFinite(h[i]) && h[i] > 0.0)) {
      return absl::InvalidArgumentError(absl::StrCat("forecast evaluation (", target,
                                                     "): forecast at bar ", i, " is ", h[i],
                                                     ", expected finite and > 0"));
    }
    const double ratio = y[i] / h[i];
    ql += std::log(h[i]) + ratio;
    if (y[i] > 0.0) {
      qn += ratio - std::log(ratio) - 1.0;
      ++f.n_normalized;
    }
    se += (y[i] - h[i]) * (y[i] - h[i]);
  }
  const double n = static_cast<double>(f.n);
  f.qlike = ql / n;
  f.qlike_normalized = f.n_normalized > 0 ? qn / static_cast<double>(f.n_normalized) : kNaN;
  f.mse = se / n;
  // Constant forecasts (a constant-variance model) leave the regression
  // undefined; the losses stay valid, the regression is reported as absent.
  auto mz = MincerZarnowitzRegression(y, h);
  if (mz.ok()) {
    f.mz = *mz;
  } else {
    f.mz.intercept = f.mz.slope = f.mz.intercept_se = f.mz.slope_se = kNaN;
    f.mz.intercept_se_robust = f.mz.slope_se_robust = f.mz.r_squared = kNaN;
  }
  return f;
}

absl::Status AppendBarUpdate(const BarUpdate& u, double rv, SymbolHistory* h) {
  if (h->t_ns.empty() && h->risk_levels.empty()) {
    h->risk_levels.assign(u.levels, u.levels + u.n_levels);
    h->var_risk_next.assign(u.n_levels, {});
    h->es_next.assign(u.n_levels, {});
  }
  if (static_cast<int>(h->risk_levels.size()) != u.n_levels ||
      !std::equal(h->risk_levels.begin(), h->risk_levels.end(), u.levels)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "history of '", h->symbol, "': the bar's risk levels differ from the earlier bars'"));
  }
  h->t_ns.push_back(u.t_ns);
  h->r.push_back(u.r);
  h->mu.push_back(u.mu);
  h->var.push_back(u.var);
  h->z.push_back(u.z);
  h->var_next.push_back(u.var_next);
  if (!std::isnan(rv) || !h->rv.empty()) {
    h->rv.resize(h->t_ns.size() - 1, kNaN);
    h->rv.push_back(rv);
  }
  for (int k = 0; k < u.n_levels; ++k) {
    h->var_risk_next[k].push_back(u.var_risk[k]);
    h->es_next[k].push_back(u.es[k]);
  }
  h->ver.push_back(u.ver);
  h->flags.push_back(u.flags);
  return absl::OkStatus();
}

std::vector<int64_t> UsableBars(const SymbolHistory& hist, const EvaluationOptions& options) {
  std::vector<int64_t> used;
  used.reserve(hist.t_ns.size());
  for (size_t i = 0; i < hist.t_ns.size(); ++i) {
    const uint32_t f = hist.flags[i];
    if (f & kFlagFirstBar) continue;
    if (options.exclude_warmup && (f & kFlagWarmup)) continue;
    if (!IsFinite(hist.r[i]) || !IsFinite(hist.mu[i]) || !IsFinite(hist.z[i]) ||
        !(IsFinite(hist.var[i]) && hist.var[i] > 0.0)) {
      continue;
    }
    used.push_back(static_cast<int64_t>(i));
  }
  return used;
}

absl::StatusOr<SymbolEvaluation> EvaluateSymbol(const SymbolHistory& hist,
                                                const EvaluationOptions& options) {
  const std::string who = absl::StrCat("evaluation of '", hist.symbol, "': ");
  const size_t n = hist.t_ns.size();
  if (n == 0) return absl::InvalidArgumentError(who + "the history has no bars");
  auto check_len = [&](size_t len, const char* field) -> absl::Status {
    if (len != n) {
      return absl::InvalidArgumentError(
          absl::StrCat(who, "field '", field, "' has ", len, " entries, t_ns has ", n));
    }
    return absl::OkStatus();
  };
  for (auto s : {check_len(hist.r.size(), "r"), check_len(hist.mu.size(), "mu"),
                 check_len(hist.var.size(), "var"), check_len(hist.z.size(), "z"),
                 check_len(hist.var_next.size(), "var_next"), check_len(hist.ver.size(), "ver"),
                 check_len(hist.flags.size(), "flags")}) {
    if (!s.ok()) return s;
  }
  if (!hist.rv.empty()) {
    if (auto s = check_len(hist.rv.size(), "rv"); !s.ok()) return s;
  }
  if (!hist.session_bar.empty()) {
    if (auto s = check_len(hist.session_bar.size(), "session_bar"); !s.ok()) return s;
  }
  const size_t nl = hist.risk_levels.size();
  if (hist.var_risk_next.size() != nl || hist.es_next.size() != nl) {
    return absl::InvalidArgumentError(absl::StrCat(who, nl, " risk levels but ",
                                                   hist.var_risk_next.size(), " VaR columns and ",
                                                   hist.es_next.size(), " ES columns"));
  }
  for (size_t k = 0; k < nl; ++k) {
    const double lv = hist.risk_levels[k];
    if (!(lv > 0.5 && lv < 1.0)) {
      return absl::InvalidArgumentError(
          absl::StrCat(who, "risk level ", lv, " is not in (0.5, 1)"));
    }
    if (auto s = check_len(hist.var_risk_next[k].size(), "var_risk_next"); !s.ok()) return s;
    if (auto s = check_len(hist.es_next[k].size(), "es_next"); !s.ok()) return s;
  }
  for (size_t i = 1; i < n; ++i) {
    if (hist.t_ns[i] < hist.t_ns[i - 1]) {
      return absl::InvalidArgumentError(absl::StrCat(who, "timestamps decrease at bar ", i));
    }
  }

  SymbolEvaluation ev;
  ev.symbol = hist.symbol;
  ev.bars = static_cast<int64_t>(n);
  ev.last_var_next = hist.var_next.back();

  for (size_t i = 0; i < n; ++i) {
    if (hist.flags[i] & kFlagWarmup) ++ev.warmup_bars;
    if (hist.flags[i] & kFlagFallback) ++ev.fallback_bars;
  }
  std::vector<size_t> used;
  for (int64_t i : UsableBars(hist, options)) used.push_back(static_cast<size_t>(i));
  ev.evaluated = static_cast<int64_t>(used.size());
  if (used.size() < 3) {
    return absl::InvalidArgumentError(absl::StrCat(who, "only ", used.size(), " of ", n,
                                                   " bars are usable (warm-up or invalid bars are "
                                                   "left out); at least 3 are needed"));
  }

  // Forecast losses.
  {
    std::vector<double> y, h;
    y.reserve(used.size());
    h.reserve(used.size());
    for (size_t i : used) {
      const double e = hist.r[i] - hist.mu[i];
      y.push_back(e * e);
      h.push_back(hist.var[i]);
    }
    auto f = EvaluateVarianceForecasts(y, h, "r2");
    if (!f.ok()) return absl::InvalidArgumentError(who + std::string(f.status().message()));
    ev.vs_r2 = *f;
    if (!hist.rv.empty()) {
      y.clear();
      h.clear();
      for (size_t i : used) {
        if (IsFinite(hist.rv[i]) && hist.rv[i] >= 0.0) {
          y.push_back(hist.rv[i]);
          h.push_back(hist.var[i]);
        }
      }
      if (y.size() >= 3) {
        auto g = EvaluateVarianceForecasts(y, h, "rv");
        if (!g.ok()) return absl::InvalidArgumentError(who + std::string(g.status().message()));
        ev.vs_rv = *g;
      }
    }
  }

  // Shock moments.
  {
    double s1 = 0;
    for (size_t i : used) s1 += hist.z[i];
    const double m = static_cast<double>(used.size());
    ev.z.n = static_cast<int64_t>(used.size());
    ev.z.mean = s1 / m;
    double m2 = 0, m3 = 0, m4 = 0;
    for (size_t i : used) {
      const double d = hist.z[i] - ev.z.mean;
      m2 += d * d;
      m3 += d * d * d;
      m4 += d * d * d * d;
      ev.z.max_abs = std::max(ev.z.max_abs, std::fabs(hist.z[i]));
    }
    m2 /= m;
    m3 /= m;
    m4 /= m;
    ev.z.variance = m2;
    ev.z.skewness = m2 > 0 ? m3 / std::pow(m2, 1.5) : 0.0;
    ev.z.excess_kurtosis = m2 > 0 ? m4 / (m2 * m2) - 3.0 : 0.0;
  }

  // Calibration by the probability integral transform.
  {
    std::vector<double> z;
    z.reserve(used.size());
    for (size_t i : used) z.push_back(hist.z[i]);
    auto pit = TestPit(z, hist.law, options.pit_bins);
    if (!pit.ok()) return absl::InvalidArgumentError(who + std::string(pit.status().message()));
    ev.pit = *pit;
  }
  ev.time_of_day = ComputeTimeOfDay(hist, options);

  // VaR backtests: the forecast for bar i is the one published at bar i-1.
  const std::vector<int64_t> days = TradingDays(hist);
  for (size_t k = 0; k < nl; ++k) {
    LevelBacktest lb;
    lb.level = hist.risk_levels[k];
    std::vector<uint8_t> hits;
    std::vector<int64_t> hit_day;
    hits.reserve(used.size());
    hit_day.reserve(used.size());
    double es_sum = 0;
    for (size_t i : used) {
      if (i == 0) continue;
      const double v = hist.var_risk_next[k][i - 1];
      if (!IsFinite(v)) continue;
      const double loss = -hist.r[i];
      const bool hit = loss > v;
      hits.push_back(hit ? 1 : 0);
      hit_day.push_back(days[i]);
      if (hit) lb.exception_bars.push_back(static_cast<int64_t>(i));
      const double es = hist.es_next[k][i - 1];
      if (hit && IsFinite(es) && es > 0.0) {
        es_sum += loss / es;
        ++lb.es_n;
      }
    }
    lb.es_ratio = lb.es_n > 0 ? es_sum / static_cast<double>(lb.es_n) : kNaN;
    if (!hits.empty()) {
      auto t = TestExceptions(hits, 1.0 - lb.level);
      if (!t.ok()) return t.status();
      lb.tests = *t;
      if (std::fabs(lb.level - options.traffic_light_level) < 1e-9) {
        // Intraday when some trading day holds two tested bars.
        bool intraday = false;
        int64_t n_days = 1;
        for (size_t j = 1; j < hit_day.size(); ++j) {
          intraday = intraday || hit_day[j] == hit_day[j - 1];
          n_days += hit_day[j] != hit_day[j - 1] ? 1 : 0;
        }
        absl::StatusOr<TrafficLight> tl;
        if (intraday && options.zone_window_days > 0 && n_days >= options.zone_window_days) {
          tl = EvaluateTrafficLightByDays(hits, hit_day, 1.0 - lb.level, options);
        } else {
          tl = EvaluateTrafficLight(hits, options);
          if (tl.ok() && intraday) tl->basis = ZoneBasis::kBars;
        }
        if (!tl.ok()) return tl.status();
        lb.traffic_light = *tl;
      }
    } else {
      lb.tests.tail_prob = 1.0 - lb.level;
    }
    ev.levels.push_back(lb);
  }

  // Alerts.
  std::map<std::pair<std::string, std::string>, int64_t> counts;
  for (const auto& a : hist.alerts) ++counts[{a.kind, a.severity}];
  for (const auto& [key, c] : counts) ev.alerts.push_back({key.first, key.second, c});
  ev.alerts_total = static_cast<int64_t>(hist.alerts.size());

  // Refits.
  std::map<std::string, int64_t> reasons;
  for (const auto& s : hist.swaps) {
    ++ev.swaps.attempts;
    if (s.accepted) {
      ++ev.swaps.accepted;
      ev.swaps.last_version = std::max(ev.swaps.last_version, s.version);
    } else {
      ++ev.swaps.rejected;
      ++reasons[s.gate_reason.empty() ? std::string("unspecified") : s.gate_reason];
    }
  }
  ev.swaps.reject_reasons.assign(reasons.begin(), reasons.end());

  // Findings in plain language.
  for (const auto& lb : ev.levels) {
    const std::string lv = absl::StrFormat("%.4g %%", 100.0 * lb.level);
    if (lb.tests.n == 0) {
      ev.warnings.push_back(absl::StrCat("no VaR forecasts at ", lv));
      continue;
    }
    if (lb.traffic_light.zone == TrafficLightZone::kRed ||
        lb.traffic_light.zone == TrafficLightZone::kYellow) {
      const TrafficLight& tl = lb.traffic_light;
      ev.warnings.push_back(
          absl::StrCat(ZoneName(tl.zone), " zone at ", lv, " (", tl.window_exceptions,
                       " exceptions in the last ",
                       tl.basis == ZoneBasis::kTradingDays
                           ? absl::StrCat(tl.window_days, " trading days, ", tl.window, " bars")
                           : absl::StrCat(tl.window, " bars"),
                       ")"));
    }
    if (lb.tests.p_pof < options.warn_p_value) {
      ev.warnings.push_back(
          absl::StrFormat("coverage rejected at %s (Kupiec p = %.3g)", lv, lb.tests.p_pof));
    }
    if (lb.tests.p_ind < options.warn_p_value) {
      ev.warnings.push_back(absl::StrFormat("exceptions cluster at %s (Christoffersen p = %.3g)",
                                            lv, lb.tests.p_ind));
    }
  }
  // Pearson's chi-square needs about 5 expected per bin to follow its law;
  // below that the PIT figures are shown but raise no warning.
  if (ev.pit.n >= 5 * static_cast<int64_t>(ev.pit.counts.size()) &&
      (ev.pit.chi2_p < options.warn_p_value || ev.pit.ks_p < options.warn_p_value)) {
    ev.warnings.push_back(absl::StrFormat(
        "shocks not calibrated to the innovation law (PIT chi-square p = %.3g, KS p = %.3g)",
        ev.pit.chi2_p, ev.pit.ks_p));
  }
  if (ev.fallback_bars > 0) {
    ev.warnings.push_back(absl::StrCat(ev.fallback_bars, ev.fallback_bars == 1 ? " bar" : " bars",
                                       " on the EWMA fallback"));
  }
  if (ev.swaps.rejected > 0) {
    ev.warnings.push_back(absl::StrCat(
        ev.swaps.rejected, ev.swaps.rejected == 1 ? " refit" : " refits", " rejected by the gate"));
  }
  return ev;
}

std::string VarExceptionsCsv(const SymbolHistory& hist, const SymbolEvaluation& eval, bool header) {
  std::string out = header ? "symbol,time,bar,return,limit,level\n" : "";
  for (size_t k = 0; k < eval.levels.size() && k < hist.var_risk_next.size(); ++k) {
    const LevelBacktest& lb = eval.levels[k];
    for (int64_t i : lb.exception_bars) {
      const size_t b = static_cast<size_t>(i);
      if (b == 0 || b >= hist.r.size() || b >= hist.t_ns.size()) continue;
      absl::StrAppend(&out, hist.symbol, ",",
                      absl::FormatTime("%Y-%m-%dT%H:%M:%E*SZ", absl::FromUnixNanos(hist.t_ns[b]),
                                       absl::UTCTimeZone()),
                      ",", i, ",", absl::StrFormat("%.12g", hist.r[b]), ",",
                      absl::StrFormat("%.12g", hist.var_risk_next[k][b - 1]), ",",
                      absl::StrFormat("%g", lb.level), "\n");
    }
  }
  return out;
}

}  // namespace aftershock
