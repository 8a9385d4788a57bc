// See water_files.h and config/WATER.md.
#include "water_files.h"

#include <cmath>

namespace holdfast {

using nlohmann::json;
using json_text::Describe;
using json_text::Join;
using json_text::Num;

bool JsonChecker::Number(const json& obj, const char* key, const std::string& path, bool required, double* out,
                         double lo, double hi, const char* range_text) {
  double v = 0.0;
  if (JsonCheck::Number(obj, key, path, NeedOf(required), &v) != Got::kOk) return false;
  if (v < lo || v > hi) {
    Add(Join(path, key), std::string("must be ") + (range_text ? range_text : "in range") + " (got " + Num(v) + ")");
    return false;
  }
  *out = v;
  return true;
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
