// Rendering of an IdentificationReport as text or JSON (`aftershock fit
// --mean auto --variance auto`).
#ifndef AFTERSHOCK_APP_IDENTIFY_REPORT_H_
#define AFTERSHOCK_APP_IDENTIFY_REPORT_H_

#include <string>

#include <nlohmann/json.hpp>

#include "aftershock/identify.h"

namespace aftershock::app {

nlohmann::json IdentificationJson(const IdentificationReport& rep);

// Residual diagnostics as text, grouped by the question each answers: dynamics
// left in the mean, volatility clustering left, asymmetry left, tails.
std::string DiagnosticsText(const std::vector<TestOutcome>& tests);
// `periods_per_year` annualizes the final model's verdict (FitVerdict).
std::string IdentificationText(const IdentificationReport& rep, const std::string& title,
                               double periods_per_year = 252);

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_IDENTIFY_REPORT_H_
