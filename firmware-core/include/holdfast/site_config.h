// Site configuration: JSON document -> compiled Site (site.h).
// The format is documented in config/FORMAT.md. CompileSite never throws and
// never stops at the first problem: every problem is reported with its JSON
// path (RFC 6901 pointer, e.g. "/segments/0/sections/2/length_m") and reason.
#pragma once

#include <string>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "holdfast/site.h"

namespace holdfast {

struct ConfigProblem {
  std::string path;     // JSON pointer into the document ("" = the whole document)
  std::string message;  // what is wrong, in words a user can act on
  std::string ToString() const;  // "<path>: <message>"
};

// Returns true and fills `site` when the document is valid; otherwise returns
// false and appends every problem found to `problems` (site is then unspecified).
bool CompileSite(const nlohmann::json& doc, Site* site, std::vector<ConfigProblem>* problems);

// The format identifier this build reads ("holdfast-site/1").
const char* SiteFormatVersion();

}  // namespace holdfast
