#include "aftershock/stats.h"

#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "aftershock/least_squares.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RelDiff;

std::vector<double> WhiteNoise(int n, uint64_t seed) {
  boost::random::mt19937_64 rng(seed);
  boost::random::normal_distribution<double> normal(0.0, 1.0);
  std::vector<double> x(n);
  for (double& v : x) v = normal(rng);
  return x;
}

// AR(1) mean with GARCH(1,1) errors from stated parameters:
//   x_t = 0.3 x_{t-1} + e_t, e_t = sqrt(h_t) z_t, h_t = 0.05 + 0.10 e_{t-1}^2 + 0.85 h_{t-1}.
struct ArGarch {
  std::vector<double> x, e;
};

ArGarch SimulateArGarch(int n, uint64_t seed) {
  boost::random::mt19937_64 rng(seed);
  boost::random::normal_distribution<double> normal(0.0, 1.0);
  ArGarch s;
  double h = 1.0, e = 0.0, x = 0.0;
  for (int t = -200; t < n; ++t) {  // 200 burn-in draws
    h = 0.05 + 0.10 * e * e + 0.85 * h;
    e = std::sqrt(h) * normal(rng);
    x = 0.3 * x + e;
    if (t >= 0) {
      s.x.push_back(x);
      s.e.push_back(e);
    }
  }
  return s;
}

std::string Message(const absl::Status& s) { return std::string(s.message()); }

// ---- Distribution functions ---------------------------------------------------------

struct TableEntry {
  int df;
  double upper_tail;  // probability of exceeding the critical value
  double value;       // critical value, 3 decimals
};

// NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4, "Critical
// values of the chi-square distribution" (upper tail). 18.307 for (10, 0.05) is
// quoted in PRODUCT.md section 4; the others are (e-Handbook table, from memory)
// and are cross-checked live against scipy.stats.chi2.ppf below.
const TableEntry kChiSquareTable[] = {
    {1, 0.10, 2.706},   {1, 0.05, 3.841},     {1, 0.01, 6.635},   {1, 0.001, 10.828},
    {2, 0.05, 5.991},   {2, 0.01, 9.210},     {3, 0.05, 7.815},   {5, 0.05, 11.070},
    {5, 0.01, 15.086},  {10, 0.10, 15.987},   {10, 0.05, 18.307}, {10, 0.025, 20.483},
    {10, 0.01, 23.209}, {10, 0.001, 29.588},  {20, 0.05, 31.410}, {30, 0.05, 43.773},
    {30, 0.01, 50.892}, {100, 0.05, 124.342},
};

