#include "aftershock/least_squares.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RelDiff;

// NIST Statistical Reference Datasets, linear least squares, "Longley"
// (https://www.itl.nist.gov/div898/strd/lls/data/Longley.shtml): 16
// observations; y = total derived employment, x1 = GNP implicit price
// deflator, x2 = GNP, x3 = unemployed, x4 = size of armed forces,
// x5 = non-institutional population 14 years and over, x6 = year.
// Model y = B0 + B1 x1 + ... + B6 x6. Public data.
// Columns: y, x1, x2, x3, x4, x5, x6.
constexpr double kLongley[16][7] = {
    {60323, 83.0, 234289, 2356, 1590, 107608, 1947},
    {61122, 88.5, 259426, 2325, 1456, 108632, 1948},
    {60171, 88.2, 258054, 3682, 1616, 109773, 1949},
    {61187, 89.5, 284599, 3351, 1650, 110929, 1950},
    {63221, 96.2, 328975, 2099, 3099, 112075, 1951},
    {63639, 98.1, 346999, 1932, 3594, 113270, 1952},
    {64989, 99.0, 365385, 1870, 3547, 115094, 1953},
    {63761, 100.0, 363112, 3578, 3350, 116219, 1954},
    {66019, 101.2, 397469, 2904, 3048, 117388, 1955},
    {67857, 104.6, 419180, 2822, 2857, 118734, 1956},
    {68169, 108.4, 442769, 2936, 2798, 120445, 1957},
    {66513, 110.8, 444546, 4681, 2637, 121950, 1958},
    {68655, 112.6, 482704, 3813, 2552, 123366, 1959},
    {69564, 114.2, 502601, 3931, 2514, 125368, 1960},
    {69331, 115.7, 518173, 4806, 2572, 127852, 1961},
    {70551, 116.9, 554894, 4007, 2827, 130081, 1962},
};

// NIST StRD Longley certified values (NIST certified values, from memory;
// cross-checked live against numpy below so that a mistyped digit fails).
constexpr double kCertCoef[7] = {-3482258.63459582, 15.0618722713733,  -0.358191792925910e-01,
                                 -2.02022980381683, -1.03322686717359, -0.511041056535807e-01,
                                 1829.15146461355};
constexpr double kCertSd[7] = {890420.383607373,  84.9149257747669,  0.334910077722432e-01,
                               0.488399681651699, 0.214274163161675, 0.226073200069370,
                               455.478499142212};
constexpr double kCertResidualSd = 304.854073561965;
constexpr double kCertRSquared = 0.995479004577296;

struct Longley {
  std::vector<double> y, x;
};

Longley LongleyData() {
  Longley d;
  for (const auto& row : kLongley) {
    d.y.push_back(row[0]);
    for (int j = 1; j < 7; ++j) d.x.push_back(row[j]);
  }
  return d;
}

TEST_CASE("Longley: coefficients, standard deviations and residual SD match NIST", "[ols]") {
  const Longley d = LongleyData();
  absl::StatusOr<OlsResult> fit = OrdinaryLeastSquares(d.y, d.x, 6);
  REQUIRE(fit.ok());
  REQUIRE(fit->coefficients.size() == 7);
  double worst_coef = 0.0, worst_sd = 0.0;
  for (int j = 0; j < 7; ++j) {
    INFO("coefficient B" << j);
    // Source: NIST StRD Longley certified values.
    CHECK(RelDiff(fit->coefficients[j], kCertCoef[j]) <= 1e-8);
    CHECK(RelDiff(fit->std_errors[j], kCertSd[j]) <= 1e-8);
    worst_coef = std::max(worst_coef, RelDiff(fit->coefficients[j], kCertCoef[j]));
    worst_sd = std::max(worst_sd, RelDiff(fit->std_errors[j], kCertSd[j]));
  }
  CHECK(RelDiff(fit->residual_sd, kCertResidualSd) <= 1e-8);  // NIST certified residual SD
  CHECK(RelDiff(fit->r_squared, kCertRSquared) <= 1e-8);      // NIST certified R-squared
  CHECK(fit->nobs == 16);
  CHECK(fit->num_params == 7);
  CHECK(std::fabs(fit->rss - kCertResidualSd * kCertResidualSd * 9) <= 1e-6 * fit->rss);
  WARN("Longley max relative error: coefficients " << worst_coef << ", SDs " << worst_sd
                                                   << ", residual SD "
                                                   << RelDiff(fit->residual_sd, kCertResidualSd));
}

