// The identification's decisions on a fixed panel of simulated windows, held
// against the record of the last reviewed build (data/identify_panel.tsv).
//
// This is a regression record, not a reference: the recorded choices are this
// project's own earlier output. Its job is to make any change of a decision
// visible in review (a change to the estimator, the search or the tests that
// moves a chosen model or its log-likelihood fails here), so that such a
// change is looked at and the record rewritten on purpose:
//
//   AFTERSHOCK_WRITE_IDENTIFY_PANEL=1 build/tests/identify_panel_test
//
// rewrites tests/estimation/data/identify_panel.tsv from the current build
// (the test then fails, so a rewrite never passes unnoticed). How well the
// choices recover the simulated models is checked in identify_test and
// recovery_test.
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdlib>
#include <fstream>
#include <map>
#include <sstream>
#include <string>
#include <vector>

#include "absl/strings/str_format.h"
#include "absl/strings/str_split.h"
#include "aftershock/identify.h"
#include "aftershock/simulate.h"

namespace aftershock {
namespace {

struct Truth {
  std::string name;  // the window's label prefix
  const char* mean;
  std::vector<int> mean_orders;
  const char* variance;
  VarianceLags variance_orders;
  const char* law;
  std::vector<std::pair<std::string, double>> values;
};

// Nine laws: Gaussian and Student-t GARCH(1,1) from near-Gaussian to heavy
// tails, ARCH(2), GARCH(1,2) and an AR(1) mean with asymmetric variance.
std::vector<Truth> Truths() {
  const std::vector<std::pair<std::string, double>> g11 = {
      {"mu", 0.03}, {"omega", 0.02}, {"alpha_1", 0.06}, {"beta_1", 0.92}};
  auto with_nu = [](std::vector<std::pair<std::string, double>> v, double nu) {
    v.emplace_back("nu", nu);
    return v;
  };
  const std::vector<std::pair<std::string, double>> g11b = {
      {"mu", 0.03}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}};
  const std::vector<std::pair<std::string, double>> a2 = {
      {"mu", 0.03}, {"omega", 0.5}, {"alpha_1", 0.3}, {"alpha_2", 0.15}};
  return {
      {"g11n", "constant", {}, "garch", {1, 1}, "gaussian", g11},
      {"g11t5", "constant", {}, "garch", {1, 1}, "student", with_nu(g11, 5)},
      {"g11t8",
       "constant",
       {},
       "garch",
       {1, 1},
       "student",
       {{"mu", 0.03}, {"omega", 0.05}, {"alpha_1", 0.1}, {"beta_1", 0.85}, {"nu", 8}}},
      {"g11t20", "constant", {}, "garch", {1, 1}, "student", with_nu(g11b, 20)},
      {"g11t40", "constant", {}, "garch", {1, 1}, "student", with_nu(g11b, 40)},
      {"a2n", "constant", {}, "arch", {2}, "gaussian", a2},
      {"a2t12", "constant", {}, "arch", {2}, "student", with_nu(a2, 12)},
      {"g12t15",
       "constant",
       {},
       "garch",
       {1, 2},
       "student",
       {{"mu", 0.03},
        {"omega", 0.03},
        {"alpha_1", 0.05},
        {"beta_1", 0.5},
        {"beta_2", 0.4},
        {"nu", 15}}},
      {"ar1gjrt6",
       "arma",
       {1, 0},
       "gjr",
       {1, 1, 1},
       "student",
       {{"mu", 0.02},
        {"ar_1", 0.3},
        {"omega", 0.03},
        {"alpha_1", 0.02},
        {"gamma_1", 0.16},
        {"beta_1", 0.88},
        {"nu", 6}}},
  };
}

// One window's outcome, as recorded: the chosen model, whether ARCH effects
// were found, the joint fit's log-likelihood.
struct Decision {
  std::string model;
  bool arch_effect = false;
  double loglik = 0;
};

std::string RecordPath() {
  return std::string(AFTERSHOCK_SOURCE_DIR) + "/tests/estimation/data/identify_panel.tsv";
}

std::map<std::string, Decision> ReadRecord() {
  std::map<std::string, Decision> out;
  std::ifstream in(RecordPath());
  std::string line;
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    const std::vector<std::string> f = absl::StrSplit(line, '\t');
    REQUIRE(f.size() == 4);
    Decision d;
    d.model = f[1];
    d.arch_effect = f[2] == "yes";
    d.loglik = std::stod(f[3]);
    out[f[0]] = d;
  }
  return out;
}

TEST_CASE("the identification's decisions on the recorded panel are unchanged", "[identify]") {
  std::map<std::string, Decision> now;
  for (const Truth& t : Truths()) {
    auto spec = MakeModelSpec(t.mean, t.mean_orders, t.variance, t.variance_orders, t.law);
    REQUIRE(spec.ok());
    auto params = ModelParams::FromNamed(*spec, t.values);
    INFO(t.name);
    REQUIRE(params.ok());
    for (int n : {500, 1000, 2000}) {
      for (uint64_t seed : {1, 2, 3}) {
        SimulationOptions so;
        so.n = n;
        so.seed = 7000 + seed;
        auto sim = Simulate(*params, so);
        REQUIRE(sim.ok());
        auto rep = IdentifyModel(sim->returns);
        REQUIRE(rep.ok());
        Decision d;
        d.model = rep->final_fit.params.spec.Label();
        d.arch_effect = rep->arch_effect;
        d.loglik = rep->final_fit.loglik;
        now[absl::StrFormat("%s_%d_%d", t.name, n, seed)] = d;
      }
    }
  }
  REQUIRE(now.size() == 81);

  if (std::getenv("AFTERSHOCK_WRITE_IDENTIFY_PANEL") != nullptr) {
    std::ofstream out(RecordPath());
    out << "# Written by identify_panel_test (AFTERSHOCK_WRITE_IDENTIFY_PANEL=1): the\n"
           "# identification's choices on the panel, a regression record of this project's\n"
           "# own output (not a reference). window\tchosen model\tARCH effect\tlog-likelihood\n";
    for (const auto& [window, d] : now) {
      out << window << '\t' << d.model << '\t' << (d.arch_effect ? "yes" : "no") << '\t'
          << absl::StrFormat("%.10g", d.loglik) << '\n';
    }
    REQUIRE(out.good());
    FAIL("rewrote " << RecordPath() << ": review the difference, then run without the variable");
  }

  const std::map<std::string, Decision> recorded = ReadRecord();
  REQUIRE(recorded.size() == now.size());
  int changed = 0;
  for (const auto& [window, d] : now) {
    const auto it = recorded.find(window);
    REQUIRE(it != recorded.end());
    const Decision& r = it->second;
    INFO(window << ": recorded " << r.model << ", ARCH effect " << r.arch_effect << ", "
                << absl::StrFormat("%.10g", r.loglik) << "; now " << d.model << ", "
                << d.arch_effect << ", " << absl::StrFormat("%.10g", d.loglik));
    const bool same = d.model == r.model && d.arch_effect == r.arch_effect &&
                      std::fabs(d.loglik - r.loglik) <= 1e-7 * std::fabs(r.loglik) + 1e-7;
    CHECK(same);
    changed += same ? 0 : 1;
  }
  INFO(changed << " of " << now.size() << " windows changed");
  CHECK(changed == 0);
}

}  // namespace
}  // namespace aftershock