TEST_CASE("chi-square quantiles match the e-Handbook critical-value table", "[dist]") {
  // Source: NIST/SEMATECH e-Handbook 1.3.6.7.4 (values to 3 decimals -> 5e-4).
  CHECK(std::fabs(ChiSquareQuantile(0.95, 10) - 18.307) <= 5e-4);
  nlohmann::json in;
  in["cases"] = nlohmann::json::array();
  for (const auto& e : kChiSquareTable) {
    INFO("df " << e.df << ", upper tail " << e.upper_tail);
    CHECK(std::fabs(ChiSquareQuantile(1.0 - e.upper_tail, e.df) - e.value) <= 5e-4);
    // Survival at the critical value returns the tail probability.
    CHECK(ChiSquareSurvival(e.value, e.df) == Approx(e.upper_tail).epsilon(2e-3));
    in["cases"].push_back({e.df, e.upper_tail});
  }
  in["points"] = {{"chi2_sf", {{0.5, 1}, {3.0, 2}, {18.307, 10}, {40.0, 12}, {1e-3, 7}}},
                  {"chi2_ppf", {{0.5, 3}, {0.999, 4}, {0.01, 30}}},
                  {"f_sf", {{1.0, 3, 10}, {2.5, 5, 900}, {0.2, 1, 50}}},
                  {"norm_cdf", {-3.0, -0.5, 0.0, 1.96, 6.0}},
                  {"norm_ppf", {0.001, 0.025, 0.5, 0.975}},
                  {"t_cdf", {{-2.0, 3}, {0.7, 10}, {2.5, 1996}}}};
  // Live cross-check of the recalled table (scipy.stats.chi2.ppf, scipy 1.10.1).
  testing::CommandResult r = testing::RunPython("statsmodels_ref.py", {"chi2"}, in.dump());
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  nlohmann::json out = nlohmann::json::parse(r.out);
  int i = 0;
  for (const auto& e : kChiSquareTable) {
    INFO("df " << e.df << ", upper tail " << e.upper_tail);
    const double scipy_value = out["ppf"][i++].get<double>();
    CHECK(std::fabs(scipy_value - e.value) <= 5e-4);  // scipy.stats.chi2.ppf vs table
    CHECK(RelDiff(ChiSquareQuantile(1.0 - e.upper_tail, e.df), scipy_value) <= 1e-10);
  }
  const auto& pts = in["points"];
  for (size_t k = 0; k < pts["chi2_sf"].size(); ++k) {  // scipy.stats.chi2.sf
    CHECK(RelDiff(ChiSquareSurvival(pts["chi2_sf"][k][0], pts["chi2_sf"][k][1]),
                  out["chi2_sf"][k]) <= 1e-10);
  }
  for (size_t k = 0; k < pts["chi2_ppf"].size(); ++k) {  // scipy.stats.chi2.ppf
    CHECK(RelDiff(ChiSquareQuantile(pts["chi2_ppf"][k][0], pts["chi2_ppf"][k][1]),
                  out["chi2_ppf"][k]) <= 1e-10);
  }
  for (size_t k = 0; k < pts["f_sf"].size(); ++k) {  // scipy.stats.f.sf
    CHECK(RelDiff(FSurvival(pts["f_sf"][k][0], pts["f_sf"][k][1], pts["f_sf"][k][2]),
                  out["f_sf"][k]) <= 1e-10);
  }
  for (size_t k = 0; k < pts["norm_cdf"].size(); ++k) {  // scipy.stats.norm.cdf
    CHECK(RelDiff(NormalCdf(pts["norm_cdf"][k]), out["norm_cdf"][k]) <= 1e-10);
  }
  for (size_t k = 0; k < pts["norm_ppf"].size(); ++k) {  // scipy.stats.norm.ppf
    const double ours = NormalQuantile(pts["norm_ppf"][k]);
    const double ref = out["norm_ppf"][k];
    CHECK(std::fabs(ours - ref) <= 1e-10 * std::max(1.0, std::fabs(ref)));
  }
  for (size_t k = 0; k < pts["t_cdf"].size(); ++k) {  // scipy.stats.t.cdf
    CHECK(RelDiff(StudentTCdf(pts["t_cdf"][k][0], pts["t_cdf"][k][1]), out["t_cdf"][k]) <= 1e-10);
  }
}

TEST_CASE("distribution functions: edge cases and invalid arguments", "[dist]") {
  CHECK(ChiSquareSurvival(0.0, 3) == 1.0);
  CHECK(ChiSquareSurvival(-1.0, 3) == 1.0);
  CHECK(ChiSquareSurvival(INFINITY, 3) == 0.0);
  CHECK(std::isnan(ChiSquareSurvival(1.0, 0.0)));
  CHECK(std::isnan(ChiSquareQuantile(1.0, 3)));
  CHECK(std::isnan(ChiSquareQuantile(0.5, -2)));
  CHECK(std::isnan(NormalQuantile(0.0)));
  CHECK(std::isnan(StudentTCdf(0.0, 0.0)));
  CHECK(std::isnan(FSurvival(1.0, 0.0, 3.0)));
  CHECK(NormalCdf(-INFINITY) == 0.0);
  CHECK(StudentTCdf(0.0, 5) == Approx(0.5));
}

// ---- Time-series statistics against statsmodels ---------------------------------------

