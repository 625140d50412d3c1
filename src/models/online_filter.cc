#include "aftershock/online_filter.h"

#include <algorithm>
#include <cmath>
#include <cstddef>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

absl::Status CheckOutputs(const OutputOptions& o) {
  if (o.horizons.size() > static_cast<size_t>(kMaxHorizons)) {
    return absl::InvalidArgumentError(
        absl::StrCat("at most ", kMaxHorizons, " horizons are supported, got ", o.horizons.size()));
  }
  for (int h : o.horizons) {
    if (h < 1 || h > kMaxHorizonBars) {
      return absl::InvalidArgumentError(
          absl::StrCat("horizons must be in 1..", kMaxHorizonBars, " bars, got ", h));
    }
  }
  if (!(o.periods_per_year > 0) || !std::isfinite(o.periods_per_year)) {
    return absl::InvalidArgumentError("periods_per_year must be a positive number");
  }
  if (!(o.target_vol_ann > 0) || !std::isfinite(o.target_vol_ann)) {
    return absl::InvalidArgumentError("target_vol_ann must be a positive number");
  }
  if (!(o.scale_cap > 0) || !std::isfinite(o.scale_cap)) {
    return absl::InvalidArgumentError("scale_cap must be a positive number");
  }
  return absl::OkStatus();
}

}  // namespace

absl::StatusOr<FilterModel> FilterModel::Create(const ModelParams& params,
                                                const OutputOptions& outputs, uint32_t version) {
  if (auto s = params.CheckConstraints(); !s.ok()) return s;
  if (auto s = CheckOutputs(outputs); !s.ok()) return s;
  const ModelSpec& spec = params.spec;
  FilterModel m;
  m.params_ = params;
  m.version_ = version;
  m.mean_ = spec.mean;
  m.variance_ = spec.variance;
  m.np_ = spec.ar_order;
  m.nq_ = spec.ma_order;
  m.na_ = spec.variance == VarianceKind::kConstant || spec.variance == VarianceKind::kEwma
              ? 0
              : spec.arch_order;
  m.no_ = spec.asym_order;
  m.nb_ = spec.garch_order;
  if (spec.mean != MeanKind::kZero) m.mu_ = params.mu();
  for (int i = 0; i < m.np_; ++i) m.ar_[i] = params.ar(i);
  for (int i = 0; i < m.nq_; ++i) m.ma_[i] = params.ma(i);
  if (spec.variance == VarianceKind::kEwma) {
    m.lambda_ = params.lambda();
  } else {
    m.omega_ = params.omega();
    for (int i = 0; i < m.na_; ++i) m.alpha_[i] = params.alpha(i);
    for (int i = 0; i < m.no_; ++i) m.gamma_[i] = params.gamma(i);
    for (int i = 0; i < m.nb_; ++i) m.beta_[i] = params.beta(i);
  }
  m.sqrt_ppy_ = std::sqrt(outputs.periods_per_year);
  m.scale_num_ = outputs.target_vol_ann / m.sqrt_ppy_;
  m.scale_cap_ = outputs.scale_cap;
  auto table = HorizonTable::Create(params, outputs.horizons);
  if (!table.ok()) return table.status();
  m.horizons_ = *table;
  // The slow path walks horizons in increasing order.
  for (size_t i = 1; i < outputs.horizons.size(); ++i) {
    if (outputs.horizons[i] <= outputs.horizons[i - 1]) {
      return absl::InvalidArgumentError("horizons must be strictly increasing");
    }
  }
  m.max_horizon_ = outputs.horizons.empty() ? 0 : outputs.horizons.back();
  if (spec.variance == VarianceKind::kEwma) {
    m.phi_ = 1;
  } else {
    m.phi_ = params.Persistence();
    m.sbar2_ = m.phi_ < 1 ? params.UnconditionalVariance() : 0.0;
  }
  auto law = InnovationLaw::FromParams(params);
  if (!law.ok()) return law.status();
  auto risk = RiskQuantiles::Create(*law, outputs.risk_levels);
  if (!risk.ok()) return risk.status();
  m.risk_ = *risk;
  return m;
}

