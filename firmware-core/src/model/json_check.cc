// See holdfast/json_check.h.
#include "holdfast/json_check.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <exception>
#include <functional>
#include <limits>
#include <set>
#include <utility>

namespace holdfast {

using nlohmann::json;
using namespace json_text;

namespace {

// Tracks where the parser is, to report a key repeated within one object
// with the JSON pointer of the repeated member.
class DuplicateKeyFinder {
 public:
  bool operator()(int /*depth*/, json::parse_event_t event, json& parsed) {
    switch (event) {
      case json::parse_event_t::object_start: frames_.push_back(Frame{false, 0, {}, {}}); break;
      case json::parse_event_t::array_start: frames_.push_back(Frame{true, 0, {}, {}}); break;
      case json::parse_event_t::key:
        if (!frames_.empty() && parsed.is_string()) {
          Frame& top = frames_.back();
          top.key = parsed.get<std::string>();
          if (!top.keys.insert(top.key).second) {
            found.push_back(ConfigProblem{
                Pointer(), "duplicate key \"" + top.key + "\" in one object; JSON keeps only the last, so keys must be unique"});
          }
        }
        break;
      case json::parse_event_t::value: ElementDone(); break;
      case json::parse_event_t::object_end:
      case json::parse_event_t::array_end:
        if (!frames_.empty()) frames_.pop_back();
        ElementDone();
        break;
    }
    return true;
  }

  std::vector<ConfigProblem> found;

 private:
  struct Frame {
    bool is_array;
    std::size_t index;
    std::string key;
    std::set<std::string> keys;
  };

  void ElementDone() {
    if (!frames_.empty() && frames_.back().is_array) ++frames_.back().index;
  }

  std::string Pointer() const {
    std::string out;
    for (const Frame& f : frames_) out += "/" + (f.is_array ? std::to_string(f.index) : PointerToken(f.key));
    return out;
  }