TEST_CASE("ACF, PACF, Ljung-Box, McLeod-Li, ARCH-LM, Jarque-Bera, sign bias vs statsmodels",
          "[stats][statsmodels]") {
  // Reference: statsmodels 0.13.5 / scipy 1.10.1 (Debian 12), run live.
  const ArGarch s = SimulateArGarch(1500, 20261202);
  // The GARCH errors have unconditional variance 0.05 / (1 - 0.95) = 1, so they
  // serve as the "standardized" series of the sign-bias test.
  const std::vector<double>& z = s.e;
  nlohmann::json in;
  in["x"] = s.x;
  in["lags"] = 10;
  in["model_df"] = 2;
  in["arch_lags"] = 5;
  in["arch_ddof"] = 2;
  in["pacf_lags"] = 10;
  in["z"] = z;
  testing::CommandResult r = testing::RunPython("statsmodels_ref.py", {"stats"}, in.dump());
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  nlohmann::json ref = nlohmann::json::parse(r.out);
  INFO("statsmodels " << ref["statsmodels"].get<std::string>());

  // statsmodels.tsa.stattools.acf(x, nlags=10, fft=False)
  absl::StatusOr<std::vector<double>> acf = Autocorrelation(s.x, 10);
  REQUIRE(acf.ok());
  for (int k = 0; k <= 10; ++k) CHECK(RelDiff((*acf)[k], ref["acf"][k]) <= 1e-10);

  // statsmodels.tsa.stattools.pacf(x, nlags=10, method="ldb")
  absl::StatusOr<std::vector<double>> pacf = PartialAutocorrelation(s.x, 10);
  REQUIRE(pacf.ok());
  REQUIRE(pacf->size() == 11);
  for (int k = 0; k <= 10; ++k) {
    INFO("lag " << k);
    CHECK(RelDiff((*pacf)[k], ref["pacf"][k]) <= 1e-6);
  }
  CHECK((*pacf)[1] == Approx(0.3).margin(0.08));  // the AR(1) coefficient of the simulation

  // statsmodels.stats.diagnostic.acorr_ljungbox(x, lags=[10], model_df=0)
  absl::StatusOr<PortmanteauResult> lb = LjungBox(s.x, 10);
  REQUIRE(lb.ok());
  CHECK(lb->df == 10);
  CHECK(RelDiff(lb->statistic, ref["lb"][0]) <= 1e-6);
  // The AR(1) series has p ~ 1e-60; compare the p-value where it is representable.
  CHECK(std::fabs(lb->p_value - ref["lb"][1].get<double>()) <=
        1e-6 * ref["lb"][1].get<double>() + 1e-300);
  // statsmodels.stats.diagnostic.acorr_ljungbox(x, lags=[10], model_df=2)
  absl::StatusOr<PortmanteauResult> lb_dof = LjungBox(s.x, 10, 2);
  REQUIRE(lb_dof.ok());
  CHECK(lb_dof->df == 8);
  CHECK(RelDiff(lb_dof->statistic, ref["lb_dof"][0]) <= 1e-6);
  CHECK(std::fabs(lb_dof->p_value - ref["lb_dof"][1].get<double>()) <=
        1e-6 * ref["lb_dof"][1].get<double>() + 1e-300);

  // On the serially uncorrelated GARCH errors the p-value is moderate:
  // statsmodels.stats.diagnostic.acorr_ljungbox(z, lags=[10], model_df=2)
  absl::StatusOr<PortmanteauResult> lb_z = LjungBox(z, 10, 2);
  REQUIRE(lb_z.ok());
  CHECK(RelDiff(lb_z->statistic, ref["lb_z_dof"][0]) <= 1e-6);
  CHECK(RelDiff(lb_z->p_value, ref["lb_z_dof"][1]) <= 1e-6);

  // McLeod-Li = statsmodels.stats.diagnostic.acorr_ljungbox(x**2, lags=[10], model_df=2)
  absl::StatusOr<PortmanteauResult> ml = McLeodLi(s.x, 10, 2);
  REQUIRE(ml.ok());
  CHECK(RelDiff(ml->statistic, ref["mcleod_li_dof"][0]) <= 1e-6);
  CHECK(RelDiff(ml->p_value, ref["mcleod_li_dof"][1]) <= 1e-6);

  // statsmodels.stats.diagnostic.het_arch(x, nlags=5): lm, lm p, F, F p.
  absl::StatusOr<ArchLmResult> arch = ArchLm(s.x, 5);
  REQUIRE(arch.ok());
  CHECK(arch->nobs == 1495);
  CHECK(RelDiff(arch->lm_statistic, ref["het_arch"][0]) <= 1e-6);
  CHECK(RelDiff(arch->lm_p_value, ref["het_arch"][1]) <= 1e-6);
  CHECK(RelDiff(arch->f_statistic, ref["het_arch"][2]) <= 1e-6);
  CHECK(RelDiff(arch->f_p_value, ref["het_arch"][3]) <= 1e-6);
  // statsmodels.stats.diagnostic.het_arch(x, nlags=5, ddof=2)
  absl::StatusOr<ArchLmResult> arch2 = ArchLm(s.x, 5, 2);
  REQUIRE(arch2.ok());
  CHECK(RelDiff(arch2->lm_statistic, ref["het_arch_ddof"][0]) <= 1e-6);
  CHECK(RelDiff(arch2->lm_p_value, ref["het_arch_ddof"][1]) <= 1e-6);

  // statsmodels.stats.stattools.jarque_bera(x): JB, p, skew, kurtosis.
  absl::StatusOr<JarqueBeraResult> jb = JarqueBera(s.x);
  REQUIRE(jb.ok());
  CHECK(RelDiff(jb->statistic, ref["jarque_bera"][0]) <= 1e-6);
  CHECK(std::fabs(jb->p_value - ref["jarque_bera"][1].get<double>()) <=
        1e-6 * ref["jarque_bera"][1].get<double>() + 1e-300);
  CHECK(RelDiff(jb->skewness, ref["jarque_bera"][2]) <= 1e-6);
  CHECK(RelDiff(jb->kurtosis, ref["jarque_bera"][3]) <= 1e-6);

  // Engle-Ng sign bias vs statsmodels.regression.linear_model.OLS on the same design.
  absl::StatusOr<SignBiasResult> sb = SignBias(z);
  REQUIRE(sb.ok());
  const auto& rsb = ref["sign_bias"];
  const SignBiasTerm terms[3] = {sb->sign, sb->negative_size, sb->positive_size};
  for (int j = 0; j < 3; ++j) {
    INFO("sign-bias term " << j);
    CHECK(RelDiff(terms[j].coefficient, rsb["coef"][j]) <= 1e-6);
    CHECK(RelDiff(terms[j].t_statistic, rsb["t"][j]) <= 1e-6);
    CHECK(RelDiff(terms[j].p_value, rsb["p"][j]) <= 1e-6);
  }
  CHECK(RelDiff(sb->joint_statistic, rsb["joint"]) <= 1e-6);
  CHECK(RelDiff(sb->joint_p_value, rsb["joint_p"]) <= 1e-6);
  WARN("LB(10) Q=" << lb->statistic << " p=" << lb->p_value
                   << "; LB(10, dof 2) Q=" << lb_dof->statistic
                   << "; LB(10, dof 2) on errors Q=" << lb_z->statistic << " p=" << lb_z->p_value
                   << "; McLeod-Li Q=" << ml->statistic << " p=" << ml->p_value
                   << "; ARCH-LM(5) LM=" << arch->lm_statistic << " p=" << arch->lm_p_value
                   << " F=" << arch->f_statistic << "; JB=" << jb->statistic
                   << "; sign-bias joint=" << sb->joint_statistic << " p=" << sb->joint_p_value);
}

