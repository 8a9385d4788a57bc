// Water-utility mode files at the boundary: the annual water-balance input
// ("holdfast-water-year/1", config/WATER.md) and a small JSON reader that
// reports every problem with the file name and JSON pointer, the way the site
// config does ("year.json:/system_input/0/volume_m3: must be ... (got -5)").
// ReadJsonFile is in json_file.h.
#pragma once

#include <initializer_list>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "holdfast/json_check.h"
#include "holdfast/site_config.h"
#include "json_file.h"
#include "holdfast/water.h"

namespace holdfast {

// Checked access to members of JSON objects, on JsonCheck with `bool
// required` and range wording. Paths are JSON pointers; every problem is
// appended with the file name as prefix.
class JsonChecker : private JsonCheck {
 public:
  JsonChecker(std::string file, std::vector<ConfigProblem>* problems)
      : JsonCheck(problems, std::move(file)), start_(problems->size()) {}
  using JsonCheck::Add;
  // Unknown keys are errors (with a suggestion); keys starting with '_' are comments.
  void Keys(const nlohmann::json& obj, const std::string& path, std::initializer_list<const char*> allowed) {
    ExactKeys(obj, path, std::vector<std::string>(allowed.begin(), allowed.end()));
  }
  // Each returns true when the member was present and good (*out set).
  // `required`: a missing member is reported. Out of [lo, hi]: "must be
  // <range_text> (got v)".
  bool Number(const nlohmann::json& obj, const char* key, const std::string& path, bool required, double* out,
              double lo = -1e300, double hi = 1e300, const char* range_text = nullptr);
  bool String(const nlohmann::json& obj, const char* key, const std::string& path, bool required, std::string* out) {
    return JsonCheck::String(obj, key, path, NeedOf(required), out) == Got::kOk;
  }
  bool Bool(const nlohmann::json& obj, const char* key, const std::string& path, bool required, bool* out) {
    return JsonCheck::Bool(obj, key, path, NeedOf(required), out) == Got::kOk;
  }
  const nlohmann::json* Object(const nlohmann::json& obj, const char* key, const std::string& path, bool required) {
    const nlohmann::json* m = nullptr;
    return JsonCheck::Object(obj, key, path, NeedOf(required), &m) == Got::kOk ? m : nullptr;
  }
  const nlohmann::json* Array(const nlohmann::json& obj, const char* key, const std::string& path, bool required) {
    const nlohmann::json* m = nullptr;
    return JsonCheck::Array(obj, key, path, NeedOf(required), &m) == Got::kOk ? m : nullptr;
  }
  bool ok() const { return problems()->size() == start_; }

 private:
  static Need NeedOf(bool required) { return required ? Need::kRequired : Need::kOptional; }
  size_t start_;
};

// "holdfast-water-year/1": the IWA water balance inputs of one district or
// system for a period (normally a year). See config/WATER.md.
bool LoadWaterYearFile(const std::string& path, water::WaterBalanceInputs* in, std::string* name,
                       std::vector<ConfigProblem>* problems);
bool CompileWaterYear(const nlohmann::json& doc, const std::string& file, water::WaterBalanceInputs* in,
                      std::string* name, std::vector<ConfigProblem>* problems);

}  // namespace holdfast