  std::vector<Frame> frames_;
};

// "source:line:column" and the parser's reason, from a parse error.
ConfigProblem ParseProblem(const std::string& source, const std::string& text, const json::parse_error& e) {
  const std::string what = e.what();
  // nlohmann: "[json.exception.parse_error.101] parse error at line L, column C: reason"
  unsigned long line = 0;
  unsigned long column = 0;
  const std::size_t at = what.find("at line ");
  if (at == std::string::npos || std::sscanf(what.c_str() + at, "at line %lu, column %lu", &line, &column) != 2) {
    // Count from the byte offset of the last character read (1-based).
    line = 1;
    column = 0;
    const std::size_t end = std::min<std::size_t>(e.byte, text.size());
    for (std::size_t i = 0; i < end; ++i) {
      if (text[i] == '\n') {
        ++line;
        column = 0;
      } else {
        ++column;
      }
    }
  }
  const std::size_t colon = what.find(": ", at == std::string::npos ? 0 : at);
  const std::string early = e.byte >= text.size() ? " (the text ends early: is it truncated?)" : "";
  return ConfigProblem{source + ":" + std::to_string(line) + ":" + std::to_string(column),
                       "parse error: " + (colon == std::string::npos ? what : what.substr(colon + 2)) + early};
}

// "a, b, c" -> {"a", "b", "c"}
std::vector<std::string> SplitNames(const std::string& list) {
  std::vector<std::string> out;
  std::size_t start = 0;
  while (start <= list.size()) {
    const std::size_t comma = list.find(", ", start);
    out.push_back(list.substr(start, comma == std::string::npos ? std::string::npos : comma - start));
    if (comma == std::string::npos) break;
    start = comma + 2;
  }
  return out;
}

}  // namespace

bool ParseJsonText(const std::string& text, const std::string& source, json* doc,
                   std::vector<ConfigProblem>* problems) {
  DuplicateKeyFinder finder;
  try {
    *doc = json::parse(text, std::ref(finder));
  } catch (const json::parse_error& e) {
    problems->push_back(ParseProblem(source, text, e));
    return false;
  } catch (const std::exception& e) {
    problems->push_back(ConfigProblem{source, std::string("cannot parse the text: ") + e.what()});
    return false;
  }
  for (ConfigProblem& p : finder.found) problems->push_back(std::move(p));
  return finder.found.empty();
}

// --- Pointers and wording -------------------------------------------------------

namespace json_text {

std::string PointerToken(const std::string& key) {
  std::string out;
  out.reserve(key.size());
  for (char c : key) {
    if (c == '~') {
      out += "~0";
    } else if (c == '/') {
      out += "~1";
    } else {
      out += c;
    }
  }
  return out;
}

std::string Join(const std::string& path, const std::string& key) { return path + "/" + PointerToken(key); }
std::string Join(const std::string& path, std::size_t index) { return path + "/" + std::to_string(index); }

std::string Num(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.10g", v);
  return buf;
}

std::string Quote(const std::string& s) {
  constexpr std::size_t kMax = 60;
  return s.size() <= kMax ? "\"" + s + "\"" : "\"" + s.substr(0, kMax) + "...\"";
}

// Never dumps a container: a deeply nested document must not recurse here.
std::string Describe(const json& j) {
  switch (j.type()) {
    case json::value_t::null: return "null";
    case json::value_t::boolean: return std::string("a boolean (") + (j.get<bool>() ? "true" : "false") + ")";
    case json::value_t::number_integer:
    case json::value_t::number_unsigned:
    case json::value_t::number_float: return "a number (" + Num(j.get<double>()) + ")";
    case json::value_t::string: return "a string " + Quote(j.get_ref<const std::string&>());
    case json::value_t::array: return "an array";
    case json::value_t::object: return "an object";
    default: return j.type_name();
  }
}

std::string ListNames(const std::vector<std::string>& names) {
  std::string out;
  for (const std::string& n : names) {
    if (!out.empty()) out += ", ";
    out += n;
  }
  return out;
}

std::size_t EditDistance(std::string_view a, std::string_view b) {
  std::vector<std::size_t> row(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) row[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    std::size_t diag = row[0];
    row[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j) {
      const std::size_t up = row[j];
      row[j] = std::min({row[j] + 1, row[j - 1] + 1, diag + (a[i - 1] == b[j - 1] ? 0u : 1u)});
      diag = up;
    }
  }
  return row[b.size()];
}

std::string Closest(const std::string& name, const std::vector<std::string>& candidates) {
  std::string best;
  std::size_t best_d = 0;
  for (const std::string& c : candidates) {
    const std::size_t d = EditDistance(name, c);
    if (best.empty() || d < best_d) {
      best = c;
      best_d = d;
    }
  }
  const std::size_t limit = std::max<std::size_t>(1, std::min<std::size_t>(3, name.size() / 3));
  if (!best.empty() && best_d <= limit) return best;
  // A name missing its unit suffix ("youngs_modulus" for "youngs_modulus_gpa").
  if (name.size() >= 3) {
    for (const std::string& c : candidates) {
      if (c.size() > name.size() && c.compare(0, name.size(), name) == 0 && c[name.size()] == '_') return c;
    }
  }
  return std::string();
}

}  // namespace json_text

// --- Readers ----------------------------------------------------------------------

void JsonCheck::Add(const std::string& path, const std::string& message) {
  if (file_.empty()) {
    problems_->push_back(ConfigProblem{path, message});
  } else {
    problems_->push_back(ConfigProblem{path.empty() ? file_ : file_ + ":" + path, message});
  }
}

const json* JsonCheck::Member(const json& obj, const char* key) {
  auto it = obj.find(key);
  return it == obj.end() ? nullptr : &*it;
}

const json* JsonCheck::Present(const json& obj, const char* key, const std::string& path, Need need,
                               const char* expected) {
  const json* m = Member(obj, key);
  if (m == nullptr && need == Need::kRequired) {
    Add(Join(path, key), std::string("missing required field \"") + key + "\" (" + expected + ")");
  }
  return m;
}

Got JsonCheck::NumberValue(const json& v, const std::string& path, double* out) {
  if (!v.is_number()) {
    Add(path, "must be a number (got " + Describe(v) + ")");
    return Got::kBad;
  }
  const double x = v.get<double>();
  if (!std::isfinite(x)) {
    Add(path, "must be a finite number");
    return Got::kBad;
  }
  *out = x;
  return Got::kOk;
}

Got JsonCheck::RangeValue(const json& v, const std::string& path, double lo, double hi, double* out, bool lo_open,
                          bool hi_open) {
  double x = 0.0;
  const Got g = NumberValue(v, path, &x);
  if (g != Got::kOk) return g;
  const bool below = lo_open ? !(x > lo) : !(x >= lo);
  const bool above = hi_open ? !(x < hi) : !(x <= hi);
  if (below || above) {
    std::string what;
    if (std::isinf(hi) && lo == 0.0) {
      what = lo_open ? "must be positive" : "must not be negative";
    } else {
      what = std::string("must be in ") + (lo_open ? "(" : "[") + Num(lo) + ", " + (std::isinf(hi) ? "inf" : Num(hi)) +
             (hi_open ? ")" : "]");
    }
    Add(path, what + " (got " + Num(x) + ")");
    return Got::kBad;
  }
  *out = x;
  return Got::kOk;
}

Got JsonCheck::Number(const json& obj, const char* key, const std::string& path, Need need, double* out) {
  const json* m = Present(obj, key, path, need, "a number");
  return m == nullptr ? Got::kAbsent : NumberValue(*m, Join(path, key), out);
}

Got JsonCheck::Range(const json& obj, const char* key, const std::string& path, Need need, double lo, double hi,
                     double* out, bool lo_open, bool hi_open) {
  const json* m = Present(obj, key, path, need, "a number");
  return m == nullptr ? Got::kAbsent : RangeValue(*m, Join(path, key), lo, hi, out, lo_open, hi_open);
}

Got JsonCheck::Positive(const json& obj, const char* key, const std::string& path, Need need, double* out) {
  return Range(obj, key, path, need, 0.0, std::numeric_limits<double>::infinity(), out, true, true);
}

Got JsonCheck::NonNegative(const json& obj, const char* key, const std::string& path, Need need, double* out) {
  return Range(obj, key, path, need, 0.0, std::numeric_limits<double>::infinity(), out, false, true);
}

Got JsonCheck::Integer(const json& obj, const char* key, const std::string& path, Need need, int lo, int hi,
                       int* out) {
  double v = 0.0;
  const Got g = Number(obj, key, path, need, &v);
  if (g != Got::kOk) return g;
  if (v != std::floor(v)) {
    Add(Join(path, key), "must be a whole number (got " + Num(v) + ")");
    return Got::kBad;
  }
  if (v < lo || v > hi) {
    Add(Join(path, key),
        "must be between " + std::to_string(lo) + " and " + std::to_string(hi) + " (got " + Num(v) + ")");
    return Got::kBad;
  }
  *out = static_cast<int>(v);
  return Got::kOk;
}

Got JsonCheck::Bool(const json& obj, const char* key, const std::string& path, Need need, bool* out) {
  const json* m = Present(obj, key, path, need, "true or false");
  if (m == nullptr) return Got::kAbsent;
  if (!m->is_boolean()) {
    Add(Join(path, key), "must be true or false (got " + Describe(*m) + ")");
    return Got::kBad;
  }
  *out = m->get<bool>();
  return Got::kOk;
}

Got JsonCheck::String(const json& obj, const char* key, const std::string& path, Need need, std::string* out,
                      const std::string& expected) {
  const json* m = Present(obj, key, path, need, expected.c_str());
  if (m == nullptr) return Got::kAbsent;
  if (!m->is_string()) {
    Add(Join(path, key), "must be a string (got " + Describe(*m) + ")");
    return Got::kBad;
  }
  if (m->get_ref<const std::string&>().empty()) {
    Add(Join(path, key), "must not be empty");
    return Got::kBad;
  }
  *out = m->get<std::string>();
  return Got::kOk;
}

Got JsonCheck::Enum(const json& obj, const char* key, const std::string& path, Need need,
                    const std::vector<std::string>& names, std::string* out) {
  std::string v;
  const Got g = String(obj, key, path, need, &v, "one of: " + ListNames(names));
  if (g != Got::kOk) return g;
  if (std::find(names.begin(), names.end(), v) != names.end()) {
    *out = v;
    return Got::kOk;
  }
  std::string msg = std::string("unknown ") + key + " " + Quote(v);
  const std::string hint = Closest(v, names);
  if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
  Add(Join(path, key), msg + "; accepted: " + ListNames(names));
  return Got::kBad;
}

Got JsonCheck::Object(const json& obj, const char* key, const std::string& path, Need need, const json** out) {
  const json* m = Present(obj, key, path, need, "an object");
  if (m == nullptr) return Got::kAbsent;
  if (!m->is_object()) {
    Add(Join(path, key), "must be an object (got " + Describe(*m) + ")");
    return Got::kBad;
  }
  *out = m;
  return Got::kOk;
}

Got JsonCheck::Array(const json& obj, const char* key, const std::string& path, Need need, const json** out) {
  const json* m = Present(obj, key, path, need, "an array");
  if (m == nullptr) return Got::kAbsent;
  if (!m->is_array()) {
    Add(Join(path, key), "must be an array (got " + Describe(*m) + ")");
    return Got::kBad;
  }
  *out = m;
  return Got::kOk;
}

Got JsonCheck::ArrayAtMost(const json& obj, const char* key, const std::string& path, Need need, std::size_t max,
                           const char* what, const json** out) {
  const json* a = nullptr;
  const Got g = Array(obj, key, path, need, &a);
  if (g != Got::kOk) return g;
  if (a->size() > max) {
    Add(Join(path, key),
        "at most " + std::to_string(max) + " " + what + " (got " + std::to_string(a->size()) + ")");
    return Got::kBad;
  }
  *out = a;
  return Got::kOk;
}

bool JsonCheck::ElementObject(const json& e, const std::string& path) {
  if (e.is_object()) return true;
  Add(path, "must be an object (got " + Describe(e) + ")");
  return false;
}

bool JsonCheck::Unit(const std::string& name, std::initializer_list<Quantity> accepted, const std::string& path,
                     UnitConversion* out) {
  std::string why;
  if (accepted.size() == 1) {
    if (LookUpUnitOf(name, *accepted.begin(), out, &why)) return true;
    Add(path, why);
    return false;
  }
  for (Quantity q : accepted) {
    if (LookUpUnitOf(name, q, out, nullptr)) return true;
  }
  std::vector<std::string> names;
  std::string wanted;
  for (Quantity q : accepted) {
    for (std::string& n : SplitNames(KnownUnitNames(q))) names.push_back(std::move(n));
    if (!wanted.empty()) wanted += " or ";
    wanted += QuantityName(q);
  }
  UnitConversion other;
  if (LookUpUnit(name, &other, nullptr)) {
    Add(path, "unit " + Quote(name) + " is a " + QuantityName(other.quantity) +
                  " unit, expected a " + wanted + " unit (one of: " + ListNames(names) + ")");
    return false;
  }
  std::string msg = "unknown " + wanted + " unit " + Quote(name);
  const std::string hint = Closest(name, names);
  if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
  msg += "; unit names are case-sensitive; accepted: " + ListNames(names);
  Add(path, msg);
  return false;
}

Got JsonCheck::Qty(const json& obj, const char* key, const std::string& path, Need need,
                   std::initializer_list<Quantity> accepted, double* si, UnitConversion* conv) {
  const json* q = Present(obj, key, path, need, "a quantity {\"value\": number, \"unit\": name}");
  if (q == nullptr) return Got::kAbsent;
  const std::string qpath = Join(path, key);
  if (!q->is_object()) {
    Add(qpath, "must be a quantity {\"value\": number, \"unit\": \"name\"} (got " + Describe(*q) +
                   ")");
    return Got::kBad;
  }
  ExactKeys(*q, qpath, {"value", "unit"});
  double value = 0.0;
  std::string unit;
  const Got gv = Number(*q, "value", qpath, Need::kRequired, &value);
  const Got gu = String(*q, "unit", qpath, Need::kRequired, &unit);
  if (gv != Got::kOk || gu != Got::kOk) return Got::kBad;
  UnitConversion c;
  if (!Unit(unit, accepted, Join(qpath, "unit"), &c)) return Got::kBad;
  const double v = c.ToSi(value);
  if (!std::isfinite(v)) {
    Add(Join(qpath, "value"), "is out of range");
    return Got::kBad;
  }
  *si = v;
  if (conv != nullptr) *conv = c;
  return Got::kOk;
}

void JsonCheck::ExactKeys(const json& obj, const std::string& path, const std::vector<std::string>& allowed) {
  for (auto it = obj.begin(); it != obj.end(); ++it) {
    const std::string& key = it.key();
    if (!key.empty() && key[0] == '_') continue;
    if (std::find(allowed.begin(), allowed.end(), key) != allowed.end()) continue;
    std::string msg = "unknown key " + Quote(key);
    const std::string hint = Closest(key, allowed);
    if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
    Add(Join(path, key), msg + "; accepted here: " + ListNames(allowed));
  }
}

}  // namespace holdfast