TEST_CASE("Jarque-Bera and Ljung-Box by hand on a tiny series", "[stats]") {
  // x = 1, 2, 3, 4, 10: mean 4, deviations -3 -2 -1 0 6.
  const std::vector<double> x = {1, 2, 3, 4, 10};
  absl::StatusOr<JarqueBeraResult> jb = JarqueBera(x);
  REQUIRE(jb.ok());
  const double m2 = 50.0 / 5, m3 = (-27 - 8 - 1 + 216) / 5.0, m4 = (81 + 16 + 1 + 1296) / 5.0;
  CHECK(jb->skewness == Approx(m3 / std::pow(m2, 1.5)));
  CHECK(jb->kurtosis == Approx(m4 / (m2 * m2)));
  // r_1 = (-3*-2 + -2*-1 + -1*0 + 0*6) / 50 = 8/50.
  absl::StatusOr<PortmanteauResult> lb = LjungBox(x, 1);
  REQUIRE(lb.ok());
  CHECK(lb->statistic == Approx(5.0 * 7.0 * (0.16 * 0.16) / 4.0));
}

TEST_CASE("bad input is a clear error", "[stats]") {
  const std::vector<double> x = WhiteNoise(50, 7);
  CHECK(absl::IsInvalidArgument(LjungBox(x, 0).status()));
  CHECK(absl::IsInvalidArgument(JarqueBera(std::vector<double>(20, 1.5)).status()));
  CHECK(Message(LjungBox(std::vector<double>{1.0, 2.0}, 1).status()) ==
        "series has 2 observations; at least 3 are needed");
  std::vector<double> bad = x;
  bad[17] = NAN;
  CHECK(Message(LjungBox(bad, 5).status()) == "series has a non-finite value at index 17");
  CHECK(Message(JarqueBera(std::vector<double>(20, 1.5)).status()) ==
        "series is constant (zero variance)");
  CHECK(Message(PartialAutocorrelation(std::vector<double>(20, 0.0), 3).status()) ==
        "series is constant (zero variance)");
  CHECK(Message(LjungBox(x, 0).status()) == "lags must be in 1..49 for 50 observations (got 0)");
  CHECK(Message(LjungBox(x, 50).status()) == "lags must be in 1..49 for 50 observations (got 50)");
  CHECK(Message(Autocorrelation(x, 60).status()) ==
        "max_lag must be in 1..49 for 50 observations (got 60)");
  CHECK(Message(LjungBox(x, 5, 5).status()) ==
        "model_dof must be in 0..4 so that lags - model_dof > 0 (got 5 with 5 lags)");
  CHECK(Message(ArchLm(x, 30).status()) ==
        "ARCH-LM lags must be in 1..24 for 50 observations (got 30)");
  CHECK(Message(ArchLm(x, 0).status()) ==
        "ARCH-LM lags must be in 1..24 for 50 observations (got 0)");
  CHECK(Message(ArchLm(x, 2, 48).status()) == "ddof must be in 0..47 (got 48)");
  std::vector<double> pm(40);
  for (int i = 0; i < 40; ++i) pm[i] = i % 2 ? 1.0 : -1.0;
  CHECK(Message(ArchLm(pm, 3).status()) == "squared residual series is constant (zero variance)");
  CHECK(Message(McLeodLi(pm, 3).status()) == "squared series is constant (zero variance)");
  CHECK(Message(SignBias(std::vector<double>(5, 1.0)).status()) ==
        "standardized residual series has 5 observations; at least 10 are needed");
  std::vector<double> pos(30);
  for (int i = 0; i < 30; ++i) pos[i] = 1.0 + 0.1 * (i % 7);
  CHECK(Message(SignBias(pos).status()) ==
        "sign-bias test needs both negative and non-negative lagged residuals");
}

