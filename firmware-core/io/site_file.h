// Site config files: read, parse and compile a "holdfast-site/1" JSON file.
#pragma once

#include <string>
#include <vector>

#include "holdfast/site.h"
#include "holdfast/site_config.h"

namespace holdfast {

// Reads `path`, parses it as JSON and compiles it with CompileSite. Returns
// true when the site is valid. Otherwise appends every problem found; their
// paths are prefixed with the file name so that ToString() reads
//   "site.json:/segments/0/sections/1/length_m: must be positive (got -5)"
//   "site.json:12:7: parse error: ..."     (line and column, 1-based)
//   "site.json: cannot read the file: No such file or directory"
// Duplicate keys in one JSON object (which a JSON parser silently collapses to
// the last one) are reported too. Never throws.
bool LoadSiteFile(const std::string& path, holdfast::Site* site,
                  std::vector<holdfast::ConfigProblem>* problems);

}  // namespace holdfast
