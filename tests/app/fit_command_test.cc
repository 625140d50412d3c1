// `aftershock fit` input handling: tick files need an instrument, prices need
// to be asked for, and a tick file's bar returns fit exactly like the same
// returns given as a series.
#include <cmath>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "catch2/catch.hpp"
#include "nlohmann/json.hpp"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RunCli;

ModelParams Garch() {
  ModelParams p;
  p.spec.mean = MeanKind::kConstant;
  p.spec.variance = VarianceKind::kGarch;
  p.spec.arch_order = 1;
  p.spec.garch_order = 1;
  p.spec.innovations = Innovations::kNormal;
  p.values = {0.0002, 2e-6, 0.08, 0.9};
  return p;
}

struct Files {
  std::string ticks, series, prices;
};

// 800 one-second price ticks of ALDER.X (epoch milliseconds) interleaved
// with BIRCH.Y; the same ALDER.X log returns as a series and as prices.
Files Write(const std::string& dir) {
  const std::vector<double> r = testing::SimulatedReturns(Garch(), 800, 17);
  std::string ticks = "symbol,time,price\n", series = "ret\n", prices = "price\n";
  double p = 100.0;
  int64_t t_ms = 1772443800000;
  absl::StrAppend(&ticks, "ALDER.X,", t_ms, ",", absl::StrFormat("%.17g", p), "\n");
  absl::StrAppend(&prices, absl::StrFormat("%.17g", p), "\n");
  for (size_t i = 0; i < r.size(); ++i) {
    t_ms += 1000;
    const double next = p * std::exp(r[i]);
    absl::StrAppend(&ticks, "ALDER.X,", t_ms, ",", absl::StrFormat("%.17g", next), "\n");
    absl::StrAppend(&ticks, "BIRCH.Y,", t_ms, ",50\n");
    absl::StrAppend(&prices, absl::StrFormat("%.17g", next), "\n");
    // The series holds the returns the bar builder computes: log(p1) - log(p0).
    absl::StrAppend(&series, absl::StrFormat("%.17g", std::log(next) - std::log(p)), "\n");
    p = next;
  }
  return {testing::WriteFile(dir + "/ticks.csv", ticks),
          testing::WriteFile(dir + "/series.csv", series),
          testing::WriteFile(dir + "/prices.csv", prices)};
}

nlohmann::json FitJson(const std::vector<std::string>& extra) {
  std::vector<std::string> args = {"fit", "--mean", "constant", "--variance", "garch",
                                   "--format", "json"};
  args.insert(args.end(), extra.begin(), extra.end());
  auto out = RunCli(args);
  INFO(out.err);
  REQUIRE(out.exit_code == 0);
  return nlohmann::json::parse(out.out);
}

