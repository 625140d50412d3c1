// A deterministic GARCH-type series for tests that only need realistic data
// (not a particular model): fixed seed, Gaussian GARCH(1,1) with mild AR(1)
// mean and occasional negative-shock asymmetry. Independent of the project's
// simulator so that likelihood tests do not depend on it.
#ifndef AFTERSHOCK_TESTS_ESTIMATION_TEST_SERIES_H_
#define AFTERSHOCK_TESTS_ESTIMATION_TEST_SERIES_H_

#include <cmath>
#include <vector>

#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <boost/random/student_t_distribution.hpp>

namespace aftershock::testing {

// nu > 2: standardized Student-t shocks with nu degrees of freedom; 0: Gaussian.
inline std::vector<double> TestGarchSeries(int n, unsigned seed, double nu = 0) {
  boost::random::mt19937_64 gen(seed);
  boost::random::normal_distribution<double> normal;
  boost::random::student_t_distribution<double> student(nu > 2 ? nu : 5.0);
  const double t_scale = nu > 2 ? std::sqrt((nu - 2) / nu) : 1.0;
  std::vector<double> r(n);
  double s2 = 1.0, eps = 0.0, prev_r = 0.0;
  for (int t = 0; t < n; ++t) {
    s2 = 0.05 + 0.08 * eps * eps + (eps < 0 ? 0.06 * eps * eps : 0.0) + 0.86 * s2;
    eps = std::sqrt(s2) * (nu > 2 ? t_scale * student(gen) : normal(gen));
    r[t] = 0.03 + 0.1 * prev_r + eps;
    prev_r = r[t];
  }
  return r;
}

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_ESTIMATION_TEST_SERIES_H_
