// See water_files.h and config/WATER.md.
#include "water_files.h"

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <set>

namespace holdfast {
namespace {

using nlohmann::json;

std::string Num(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.10g", v);
  return buf;
}

std::string Describe(const json& j) {
  switch (j.type()) {
    case json::value_t::null: return "null";
    case json::value_t::boolean: return j.get<bool>() ? "true" : "false";
    case json::value_t::number_integer:
    case json::value_t::number_unsigned:
    case json::value_t::number_float: return "a number (" + Num(j.get<double>()) + ")";
    case json::value_t::string: return "a string";
    case json::value_t::array: return "an array";
    case json::value_t::object: return "an object";
    default: return j.type_name();
  }
}

std::string Join(const std::string& path, const std::string& key) {
  std::string t;
  for (char c : key) t += c == '~' ? "~0" : (c == '/' ? "~1" : std::string(1, c));
  return path + "/" + t;
}

size_t EditDistance(const std::string& a, const std::string& b) {
  std::vector<size_t> row(b.size() + 1);
  for (size_t j = 0; j <= b.size(); ++j) row[j] = j;
  for (size_t i = 1; i <= a.size(); ++i) {
    size_t diag = row[0];
    row[0] = i;
    for (size_t j = 1; j <= b.size(); ++j) {
      const size_t up = row[j];
      row[j] = std::min({row[j] + 1, row[j - 1] + 1, diag + (a[i - 1] == b[j - 1] ? 0u : 1u)});
      diag = up;
    }
  }
  return row[b.size()];
}

// Reports keys repeated within one object (a JSON parser keeps the last).
class DuplicateKeys {
 public:
  bool operator()(int /*depth*/, json::parse_event_t event, json& parsed) {
    switch (event) {
      case json::parse_event_t::object_start: stack_.emplace_back(); break;
      case json::parse_event_t::key:
        if (!stack_.empty() && parsed.is_string() && !stack_.back().insert(parsed.get<std::string>()).second)
          found.push_back(parsed.get<std::string>());
        break;
      case json::parse_event_t::object_end:
        if (!stack_.empty()) stack_.pop_back();
        break;
      default: break;
    }
    return true;
  }
  std::vector<std::string> found;

