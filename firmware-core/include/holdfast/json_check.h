// Checked JSON: parsing with duplicate-key detection and readers that check a
// member's type and value, each problem reported as a ConfigProblem with the
// RFC 6901 pointer of the offending member (or of the missing one). Shared by
// the site, scenario, batch, tuning and water file readers. Pure: no file I/O
// (io/json_file.h reads files).
#pragma once

#include <cstddef>
#include <initializer_list>
#include <string>
#include <string_view>
#include <vector>

#include <nlohmann/json.hpp>

#include "holdfast/site_config.h"
#include "holdfast/units.h"

namespace holdfast {

// Parses `text` as JSON into *doc. A parse error gives one problem at
// "source:line:column" (1-based) with the parser's reason; each key repeated
// within one object (JSON keeps only the last) gives a problem whose path is
// the JSON pointer of the repeated member (e.g. "/segments/1/id"). Returns
// true when the text parsed and had no repeated key. *doc is set when the text
// parsed (repeated keys or not) and left as it was otherwise. Never throws.
bool ParseJsonText(const std::string& text, const std::string& source, nlohmann::json* doc,
                   std::vector<ConfigProblem>* problems);

namespace json_text {

// Pointers and wording used by the readers below.
std::string PointerToken(const std::string& key);           // '~' -> "~0", '/' -> "~1"
std::string Join(const std::string& path, const std::string& key);  // path + "/" + token
std::string Join(const std::string& path, std::size_t index);
std::string Num(double v);                  // "%.10g"
std::string Quote(const std::string& s);    // "\"s\"", cut after 60 characters
std::string Describe(const nlohmann::json& j);  // "a number (3)", "a string \"x\"", "an array" ...
std::string ListNames(const std::vector<std::string>& names);  // "a, b, c"
// Levenshtein distance, for "did you mean" (also used by the unit names).
std::size_t EditDistance(std::string_view a, std::string_view b);
// The candidate close enough to `name` to be a typo of it (or `name` plus a
// unit suffix), or "".
std::string Closest(const std::string& name, const std::vector<std::string>& candidates);

}  // namespace json_text

// Whether a member must be present.
enum class Need { kRequired, kOptional };
// Result of reading one member: absent (optional and not given, or required
// and missing, which is then reported), bad (reported) or a usable value.
enum class Got { kAbsent, kBad, kOk };

// An enumeration's JSON names, for JsonCheck::Enum.
template <typename E>
struct EnumName {
  const char* name;
  E value;
};

// Checked access to members of JSON objects. `obj` is always an object;
// `path` is its pointer; problems are reported at Join(path, key). On kBad or
// kAbsent, *out is left as it was.
class JsonCheck {
 public:
  // `file`, when given, prefixes every problem path ("file:/a/b", or "file"
  // for the whole document).
  explicit JsonCheck(std::vector<ConfigProblem>* problems, std::string file = std::string())
      : problems_(problems), file_(std::move(file)) {}

  void Add(const std::string& path, const std::string& message);
  std::vector<ConfigProblem>* problems() const { return problems_; }

  // The member or nullptr; never reports.
  static const nlohmann::json* Member(const nlohmann::json& obj, const char* key);
  // The member (any type) or nullptr; a missing required one is reported as
  // missing, with `expected` in words ("a number").
  const nlohmann::json* Present(const nlohmann::json& obj, const char* key, const std::string& path, Need need,
                                const char* expected);

  // A value (at `path`, e.g. an array element) that must be a finite number.
  Got NumberValue(const nlohmann::json& v, const std::string& path, double* out);
  // A value that must be a finite number in [lo, hi] (open bounds as in Range).
  Got RangeValue(const nlohmann::json& v, const std::string& path, double lo, double hi, double* out,
                 bool lo_open = false, bool hi_open = false);
  // A finite number.
  Got Number(const nlohmann::json& obj, const char* key, const std::string& path, Need need, double* out);
  // A finite number in [lo, hi]; an open bound excludes its end ("must be in (0, 1]").
  Got Range(const nlohmann::json& obj, const char* key, const std::string& path, Need need, double lo, double hi,
            double* out, bool lo_open = false, bool hi_open = false);
  // A number > 0 ("must be positive (got -5)").
  Got Positive(const nlohmann::json& obj, const char* key, const std::string& path, Need need, double* out);
  // A number >= 0 ("must not be negative (got -5)").
  Got NonNegative(const nlohmann::json& obj, const char* key, const std::string& path, Need need, double* out);
  // A whole number in [lo, hi].
  Got Integer(const nlohmann::json& obj, const char* key, const std::string& path, Need need, int lo, int hi,
              int* out);
  // true or false.
  Got Bool(const nlohmann::json& obj, const char* key, const std::string& path, Need need, bool* out);
  // A non-empty string; `expected` words the missing case.
  Got String(const nlohmann::json& obj, const char* key, const std::string& path, Need need, std::string* out,
             const std::string& expected = "a string");
  // A string among `names`; otherwise "unknown <key> \"x\" (did you mean ...); accepted: a, b".
  Got Enum(const nlohmann::json& obj, const char* key, const std::string& path, Need need,
           const std::vector<std::string>& names, std::string* out);
  // The same over a table of names and values.
  template <typename E, std::size_t N>
  Got Enum(const nlohmann::json& obj, const char* key, const std::string& path, Need need,
           const EnumName<E> (&table)[N], E* out) {
    std::vector<std::string> names;
    for (const auto& e : table) names.emplace_back(e.name);
    std::string name;
    const Got g = Enum(obj, key, path, need, names, &name);
    if (g != Got::kOk) return g;
    for (const auto& e : table) {
      if (name == e.name) *out = e.value;
    }
    return Got::kOk;
  }
  // An object member; *out points at it.
  Got Object(const nlohmann::json& obj, const char* key, const std::string& path, Need need,
             const nlohmann::json** out);
  // An array member; *out points at it.
  Got Array(const nlohmann::json& obj, const char* key, const std::string& path, Need need,
            const nlohmann::json** out);
  // An array of at most `max` elements ("at most 64 points (got 65)", `what` = "points").
  Got ArrayAtMost(const nlohmann::json& obj, const char* key, const std::string& path, Need need, std::size_t max,
                  const char* what, const nlohmann::json** out);
  // An array element (at `path`) that must be an object.
  bool ElementObject(const nlohmann::json& e, const std::string& path);
  // Resolves a unit name of one of the `accepted` quantities; otherwise
  // reports at `path` what it is or the closest known name, with the list.
  bool Unit(const std::string& name, std::initializer_list<Quantity> accepted, const std::string& path,
            UnitConversion* out);
  // A quantity {"value": number, "unit": "name"} of one of `accepted`; *si
  // gets the value in SI, *conv (if given) the unit.
  Got Qty(const nlohmann::json& obj, const char* key, const std::string& path, Need need,
          std::initializer_list<Quantity> accepted, double* si, UnitConversion* conv = nullptr);
  // Reports every member of `obj` not in `allowed`, naming it, suggesting the
  // closest and listing the accepted ones (a typo must not become a default).
  // Members whose name starts with '_' are comments and are skipped.
  void ExactKeys(const nlohmann::json& obj, const std::string& path, const std::vector<std::string>& allowed);

 private:
  std::vector<ConfigProblem>* problems_;
  std::string file_;
};

}  // namespace holdfast