// R^2 of e_t^2 on 1, e_{t-1}^2, ..., e_{t-lags}^2 by the QR regression
// (OrdinaryLeastSquares on the full design), the reference for ArchLm's
// cross-product computation.
double ArchLmRSquaredByQr(const std::vector<double>& e, int lags) {
  const int rows = static_cast<int>(e.size()) - lags;
  std::vector<double> y(rows), x(static_cast<size_t>(rows) * lags);
  for (int t = 0; t < rows; ++t) {
    y[t] = e[t + lags] * e[t + lags];
    for (int j = 1; j <= lags; ++j) {
      x[static_cast<size_t>(t) * lags + j - 1] = e[t + lags - j] * e[t + lags - j];
    }
  }
  absl::StatusOr<OlsResult> ols = OrdinaryLeastSquares(y, x, lags);
  REQUIRE(ols.ok());
  return ols->r_squared;
}

TEST_CASE("ARCH-LM R^2 equals the QR regression's on varied series", "[stats]") {
  // White noise, GARCH errors, heavy tails (t with 3 df), data on a tiny scale
  // (returns of 1e-4) and on a large one with an offset, for several lag counts.
  boost::random::mt19937_64 rng(4242);
  boost::random::normal_distribution<double> normal(0.0, 1.0);
  std::vector<std::pair<std::string, std::vector<double>>> series;
  series.push_back({"white noise", WhiteNoise(2000, 11)});
  series.push_back({"GARCH errors", SimulateArGarch(2000, 12).e});
  std::vector<double> heavy(2000), tiny(2000), offset(1500);
  for (double& v : heavy) {
    double c = 0;
    for (int k = 0; k < 3; ++k) {
      const double g = normal(rng);
      c += g * g;
    }
    v = normal(rng) / std::sqrt(c / 3.0);
  }
  for (double& v : tiny) v = 1e-4 * normal(rng);
  for (double& v : offset) v = 1e3 + normal(rng);
  series.push_back({"Student-t(3)", heavy});
  series.push_back({"scale 1e-4", tiny});
  series.push_back({"offset 1e3", offset});
  for (const auto& [name, e] : series) {
    for (int lags : {1, 2, 5, 10, 20}) {
      INFO(name << ", " << lags << " lags");
      absl::StatusOr<ArchLmResult> r = ArchLm(e, lags);
      REQUIRE(r.ok());
      const double qr = ArchLmRSquaredByQr(e, lags);
      CHECK(std::fabs(r->r_squared - qr) <= 1e-12 + 1e-10 * std::fabs(qr));
      CHECK(RelDiff(r->lm_statistic, (e.size() - lags) * qr) <= 1e-9);
    }
  }
}

