#include "aftershock/identify.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "aftershock/likelihood.h"
#include "aftershock/stats.h"
#include "estimation/estimator_internal.h"
#include "estimation/identify_internal.h"

namespace aftershock {
namespace {

double Criterion(InfoCriterion c, double aic, double bic) {
  return c == InfoCriterion::kAic ? aic : bic;
}
const char* CriterionName(InfoCriterion c) { return c == InfoCriterion::kAic ? "AIC" : "BIC"; }

TestOutcome Outcome(std::string name, double stat, double df, double p, double level,
                    std::string meaning) {
  TestOutcome t;
  t.name = std::move(name);
  t.statistic = stat;
  t.df = df;
  t.p_value = p;
  t.rejected = p < level;
  t.meaning = std::move(meaning);
  return t;
}

// The GARCH-family spec with the step-1 mean and the given variance part.
ModelSpec WithVariance(int p, int q, VarianceKind v, int na, int no, int nb, Innovations law) {
  ModelSpec s;
  s.mean = (p == 0 && q == 0) ? MeanKind::kConstant : MeanKind::kArma;
  s.ar_order = p;
  s.ma_order = q;
  s.variance = v;
  s.arch_order = na;
  s.asym_order = no;
  s.garch_order = nb;
  s.innovations = law;
  return s;
}

// Start vector for `spec` whose mean block is the step-1 estimate (converted
// from the ARMA module's mean form to the intercept form of likelihood.h; held
// fixed in the two-step fit) and whose variance block is a typical start.
ModelParams MeanStart(const ModelSpec& spec, const ArmaParams& arma) {
  ModelParams p{spec, std::vector<double>(spec.NumParams(), 0.0)};
  double ar_sum = 0;
  for (double a : arma.ar) ar_sum += a;
  p.values[0] = arma.mu * (1.0 - ar_sum);
  for (int i = 0; i < spec.ar_order; ++i) p.values[1 + i] = arma.ar[i];
  for (int i = 0; i < spec.ma_order; ++i) p.values[1 + spec.ar_order + i] = arma.ma[i];
  const int v0 = spec.VarianceOffset();
  // Typical values inside the constraints, the first start of the fit (the
  // estimator falls back to its grid of cold starts if a fit from here fails):
  // persistence 0.98 with GARCH terms, 0.3 for a pure ARCH.
  const int na = spec.arch_order, no = spec.asym_order, nb = spec.garch_order;
  if (spec.variance == VarianceKind::kConstant) {
    p.values[v0] = arma.sigma2;
  } else {
    const double a_total = nb > 0 ? 0.08 : 0.3, b_total = nb > 0 ? 0.9 : 0.0;
    p.values[v0] = arma.sigma2 * (1.0 - a_total - b_total);
    for (int i = 0; i < na; ++i) p.values[v0 + 1 + i] = (no > 0 ? 0.5 : 1.0) * a_total / na;
    for (int i = 0; i < no; ++i) p.values[v0 + 1 + na + i] = a_total / no;
    for (int j = 0; j < nb; ++j) p.values[v0 + 1 + na + no + j] = b_total / nb;
  }
  if (spec.innovations == Innovations::kStudentT) p.values[spec.DistOffset()] = 8.0;
  return p;
}

std::vector<double> Standardized(absl::Span<const double> residuals,
                                 absl::Span<const double> sigma2) {
  std::vector<double> z(residuals.size());
  for (size_t i = 0; i < z.size(); ++i) z[i] = residuals[i] / std::sqrt(sigma2[i]);
  return z;
}

// Ljung-Box on z and z^2 and ARCH-LM on z, appended to *out_tests.
void AddGateTests(const std::vector<double>& z, int mean_dof, const IdentifyOptions& options,
                  std::vector<TestOutcome>* out_tests) {
  std::vector<TestOutcome>& out = *out_tests;
  const double lvl = options.level;
  const int lags = options.lags;
  if (auto lb = LjungBox(z, lags, std::min(mean_dof, lags - 1)); lb.ok()) {
    out.push_back(Outcome(absl::StrCat("Ljung-Box(", lags, ") on z"), lb->statistic, lb->df,
                          lb->p_value, lvl,
                          "autocorrelation left in the standardized residuals: the mean "
                          "equation is missing terms"));
  }
  if (auto ml = McLeodLi(z, lags, 0); ml.ok()) {
    out.push_back(Outcome(absl::StrCat("Ljung-Box(", lags, ") on z^2"), ml->statistic, ml->df,
                          ml->p_value, lvl,
                          "volatility clustering left in z: the variance equation is too small"));
  }
  if (auto lm = ArchLm(z, options.arch_lm_lags); lm.ok()) {
    out.push_back(Outcome(absl::StrCat("ARCH-LM(", options.arch_lm_lags, ") on z"),
                          lm->lm_statistic, lm->lags, lm->lm_p_value, lvl,
                          "remaining ARCH effect in z"));
  }
}

}  // namespace

std::vector<TestOutcome> GateResidualDiagnostics(absl::Span<const double> residuals,
                                                 absl::Span<const double> sigma2, int mean_dof,
                                                 const IdentifyOptions& options) {
  std::vector<TestOutcome> out;
  AddGateTests(Standardized(residuals, sigma2), mean_dof, options, &out);
  return out;
}

std::vector<TestOutcome> StandardizedResidualDiagnostics(absl::Span<const double> residuals,
                                                         absl::Span<const double> sigma2,
                                                         int mean_dof,
                                                         const IdentifyOptions& options) {
  std::vector<TestOutcome> out;
  const std::vector<double> z = Standardized(residuals, sigma2);
  AddGateTests(z, mean_dof, options, &out);
  const double lvl = options.level;
  if (auto sb = SignBias(z); sb.ok()) {
    out.push_back(Outcome("Engle-Ng sign bias (joint)", sb->joint_statistic, 3,
                          sb->joint_p_value, lvl,
                          "the response of the variance to negative and positive shocks is "
                          "misspecified (asymmetry)"));
  }
  if (auto jb = JarqueBera(z); jb.ok()) {
    out.push_back(Outcome("Jarque-Bera on z", jb->statistic, 2, jb->p_value, lvl,
                          absl::StrFormat("z is not normal (skewness %.3f, kurtosis %.3f)",
                                          jb->skewness, jb->kurtosis)));
  }
  return out;
}

absl::StatusOr<IdentificationReport> IdentifyModel(absl::Span<const double> returns,
                                                   const IdentifyOptions& options) {
  return internal::IdentifyModelWithSearch(returns, options, internal::IdentifySearch());
}

namespace internal {

absl::StatusOr<IdentificationReport> IdentifyModelWithSearch(absl::Span<const double> returns,
                                                             const IdentifyOptions& options,
                                                             const IdentifySearch& search) {
  if (auto s = ValidateReturns(returns, kMinIdentifyObservations); !s.ok()) return s;
  if (options.max_ar < 0 || options.max_ar > kMaxArmaOrder || options.max_ma < 0 ||
      options.max_ma > kMaxArmaOrder) {
    return absl::InvalidArgumentError(
        absl::StrCat("max mean orders must be in 0..", kMaxArmaOrder));
  }
  if (options.max_arch_order < 1 || options.max_arch_order > kMaxArchOrder) {
    return absl::InvalidArgumentError(
        absl::StrCat("max ARCH order must be in 1..", kMaxArchOrder));
  }
  if (options.lags < 2 || options.arch_lm_lags < 1) {
    return absl::InvalidArgumentError("lags must be >= 2 and ARCH-LM lags >= 1");
  }
  if (!(options.level > 0 && options.level < 0.5)) {
    return absl::InvalidArgumentError("significance level must be in (0, 0.5)");
  }
  IdentificationReport rep;
  rep.options = options;
  rep.nobs = static_cast<int>(returns.size());
  const char* crit = CriterionName(options.criterion);

  // ---- Step 1: mean order --------------------------------------------------
  auto sel = SelectArmaOrder(returns, options.max_ar, options.max_ma, options.criterion);
  if (!sel.ok()) return sel.status();
  rep.mean_candidates = sel->candidates;
  rep.ar_order = sel->best.params.p();
  rep.ma_order = sel->best.params.q();
  rep.mean_decision =
      (rep.ar_order == 0 && rep.ma_order == 0)
          ? absl::StrFormat("constant mean: ARMA(0,0) has the lowest %s among %d candidates",
                            crit, static_cast<int>(sel->candidates.size()))
          : absl::StrFormat("ARMA(%d,%d) has the lowest %s among %d candidates", rep.ar_order,
                            rep.ma_order, crit, static_cast<int>(sel->candidates.size()));
  const std::vector<double>& e = sel->best.residuals;

  // ---- Step 2: ARCH-effect tests -------------------------------------------
  std::vector<double> e2(e.size());
  for (size_t i = 0; i < e.size(); ++i) e2[i] = e[i] * e[i];
  bool lm_rejects = false;
  if (auto lm = ArchLm(e, options.arch_lm_lags); lm.ok()) {
    auto t = Outcome(absl::StrCat("ARCH-LM(", options.arch_lm_lags, ") on residuals"),
                     lm->lm_statistic, lm->lags, lm->lm_p_value, options.level,
                     "the squared residuals are predictable from their past: ARCH effect");
    lm_rejects = t.rejected;
    rep.arch_tests.push_back(t);
    rep.arch_tests.push_back(Outcome(
        absl::StrCat("ARCH-LM(", options.arch_lm_lags, ") F form"), lm->f_statistic, lm->f_df1,
        lm->f_p_value, options.level, "same hypothesis, small-sample F reference"));
  } else {
    rep.warnings.push_back(absl::StrCat("ARCH-LM test not computed: ", lm.status().message()));
  }
  if (auto ml = McLeodLi(e, options.lags, 0); ml.ok()) {
    rep.arch_tests.push_back(Outcome(absl::StrCat("Ljung-Box(", options.lags, ") on residuals^2"),
                                     ml->statistic, ml->df, ml->p_value, options.level,
                                     "the squared residuals are autocorrelated"));
  }
  if (auto pacf = PartialAutocorrelation(e2, options.lags); pacf.ok()) {
    rep.squared_residual_pacf.assign(pacf->begin() + 1, pacf->end());
  }
  rep.arch_effect = lm_rejects;
  rep.arch_decision =
      lm_rejects ? absl::StrFormat("ARCH effect present: ARCH-LM p = %.3g < %.3g",
                                   rep.arch_tests[0].p_value, options.level)
      : rep.arch_tests.empty()
          ? "no ARCH-LM test possible: constant variance assumed"
          : absl::StrFormat("no ARCH effect found: ARCH-LM p = %.3g >= %.3g; %s",
                            rep.arch_tests[0].p_value, options.level,
                            options.weak_evidence_aic
                                ? "constant variance and GARCH(1,1) are compared by AIC"
                                : "a constant-variance model is used");

  // ---- Steps 3-4: variance family by the criterion, mean fixed -------------
  const int p = rep.ar_order, q = rep.ma_order;
  std::vector<ModelSpec> specs;
  std::vector<Innovations> laws = {Innovations::kNormal};
  if (options.try_student_t) laws.push_back(Innovations::kStudentT);
  // Weak evidence (no ARCH effect found): constant variance against GARCH(1,1), by AIC.
  const bool weak = !rep.arch_effect && options.weak_evidence_aic;
  if (rep.arch_effect) {
    for (Innovations law : laws) {
      for (int m = 1; m <= options.max_arch_order; ++m) {
        specs.push_back(WithVariance(p, q, VarianceKind::kArch, m, 0, 0, law));
      }
      specs.push_back(WithVariance(p, q, VarianceKind::kGarch, 1, 0, 1, law));
      specs.push_back(WithVariance(p, q, VarianceKind::kGarch, 1, 0, 2, law));
      specs.push_back(WithVariance(p, q, VarianceKind::kGarch, 2, 0, 1, law));
      specs.push_back(WithVariance(p, q, VarianceKind::kGjr, 1, 1, 1, law));
    }
  } else {
    for (Innovations law : laws) {
      specs.push_back(WithVariance(p, q, VarianceKind::kConstant, 0, 0, 0, law));
      if (weak) specs.push_back(WithVariance(p, q, VarianceKind::kGarch, 1, 0, 1, law));
    }
  }
  int best = -1;
  std::vector<FitResult> fits(specs.size());
  rep.variance_candidates.resize(specs.size());
  const size_t per_law = specs.size() / laws.size();  // specs are law-major
  // The residuals of the step-1 mean are the same for every candidate (the
  // mean is held fixed): computed once.
  std::vector<double> mean_residuals;
  {
    LikelihoodOptions lo;
    lo.gradient = false;
    lo.series = true;
    lo.presample = options.presample;
    auto ev = EvaluateLikelihood(MeanStart(specs[0], sel->best.params), returns, lo);
    if (!ev.ok()) return ev.status();
    mean_residuals = std::move(ev->residuals);
  }
  // Fitting order within a law: every candidate that nests an ARCH(m) before
  // it, the largest ARCH first. An ARCH(m) then has an upper bound on its
  // log-likelihood, the smallest of the fitted models that nest it
  // (ARCH(m') with m' > m; GARCH(1,1), GARCH(1,2) and GJR-GARCH(1,1) for m = 1;
  // GARCH(2,1) for m = 2), hence a lower bound on its criterion; it is not
  // fitted when that bound exceeds the best eligible criterion so far by more
  // than kPruneMargin (slack for optimizer tolerance), since it cannot win.
  constexpr double kPruneMargin = 10.0;
  std::vector<size_t> order;
  for (size_t l = 0; l < laws.size(); ++l) {
    std::vector<size_t> arch;
    for (size_t j = 0; j < per_law; ++j) {
      const size_t i = l * per_law + j;
      if (specs[i].variance == VarianceKind::kArch) {
        arch.push_back(i);
      } else {
        order.push_back(i);
      }
    }
    std::sort(arch.begin(), arch.end(),
              [&](size_t x, size_t y) { return specs[x].arch_order > specs[y].arch_order; });
    order.insert(order.end(), arch.begin(), arch.end());
  }
  auto nests = [](const ModelSpec& big, const ModelSpec& small) {
    if (small.variance != VarianceKind::kArch || big.innovations != small.innovations) {
      return false;
    }
    const int m = small.arch_order;
    switch (big.variance) {
      case VarianceKind::kArch:
        return big.arch_order >= m;
      case VarianceKind::kGarch:
        return big.arch_order >= m;  // beta = 0
      case VarianceKind::kGjr:
        return big.arch_order >= m;  // gamma = beta = 0
      default:
        return false;
    }
  };
  const double log_n = std::log(static_cast<double>(mean_residuals.size()));
  for (size_t i : order) {
    VarianceCandidateResult& c = rep.variance_candidates[i];
    c.spec = specs[i];
    if (search.prune_nested_arch && specs[i].variance == VarianceKind::kArch && rep.arch_effect) {
      double ll_bound = std::numeric_limits<double>::infinity();
      int bound_from = -1;
      double best_crit = std::numeric_limits<double>::infinity();
      for (size_t j = 0; j < specs.size(); ++j) {
        const VarianceCandidateResult& o = rep.variance_candidates[j];
        if (!o.ok) continue;
        if (o.eligible) best_crit = std::min(best_crit, o.criterion);
        if (nests(specs[j], specs[i]) && o.loglik < ll_bound) {
          ll_bound = o.loglik;
          bound_from = static_cast<int>(j);
        }
      }
      const int k =
          1 + specs[i].arch_order + (specs[i].innovations == Innovations::kStudentT ? 1 : 0);
      const double crit_bound =
          Criterion(options.criterion, -2.0 * ll_bound + 2.0 * k, -2.0 * ll_bound + k * log_n);
      if (bound_from >= 0 && crit_bound > best_crit + kPruneMargin) {
        c.error = absl::StrFormat(
            "not fitted: nested in %s (log-likelihood %.3f), so its %s is at least %.3f, "
            "above the best %.3f",
            specs[bound_from].Label(), ll_bound, crit, crit_bound, best_crit);
        continue;
      }
    }
    FitOptions fo;
    fo.presample = options.presample;
    fo.start = MeanStart(specs[i], sel->best.params);
    // A Student-t candidate starts from the normal fit of the same variance
    // equation (nu = 8): the variance parameters rarely move far.
    if (specs[i].innovations == Innovations::kStudentT && i >= per_law &&
        rep.variance_candidates[i - per_law].ok) {
      const std::vector<double>& v = fits[i - per_law].params.values;
      std::copy(v.begin(), v.end(), fo.start->values.begin());
      fo.start->values.back() = 8.0;
    }
    fo.fix_mean = true;
    fo.std_errors = false;
    // Ranking needs the criterion to ~1e-6 nats, not 1e-11: looser tolerances
    // here, full precision in the warm-started re-fit of the chosen model.
    fo.ftol_rel = 1e-8;
    fo.xtol_rel = 1e-6;
    auto fit = internal::FitOnFixedMeanResiduals(specs[i], mean_residuals, fo);
    if (!fit.ok()) {
      c.error = std::string(fit.status().message());
    } else {
      c.ok = fit->converged;
      if (!c.ok) c.error = absl::StrCat("did not converge (", fit->optimizer_message, ")");
      c.loglik = fit->loglik;
      c.aic = fit->aic;
      c.bic = fit->bic;
      c.num_params = fit->num_estimated;
      c.criterion = Criterion(options.criterion, c.aic, c.bic);
      const double pers = fit->params.Persistence();
      c.eligible = c.ok && pers < options.max_persistence;
      if (c.ok && !c.eligible) {
        c.error = absl::StrFormat("persistence %.5f is not below the admissible %.5g", pers,
                                  options.max_persistence);
      }
      fits[i] = *std::move(fit);
    }
  }
  // The best eligible candidate; if none is eligible, the best converged one.
  for (int pass = 0; pass < 2 && best < 0; ++pass) {
    for (size_t i = 0; i < rep.variance_candidates.size(); ++i) {
      const auto& c = rep.variance_candidates[i];
      if (!(pass == 0 ? c.eligible : c.ok)) continue;
      const auto& b = rep.variance_candidates[best < 0 ? 0 : best];
      if (best < 0 || (weak ? c.aic < b.aic : c.criterion < b.criterion)) {
        best = static_cast<int>(i);
      }
    }
    if (pass == 0 && best < 0 && !rep.variance_candidates.empty()) {
      rep.warnings.push_back(
          "no variance candidate has an admissible persistence; the best by the criterion is "
          "kept");
    }
  }
  if (best < 0) {
    return absl::FailedPreconditionError(
        "no variance candidate could be fitted to this window (every fit failed)");
  }
  const ModelSpec chosen = specs[best];
  rep.variance_decision =
      rep.arch_effect
          ? absl::StrFormat("%s has the lowest %s (%.3f) among %d candidates", chosen.Label(),
                            crit, rep.variance_candidates[best].criterion,
                            static_cast<int>(specs.size()))
      : weak
          ? absl::StrFormat("no ARCH effect found; weak-evidence rule: %s has the lowest AIC "
                            "(%.3f) among constant variance and GARCH(1,1)",
                            chosen.Label(), rep.variance_candidates[best].aic)
          : absl::StrFormat("no ARCH effect: %s chosen by %s", chosen.Label(), crit);
  // Re-fit the chosen two-step model with standard errors.
  {
    FitOptions fo;
    fo.presample = options.presample;
    fo.start = fits[best].params;
    fo.fix_mean = true;
    fo.keep_series = true;
    auto fit = FitModel(chosen, returns, fo);
    if (!fit.ok()) return fit.status();
    rep.two_step = *std::move(fit);
  }
  rep.diagnostics_two_step = StandardizedResidualDiagnostics(
      rep.two_step.residuals, rep.two_step.sigma2, p + q, options);

  // ---- Step 6: joint MLE from the two-step estimates -----------------------
  {
    FitOptions fo;
    fo.presample = options.presample;
    fo.start = rep.two_step.params;
    fo.keep_series = true;
    auto fit = FitModel(chosen, returns, fo);
    if (fit.ok() && fit->converged && fit->loglik >= rep.two_step.loglik - 1e-6) {
      rep.final_fit = *std::move(fit);
      rep.joint_decision = absl::StrFormat(
          "joint MLE of mean and variance converged; log-likelihood %.4f (two-step %.4f)",
          rep.final_fit.loglik, rep.two_step.loglik);
    } else {
      rep.final_fit = rep.two_step;
      rep.joint_decision =
          fit.ok() ? absl::StrCat("joint MLE did not improve on the two-step fit (",
                                  fit->optimizer_message, "); the two-step estimates are kept")
                   : absl::StrCat("joint MLE failed (", fit.status().message(),
                                  "); the two-step estimates are kept");
      rep.warnings.push_back(rep.joint_decision);
    }
  }
  rep.diagnostics = StandardizedResidualDiagnostics(rep.final_fit.residuals,
                                                    rep.final_fit.sigma2, p + q, options);
  rep.diagnostics_pass = true;
  for (const auto& d : rep.diagnostics) {
    // Normality is informative only (fat tails are expected); the dependence
    // tests decide.
    if (d.rejected && d.name.rfind("Jarque-Bera", 0) != 0) {
      rep.diagnostics_pass = false;
      rep.warnings.push_back(absl::StrFormat("diagnostic failed: %s (p = %.3g): %s", d.name,
                                             d.p_value, d.meaning));
    }
  }
  for (const auto& w : rep.final_fit.warnings) rep.warnings.push_back(w);
  return rep;
}

}  // namespace internal
}  // namespace aftershock
