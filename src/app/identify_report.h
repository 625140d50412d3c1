// Rendering of an IdentificationReport as text or JSON (`aftershock fit
// --mean auto --variance auto`).
#ifndef AFTERSHOCK_APP_IDENTIFY_REPORT_H_
#define AFTERSHOCK_APP_IDENTIFY_REPORT_H_

#include <string>

#include <nlohmann/json.hpp>

#include "aftershock/identify.h"

namespace aftershock::app {

nlohmann::json IdentificationJson(const IdentificationReport& rep);
std::string IdentificationText(const IdentificationReport& rep, const std::string& title);

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_IDENTIFY_REPORT_H_