TEST_CASE("ARCH-LM with nearly collinear or collinear lags", "[stats]") {
  // Squares of period 2 (1, 4, 1, 4, ...) make the centred lag columns one
  // column up to sign (rank 2 with the intercept):
  // the QR regression reports the rank deficiency.
  std::vector<double> periodic(200);
  for (int i = 0; i < 200; ++i) periodic[i] = i % 2 ? 2.0 : -1.0;
  CHECK(Message(ArchLm(periodic, 3).status()) ==
        "ARCH-LM regression failed: design matrix is rank deficient: rank 2 of 4 columns");
  // A small perturbation of it: nearly collinear lags, still of full rank;
  // the statistic is the QR regression's.
  boost::random::mt19937_64 rng(77);
  boost::random::normal_distribution<double> normal(0.0, 1.0);
  std::vector<double> near = periodic;
  for (double& v : near) v += 1e-4 * normal(rng);
  absl::StatusOr<ArchLmResult> r = ArchLm(near, 3);
  REQUIRE(r.ok());
  const double qr = ArchLmRSquaredByQr(near, 3);
  CHECK(std::fabs(r->r_squared - qr) <= 1e-12 + 1e-10 * std::fabs(qr));
  CHECK(r->r_squared > 0.99);  // the period explains the squares
}

TEST_CASE("ARCH-LM size on white noise is close to the nominal 5%", "[stats][property]") {
  // 200 Gaussian white-noise series (boost mt19937_64, seeds 1000..1199),
  // n = 1000, 5 lags: under the null the rejection rate at 5% should be near
  // 0.05; with 200 replications [0.02, 0.09] covers sampling error.
  int rejections = 0;
  const int reps = 200;
  for (int i = 0; i < reps; ++i) {
    const std::vector<double> x = WhiteNoise(1000, 1000 + i);
    absl::StatusOr<ArchLmResult> r = ArchLm(x, 5);
    REQUIRE(r.ok());
    rejections += r->lm_p_value < 0.05;
  }
  const double rate = static_cast<double>(rejections) / reps;
  WARN("ARCH-LM(5) rejection rate at 5% on white noise: " << rate);
  CHECK(rate >= 0.02);
  CHECK(rate <= 0.09);
}

TEST_CASE("ARCH-LM and McLeod-Li detect GARCH effects", "[stats][property]") {
  const ArGarch s = SimulateArGarch(3000, 99);
  absl::StatusOr<ArchLmResult> arch = ArchLm(s.e, 5);
  REQUIRE(arch.ok());
  CHECK(arch->lm_p_value < 1e-4);
  absl::StatusOr<PortmanteauResult> ml = McLeodLi(s.e, 10);
  REQUIRE(ml.ok());
  CHECK(ml->p_value < 1e-4);
  absl::StatusOr<PortmanteauResult> lb = LjungBox(s.e, 10);
  REQUIRE(lb.ok());
  CHECK(lb->p_value > 1e-3);  // GARCH errors are serially uncorrelated
}

}  // namespace
}  // namespace aftershock
