// LikelihoodKernel: the reusable workspace behind EvaluateLikelihood and the
// estimator. Construction sizes every buffer once; Evaluate() then allocates
// nothing, so an optimizer can call it thousands of times cheaply.
//
// Thread-safety: not thread-safe (owns mutable workspaces); one per thread.
#ifndef AFTERSHOCK_ESTIMATION_LIKELIHOOD_KERNEL_H_
#define AFTERSHOCK_ESTIMATION_LIKELIHOOD_KERNEL_H_

#include <vector>

#include "aftershock/model_spec.h"

namespace aftershock::internal {

class LikelihoodKernel {
 public:
  // REQUIRES: spec.Validate().ok(), returns.size() > spec.ConditioningObs(), all
  // returns finite. The kernel keeps a copy of the returns.
  LikelihoodKernel(const ModelSpec& spec, std::vector<double> returns, Presample presample);

  // Log-likelihood at theta (spec.NumParams() values). When grad != nullptr it
  // receives the K-vector gradient; when scores != nullptr (requires grad) it
  // receives nobs x K per-observation gradients, row-major. Returns -inf when a
  // conditional variance is not positive and finite (grad is then zeroed).
  double Evaluate(const double* theta, double* grad, double* scores);

  // True when EvaluateHessian() applies: a zero or constant mean with
  // GARCH(1,1) or GJR-GARCH(1,1) variance (the order-one fast path), or a zero
  // mean with ARCH, GARCH or GJR-GARCH variance of any order (the variance part
  // of a two-step fit).
  bool has_hessian() const { return order_one_ || zero_mean_general_; }
  // True for the order-one fast path (has_hessian() without the general orders).
  bool is_order_one() const { return order_one_; }

  // Log-likelihood, gradient (K) and analytic Hessian (K x K, row-major) at
  // theta, from second-derivative recursions of the variance; scores as in
  // Evaluate() when not null. REQUIRES: has_hessian(), grad and hess not null.
  // Returns -inf (grad and hess zeroed) where Evaluate() does.
  double EvaluateHessian(const double* theta, double* grad, double* hess, double* scores);

  // EvaluateHessian() plus opg (K x K, row-major) = sum over the observations
  // of s_t s_t', the outer product of the per-observation scores s_t (the
  // rows Evaluate() writes to `scores`). On the order-one path it is summed
  // in the reverse-accumulation Hessian pass, without storing the scores. REQUIRES:
  // has_hessian(), grad, hess and opg not null. Returns -inf (grad and hess
  // zeroed, opg unspecified) where Evaluate() does.
  double EvaluateHessianOpg(const double* theta, double* grad, double* hess, double* opg);

  // Log-likelihoods of m points that share the mean parameters (equal values
  // before spec().VarianceOffset()): out[j] is Evaluate(thetas[j], nullptr,
  // nullptr) to the bit, -inf where a variance is not positive and finite.
  // The residuals are computed once and the points' recursions run
  // interleaved, kBatch at a time where is_order_one(); other kernels evaluate
  // the points one by one (sigma2() then holds the last point's). Where
  // is_order_one(), sigma2() is not updated.
  static constexpr int kBatch = 5;
  void EvaluateBatch(const double* const* thetas, int m, double* out);

  int nobs() const { return n_; }
  int num_params() const { return k_; }
  const ModelSpec& spec() const { return spec_; }
  const std::vector<double>& returns() const { return r_; }
  // Series from the most recent Evaluate().
  const std::vector<double>& residuals() const { return eps_; }
  const std::vector<double>& sigma2() const { return sig2_; }
  double presample_variance() const { return s2_; }