 private:
  std::vector<std::set<std::string>> stack_;
};

}  // namespace

bool ReadJsonFile(const std::string& path, json* doc, std::vector<ConfigProblem>* problems) {
  std::FILE* f = std::fopen(path.c_str(), "rb");
  if (f == nullptr) {
    problems->push_back({path, std::string("cannot read the file: ") + std::strerror(errno)});
    return false;
  }
  std::string text;
  char buf[65536];
  size_t n = 0;
  while ((n = std::fread(buf, 1, sizeof buf, f)) > 0) text.append(buf, n);
  std::fclose(f);
  DuplicateKeys dup;
  try {
    *doc = json::parse(text, std::ref(dup));
  } catch (const json::parse_error& e) {
    size_t line = 1, col = 0;
    for (size_t i = 0; i < std::min<size_t>(e.byte > 0 ? e.byte - 1 : 0, text.size()); ++i) {
      if (text[i] == '\n') { ++line; col = 0; } else { ++col; }
    }
    std::string what = e.what();
    const size_t colon = what.find(": ", what.find("parse error"));
    problems->push_back({path + ":" + std::to_string(line) + ":" + std::to_string(col + 1),
                         "parse error: " + (colon == std::string::npos ? what : what.substr(colon + 2))});
    return false;
  } catch (const std::exception& e) {
    problems->push_back({path, std::string("cannot parse: ") + e.what()});
    return false;
  }
  for (const std::string& k : dup.found)
    problems->push_back({path, "duplicate key \"" + k + "\" in one object; keys must be unique"});
  return dup.found.empty();
}

void JsonChecker::Add(const std::string& path, const std::string& message) {
  problems_->push_back({path.empty() ? file_ : file_ + ":" + path, message});
}

void JsonChecker::Keys(const json& obj, const std::string& path, std::initializer_list<const char*> allowed) {
  for (auto it = obj.begin(); it != obj.end(); ++it) {
    const std::string& key = it.key();
    if (!key.empty() && key[0] == '_') continue;
    bool known = false;
    std::string best;
    size_t best_d = 1000;
    std::string list;
    for (const char* a : allowed) {
      if (key == a) known = true;
      const size_t d = EditDistance(key, a);
      if (d < best_d) { best_d = d; best = a; }
      if (!list.empty()) list += ", ";
      list += a;
    }
    if (known) continue;
    std::string msg = "unknown key \"" + key + "\"";
    if (best_d <= std::max<size_t>(1, std::min<size_t>(3, key.size() / 3))) msg += " (did you mean \"" + best + "\"?)";
    Add(Join(path, key), msg + "; accepted here: " + list);
  }
}

bool JsonChecker::Number(const json& obj, const char* key, const std::string& path, bool required, double* out,
                         double lo, double hi, const char* range_text) {
  auto it = obj.find(key);
  if (it == obj.end()) {
    if (required) Add(Join(path, key), std::string("missing required field \"") + key + "\" (a number)");
    return false;
  }
  if (!it->is_number()) {
    Add(Join(path, key), "must be a number (got " + Describe(*it) + ")");
    return false;
  }
  const double v = it->get<double>();
  if (!std::isfinite(v) || v < lo || v > hi) {
    Add(Join(path, key), std::string("must be ") + (range_text ? range_text : "in range") + " (got " + Num(v) + ")");
    return false;
  }
  *out = v;
  return true;
}

bool JsonChecker::String(const json& obj, const char* key, const std::string& path, bool required, std::string* out) {
  auto it = obj.find(key);
  if (it == obj.end()) {
    if (required) Add(Join(path, key), std::string("missing required field \"") + key + "\" (a string)");
    return false;
  }
  if (!it->is_string() || it->get_ref<const std::string&>().empty()) {
    Add(Join(path, key), "must be a non-empty string (got " + Describe(*it) + ")");
    return false;
  }
  *out = it->get<std::string>();
  return true;
}

bool JsonChecker::Bool(const json& obj, const char* key, const std::string& path, bool required, bool* out) {
  auto it = obj.find(key);
  if (it == obj.end()) {
    if (required) Add(Join(path, key), std::string("missing required field \"") + key + "\" (true or false)");
    return false;
  }
  if (!it->is_boolean()) {
    Add(Join(path, key), "must be true or false (got " + Describe(*it) + ")");
    return false;
  }
  *out = it->get<bool>();
  return true;
}

const json* JsonChecker::Object(const json& obj, const char* key, const std::string& path, bool required) {
  auto it = obj.find(key);
  if (it == obj.end()) {
    if (required) Add(Join(path, key), std::string("missing required field \"") + key + "\" (an object)");
    return nullptr;
  }
  if (!it->is_object()) {
    Add(Join(path, key), "must be an object (got " + Describe(*it) + ")");
    return nullptr;
  }
  return &*it;
}

const json* JsonChecker::Array(const json& obj, const char* key, const std::string& path, bool required) {
  auto it = obj.find(key);
  if (it == obj.end()) {
    if (required) Add(Join(path, key), std::string("missing required field \"") + key + "\" (an array)");
    return nullptr;
  }
  if (!it->is_array()) {
    Add(Join(path, key), "must be an array (got " + Describe(*it) + ")");
    return nullptr;
  }
  return &*it;
}

namespace {

constexpr const char* kWaterYearFormat = "holdfast-water-year/1";

// A list of volumes: [{"name", "volume_m3", "accuracy_pct"}], or one such object.
void VolumeList(JsonChecker& c, const json& doc, const char* key, bool required, std::vector<water::VolumeInput>* out) {
  auto it = doc.find(key);
  const std::string path = Join("", key);
  if (it == doc.end()) {
    if (required) c.Add(path, std::string("missing required field \"") + key + "\" (a list of volumes)");
    return;
  }
  std::vector<const json*> items;
  std::vector<std::string> paths;
  if (it->is_object()) {
    items.push_back(&*it);
    paths.push_back(path);
  } else if (it->is_array()) {
    if (it->empty() && required) c.Add(path, "must list at least one volume");
    for (size_t i = 0; i < it->size(); ++i) {
      items.push_back(&(*it)[i]);
      paths.push_back(path + "/" + std::to_string(i));
    }
  } else {
    c.Add(path, "must be a volume {\"volume_m3\", \"accuracy_pct\"} or a list of them (got " + Describe(*it) + ")");
    return;
  }
  for (size_t i = 0; i < items.size(); ++i) {
    const json& e = *items[i];
    if (!e.is_object()) {
      c.Add(paths[i], "must be an object {\"name\", \"volume_m3\", \"accuracy_pct\"} (got " + Describe(e) + ")");
      continue;
    }
    c.Keys(e, paths[i], {"name", "volume_m3", "accuracy_pct"});
    water::VolumeInput v;
    v.name = key;
    c.String(e, "name", paths[i], false, &v.name);
    const bool a = c.Number(e, "volume_m3", paths[i], true, &v.volume_m3, 0.0, 1e12, "a volume in [0, 1e12] m3");
    const bool b = c.Number(e, "accuracy_pct", paths[i], true, &v.accuracy95_pct, 0.0, 99.999,
                            "a 95 % accuracy in [0, 100) percent");
    if (a && b) out->push_back(v);
  }
}

// An infrastructure figure: a number, or {"value", "accuracy_pct"}.
void Figure(JsonChecker& c, const json& obj, const char* key, const std::string& path, bool required, double lo,
            const char* range, water::Estimate* out) {
  auto it = obj.find(key);
  const std::string p = Join(path, key);
  if (it == obj.end()) {
    if (required) c.Add(p, std::string("missing required field \"") + key + "\" (a number, or {\"value\", \"accuracy_pct\"})");
    return;
  }
  if (it->is_number()) {
    c.Number(obj, key, path, true, &out->value, lo, 1e12, range);
    out->ci95 = 0.0;
    return;
  }
  if (!it->is_object()) {
    c.Add(p, "must be a number or {\"value\", \"accuracy_pct\"} (got " + Describe(*it) + ")");
    return;
  }
  c.Keys(*it, p, {"value", "accuracy_pct"});
  double pct = 0.0;
  c.Number(*it, "value", p, true, &out->value, lo, 1e12, range);
  if (c.Number(*it, "accuracy_pct", p, false, &pct, 0.0, 99.999, "a 95 % accuracy in [0, 100) percent"))
    out->ci95 = std::fabs(out->value) * pct / 100.0;
}

}  // namespace

bool CompileWaterYear(const json& doc, const std::string& file, water::WaterBalanceInputs* in, std::string* name,
                      std::vector<ConfigProblem>* problems) {
  JsonChecker c(file, problems);
  if (!doc.is_object()) {
    c.Add("", std::string("the document must be a JSON object with \"format\": \"") + kWaterYearFormat + "\"");
    return false;
  }
  c.Keys(doc, "",
         {"format", "name", "period_days", "system_input", "billed_metered", "billed_unmetered", "unbilled_metered",
          "unbilled_unmetered", "unauthorised", "meter_inaccuracies", "infrastructure"});
  std::string format;
  if (c.String(doc, "format", "", true, &format) && format != kWaterYearFormat)
    c.Add("/format", "unsupported format \"" + format + "\"; this build reads \"" + kWaterYearFormat + "\"");
  *name = "water balance";
  c.String(doc, "name", "", false, name);
  water::WaterBalanceInputs w;
  c.Number(doc, "period_days", "", false, &w.period_days, 1.0, 3660.0, "in [1, 3660] days");
  VolumeList(c, doc, "system_input", true, &w.system_input);
  VolumeList(c, doc, "billed_metered", false, &w.billed_metered);
  VolumeList(c, doc, "billed_unmetered", false, &w.billed_unmetered);
  VolumeList(c, doc, "unbilled_metered", false, &w.unbilled_metered);
  VolumeList(c, doc, "unbilled_unmetered", false, &w.unbilled_unmetered);
  VolumeList(c, doc, "unauthorised", false, &w.unauthorised);
  VolumeList(c, doc, "meter_inaccuracies", false, &w.meter_inaccuracies);
  if (const json* inf = c.Object(doc, "infrastructure", "", true)) {
    const std::string p = "/infrastructure";
    c.Keys(*inf, p,
           {"mains_length_km", "service_connections", "private_pipe_length_km", "average_pressure_m",
            "pressurised_pct"});
    water::SystemInfrastructure& s = w.infrastructure;
    Figure(c, *inf, "mains_length_km", p, true, 1e-9, "positive", &s.mains_length_km);
    Figure(c, *inf, "service_connections", p, true, 0.0, "not negative", &s.service_connections);
    Figure(c, *inf, "private_pipe_length_km", p, false, 0.0, "not negative", &s.private_pipe_length_km);
    Figure(c, *inf, "average_pressure_m", p, true, 1e-9, "positive", &s.average_pressure_head_m);
    double pct = 100.0;
    if (c.Number(*inf, "pressurised_pct", p, false, &pct, 1e-9, 100.0, "in (0, 100] percent"))
      s.pressurised_fraction = pct / 100.0;
  }
  if (!c.ok()) return false;
  std::string why;
  if (!w.IsValid(&why)) {
    c.Add("", why);
    return false;
  }
  *in = std::move(w);
  return true;
}

bool LoadWaterYearFile(const std::string& path, water::WaterBalanceInputs* in, std::string* name,
                       std::vector<ConfigProblem>* problems) {
  json doc;
  if (!ReadJsonFile(path, &doc, problems)) return false;
  return CompileWaterYear(doc, path, in, name, problems);
}

}  // namespace holdfast
