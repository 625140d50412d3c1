#include "aftershock/estimator.h"

#include <nlopt.h>

#include <Eigen/Dense>
#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <numeric>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "aftershock/likelihood.h"
#include "estimation/estimator_internal.h"
#include "estimation/likelihood_kernel.h"

namespace aftershock {
namespace {

constexpr double kInfeasibleObjective = 1e10;
// nu tried, the other parameters kept, when a fit ends with nu on its upper
// bound: tails from slightly heavier than Gaussian to heavy (150 catches the
// maxima at nu 100-220 of nearly Gaussian windows: estimator_test).
constexpr double kInteriorNuProbes[] = {150.0, 60.0, 20.0, 8.0};
// A fit whose nu ends above this is taken to be at the bound for that test
// (SLSQP on the flat likelihood stops short of it: 499.3 on t(8) data).
constexpr double kNearMaxNu = 0.9 * kMaxNu;

// Everything the NLopt callbacks need. Works on the scaled data.
struct Problem {
  internal::LikelihoodKernel* kernel = nullptr;
  std::vector<int> free_idx;    // indices of estimated params in the full vector
  std::vector<double> full;     // full scaled parameter vector (fixed entries set)
  std::vector<double> grad_full;
  std::vector<int> persist_idx;      // full indices entering the persistence sum
  std::vector<double> persist_coef;  // their coefficients (1, or 0.5 for gamma)
  int evals = 0;
};

double Objective(unsigned n, const double* x, double* grad, void* data) {
  auto* p = static_cast<Problem*>(data);
  ++p->evals;
  for (unsigned i = 0; i < n; ++i) p->full[p->free_idx[i]] = x[i];
  const double ll = p->kernel->Evaluate(p->full.data(), grad ? p->grad_full.data() : nullptr,
                                        nullptr);
  const double scale = 1.0 / p->kernel->nobs();
  if (!std::isfinite(ll)) {
    if (grad) std::fill(grad, grad + n, 0.0);
    return kInfeasibleObjective;
  }
  if (grad) {
    for (unsigned i = 0; i < n; ++i) grad[i] = -p->grad_full[p->free_idx[i]] * scale;
  }
  return -ll * scale;
}

// persistence(x) - kOptimizerMaxPersistence <= 0.
double PersistenceConstraint(unsigned n, const double* x, double* grad, void* data) {
  auto* p = static_cast<Problem*>(data);
  if (grad) std::fill(grad, grad + n, 0.0);
  double s = -kOptimizerMaxPersistence;
  for (size_t j = 0; j < p->persist_idx.size(); ++j) {
    const int full_i = p->persist_idx[j];
    for (unsigned i = 0; i < n; ++i) {
      if (p->free_idx[i] == full_i) {
        s += p->persist_coef[j] * x[i];
        if (grad) grad[i] = p->persist_coef[j];
      }
    }
  }
  return s;
}

struct RunOutcome {
  std::vector<double> x;
  double objective = std::numeric_limits<double>::infinity();
  nlopt_result code = NLOPT_FAILURE;
};

bool Succeeded(nlopt_result r) {
  return r == NLOPT_SUCCESS || r == NLOPT_FTOL_REACHED || r == NLOPT_XTOL_REACHED ||
         r == NLOPT_STOPVAL_REACHED;
}

// A run that ended on a success code at a finite, feasible objective.
bool Usable(const RunOutcome& run) {
  return Succeeded(run.code) && std::isfinite(run.objective) &&
         run.objective < kInfeasibleObjective;
}

const char* ResultName(nlopt_result r) {
  switch (r) {
    case NLOPT_SUCCESS: return "success";
    case NLOPT_STOPVAL_REACHED: return "stop value reached";
    case NLOPT_FTOL_REACHED: return "objective tolerance reached";
    case NLOPT_XTOL_REACHED: return "parameter tolerance reached";
    case NLOPT_MAXEVAL_REACHED: return "evaluation limit reached";
    case NLOPT_MAXTIME_REACHED: return "time limit reached";
    case NLOPT_ROUNDOFF_LIMITED: return "stopped by round-off";
    case NLOPT_FORCED_STOP: return "forced stop";
    case NLOPT_OUT_OF_MEMORY: return "out of memory";
    case NLOPT_INVALID_ARGS: return "invalid arguments";
    default: return "failure";
  }
}

RunOutcome RunOptimizer(nlopt_algorithm algo, Problem* prob, const std::vector<double>& lb,
                        const std::vector<double>& ub, std::vector<double> x0,
                        const FitOptions& options) {
  const unsigned n = static_cast<unsigned>(x0.size());
  RunOutcome out;
  nlopt_opt opt = nlopt_create(algo, n);
  if (opt == nullptr) return out;
  nlopt_set_lower_bounds(opt, lb.data());
  nlopt_set_upper_bounds(opt, ub.data());
  nlopt_set_min_objective(opt, Objective, prob);
  if (!prob->persist_idx.empty()) {
    nlopt_add_inequality_constraint(opt, PersistenceConstraint, prob, 1e-12);
  }
  nlopt_set_ftol_rel(opt, options.ftol_rel);
  nlopt_set_xtol_rel(opt, options.xtol_rel);
  nlopt_set_maxeval(opt, options.max_evaluations);
  if (algo == NLOPT_LN_COBYLA) {
    std::vector<double> step(n);
    for (unsigned i = 0; i < n; ++i) step[i] = std::max(1e-4, 0.05 * std::fabs(x0[i]));
    nlopt_set_initial_step(opt, step.data());
  }
  for (unsigned i = 0; i < n; ++i) x0[i] = std::clamp(x0[i], lb[i], ub[i]);
  double f = 0;
  out.code = nlopt_optimize(opt, x0.data(), &f);
  nlopt_destroy(opt);
  out.x = std::move(x0);
  out.objective = f;
  return out;
}

// Shared pieces of the Newton refinements below (same arithmetic, in the same
// order, as when each routine had its own copy).

// True when every free parameter of th lies strictly inside its bounds and the
// persistence cap holds. With `held` (one entry per free parameter: 0 moving,
// -1 held at its lower bound, +1 at its upper bound), a held parameter must be
// exactly at its bound instead.
bool StrictlyFeasible(const Problem& prob, const std::vector<double>& lb,
                      const std::vector<double>& ub, const std::vector<double>& th,
                      const std::vector<int>* held = nullptr) {
  const int nf = static_cast<int>(prob.free_idx.size());
  for (int a = 0; a < nf; ++a) {
    const double x = th[prob.free_idx[a]];
    const int h = held == nullptr ? 0 : (*held)[a];
    if (h == 0 ? !(x > lb[a] && x < ub[a]) : x != (h < 0 ? lb[a] : ub[a])) return false;
  }
  double pers = 0;
  for (size_t j = 0; j < prob.persist_idx.size(); ++j) {
    pers += prob.persist_coef[j] * th[prob.persist_idx[j]];
  }
  return pers <= kOptimizerMaxPersistence;
}

// The largest free gradient component, times inv_n (per observation).
double FreeGradientMax(const Problem& prob, const std::vector<double>& grad, double inv_n) {
  double m = 0;
  for (size_t a = 0; a < prob.free_idx.size(); ++a) {
    m = std::max(m, std::fabs(grad[prob.free_idx[a]]) * inv_n);
  }
  return m;
}

// Gathers the gradient g_m and -H_mm of the moving free parameters (free
// positions in `moving`) from the full K-vector g and the row-major K x K
// Hessian h.
void GatherMoving(const Problem& prob, int K, const std::vector<int>& moving,
                  const std::vector<double>& g, const std::vector<double>& h, Eigen::VectorXd& gm,
                  Eigen::MatrixXd& neg_h) {
  const int nm = static_cast<int>(moving.size());
  for (int i = 0; i < nm; ++i) {
    const int fi = prob.free_idx[moving[i]];
    gm[i] = g[fi];
    for (int j = 0; j < nm; ++j) {
      neg_h(i, j) = -h[static_cast<size_t>(fi) * K + prob.free_idx[moving[j]]];
    }
  }
}

// The bounds a start sits on: per free position 0 (inside), -1 (on lb) or +1
// (on ub). A value within 1e-12 (relative) of a bound counts as on it and is
// set to it exactly: a previous fit that ended on a bound may carry the
// bound's value to round-off only (SLSQP's 499.99999999999994 for nu = 500).
std::vector<int> HeldAtStart(const Problem& prob, const std::vector<double>& lb,
                             const std::vector<double>& ub, std::vector<double>& theta) {
  const int nf = static_cast<int>(prob.free_idx.size());
  std::vector<int> held(nf, 0);
  for (int a = 0; a < nf; ++a) {
    double& x = theta[prob.free_idx[a]];
    if (std::fabs(x - lb[a]) <= 1e-12 * std::max(1.0, std::fabs(lb[a]))) {
      x = lb[a];
      held[a] = -1;
    } else if (std::fabs(x - ub[a]) <= 1e-12 * std::max(1.0, std::fabs(ub[a]))) {
      x = ub[a];
      held[a] = 1;
    }
  }
  return held;
}

// The largest gradient component per observation of the moving free
// parameters (held[a] == 0), and in *inward the largest by which a held
// one's points back into the bounds (0 if none does).
double MovingGradientMax(const Problem& prob, const std::vector<int>& held,
                         const std::vector<double>& grad, double inv_n, double* inward,
                         int* inward_at) {
  double m = 0;
  *inward = 0;
  *inward_at = -1;
  for (size_t a = 0; a < held.size(); ++a) {
    const double ga = grad[prob.free_idx[a]] * inv_n;
    if (held[a] == 0) {
      m = std::max(m, std::fabs(ga));
    } else if ((held[a] < 0 ? ga : -ga) > *inward) {
      *inward = held[a] < 0 ? ga : -ga;
      *inward_at = static_cast<int>(a);
    }
  }
  return m;
}

// Cholesky factor of neg_h, its diagonal damped (Levenberg) in tenfold steps
// from 1e-4 until it is positive definite. False when no damping up to 1e4
// does it; *damped tells whether any was needed.
bool DampedCholesky(const Eigen::MatrixXd& neg_h, double nobs, Eigen::LLT<Eigen::MatrixXd>& llt,
                    bool* damped) {
  const int nf = static_cast<int>(neg_h.rows());
  llt.compute(neg_h);
  *damped = false;
  for (double tau = 1e-4; llt.info() != Eigen::Success; tau *= 10) {
    if (tau > 1e4) return false;
    *damped = true;
    Eigen::MatrixXd m = neg_h;
    for (int a = 0; a < nf; ++a) {
      m(a, a) += tau * std::max(std::fabs(neg_h(a, a)), 1e-8 * nobs);
    }
    llt.compute(m);
  }
  return true;
}

// Armijo backtracking along step from theta: t = t0, t0/2, ... (30 tries),
// skipping points that are not strictly feasible (held parameters, see
// StrictlyFeasible, have a zero step), until evaluate(trial), the
// log-likelihood at trial, rises above ll by 1e-4 t gain (less a round-off
// slack: near the optimum the rise is below the sum's precision). Returns the
// accepted t (trial then holds the point, *ll_accepted its value), or 0 when
// no step is accepted. Counts the evaluations in *evals.
template <typename Evaluate>
double ArmijoSearch(const Problem& prob, const std::vector<double>& lb,
                    const std::vector<double>& ub, const std::vector<double>& theta,
                    const Eigen::VectorXd& step, double gain, double ll, std::vector<double>& trial,
                    int* evals, double* ll_accepted, Evaluate&& evaluate, double t0 = 1.0,
                    const std::vector<int>* held = nullptr) {
  const int nf = static_cast<int>(prob.free_idx.size());
  double t = t0;
  for (int ls = 0; ls < 30; ++ls, t *= 0.5) {
    trial = theta;
    for (int a = 0; a < nf; ++a) trial[prob.free_idx[a]] += t * step[a];
    if (!StrictlyFeasible(prob, lb, ub, trial, held)) continue;
    const double ll_try = evaluate(trial);
    ++*evals;
    if (std::isfinite(ll_try) && ll_try >= ll + 1e-4 * t * gain - 1e-13 * std::fabs(ll)) {
      *ll_accepted = ll_try;
      return t;
    }
  }
  return 0.0;
}

// Newton's method from a warm start on the order-one path (the kernel's
// analytic Hessian), on the free parameters of the scaled problem:
//   step = (-H_ff)^-1 g_f, halved until the point is strictly inside the
//   bounds and the persistence cap and the log-likelihood rises by an Armijo
//   fraction of the predicted gain; converged when the largest free gradient
//   component per observation is <= gtol at an accepted point.
// A pass with the Hessian costs about three with the gradient alone, so near
// the optimum the Hessian is kept (a chord step: the gradient contracts
// linearly at a rate set by how far the Hessian moved, tiny there): trial
// points are evaluated with the gradient only while each full step shrinks the
// gradient at least tenfold, and with the Hessian again otherwise. After a
// slow chord step the Hessian is renewed at that point; when the last step
// taken from a fresh Hessian was fast, the renewed one's step is again
// evaluated with the gradient only (a Newton step there usually contracts
// fast, and a gradient pass costs about a third of a Hessian pass).
// A start on a bound (a warm start from a fit that ended there, e.g. nu at its
// upper bound on nearly Gaussian data) holds that parameter there: the steps
// move the others, and the point converged to counts only if the held
// parameter's gradient does not point back into the bounds by more than gtol.
// Gives up (converged = false) when no damping makes -H_ff positive definite,
// no step is accepted, the iterations run out or a held parameter would move.
struct NewtonOutcome {
  std::vector<double> theta;  // full scaled vector: the converged or best point
  double loglik = -std::numeric_limits<double>::infinity();
  bool converged = false;
  int evals = 0;
  int iterations = 0;
  int held = 0;  // parameters on a bound at convergence
};

NewtonOutcome RefineByNewton(internal::LikelihoodKernel* kernel, const Problem& prob,
                             const std::vector<double>& lb, const std::vector<double>& ub,
                             std::vector<double> theta, int max_iterations, double gtol) {
  NewtonOutcome out;
  const int K = kernel->num_params();
  const int nf = static_cast<int>(prob.free_idx.size());
  // A start on a bound (a warm start from a fit that ended there) holds it.
  const std::vector<int> held = HeldAtStart(prob, lb, ub, theta);
  std::vector<int> moving;
  for (int a = 0; a < nf; ++a) {
    if (held[a] == 0) moving.push_back(a);
  }
  const int nm = static_cast<int>(moving.size());
  if (nm == 0 || !StrictlyFeasible(prob, lb, ub, theta, &held)) return out;
  std::vector<double> g(K), h(static_cast<size_t>(K) * K), g_try(K),
      h_try(static_cast<size_t>(K) * K), trial;
  double ll = kernel->EvaluateHessian(theta.data(), g.data(), h.data(), nullptr);
  ++out.evals;
  if (!std::isfinite(ll)) return out;
  bool h_current = true;  // h was evaluated at theta
  bool chord = true;      // evaluate trial points without the Hessian
  bool fresh_fast = true;  // the last step from a Hessian evaluated at its point was fast
  out.theta = theta;
  out.loglik = ll;
  const double inv_n = 1.0 / kernel->nobs();
  double inward = 0;
  int inward_at = -1;
  auto gradient_max = [&](const std::vector<double>& grad) {
    return MovingGradientMax(prob, held, grad, inv_n, &inward, &inward_at);
  };
  Eigen::VectorXd gf(nm), step(nm), step_free = Eigen::VectorXd::Zero(nf);
  Eigen::MatrixXd neg_h(nm, nm);
  Eigen::LLT<Eigen::MatrixXd> llt(nm);
  double gmax = gradient_max(g);
  for (int it = 0;; ++it) {
    if (gmax <= gtol) {
      // At a Karush-Kuhn-Tucker point only if no held parameter's gradient
      // points back into the bounds; if one does, SLSQP decides.
      out.converged = inward <= gtol;
      out.held = nf - nm;
      return out;
    }
    if (it == max_iterations) return out;
    GatherMoving(prob, K, moving, g, h, gf, neg_h);
    // Away from the maximum -H may be indefinite: damp its diagonal
    // (Levenberg) until it is positive definite, which shortens the step and
    // turns it towards the gradient.
    bool damped_step = false;
    if (!DampedCholesky(neg_h, kernel->nobs(), llt, &damped_step)) return out;
    step = llt.solve(gf);
    const double gain = gf.dot(step);  // predicted rise x 2, > 0
    if (!(gain > 0) || !std::isfinite(gain)) return out;
    for (int i = 0; i < nm; ++i) step_free[moving[i]] = step[i];
    const bool fresh = h_current;
    double ll_try = 0;
    const double t_accepted = ArmijoSearch(
        prob, lb, ub, theta, step_free, gain, ll, trial, &out.evals, &ll_try,
        [&](const std::vector<double>& x) {
          return chord ? kernel->Evaluate(x.data(), g_try.data(), nullptr)
                       : kernel->EvaluateHessian(x.data(), g_try.data(), h_try.data(), nullptr);
        },
        1.0, &held);
    const bool accepted = t_accepted > 0;
    if (accepted) {
      theta.swap(trial);
      g.swap(g_try);
      if (!chord) h.swap(h_try);
      h_current = !chord;
      ll = ll_try;
    }
    if (!accepted && h_current) return out;
    if (accepted) {
      ++out.iterations;
      out.theta = theta;
      out.loglik = ll;
      const double gmax_new = gradient_max(g);
      const bool fast = t_accepted == 1.0 && gmax_new <= 0.1 * gmax;
      if (fresh) fresh_fast = fast;
      gmax = gmax_new;
      if (fast) {
        chord = true;
        continue;
      }
      if (gmax <= gtol) continue;  // converged: no Hessian needed
    }
    // Slow progress (or a stale Hessian that found no step): a fresh Hessian
    // here, and trial points with the Hessian until progress is fast again.
    chord = false;
    if (!h_current) {
      const double ll_h = kernel->EvaluateHessian(theta.data(), g.data(), h.data(), nullptr);
      ++out.evals;
      if (!std::isfinite(ll_h)) return out;
      ll = ll_h;
      h_current = true;
      gmax = gradient_max(g);
      chord = fresh_fast;
    }
  }
}

// Newton's method for the general orders (the kernel's analytic Hessian of a
// zero-mean ARCH/GARCH/GJR model, the variance part of a two-step fit) with
// bounds held: the maximum of such a model often lies on a bound (an extra lag
// whose coefficient is 0), which unconstrained steps never reach.
//   Step (-H_mm)^-1 g_m on the moving (not held) parameters, Levenberg-damped
//   until -H_mm is positive definite. A step that meets a bound goes to the
//   first bound it meets and holds that parameter there, if the
//   log-likelihood rises by an Armijo fraction of the gain predicted to that
//   point; otherwise (and for steps inside the box) halved from there until
//   it does, strictly inside the bounds and the persistence cap.
//   Converged at a Karush-Kuhn-Tucker point: every moving gradient component
//   per observation <= gtol, and no held parameter's component pointing into
//   the box by more than gtol. Before that, the held parameter whose component
//   points inward most is released once the moving ones are small.
//   A Hessian with every step: the general pass costs little more with it than
//   without.
// Gives up (converged = false; SLSQP then runs from the same start) when no
// damping makes -H_mm positive definite, a released parameter's step leaves
// the box at once, no step is accepted or the iterations run out.
NewtonOutcome RefineInsideBounds(internal::LikelihoodKernel* kernel, const Problem& prob,
                                 const std::vector<double>& lb, const std::vector<double>& ub,
                                 std::vector<double> theta, int max_iterations, double gtol) {
  NewtonOutcome out;
  const int K = kernel->num_params();
  const int nf = static_cast<int>(prob.free_idx.size());
  // 0 moving, -1 held at lb, +1 held at ub (free positions). A start on a
  // bound (a warm start from a fit that ended there) holds it.
  std::vector<int> held = HeldAtStart(prob, lb, ub, theta);
  if (nf == 0 || !StrictlyFeasible(prob, lb, ub, theta, &held)) return out;
  std::vector<double> g(K), h(static_cast<size_t>(K) * K), g_try(K),
      h_try(static_cast<size_t>(K) * K), trial;
  double ll = kernel->EvaluateHessian(theta.data(), g.data(), h.data(), nullptr);
  ++out.evals;
  if (!std::isfinite(ll)) return out;
  out.theta = theta;
  out.loglik = ll;
  const double inv_n = 1.0 / kernel->nobs();
  std::vector<int> moving;  // free positions not held
  Eigen::VectorXd step_free(nf);
  Eigen::LLT<Eigen::MatrixXd> llt;
  for (int it = 0;; ++it) {
    double inward = 0;
    int inward_at = -1;
    const double gmax = MovingGradientMax(prob, held, g, inv_n, &inward, &inward_at);
    if (gmax <= gtol) {
      // A held parameter whose gradient points into the box by more than the
      // tolerance is not at its maximum: release the largest such one.
      if (inward <= gtol) {
        out.converged = true;
        out.held = static_cast<int>(nf - std::count(held.begin(), held.end(), 0));
        return out;
      }
      held[inward_at] = 0;
    }
    if (it == max_iterations) return out;
    moving.clear();
    for (int a = 0; a < nf; ++a) {
      if (held[a] == 0) moving.push_back(a);
    }
    const int nm = static_cast<int>(moving.size());
    Eigen::VectorXd gm(nm);
    Eigen::MatrixXd neg_h(nm, nm);
    GatherMoving(prob, K, moving, g, h, gm, neg_h);
    bool damped = false;
    if (!DampedCholesky(neg_h, kernel->nobs(), llt, &damped)) return out;
    const Eigen::VectorXd step = llt.solve(gm);
    const double gain = gm.dot(step);  // predicted rise x 2, > 0
    if (!(gain > 0) || !std::isfinite(gain)) return out;
    step_free.setZero();
    for (int i = 0; i < nm; ++i) step_free[moving[i]] = step[i];
    // The first bound the full step meets, as a fraction of the step.
    double t_hit = 1.0;
    int blocking = -1;  // moving index of the first bound met
    for (int i = 0; i < nm; ++i) {
      const int a = moving[i];
      const double x = theta[prob.free_idx[a]], s = step[i];
      const double t = s < 0 && x + s <= lb[a]   ? (lb[a] - x) / s
                       : s > 0 && x + s >= ub[a] ? (ub[a] - x) / s
                                                 : 2.0;
      if (t <= t_hit) {
        t_hit = t;
        blocking = i;
      }
    }
    if (!(t_hit > 0)) return out;  // a parameter just released leaves the box
    double ll_try = 0;
    double t_accepted = 0;
    if (blocking >= 0) {
      // To the first bound met; the blocking parameter, and any other at or
      // past its bound there to round-off, is held at it.
      std::vector<int> held_try = held;
      trial = theta;
      for (int i = 0; i < nm; ++i) {
        const int a = moving[i];
        double& x = trial[prob.free_idx[a]];
        x += t_hit * step[i];
        if (i == blocking) x = step[i] < 0 ? lb[a] : ub[a];
        if (x <= lb[a]) {
          x = lb[a];
          held_try[a] = -1;
        } else if (x >= ub[a]) {
          x = ub[a];
          held_try[a] = 1;
        }
      }
      if (StrictlyFeasible(prob, lb, ub, trial, &held_try)) {
        ll_try = kernel->EvaluateHessian(trial.data(), g_try.data(), h_try.data(), nullptr);
        ++out.evals;
        // The quadratic model's rise to t is (t - t^2 / 2) gain.
        if (std::isfinite(ll_try) &&
            ll_try >= ll + 1e-4 * (t_hit - 0.5 * t_hit * t_hit) * gain - 1e-13 * std::fabs(ll)) {
          t_accepted = t_hit;
          held.swap(held_try);
        }
      }
    }
    if (!(t_accepted > 0)) {
      t_accepted = ArmijoSearch(
          prob, lb, ub, theta, step_free, gain, ll, trial, &out.evals, &ll_try,
          [&](const std::vector<double>& x) {
            return kernel->EvaluateHessian(x.data(), g_try.data(), h_try.data(), nullptr);
          },
          blocking >= 0 ? 0.5 * t_hit : 1.0, &held);
    }
    if (!(t_accepted > 0)) return out;
    theta.swap(trial);
    g.swap(g_try);
    h.swap(h_try);
    ll = ll_try;
    ++out.iterations;
    out.theta = theta;
    out.loglik = ll;
  }
}

// Newton's method from a warm start where the kernel has no analytic Hessian
// (an ARMA mean with its variance, the joint fit after a two-step one): the
// Hessian by forward differences of the analytic gradient (one gradient pass
// per free parameter), kept while the steps converge fast (a chord method:
// from a start near the optimum the gradient then shrinks by orders of
// magnitude per step) and computed again, at most twice, where they do not.
// Steps are halved until the point is strictly inside the bounds and the
// persistence cap and the log-likelihood rises by an Armijo fraction of the
// predicted gain; converged when the largest free gradient component per
// observation is <= gtol. Gives up (converged = false) when a full step crosses
// a bound (the maximum is probably on it), -H_ff is not positive definite, no
// step is accepted or the iterations run out: SLSQP then runs from the start.
NewtonOutcome RefineByDifferenceNewton(internal::LikelihoodKernel* kernel, const Problem& prob,
                                       const std::vector<double>& lb, const std::vector<double>& ub,
                                       std::vector<double> theta, int max_iterations, double gtol) {
  NewtonOutcome out;
  const int K = kernel->num_params();
  const int nf = static_cast<int>(prob.free_idx.size());
  if (nf == 0 || !StrictlyFeasible(prob, lb, ub, theta)) return out;
  std::vector<double> g(K), g_try(K), g_h(K), trial;
  double ll = kernel->Evaluate(theta.data(), g.data(), nullptr);
  ++out.evals;
  if (!std::isfinite(ll)) return out;
  out.theta = theta;
  out.loglik = ll;
  const double inv_n = 1.0 / kernel->nobs();
  auto gradient_max = [&](const std::vector<double>& grad) {
    return FreeGradientMax(prob, grad, inv_n);
  };
  Eigen::MatrixXd neg_h(nf, nf);
  Eigen::LLT<Eigen::MatrixXd> llt;
  Eigen::VectorXd gf(nf), step(nf);
  // -H_ff at theta by forward differences of the gradient; false where a
  // shifted point is infeasible or -H_ff is not positive definite.
  auto difference_hessian = [&]() {
    for (int b = 0; b < nf; ++b) {
      const int ib = prob.free_idx[b];
      trial = theta;
      const double h = 1e-6 * std::max(std::fabs(theta[ib]), 0.05);
      trial[ib] += h;
      const double lh = kernel->Evaluate(trial.data(), g_h.data(), nullptr);
      ++out.evals;
      if (!std::isfinite(lh)) return false;
      for (int a = 0; a < nf; ++a) neg_h(a, b) = -(g_h[prob.free_idx[a]] - g[prob.free_idx[a]]) / h;
    }
    neg_h = 0.5 * (neg_h + neg_h.transpose()).eval();
    llt.compute(neg_h);
    return llt.info() == Eigen::Success;
  };
  if (!difference_hessian()) return out;
  int hessians_left = 2;
  double gmax = gradient_max(g);
  for (int it = 0;; ++it) {
    if (gmax <= gtol) {
      out.converged = true;
      return out;
    }
    if (it == max_iterations) return out;
    for (int a = 0; a < nf; ++a) gf[a] = g[prob.free_idx[a]];
    step = llt.solve(gf);
    const double gain = gf.dot(step);
    if (!(gain > 0) || !std::isfinite(gain)) return out;
    trial = theta;
    for (int a = 0; a < nf; ++a) trial[prob.free_idx[a]] += step[a];
    if (!StrictlyFeasible(prob, lb, ub, trial)) return out;
    double ll_try = 0;
    const double t_accepted =
        ArmijoSearch(prob, lb, ub, theta, step, gain, ll, trial, &out.evals, &ll_try,
                     [&](const std::vector<double>& x) {
                       return kernel->Evaluate(x.data(), g_try.data(), nullptr);
                     });
    if (!(t_accepted > 0)) return out;
    theta.swap(trial);
    g.swap(g_try);
    ll = ll_try;
    ++out.iterations;
    out.theta = theta;
    out.loglik = ll;
    const double gmax_new = gradient_max(g);
    const bool fast = t_accepted == 1.0 && gmax_new <= 0.1 * gmax;
    gmax = gmax_new;
    if (!fast && gmax > gtol) {
      if (hessians_left-- == 0 || !difference_hessian()) return out;
    }
  }
}

// Cold starting points on the unit-variance scale, one full vector each.
std::vector<std::vector<double>> GridStarts(const ModelSpec& spec, double mean_y,
                                            double ewma_lambda) {
  // (total alpha-type weight, total beta weight) of each start.
  struct Pair { double a, b; };
  static const std::vector<Pair> kGarchPairs = {
      {0.08, 0.90}, {0.10, 0.80}, {0.15, 0.70}, {0.20, 0.50}, {0.05, 0.94}};
  static const std::vector<Pair> kArchPairs = {{0.3, 0}, {0.1, 0}, {0.6, 0}};
  static const std::vector<Pair> kFlatPairs = {{0, 0}};
  const bool garch_like =
      spec.variance == VarianceKind::kGarch || spec.variance == VarianceKind::kGjr;
  const std::vector<Pair>& pairs = garch_like ? kGarchPairs
                                   : spec.variance == VarianceKind::kArch ? kArchPairs
                                                                          : kFlatPairs;
  std::vector<std::vector<double>> starts;
  for (const auto& pr : pairs) {
    std::vector<double> th(spec.NumParams(), 0.0);
    if (spec.mean != MeanKind::kZero) th[0] = mean_y;
    const int v0 = spec.VarianceOffset();
    if (spec.variance == VarianceKind::kEwma) {
      th[v0] = ewma_lambda;
    } else {
      th[v0] = std::max(1e-3, 1.0 - pr.a - pr.b);
      const int na = spec.arch_order, no = spec.asym_order, nb = spec.garch_order;
      // Weights decline with the lag so that higher lags start smaller.
      double wsum = 0;
      for (int i = 0; i < na; ++i) wsum += 1.0 / (i + 1);
      for (int i = 0; i < na; ++i) {
        th[v0 + 1 + i] = pr.a * (no > 0 ? 0.5 : 1.0) * (1.0 / (i + 1)) / wsum;
      }
      for (int i = 0; i < no; ++i) th[v0 + 1 + na + i] = pr.a / no;
      for (int j = 0; j < nb; ++j) th[v0 + 1 + na + no + j] = pr.b / nb;
    }
    if (spec.innovations == Innovations::kStudentT) th[spec.DistOffset()] = 8.0;
    starts.push_back(std::move(th));
  }
  return starts;
}

}  // namespace

absl::Status ValidateReturns(absl::Span<const double> returns, int min_obs) {
  // One sweep without early exits for the common case (every value finite;
  // x - x is 0 exactly for finite x, NaN otherwise); the first bad index is
  // searched only when there is one.
  double lo = std::numeric_limits<double>::infinity(), hi = -lo, bad = 0.0;
  for (double x : returns) {
    bad += x - x;
    lo = x < lo ? x : lo;
    hi = x > hi ? x : hi;
  }
  if (bad != 0.0) {
    for (size_t i = 0; i < returns.size(); ++i) {
      if (!std::isfinite(returns[i])) {
        return absl::InvalidArgumentError(
            absl::StrCat("observation ", i + 1, " is not a finite number (", returns[i], ")"));
      }
    }
  }
  if (static_cast<int>(returns.size()) < min_obs) {
    return absl::InvalidArgumentError(absl::StrCat("too few observations: ", returns.size(),
                                                   " given, at least ", min_obs, " needed"));
  }
  if (lo == hi) {
    return absl::InvalidArgumentError(
        absl::StrCat("the series is constant (all ", returns.size(), " values equal ", lo,
                     "): its variance cannot be modelled"));
  }
  return absl::OkStatus();
}

// Two-step estimation: with the mean held fixed the likelihood depends on the
// data only through the residuals, so the variance part is fitted as a
// zero-mean model of the residual series (same terms, same presample), which
// is cheaper and takes the order-one fast path where it applies.
namespace {

absl::StatusOr<FitResult> FitResiduals(const ModelSpec& spec, absl::Span<const double> eps,
                                       const FitOptions& options,
                                       std::chrono::steady_clock::time_point t0) {
  const int nm = spec.NumMeanParams();
  ModelSpec zero = spec;
  zero.mean = MeanKind::kZero;
  zero.ar_order = zero.ma_order = 0;
  FitOptions sub = options;
  sub.fix_mean = false;
  sub.start = ModelParams{zero, std::vector<double>(options.start->values.begin() + nm,
                                                    options.start->values.end())};
  auto fit = FitModel(zero, eps, sub);
  if (!fit.ok()) return fit.status();
  FitResult res = *std::move(fit);
  std::vector<double> values(options.start->values.begin(), options.start->values.begin() + nm);
  values.insert(values.end(), res.params.values.begin(), res.params.values.end());
  res.params = ModelParams{spec, std::move(values)};
  res.names = spec.ParamNames();
  std::vector<bool> fixed(nm, true);
  fixed.insert(fixed.end(), res.fixed.begin(), res.fixed.end());
  res.fixed = std::move(fixed);
  const double nan = std::numeric_limits<double>::quiet_NaN();
  res.std_errors.insert(res.std_errors.begin(), nm, nan);
  res.robust_std_errors.insert(res.robust_std_errors.begin(), nm, nan);
  if (options.keep_series) res.residuals.assign(eps.begin(), eps.end());
  res.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return res;
}

// Two-step estimation: with the mean held fixed the likelihood depends on the
// data only through the residuals, so the variance part is fitted as a
// zero-mean model of the residual series (same terms, same presample), which
// is cheaper and takes the order-one fast path where it applies.
absl::StatusOr<FitResult> FitWithFixedMean(const ModelSpec& spec, absl::Span<const double> returns,
                                           const FitOptions& options,
                                           std::chrono::steady_clock::time_point t0) {
  LikelihoodOptions lo;
  lo.gradient = false;
  lo.series = true;
  lo.presample = options.presample;
  // Residuals do not depend on the variance block.
  auto eps = EvaluateLikelihood(*options.start, returns, lo);
  if (!eps.ok()) return eps.status();
  return FitResiduals(spec, eps->residuals, options, t0);
}

}  // namespace

namespace internal {

absl::StatusOr<FitResult> FitOnFixedMeanResiduals(const ModelSpec& spec,
                                                  absl::Span<const double> residuals,
                                                  const FitOptions& options) {
  return FitResiduals(spec, residuals, options, std::chrono::steady_clock::now());
}

}  // namespace internal

absl::StatusOr<FitResult> FitModel(const ModelSpec& spec, absl::Span<const double> returns,
                                   const FitOptions& options) {
  const auto t0 = std::chrono::steady_clock::now();
  if (auto s = spec.Validate(); !s.ok()) return s;
  const int K = spec.NumParams();
  const int nm = spec.NumMeanParams();
  const int v0 = spec.VarianceOffset();

  // Which parameters are estimated.
  std::vector<bool> fixed(K, false);
  if (spec.variance == VarianceKind::kEwma) fixed[v0] = true;
  const bool warm = options.start.has_value() && options.start->spec == spec &&
                    static_cast<int>(options.start->values.size()) == K;
  if (options.fix_mean) {
    if (!warm) {
      return absl::InvalidArgumentError("fix_mean needs a start with the same model spec");
    }
    for (int i = 0; i < nm; ++i) fixed[i] = true;
  }
  const int k_free = static_cast<int>(std::count(fixed.begin(), fixed.end(), false));
  const int min_obs = std::max(kMinFitObservations, 10 * std::max(1, k_free)) +
                      spec.ConditioningObs();
  if (auto s = ValidateReturns(returns, min_obs); !s.ok()) return s;
  if (options.fix_mean && spec.mean != MeanKind::kZero && k_free > 0) {
    return FitWithFixedMean(spec, returns, options, t0);
  }

  // Scale to unit standard deviation.
  const double n_all = static_cast<double>(returns.size());
  const double mean = std::accumulate(returns.begin(), returns.end(), 0.0) / n_all;
  double ss = 0;
  for (double r : returns) ss += (r - mean) * (r - mean);
  const double c = std::sqrt(ss / n_all);
  std::vector<double> y(returns.begin(), returns.end());
  for (double& v : y) v /= c;
  // theta = D * theta_scaled.
  std::vector<double> d(K, 1.0);
  if (spec.mean != MeanKind::kZero) d[0] = c;
  if (spec.variance != VarianceKind::kEwma) d[v0] = c * c;

  internal::LikelihoodKernel kernel(spec, std::move(y), options.presample);
  Problem prob;
  prob.kernel = &kernel;
  prob.full.assign(K, 0.0);
  prob.grad_full.assign(K, 0.0);
  for (int i = 0; i < K; ++i) {
    if (!fixed[i]) prob.free_idx.push_back(i);
  }
  if (spec.variance == VarianceKind::kGarch || spec.variance == VarianceKind::kGjr ||
      spec.variance == VarianceKind::kArch) {
    const int na = spec.arch_order, no = spec.asym_order, nb = spec.garch_order;
    for (int i = 0; i < na; ++i) { prob.persist_idx.push_back(v0 + 1 + i); prob.persist_coef.push_back(1.0); }
    for (int i = 0; i < no; ++i) { prob.persist_idx.push_back(v0 + 1 + na + i); prob.persist_coef.push_back(0.5); }
    for (int j = 0; j < nb; ++j) { prob.persist_idx.push_back(v0 + 1 + na + no + j); prob.persist_coef.push_back(1.0); }
  }

  // Bounds on the scaled problem, full-vector order.
  std::vector<double> lb_full(K), ub_full(K);
  const auto names = spec.ParamNames();
  for (int i = 0; i < K; ++i) {
    const std::string& nm_i = names[i];
    if (nm_i == "mu") { lb_full[i] = -100; ub_full[i] = 100; }
    else if (nm_i.rfind("ar", 0) == 0 || nm_i.rfind("ma", 0) == 0) { lb_full[i] = -0.9999; ub_full[i] = 0.9999; }
    else if (nm_i == "omega") { lb_full[i] = 1e-8; ub_full[i] = 100; }
    else if (nm_i == "lambda") { lb_full[i] = 0; ub_full[i] = 1; }
    else if (nm_i == "nu") { lb_full[i] = kMinNu; ub_full[i] = kMaxNu; }
    else { lb_full[i] = 0; ub_full[i] = 1; }  // alpha, gamma, beta
  }
  std::vector<double> lb, ub;
  for (int i : prob.free_idx) { lb.push_back(lb_full[i]); ub.push_back(ub_full[i]); }

  // Candidate starts: the warm start (scaled) first, then the grid by likelihood.
  std::vector<std::vector<double>> grid = GridStarts(spec, mean / c, options.ewma_lambda);
  std::vector<double> warm_scaled;
  if (warm) {
    warm_scaled = options.start->values;
    for (int i = 0; i < K; ++i) warm_scaled[i] /= d[i];
    if (spec.variance == VarianceKind::kEwma) warm_scaled[v0] = options.ewma_lambda;
    for (auto& g : grid) {  // fixed entries come from the start
      for (int i = 0; i < K; ++i) if (fixed[i]) g[i] = warm_scaled[i];
    }
  }
  // The grid is ranked by likelihood only when it is needed (no warm start, or
  // the warm start failed): a warm refit then costs no extra evaluations.
  struct Attempt { std::vector<double> theta; std::string label; };
  auto grid_attempts = [&]() {
    std::vector<std::pair<double, int>> ranked;
    // The grid points share the mean parameters: on the order-one path their
    // value passes run interleaved over one residual sweep (not on the
    // general orders, which have a Hessian but no batched pass).
    std::vector<double> lls(grid.size());
    bool shared_mean = kernel.is_order_one();
    for (const auto& g : grid) {
      for (int i = 0; i < v0 && shared_mean; ++i) shared_mean = g[i] == grid[0][i];
    }
    if (shared_mean) {
      std::vector<const double*> points;
      for (const auto& g : grid) points.push_back(g.data());
      kernel.EvaluateBatch(points.data(), static_cast<int>(points.size()), lls.data());
    } else {
      for (size_t s = 0; s < grid.size(); ++s) {
        lls[s] = kernel.Evaluate(grid[s].data(), nullptr, nullptr);
      }
    }
    for (size_t s = 0; s < grid.size(); ++s) {
      const double ll = lls[s];
      ++prob.evals;
      ranked.push_back({std::isfinite(ll) ? -ll : std::numeric_limits<double>::infinity(),
                        static_cast<int>(s)});
    }
    std::sort(ranked.begin(), ranked.end());
    std::vector<Attempt> out;
    for (size_t j = 0; j < ranked.size(); ++j) {
      out.push_back({grid[ranked[j].second], j == 0 && !warm ? "grid" : "fallback"});
    }
    return out;
  };
  std::vector<Attempt> attempts;
  if (warm) {
    attempts.push_back({warm_scaled, "warm"});
  } else {
    attempts = grid_attempts();
  }

  auto to_free = [&](const std::vector<double>& full) {
    std::vector<double> x;
    for (int i : prob.free_idx) x.push_back(full[i]);
    return x;
  };
  auto feasible_full = [&](const std::vector<double>& x) {
    std::vector<double> full = prob.full;
    for (size_t i = 0; i < x.size(); ++i) full[prob.free_idx[i]] = x[i];
    return full;
  };

  RunOutcome best;
  std::string best_label;
  bool converged = false;
  std::string message;
  // From a warm start (or the best grid point) the optimum is usually a few
  // Newton steps away; SLSQP remains the fallback.
  double newton_loglik = std::numeric_limits<double>::quiet_NaN();
  // Newton steps with the kernel's analytic Hessian from a start (full,
  // scaled): the order-one passes or the general orders' bound-holding steps.
  auto analytic_newton = [&](const std::vector<double>& start) {
    return kernel.is_order_one()
               ? RefineByNewton(&kernel, prob, lb, ub, start, options.newton_iterations,
                                options.newton_gradient_tol)
               : RefineInsideBounds(&kernel, prob, lb, ub, start, options.newton_iterations,
                                    options.newton_gradient_tol);
  };
  if (k_free > 0 && options.newton_iterations > 0 && kernel.has_hessian()) {
    NewtonOutcome nw = analytic_newton(attempts[0].theta);
    prob.evals += nw.evals;
    if (nw.converged) {
      best.x = to_free(nw.theta);
      best.objective = -nw.loglik / kernel.nobs();
      best.code = NLOPT_SUCCESS;
      best_label = attempts[0].label;
      converged = true;
      message = absl::StrCat("Newton converged in ", nw.iterations, " steps",
                             nw.held > 0 ? absl::StrCat(" (", nw.held, " at a bound)") : "");
      newton_loglik = nw.loglik;
      prob.full = nw.theta;
      attempts.clear();
    }
    // Otherwise SLSQP starts from the same point as without Newton steps: on a
    // flat likelihood with several maxima, Newton's last point may lie in the
    // basin of a worse one.
  }
  // Without an analytic Hessian (an ARMA mean), Newton steps with a Hessian by
  // differences from a warm start, SLSQP again the fallback.
  if (k_free > 0 && options.newton_iterations > 0 && !kernel.has_hessian() && warm && !converged &&
      spec.variance != VarianceKind::kEwma) {
    NewtonOutcome nw =
        RefineByDifferenceNewton(&kernel, prob, lb, ub, attempts[0].theta,
                                 options.newton_iterations, options.newton_gradient_tol);
    prob.evals += nw.evals;
    if (nw.converged) {
      best.x = to_free(nw.theta);
      best.objective = -nw.loglik / kernel.nobs();
      best.code = NLOPT_SUCCESS;
      best_label = attempts[0].label;
      converged = true;
      message =
          absl::StrCat("Newton converged in ", nw.iterations, " steps (Hessian by differences)");
      newton_loglik = nw.loglik;
      prob.full = nw.theta;
      attempts.clear();
    }
  }
  for (size_t a = 0; a < attempts.size(); ++a) {
    const Attempt att = attempts[a];
    prob.full = att.theta;
    if (k_free == 0) {
      best.x = {};
      best.objective = -kernel.Evaluate(prob.full.data(), nullptr, nullptr) / kernel.nobs();
      best.code = NLOPT_SUCCESS;
      best_label = att.label;
      converged = std::isfinite(best.objective);
      message = "nothing to estimate";
      break;
    }
    RunOutcome run = RunOptimizer(NLOPT_LD_SLSQP, &prob, lb, ub, to_free(att.theta), options);
    if (run.code == NLOPT_ROUNDOFF_LIMITED && std::isfinite(run.objective) &&
        run.objective < kInfeasibleObjective) {
      // SLSQP sometimes stops on round-off right at the optimum: confirm with a
      // derivative-free polish from that point.
      RunOutcome polish = RunOptimizer(NLOPT_LN_COBYLA, &prob, lb, ub, run.x, options);
      if (Succeeded(polish.code) && polish.objective <= run.objective + 1e-12) run = polish;
    }
    const bool ok = Usable(run);
    if (!best.x.size() || run.objective < best.objective) {
      best = run;
      best_label = att.label;
      message = ResultName(run.code);
    }
    if (ok) {
      converged = true;
      best = run;
      best_label = att.label;
      message = ResultName(run.code);
      break;
    }
    if (warm && a == 0) {  // the warm start failed: fall back to the cold grid
      for (auto& g : grid_attempts()) attempts.push_back(std::move(g));
    }
  }

  // nu on its upper bound may not be the maximum even where every test says
  // so: the likelihood is so flat in nu there (its derivative falls as
  // 1/nu^2) that a start at the bound stays there, by Newton's held-bound test
  // and by SLSQP alike, on data whose own maximum is far inside (a warm refit
  // after a nearly Gaussian window kept nu = 500 on t(8) data, 23 log-likelihood
  // units below the cold fit). Try nu well inside with the other parameters as
  // they are; if one is higher, fit again from the highest.
  const int nu_full = static_cast<int>(std::find(names.begin(), names.end(), "nu") - names.begin());
  std::vector<double> probe;  // the fit (full, scaled), then nu moved inside
  if (converged && k_free > 0 && nu_full < K && !fixed[nu_full]) probe = feasible_full(best.x);
  if (!probe.empty() && probe[nu_full] >= kNearMaxNu) {
    const double ll_bound = -best.objective * kernel.nobs();
    std::vector<double> from;
    double ll_from = ll_bound + 1e-9 * std::fabs(ll_bound);
    for (double nu : kInteriorNuProbes) {
      probe[nu_full] = nu;
      const double ll = kernel.Evaluate(probe.data(), nullptr, nullptr);
      ++prob.evals;
      if (std::isfinite(ll) && ll > ll_from) {
        ll_from = ll;
        from = probe;
      }
    }
    if (!from.empty()) {
      double ll_new = -std::numeric_limits<double>::infinity();
      std::vector<double> theta_new;
      std::string how;
      if (options.newton_iterations > 0 && kernel.has_hessian()) {
        NewtonOutcome nw = analytic_newton(from);
        prob.evals += nw.evals;
        if (nw.converged) {
          ll_new = nw.loglik;
          theta_new = nw.theta;
          how = absl::StrCat("Newton converged in ", nw.iterations, " steps");
        }
      }
      if (theta_new.empty()) {
        prob.full = from;
        const RunOutcome run = RunOptimizer(NLOPT_LD_SLSQP, &prob, lb, ub, to_free(from), options);
        if (Usable(run)) {
          ll_new = -run.objective * kernel.nobs();
          theta_new = feasible_full(run.x);
          how = ResultName(run.code);
        }
      }
      if (ll_new > ll_bound) {
        best.x = to_free(theta_new);
        best.objective = -ll_new / kernel.nobs();
        prob.full = theta_new;
        newton_loglik =
            how.rfind("Newton", 0) == 0 ? ll_new : std::numeric_limits<double>::quiet_NaN();
        message = absl::StrCat(how, " (restarted off nu's upper bound, log-likelihood +",
                               absl::StrFormat("%.3g", ll_new - ll_bound), ")");
      }
    }
  }

  // Map back to the data scale.
  std::vector<double> theta_s = k_free > 0 ? feasible_full(best.x) : prob.full;
  FitResult res;
  res.params.spec = spec;
  res.params.values.resize(K);
  for (int i = 0; i < K; ++i) res.params.values[i] = theta_s[i] * d[i];
  res.names = names;
  res.fixed = fixed;
  res.presample = options.presample;
  res.start_used = best_label;
  res.optimizer_message = message;
  res.iterations = prob.evals;
  res.num_estimated = k_free;

  // With an analytic Hessian one pass gives the value, the Hessian and the
  // outer product of the scores for the standard errors; a converged Newton
  // run already has the value.
  const bool analytic_hessian = options.std_errors && k_free > 0 && kernel.has_hessian();
  std::vector<double> scores(
      options.std_errors && !analytic_hessian ? static_cast<size_t>(kernel.nobs()) * K : 0);
  std::vector<double> hess_full(analytic_hessian ? static_cast<size_t>(K) * K : 0);
  std::vector<double> opg_full(analytic_hessian ? static_cast<size_t>(K) * K : 0);
  double ll_s;
  if (analytic_hessian) {
    std::vector<double> g0(K);
    ll_s = kernel.EvaluateHessianOpg(theta_s.data(), g0.data(), hess_full.data(), opg_full.data());
  } else if (std::isfinite(newton_loglik)) {
    ll_s = newton_loglik;
  } else {
    ll_s = kernel.Evaluate(theta_s.data(), nullptr, nullptr);
  }
  if (options.std_errors && !analytic_hessian) {
    std::vector<double> g0(K);
    kernel.Evaluate(theta_s.data(), g0.data(), scores.data());
  }
  res.nobs = kernel.nobs();
  res.loglik = ll_s - res.nobs * std::log(c);
  res.aic = -2.0 * res.loglik + 2.0 * k_free;
  res.bic = -2.0 * res.loglik + k_free * std::log(static_cast<double>(res.nobs));
  const absl::Status feasible = res.params.CheckConstraints();
  res.converged = converged && std::isfinite(res.loglik) && feasible.ok();
  if (!feasible.ok()) {
    res.warnings.push_back(absl::StrCat("estimate violates a constraint: ", feasible.message()));
  }

  res.std_errors.assign(K, std::numeric_limits<double>::quiet_NaN());
  res.robust_std_errors.assign(K, std::numeric_limits<double>::quiet_NaN());
  if (options.std_errors && k_free > 0 && std::isfinite(ll_s)) {
    // Hessian of the scaled log-likelihood, restricted to the estimated
    // parameters: analytic where the kernel has it, else by central
    // differences of the analytic gradient.
    Eigen::MatrixXd H(k_free, k_free);
    std::vector<double> gp(K), gm(K), th(theta_s);
    bool finite = true;
    for (int a = 0; a < k_free && analytic_hessian; ++a) {
      for (int b = 0; b < k_free; ++b) {
        H(b, a) = hess_full[static_cast<size_t>(prob.free_idx[b]) * K + prob.free_idx[a]];
        finite = finite && std::isfinite(H(b, a));
      }
    }
    for (int a = 0; a < k_free && !analytic_hessian; ++a) {
      const int ia = prob.free_idx[a];
      const double h = 1e-5 * std::max(std::fabs(theta_s[ia]), 1e-2);
      th[ia] = theta_s[ia] + h;
      const double lp = kernel.Evaluate(th.data(), gp.data(), nullptr);
      th[ia] = theta_s[ia] - h;
      const double lm = kernel.Evaluate(th.data(), gm.data(), nullptr);
      th[ia] = theta_s[ia];
      finite = finite && std::isfinite(lp) && std::isfinite(lm);
      for (int b = 0; b < k_free; ++b) {
        const int ib = prob.free_idx[b];
        H(b, a) = (gp[ib] - gm[ib]) / (2.0 * h);
      }
    }
    H = 0.5 * (H + H.transpose()).eval();
    // Outer product of the scores on the free parameters: from the Hessian
    // pass, else from the free columns of the nobs x K row-major scores.
    Eigen::MatrixXd J(k_free, k_free);
    if (analytic_hessian) {
      for (int a = 0; a < k_free; ++a) {
        for (int b = 0; b < k_free; ++b) {
          J(b, a) = opg_full[static_cast<size_t>(prob.free_idx[b]) * K + prob.free_idx[a]];
        }
      }
    } else {
      Eigen::MatrixXd S(res.nobs, k_free);
      for (int t = 0; t < res.nobs; ++t) {
        for (int a = 0; a < k_free; ++a)
          S(t, a) = scores[static_cast<size_t>(t) * K + prob.free_idx[a]];
      }
      J = S.transpose() * S;
    }
    Eigen::LDLT<Eigen::MatrixXd> ldlt(-H);
    if (finite && ldlt.info() == Eigen::Success && ldlt.isPositive() &&
        (ldlt.vectorD().array() > 0).all()) {
      const Eigen::MatrixXd inv = ldlt.solve(Eigen::MatrixXd::Identity(k_free, k_free));
      const Eigen::MatrixXd robust = inv * J * inv;
      for (int a = 0; a < k_free; ++a) {
        const int ia = prob.free_idx[a];
        if (inv(a, a) > 0) res.std_errors[ia] = std::sqrt(inv(a, a)) * d[ia];
        if (robust(a, a) > 0) res.robust_std_errors[ia] = std::sqrt(robust(a, a)) * d[ia];
      }
    } else {
      res.warnings.push_back(
          "the Hessian is not negative definite at the estimate: standard errors unavailable");
    }
  }

  // Warnings a quant wants to see.
  const double pers = res.params.Persistence();
  if (spec.variance != VarianceKind::kEwma && spec.variance != VarianceKind::kConstant &&
      pers > 0.99) {
    res.warnings.push_back(absl::StrFormat(
        "persistence %.5f is close to 1: shocks to the variance decay slowly (half-life %.0f bars)",
        pers, std::log(0.5) / std::log(pers)));
  }
  for (int i = 0; i < K; ++i) {
    if (fixed[i]) continue;
    const double x = theta_s[i];
    if (names[i] == "nu" && (x < kMinNu + 0.05 || x > kMaxNu - 1)) {
      res.warnings.push_back(absl::StrFormat("nu = %.3f is at its bound", x));
    } else if ((names[i].rfind("alpha", 0) == 0 || names[i].rfind("gamma", 0) == 0 ||
                names[i].rfind("beta", 0) == 0) && x < 1e-6) {
      res.warnings.push_back(absl::StrCat(names[i], " is at its lower bound 0"));
    }
  }
  if (!res.converged) {
    res.warnings.push_back(absl::StrCat("the optimizer did not converge (", message, ")"));
  }
  if (options.keep_series) {
    // The order-one Hessian pass at theta_s left theta_s's residuals and
    // variances in the workspace (the value pass's, to the bit); otherwise
    // the last pass may have been at another point.
    const bool at_estimate = analytic_hessian && kernel.is_order_one() && std::isfinite(ll_s);
    if (!at_estimate) kernel.Evaluate(theta_s.data(), nullptr, nullptr);
    res.residuals = kernel.residuals();
    res.sigma2 = kernel.sigma2();
    for (double& e : res.residuals) e *= c;
    for (double& v : res.sigma2) v *= c * c;
  }
  res.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return res;
}

}  // namespace aftershock