TEST_CASE("fit refuses a tick file without --symbol, naming its instruments", "[cli]") {
  const Files f = Write(testing::ScratchDir("fit_command_symbol"));
  auto out = RunCli({"fit", "--input", f.ticks});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("several instruments (ALDER.X, BIRCH.Y): choose one with --symbol") !=
        std::string::npos);
  out = RunCli({"fit", "--input", f.ticks, "--symbol", "CEDAR.Z"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("no ticks of 'CEDAR.Z' (it has ALDER.X, BIRCH.Y)") != std::string::npos);
  out = RunCli({"fit", "--input", f.series, "--symbol", "ALDER.X"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("no symbol column") != std::string::npos);
}

TEST_CASE("fit on one instrument of a tick file equals the fit of its returns", "[cli]") {
  const Files f = Write(testing::ScratchDir("fit_command_ticks"));
  const auto from_ticks = FitJson({"--input", f.ticks, "--symbol", "ALDER.X"});
  const auto from_series = FitJson({"--input", f.series});
  const auto from_prices = FitJson({"--input", f.prices, "--from-prices"});
  CHECK(from_ticks.at("column") == "ALDER.X");
  CHECK(from_ticks.at("likelihood_terms") == 800);
  for (const auto* other : {&from_series, &from_prices}) {
    CHECK(other->at("likelihood_terms") == 800);
    for (const char* k : {"mu", "omega", "alpha_1", "beta_1"}) {
      INFO(k);
      CHECK(from_ticks.at("estimates").at(k).get<double>() ==
            Approx(other->at("estimates").at(k).get<double>()).epsilon(1e-9));
    }
  }
  // Five-second bars of the same ticks: 801 one-second ticks give 160 or
  // 161 bars (depending on the alignment), one return fewer.
  auto coarse = RunCli({"fit", "--input", f.ticks, "--symbol", "ALDER.X", "--interval", "5s",
                        "--variance", "flat", "--format", "json"});
  INFO(coarse.err);
  REQUIRE(coarse.exit_code == 0);
  const int nobs = nlohmann::json::parse(coarse.out).at("likelihood_terms").get<int>();
  CHECK(nobs >= 159);
  CHECK(nobs <= 160);
}

TEST_CASE("fit refuses a price column unless asked to take log returns", "[cli]") {
  const Files f = Write(testing::ScratchDir("fit_command_prices"));
  auto out = RunCli({"fit", "--input", f.prices});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("column 'price' holds prices; give --from-prices") != std::string::npos);
  // --scale turns fractions into per cent: mu scales by 100 (the likelihood
  // is scale-equivariant for GARCH with omega scaled by 100^2).
  const auto pct = FitJson({"--input", f.series, "--scale", "100"});
  const auto frac = FitJson({"--input", f.series});
  CHECK(pct.at("estimates").at("mu").get<double>() ==
        Approx(100 * frac.at("estimates").at("mu").get<double>()).epsilon(1e-3));
  out = RunCli({"fit", "--input", "/nonexistent/r.csv"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("cannot open '/nonexistent/r.csv': No such file or directory") !=
        std::string::npos);
}

TEST_CASE("the text report opens with the verdict; diagnostics grouped by question", "[cli]") {
  const Files f = Write(testing::ScratchDir("fit_command_text"));
  auto out = RunCli({"fit", "--input", f.series, "--periods-per-year", "100"});
  INFO(out.err);
  REQUIRE(out.exit_code == 0);
  const auto j = FitJson({"--input", f.series});
  const double m = j.at("persistence").get<double>();
  const double var = j.at("unconditional_variance").get<double>();
  // First line: the label and the input; second: the verdict with the numbers
  // of the JSON report (half-life ln 1/2 / ln m; volatility sqrt(var), x10 a year).
  CHECK(out.out.rfind("const/GARCH(1,1)/gaussian on ", 0) == 0);
  const std::string verdict = absl::StrFormat(
      "  memory %.3g: a variance shock halves in %.1f bars; long-run volatility "
      "%.4g per bar, %.4g a year (100 bars)\n",
      m, std::log(0.5) / std::log(m), std::sqrt(var), 10 * std::sqrt(var));
  CHECK(out.out.find(verdict) == out.out.find('\n') + 1);
  CHECK(out.out.find("95 % interval (robust)") != std::string::npos);
  const size_t mean_q = out.out.find("Dynamics left in the mean?");
  const size_t clustering = out.out.find("Volatility clustering left?");
  const size_t asym = out.out.find("Asymmetry left?");
  const size_t tails = out.out.find("Tails as the law assumes?");
  const size_t caution = out.out.find("not advice");
  CHECK(mean_q < clustering);
  CHECK(clustering < asym);
  CHECK(asym < tails);
  CHECK(tails < caution);
  CHECK(caution != std::string::npos);
}

TEST_CASE("fit takes named lags and refuses the retired names with their replacement", "[cli]") {
  const Files f = Write(testing::ScratchDir("fit_command_lags"));
  const auto gjr =
      FitJson({"--input", f.series, "--variance", "gjr", "--shock-lags", "1", "--variance-lags",
               "1", "--asym-lags", "1", "--innovations", "student"});
  CHECK(gjr.at("model").at("label") == "const/GJR-GARCH(1,1)/student");
  CHECK(gjr.at("model").at("shock_lags") == 1);
  CHECK(gjr.at("model").at("asym_lags") == 1);
  CHECK(gjr.at("model").at("variance_lags") == 1);
  for (const char* k : {"mu", "omega", "alpha_1", "gamma_1", "beta_1", "nu"}) {
    INFO(k);
    CHECK(gjr.at("estimates").contains(k));
    CHECK(gjr.at("se_hessian").contains(k));
    CHECK(gjr.at("se_robust").contains(k));
  }
  CHECK(gjr.at("log_likelihood").is_number());
  // A lag the variance kind has no terms for.
  auto out = RunCli({"fit", "--input", f.series, "--variance", "garch", "--asym-lags", "1"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("variance 'garch' has no asym_lags (asym_lags is for gjr)") !=
        std::string::npos);
  // Retired names: each error names the new one.
  out = RunCli({"fit", "--input", f.series, "--variance-order", "1,1"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("option '--variance-order' was renamed: use --shock-lags, --asym-lags, "
                     "--variance-lags (CHANGELOG.md)") != std::string::npos);
  out = RunCli({"fit", "--input", f.series, "--innovations", "t"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("'t' was renamed: use student") != std::string::npos);
  out = RunCli({"fit", "--input", f.series, "--variance", "constant"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("'constant' was renamed: use flat") != std::string::npos);
  out = RunCli({"fit", "--input", f.series, "--presample", "backcast"});
  CHECK(out.exit_code == 2);
  CHECK(out.err.find("'backcast' was renamed: use robust-start") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