TEST_CASE("Longley certified values agree with numpy.linalg.lstsq on the same data", "[ols]") {
  // Guards the from-memory certified values: numpy (1.24.2 on Debian 12)
  // must reproduce every one of them to 1e-8.
  const Longley d = LongleyData();
  nlohmann::json in;
  in["y"] = d.y;
  nlohmann::json rows = nlohmann::json::array();
  for (const auto& row : kLongley) rows.push_back(std::vector<double>(row + 1, row + 7));
  in["x"] = rows;
  in["coef"] = std::vector<double>(kCertCoef, kCertCoef + 7);
  in["sd"] = std::vector<double>(kCertSd, kCertSd + 7);
  in["resid_sd"] = kCertResidualSd;
  testing::CommandResult r = testing::RunPython("nist_longley.py", {}, in.dump());
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  nlohmann::json out = nlohmann::json::parse(r.out);
  CHECK(out["rank"].get<int>() == 6);
  CHECK(out["coef_maxrel"].get<double>() <= 1e-8);   // numpy.linalg.lstsq coefficients
  CHECK(out["sd_maxrel"].get<double>() <= 1e-8);     // numpy SVD-based (X'X)^-1
  CHECK(out["resid_sd_rel"].get<double>() <= 1e-8);  // numpy residual SD
  WARN("numpy " << out["numpy"].get<std::string>() << " vs certified: coef "
                << out["coef_maxrel"].get<double>() << ", sd " << out["sd_maxrel"].get<double>()
                << ", residual SD " << out["resid_sd_rel"].get<double>());
}

TEST_CASE("exact fit without intercept and uncentred R-squared", "[ols]") {
  // y = 2 x1 - 3 x2 exactly; hand-computable.
  const std::vector<double> x = {1, 0, 0, 1, 1, 1, 2, 1, 3, 5};
  std::vector<double> y;
  for (int i = 0; i < 5; ++i) y.push_back(2 * x[2 * i] - 3 * x[2 * i + 1]);
  OlsOptions opt;
  opt.add_intercept = false;
  absl::StatusOr<OlsResult> fit = OrdinaryLeastSquares(y, x, 2, opt);
  REQUIRE(fit.ok());
  CHECK(fit->coefficients[0] == Approx(2.0).epsilon(1e-12));
  CHECK(fit->coefficients[1] == Approx(-3.0).epsilon(1e-12));
  CHECK(fit->rss == Approx(0.0).margin(1e-20));
  CHECK(fit->r_squared == Approx(1.0).epsilon(1e-12));
}

TEST_CASE("intercept-only regression gives the mean and its standard error", "[ols]") {
  const std::vector<double> y = {1, 2, 3, 4, 10};
  absl::StatusOr<OlsResult> fit = OrdinaryLeastSquares(y, {}, 0);
  REQUIRE(fit.ok());
  CHECK(fit->coefficients[0] == Approx(4.0));
  // sample variance = (9+4+1+0+36)/4 = 12.5, se = sqrt(12.5/5)
  CHECK(fit->std_errors[0] == Approx(std::sqrt(12.5 / 5)));
  CHECK(fit->r_squared == Approx(0.0).margin(1e-15));
}

TEST_CASE("rank deficiency and bad input are clear errors", "[ols]") {
  // Column 3 = column 1 + column 2.
  std::vector<double> x, y;
  for (int i = 0; i < 10; ++i) {
    const double a = i, b = (i * i) % 7;
    x.insert(x.end(), {a, b, a + b});
    y.push_back(1.0 + a - b + 0.1 * ((i * 3) % 5));
  }
  absl::StatusOr<OlsResult> fit = OrdinaryLeastSquares(y, x, 3);
  REQUIRE_FALSE(fit.ok());
  CHECK(std::string(fit.status().message()) ==
        "design matrix is rank deficient: rank 3 of 4 columns");

  std::vector<double> xc(10, 5.0);
  fit = OrdinaryLeastSquares(y, xc, 1);
  REQUIRE_FALSE(fit.ok());
  CHECK(std::string(fit.status().message()) ==
        "design matrix is rank deficient: column 0 is constant (collinear with the intercept)");

  fit = OrdinaryLeastSquares(y, std::vector<double>(7, 1.0), 1);
  REQUIRE_FALSE(fit.ok());
  CHECK(std::string(fit.status().message()) ==
        "design matrix has 7 entries; expected 10 rows x 1 columns");

  fit = OrdinaryLeastSquares({1.0, 2.0, 3.0}, {1.0, 2.0, 4.0, 1.0, 2.0, 3.0}, 2);
  REQUIRE_FALSE(fit.ok());
  CHECK(std::string(fit.status().message()) ==
        "regression has 3 observations and 3 parameters; at least 4 observations are needed");

  std::vector<double> ynan = y;
  ynan[4] = NAN;
  fit = OrdinaryLeastSquares(ynan, x, 3);
  REQUIRE_FALSE(fit.ok());
  CHECK(std::string(fit.status().message()) == "regressand is not finite at row 4");
}

}  // namespace
}  // namespace aftershock