absl::StatusOr<FilterModel> FilterModel::Ewma(double lambda, const OutputOptions& outputs,
                                              uint32_t version) {
  ModelSpec spec;
  spec.mean = MeanKind::kZero;
  spec.variance = VarianceKind::kEwma;
  spec.arch_order = spec.asym_order = spec.garch_order = 0;
  spec.innovations = Innovations::kNormal;
  return Create(ModelParams{spec, {lambda}}, outputs, version);
}

void FilterModel::RetuneVariance(double omega, double alpha, double gamma, double beta) {
  omega_ = omega;
  alpha_[0] = alpha;
  if (no_ > 0) gamma_[0] = gamma;
  beta_[0] = beta;
  const int v0 = params_.spec.VarianceOffset();
  params_.values[v0] = omega;
  params_.values[v0 + 1] = alpha;
  if (no_ > 0) params_.values[v0 + 2] = gamma;
  params_.values[v0 + 1 + na_ + no_] = beta;
  phi_ = alpha + (no_ > 0 ? 0.5 * gamma : 0.0) + beta;
  sbar2_ = omega / (1.0 - phi_);
  if (horizons_.closed()) horizons_.Retune(phi_, sbar2_);
}

void InitFilterState(const FilterModel& model, double variance, FilterState* state) {
  *state = FilterState{};
  double v = variance;
  if (!(v > 0)) v = model.unconditional_variance();
  double mean = 0;
  if (model.mean_ != MeanKind::kZero) {
    double ar_sum = 0;
    for (int i = 0; i < model.np_; ++i) ar_sum += model.ar_[i];
    mean = model.mu_ / (1.0 - ar_sum);
  }
  for (double& r : state->r_hist) r = mean;
  state->var.eps2.fill(v);
  state->var.neg_eps2.fill(0.5 * v);
  state->var.sigma2.fill(v);
  // The first bar's variance comes out of the recursion applied to the presample
  // lags, exactly as the likelihood's first term (for v = the unconditional
  // variance this is v again).
  double next = v;
  switch (model.variance_) {
    case VarianceKind::kConstant:
      next = model.omega_;
      break;
    case VarianceKind::kEwma:
      next = model.lambda_ * v + (1.0 - model.lambda_) * v;
      break;
    default:
      next = model.omega_;
      for (int i = 0; i < model.na_; ++i) next += model.alpha_[i] * state->var.eps2[i];
      for (int i = 0; i < model.no_; ++i) next += model.gamma_[i] * state->var.neg_eps2[i];
      for (int j = 0; j < model.nb_; ++j) next += model.beta_[j] * state->var.sigma2[j];
      break;
  }
  state->var.next_variance = next;
  state->sd_next = std::sqrt(next);
  // The first mean forecast, from the (unconditional) return lags.
  double m = model.mu_;
  for (int i = 0; i < model.np_; ++i) m += model.ar_[i] * state->r_hist[i];
  state->mu_next = m;
}

double FilterModel::Advance(FilterState* s, double r) const {
  const double mu = s->mu_next;
  const double eps = r - mu;
  const double e2 = eps * eps;
  const double var = s->var.next_variance;
  // Shift the lags (most recent first).
  for (int i = np_ - 1; i > 0; --i) s->r_hist[i] = s->r_hist[i - 1];
  if (np_ > 0) s->r_hist[0] = r;
  for (int i = nq_ - 1; i > 0; --i) s->eps_hist[i] = s->eps_hist[i - 1];
  if (nq_ > 0) s->eps_hist[0] = eps;
  for (int i = na_ - 1; i > 0; --i) s->var.eps2[i] = s->var.eps2[i - 1];
  s->var.eps2[0] = e2;
  for (int i = no_ - 1; i > 0; --i) s->var.neg_eps2[i] = s->var.neg_eps2[i - 1];
  if (no_ > 0) s->var.neg_eps2[0] = eps < 0.0 ? e2 : 0.0;
  for (int i = nb_ - 1; i > 0; --i) s->var.sigma2[i] = s->var.sigma2[i - 1];
  s->var.sigma2[0] = var;
  // Variance recursion, in the likelihood's summation order.
  double v;
  switch (variance_) {
    case VarianceKind::kConstant:
      v = omega_;
      break;
    case VarianceKind::kEwma:
      v = lambda_ * var + (1.0 - lambda_) * e2;
      break;
    default:
      v = omega_;
      for (int i = 0; i < na_; ++i) v += alpha_[i] * s->var.eps2[i];
      for (int i = 0; i < no_; ++i) v += gamma_[i] * s->var.neg_eps2[i];
      for (int j = 0; j < nb_; ++j) v += beta_[j] * s->var.sigma2[j];
      break;
  }
  s->var.next_variance = v;
  // Mean forecast for the next bar.
  double m = mu_;
  for (int i = 0; i < np_; ++i) m += ar_[i] * s->r_hist[i];
  for (int j = 0; j < nq_; ++j) m += ma_[j] * s->eps_hist[j];
  s->mu_next = m;
  ++s->bars;
  return eps;
}