 private:
  void MeanPass(const double* theta, bool with_grad);
  // Fast path for a zero/constant mean with GARCH(1,1) or GJR-GARCH(1,1): scalar
  // derivative recursions and a log of products every few terms instead of a
  // log per term. Same recursion and summation order as the general path.
  // kLevel: 0 value, 1 value and gradient, 2 value, gradient and Hessian.
  template <bool kMu, bool kGjr, bool kStudent, int kLevel>
  double OrderOne(const double* theta, double* grad, double* scores, double* hess);
  // The same without per-term scores, by reverse accumulation (forward sweep
  // for sigma2 and the per-term derivatives, backward sweep for the sums):
  // the value to the bit of OrderOne(), gradient and Hessian to round-off.
  // kLevel 3: level 2 plus opg (K x K), the sum of the per-term scores' outer
  // products, from the Hessian's per-term loop over the stored derivatives.
  template <bool kMu, bool kGjr, bool kStudent, int kLevel>
  double OrderOneAdjoint(const double* theta, double* grad, double* hess, double* opg = nullptr);
  // What OrderOne() and OrderOneAdjoint() start from (OrderOneBegin()).
  struct OrderOneStart {
    double mu, omega, alpha, gamma, beta, nu;  // absent parameters: 0
    int index[6];  // full-vector index of slots mu, omega, alpha, gamma, beta, nu (-1: absent)
    double s2, ds2, d2s2;  // presample variance and its first/second mu-derivatives
    double const_term, dconst, d2const, nu2, inv_nu2, np1;  // density constants
  };
  // Unpacks theta, computes the residuals (OrderOneResiduals) and the density
  // constants for the pass given by the template arguments (see OrderOne()).
  template <bool kMu, bool kGjr, bool kStudent, int kLevel>
  OrderOneStart OrderOneBegin(const double* theta);
  // Zeroes grad (kGrad) and hess (kHess); returns -inf.
  template <bool kGrad, bool kHess>
  double OrderOneFail(double* grad, double* hess);
  template <bool kMu, bool kGjr, bool kStudent>
  void OrderOneBatch(const double* const* thetas, double* out);
  // Residuals r - mu and the presample variance of the order-one passes;
  // mu_grad: also d s2 / d mu.
  void OrderOneResiduals(double mu, bool mu_grad);
  double EvaluateOrderOne(const double* theta, double* grad, double* scores, double* hess,
                          double* opg = nullptr);
  // Zero mean with ARCH/GARCH/GJR variance of any order: the residuals are the
  // returns, so the first and second derivatives of sigma2 follow from the
  // variance recursion alone (second derivatives are non-zero only through the
  // beta terms). Gradient (and Hessian when hess != nullptr); grad not null.
  // KV > 0: the number of variance parameters at compile time (0: at run
  // time); NB >= 0 likewise the number of beta lags.
  template <bool kStudent, int KV, int NB>
  double ZeroMeanGeneral(const double* theta, double* grad, double* scores, double* hess);
  double EvaluateZeroMeanGeneral(const double* theta, double* grad, double* scores, double* hess);
  void Presample(bool with_grad);
  // d eps_k / d (mean parameter c): -1 on the order-one path (no rows kept).
  double MeanDerivative(int k, int c) const {
    return deps_.empty() ? -1.0 : deps_[static_cast<size_t>(k) * nm_ + c];
  }

  const ModelSpec spec_;
  const std::vector<double> r_;
  const enum Presample presample_;
  const int p_;   // conditioning observations (AR order)
  const int n_;   // likelihood terms
  const int k_;   // parameters
  const int nm_;  // mean parameters
  const bool order_one_;  // EvaluateOrderOne applies
  const bool zero_mean_general_;  // ZeroMeanGeneral applies (and order_one_ does not)

  std::vector<double> eps_;    // n
  std::vector<double> sig2_;   // n
  std::vector<double> deps_;   // n x nm: d eps_t / d mean params
  std::vector<double> dsig2_;  // n x k: d sigma2_t / d params
  std::vector<double> ds2_;    // nm: d s2 / d mean params
  std::vector<double> work_;   // k
  // ZeroMeanGeneral workspaces (kv = variance parameters, nb = beta lags,
  // pad = largest lag):
  std::vector<double> zdv_;   // (nb + 1) x kv: d sigma2 of this and the nb previous terms
  std::vector<double> zd2v_;  // (nb + 1) x nb x kv: their second derivatives, beta rows
  std::vector<double> zhb_;   // nb x kv: Hessian accumulator of the beta rows' l_v d2 sigma2
  std::vector<double> zh_;    // (kv + 1) x (kv + 1): Hessian accumulator
  std::vector<double> ze2_;   // pad + n: s2 (presample), then eps_k^2
  std::vector<double> zne2_;  // pad + n: s2 / 2, then eps_k^2 where eps_k < 0, else 0
  std::vector<double> zv_;    // pad + n: s2, then sigma2_k
  int zpad_ = 0;
  std::vector<int> order_;     // min(n, kRobustStartSpan): sort workspace of the presample
  std::vector<double> weight_;  // min(n, kRobustStartSpan): presample weights 2^(-j / half-life)
  double s2_ = 0;
  // d^2 s2 / d mu^2 for a constant mean (d eps / d mu = -1): 2 for the mean
  // square, 2 c^2 for the robust start. Set by Presample().
  double d2s2_ = 0;
};

}  // namespace aftershock::internal

#endif  // AFTERSHOCK_ESTIMATION_LIKELIHOOD_KERNEL_H_
