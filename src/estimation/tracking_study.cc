#include "aftershock/tracking_study.h"

#include <algorithm>
#include <boost/math/distributions/students_t.hpp>
#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <boost/random/student_t_distribution.hpp>
#include <cmath>
#include <optional>

#include "absl/strings/str_cat.h"
#include "aftershock/estimator.h"
#include "aftershock/online_filter.h"

namespace aftershock {
namespace {

constexpr int64_t kBurnIn = 500;

std::vector<double> ParamsAt(const DriftCase& c, int64_t t) {
  switch (c.shape) {
    case DriftShape::kStable:
      return c.from.values;
    case DriftShape::kStep:
      return t < c.change_bar ? c.from.values : c.to.values;
    case DriftShape::kLinear:
      break;
  }
  const double f = c.n > 1 ? static_cast<double>(t) / static_cast<double>(c.n - 1) : 0.0;
  std::vector<double> v(c.from.values.size());
  for (size_t i = 0; i < v.size(); ++i)
    v[i] = c.from.values[i] + f * (c.to.values[i] - c.from.values[i]);
  return v;
}

}  // namespace

absl::StatusOr<DriftPath> SimulateDrift(const DriftCase& c) {
  const ModelSpec& spec = c.from.spec;
  if (!RecursiveTracker::Supports(spec)) {
    return absl::InvalidArgumentError(
        absl::StrCat("SimulateDrift: model ", spec.Label(), " is not supported"));
  }
  if (auto s = c.from.CheckConstraints(); !s.ok()) return s;
  if (c.shape != DriftShape::kStable) {
    if (c.to.spec != spec) return absl::InvalidArgumentError("SimulateDrift: specs differ");
    if (auto s = c.to.CheckConstraints(); !s.ok()) return s;
  }
  if (c.n < 1) return absl::InvalidArgumentError("SimulateDrift: n must be >= 1");
  const bool gjr = spec.variance == VarianceKind::kGjr;
  const bool student = spec.innovations == Innovations::kStudentT;
  const int v0 = spec.VarianceOffset();
  boost::random::mt19937_64 rng(c.seed);
  boost::random::normal_distribution<double> normal(0.0, 1.0);
  boost::random::student_t_distribution<double> tdist(student ? c.from.nu() : 5.0);
  DriftPath path;
  path.returns.resize(c.n);
  path.sigma2.resize(c.n);
  path.params.resize(c.n);
  std::vector<double> p = c.from.values;
  double h = c.from.UnconditionalVariance();
  for (int64_t t = -kBurnIn; t < c.n; ++t) {
    if (t >= 0) p = ParamsAt(c, t);
    const double mu = spec.mean == MeanKind::kZero ? 0.0 : p[0];
    double z;
    if (student) {
      const double nu = p[spec.DistOffset()];
      // A fixed nu per series (the tracker holds nu); the draw is scaled to unit variance.
      z = tdist(rng) * std::sqrt((nu - 2.0) / nu);
    } else {
      z = normal(rng);
    }
    const double e = std::sqrt(h) * z;
    if (t >= 0) {
      path.returns[t] = mu + e;
      path.sigma2[t] = h;
      path.params[t] = p;
    }
    const double e2 = e * e;
    const double omega = p[v0], alpha = p[v0 + 1];
    const double gamma = gjr ? p[v0 + 2] : 0.0;
    const double beta = p[v0 + (gjr ? 3 : 2)];
    h = omega + alpha * e2 + gamma * (e < 0 ? e2 : 0.0) + beta * h;
  }
  return path;
}

absl::StatusOr<StudyResult> RunTrackingStudy(const DriftPath& path, const ModelSpec& spec,
                                             const StudyOptions& o) {
  if (auto s = ValidateTrackerOptions(o.tracker); !s.ok()) return s;
  if (!RecursiveTracker::Supports(spec)) {
    return absl::InvalidArgumentError("RunTrackingStudy: unsupported model");
  }
  if (o.refit_every < 1 || o.window < 50 || o.min_bars < 50 || o.min_bars > o.window ||
      o.score_from < o.min_bars || !(o.alert_threshold > 0)) {
    return absl::InvalidArgumentError("RunTrackingStudy: bad options");
  }
  const int64_t n = static_cast<int64_t>(path.returns.size());
  const bool gjr = spec.variance == VarianceKind::kGjr;
  const int va = spec.VarianceOffset();
  const int ia = va + 1, ib = va + (gjr ? 3 : 2);
  OutputOptions outputs;
  StudyResult res;
  std::optional<FilterModel> model;
  FilterState state;
  RecursiveTracker tracker;
  std::optional<ModelParams> last_fit;
  double sum_r = 0, sum_d = 0, sum_t = 0, se_r = 0, se_d = 0;
  bool armed = true;
  for (int64_t t = 0; t < n; ++t) {
    const double r = path.returns[t];
    if (model && t >= o.score_from) {
      const double hr = state.var.next_variance;
      const double hd = tracker.active() ? tracker.next_variance() : hr;
      const double ht = path.sigma2[t];
      const double r2 = r * r;
      sum_r += std::log(hr) + r2 / hr;
      sum_d += std::log(hd) + r2 / hd;
      sum_t += std::log(ht) + r2 / ht;
      const std::vector<double>& tp = path.params[t];
      const double a_r = model->params().values[ia] - tp[ia];
      const double b_r = model->params().values[ib] - tp[ib];
      const double a_d = (tracker.active() ? tracker.alpha() : model->params().values[ia]) - tp[ia];
      const double b_d = (tracker.active() ? tracker.beta() : model->params().values[ib]) - tp[ib];
      se_r += a_r * a_r + b_r * b_r;
      se_d += a_d * a_d + b_d * b_d;
      ++res.scored;
    }
    if (model) {
      AdvanceState(*model, &state, r);
      tracker.Step(r, o.tracker);
      const double q = tracker.instability();
      if (armed && q >= o.alert_threshold) {
        res.alarms.push_back(t);
        armed = false;
      } else if (!armed && q < 0.5 * o.alert_threshold) {
        armed = true;
      }
    }
    const int64_t seen = t + 1;
    if (seen >= o.min_bars && (seen - o.min_bars) % o.refit_every == 0) {
      const int64_t from = std::max<int64_t>(0, seen - o.window);
      const absl::Span<const double> w(path.returns.data() + from,
                                       static_cast<size_t>(seen - from));
      FitOptions fo;
      fo.std_errors = false;
      if (last_fit) fo.start = *last_fit;
      ++res.fits;
      auto fit = FitModel(spec, w, fo);
      if (!fit.ok() || !fit->converged || !(fit->params.Persistence() < o.max_persistence)) {
        ++res.failed_fits;
        continue;
      }
      auto m = FilterModel::Create(fit->params, outputs, static_cast<uint32_t>(res.fits));
      if (!m.ok()) {
        ++res.failed_fits;
        continue;
      }
      last_fit = fit->params;
      model = *std::move(m);
      InitFilterState(*model, 0.0, &state);
      for (double x : w) AdvanceState(*model, &state, x);
      tracker.Anchor(model->params(), state.var.next_variance, o.tracker);
    }
  }
  if (res.scored > 0) {
    const double k = static_cast<double>(res.scored);
    res.qlike_refit = sum_r / k;
    res.qlike_drive = sum_d / k;
    res.qlike_true = sum_t / k;
    res.param_rmse_refit = std::sqrt(se_r / (2 * k));
    res.param_rmse_drive = std::sqrt(se_d / (2 * k));
  }
  res.tracker_resets = tracker.resets();
  return res;
}

PairedTest PairedTTest(absl::Span<const double> a, absl::Span<const double> b) {
  PairedTest pt;
  const size_t n = std::min(a.size(), b.size());
  pt.n = static_cast<int>(n);
  if (n < 2) return pt;
  double m = 0;
  for (size_t i = 0; i < n; ++i) m += a[i] - b[i];
  m /= static_cast<double>(n);
  double ss = 0;
  for (size_t i = 0; i < n; ++i) ss += (a[i] - b[i] - m) * (a[i] - b[i] - m);
  const double sd = std::sqrt(ss / static_cast<double>(n - 1));
  pt.mean_diff = m;
  if (!(sd > 0)) return pt;
  pt.t = m / (sd / std::sqrt(static_cast<double>(n)));
  const boost::math::students_t_distribution<double> dist(static_cast<double>(n - 1));
  pt.p_value = 2.0 * boost::math::cdf(boost::math::complement(dist, std::fabs(pt.t)));
  return pt;
}

}  // namespace aftershock