void AdvanceState(const FilterModel& m, FilterState* state, double r) {
  m.Advance(state, r);
  state->sd_next = std::sqrt(state->var.next_variance);
}

void FilterStep(const FilterModel& m, FilterState* state, double r, BarUpdate* out) {
  const double mu = state->mu_next;
  const double var = state->var.next_variance;
  const double sd = state->sd_next;
  const double eps = m.Advance(state, r);
  const double v_next = state->var.next_variance;
  const double sd_next = std::sqrt(v_next);
  state->sd_next = sd_next;
  out->r = r;
  out->mu = mu;
  out->eps = eps;
  out->var = var;
  out->z = eps / sd;
  out->var_next = v_next;
  out->vol_ann = sd_next * m.sqrt_ppy_;
  const int nh = m.horizons_.size();
  out->n_horizons = nh;
  if (m.horizons_.closed()) {
    for (int i = 0; i < nh; ++i) {
      out->horizons[i] = m.horizons_.horizon(i);
      out->var_h[i] = m.horizons_.SummedVariance(i, v_next);
    }
  } else if (nh > 0) {
    // Higher orders: the exact recursion into a stack buffer (no allocation).
    double path[kMaxHorizonBars];
    const int hmax = m.max_horizon_;
    ForecastVariances(m.params_, state->var, absl::Span<double>(path, hmax));
    double cum = 0;
    int next = 0;
    for (int h = 1; h <= hmax && next < nh; ++h) {
      cum += path[h - 1];
      while (next < nh && m.horizons_.horizon(next) == h) {
        out->horizons[next] = h;
        out->var_h[next] = cum;
        ++next;
      }
    }
  }
  const int nl = m.risk_.size();
  out->n_levels = nl;
  const double mu_next = state->mu_next;
  for (int i = 0; i < nl; ++i) {
    out->levels[i] = m.risk_.level(i);
    out->var_risk[i] = m.risk_.VaR(i, mu_next, sd_next);
    out->es[i] = m.risk_.ES(i, mu_next, sd_next);
  }
  out->scale = std::min(m.scale_cap_, m.scale_num_ / sd_next);
  out->ver = m.version_;
}

