// Reading a JSON file with the checks of holdfast/json_check.h.
#pragma once

#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "holdfast/site_config.h"

namespace holdfast {

// Reads the whole file (binary). False, with "path: cannot read the file: why".
bool ReadTextFile(const std::string& path, std::string* text, std::vector<ConfigProblem>* problems);

// Reads and parses a JSON file with ParseJsonText. Problems name the file:
// "path:line:column" for a parse error, "path:/a/0/b" for a repeated key.
// Returns true when the text parsed and had no repeated key. `parsed`, when
// given, says whether *doc was filled (a repeated key still fills it, so that
// the caller can report the document's other problems too).
bool ReadJsonFile(const std::string& path, nlohmann::json* doc, std::vector<ConfigProblem>* problems,
                  bool* parsed = nullptr);

}  // namespace holdfast
