// Water-utility mode files at the boundary: the annual water-balance input
// ("holdfast-water-year/1", config/WATER.md) and a small JSON reader that
// reports every problem with the file name and JSON pointer, the way the site
// config does ("year.json:/system_input/0/volume_m3: must not be negative").
#pragma once

#include <initializer_list>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "holdfast/site_config.h"
#include "holdfast/water.h"

namespace holdfast {

// Reads and parses a JSON file. Parse errors name line and column; duplicate
// keys are reported. False (with problems) when the file is unusable.
bool ReadJsonFile(const std::string& path, nlohmann::json* doc, std::vector<ConfigProblem>* problems);

// Checked access to members of JSON objects. Paths are JSON pointers; every
// problem is appended with the file name as prefix.
class JsonChecker {
 public:
  JsonChecker(std::string file, std::vector<ConfigProblem>* problems) : file_(std::move(file)), problems_(problems) {}
  void Add(const std::string& path, const std::string& message);
  // Unknown keys are errors (with a suggestion); keys starting with '_' are comments.
  void Keys(const nlohmann::json& obj, const std::string& path, std::initializer_list<const char*> allowed);
  // Each returns true when the member was present and good (*out set).
  // `required`: a missing member is reported.
  bool Number(const nlohmann::json& obj, const char* key, const std::string& path, bool required, double* out,
              double lo = -1e300, double hi = 1e300, const char* range_text = nullptr);
  bool String(const nlohmann::json& obj, const char* key, const std::string& path, bool required, std::string* out);
  bool Bool(const nlohmann::json& obj, const char* key, const std::string& path, bool required, bool* out);
  const nlohmann::json* Object(const nlohmann::json& obj, const char* key, const std::string& path, bool required);
  const nlohmann::json* Array(const nlohmann::json& obj, const char* key, const std::string& path, bool required);
  bool ok() const { return problems_->size() == start_; }

 private:
  std::string file_;
  std::vector<ConfigProblem>* problems_;
  size_t start_ = problems_->size();
};

// "holdfast-water-year/1": the IWA water balance inputs of one district or
// system for a period (normally a year). See config/WATER.md.
bool LoadWaterYearFile(const std::string& path, water::WaterBalanceInputs* in, std::string* name,
                       std::vector<ConfigProblem>* problems);
bool CompileWaterYear(const nlohmann::json& doc, const std::string& file, water::WaterBalanceInputs* in,
                      std::string* name, std::vector<ConfigProblem>* problems);

}  // namespace holdfast
