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
#include "estimation/simulated_law.h"

namespace aftershock {
namespace {

// A law of the panel and the prefix of its windows' names.
struct Truth {
  std::string name;
  testing::SimulatedLaw law;
};

// Nine laws: Gaussian and Student-t GARCH(1,1) from near-Gaussian to heavy
// tails, ARCH(2), GARCH(1,2) and an AR(1) mean with asymmetric variance.
std::vector<Truth> Truths() {
  using Named = std::vector<std::pair<std::string, double>>;
  const Named g11 = {{"mu", 0.03}, {"omega", 0.02}, {"alpha_1", 0.06}, {"beta_1", 0.92}};
  const Named g11b = {{"mu", 0.03}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}};
  const Named a2 = {{"mu", 0.03}, {"omega", 0.5}, {"alpha_1", 0.3}, {"alpha_2", 0.15}};
  auto with_nu = [](Named v, double nu) {
    v.emplace_back("nu", nu);
    return v;
  };
  auto garch11 = [](const char* law, Named v) {
    return testing::SimulatedLaw{"constant", {}, "garch", {1, 1}, law, std::move(v)};
  };
  auto arch2 = [](const char* law, Named v) {
    return testing::SimulatedLaw{"constant", {}, "arch", {2}, law, std::move(v)};
  };
  return {
      {"g11n", garch11("gaussian", g11)},
      {"g11t5", garch11("student", with_nu(g11, 5))},
      {"g11t8",
       garch11("student",
               {{"mu", 0.03}, {"omega", 0.05}, {"alpha_1", 0.1}, {"beta_1", 0.85}, {"nu", 8}})},
      {"g11t20", garch11("student", with_nu(g11b, 20))},
      {"g11t40", garch11("student", with_nu(g11b, 40))},
      {"a2n", arch2("gaussian", a2)},
      {"a2t12", arch2("student", with_nu(a2, 12))},
      {"g12t15",
       {"constant",
        {},
        "garch",
        {1, 2},
        "student",
        {{"mu", 0.03},
         {"omega", 0.03},
         {"alpha_1", 0.05},
         {"beta_1", 0.5},
         {"beta_2", 0.4},
         {"nu", 15}}}},
      {"ar1gjrt6", testing::ArAsymmetricStudentLaw()},
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
    INFO(t.name);
    for (int n : {500, 1000, 2000}) {
      for (uint64_t seed : {1, 2, 3}) {
        const std::vector<double> r = testing::SimulateLaw(t.law, n, 7000 + seed);
        auto rep = IdentifyModel(r);
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