void SeasonalizeUpdate(const FilterModel& m, const FilterState& state, double r, double s2_now,
                       const SeasonalAhead& ahead, BarUpdate* out) {
  const double s_now = std::sqrt(s2_now);
  out->r = r;
  out->mu *= s_now;
  out->eps *= s_now;
  out->var *= s2_now;
  const double h_next = state.var.next_variance;
  const double* cycle = ahead.cycle();
  const int period = ahead.period();
  const double f_next = cycle[ahead.start()];
  const double v_next = f_next * h_next;
  const double sd_next = std::sqrt(v_next);
  out->var_next = v_next;
  out->vol_ann = sd_next * m.sqrt_ppy_;
  const int nh = m.horizons_.size();
  if (nh > 0) {
    const int hmax = m.max_horizon_;
    double path[kMaxHorizonBars];
    if (m.horizons_.closed()) {
      // E h_{T+j} = sbar2 + phi^(j-1) (h_next - sbar2); flat when phi >= 1.
      const bool flat = !(m.phi_ < 1);
      double p = 1;
      for (int j = 0; j < hmax; ++j) {
        path[j] = flat ? h_next : m.sbar2_ + p * (h_next - m.sbar2_);
        p *= m.phi_;
      }
    } else {
      ForecastVariances(m.params_, state.var, absl::Span<double>(path, hmax));
    }
    double cum = 0;
    int next = 0;
    int q = ahead.start();  // the cycle index of bar h ahead, h = 1 first
    for (int h = 1; h <= hmax && next < nh; ++h) {
      cum += cycle[q] * path[h - 1];
      if (++q == period) q = 0;
      while (next < nh && m.horizons_.horizon(next) == h) out->var_h[next++] = cum;
    }
  }
  const double s_next = std::sqrt(f_next);
  const double mu_next = state.mu_next * s_next;
  for (int i = 0; i < m.risk_.size(); ++i) {
    out->var_risk[i] = m.risk_.VaR(i, mu_next, sd_next);
    out->es[i] = m.risk_.ES(i, mu_next, sd_next);
  }
  out->scale = std::min(m.scale_cap_, m.scale_num_ / sd_next);
}

std::vector<BarUpdate> FilterSeries(const FilterModel& model, double initial_variance,
                                    absl::Span<const double> returns) {
  FilterState state;
  InitFilterState(model, initial_variance, &state);
  std::vector<BarUpdate> out(returns.size());
  for (size_t i = 0; i < returns.size(); ++i) FilterStep(model, &state, returns[i], &out[i]);
  return out;
}

}  // namespace aftershock

namespace aftershock {

// The encoding is every field in declaration order, 8 bytes each, which is
// exactly the struct's layout (checked here), so a state is written with one
// copy (a live checkpoint writes 10,000 of them per period).
static_assert(offsetof(FilterState, eps_hist) == 8 * kMaxArmaOrder &&
                  offsetof(FilterState, var) == 16 * kMaxArmaOrder &&
                  offsetof(VarianceState, eps2) == 8 &&
                  offsetof(VarianceState, neg_eps2) == 8 + 8 * kMaxArchOrder &&
                  offsetof(VarianceState, sigma2) == 8 + 8 * (kMaxArchOrder + kMaxGarchOrder) &&
                  sizeof(VarianceState) == 8 * (1 + kMaxArchOrder + 2 * kMaxGarchOrder) &&
                  offsetof(FilterState, sd_next) == 16 * kMaxArmaOrder + sizeof(VarianceState) &&
                  offsetof(FilterState, mu_next) == offsetof(FilterState, sd_next) + 8 &&
                  offsetof(FilterState, bars) == offsetof(FilterState, sd_next) + 16 &&
                  sizeof(FilterState) == offsetof(FilterState, bars) + 8,
              "FilterState is no longer laid out as its checkpoint encoding");

void SaveFilterState(const FilterState& s, StateWriter* w) {
  w->Append(absl::string_view(reinterpret_cast<const char*>(&s), sizeof s));
}

FilterState RestoreFilterState(StateReader* r, absl::string_view what) {
  FilterState s;
  const std::string f = absl::StrCat(what, " filter state");
  bool finite = true;
  auto read = [&](double* v) {
    *v = r->F64(f);
    finite = finite && std::isfinite(*v);
  };
  for (double& v : s.r_hist) read(&v);
  for (double& v : s.eps_hist) read(&v);
  read(&s.var.next_variance);
  for (double& v : s.var.eps2) read(&v);
  for (double& v : s.var.neg_eps2) read(&v);
  for (double& v : s.var.sigma2) read(&v);
  read(&s.sd_next);
  read(&s.mu_next);
  s.bars = r->I64(f);
  if (!r->ok()) return s;
  if (!finite) {
    r->Fail(f, "a non-finite value");
  } else if (s.var.next_variance < 0 || s.sd_next < 0 || s.bars < 0) {
    r->Fail(f, "a negative variance or count");
  }
  return s;
}

}  // namespace aftershock
