#include "status_json.h"

#include <cmath>
#include <cstdio>

#include "event_json.h"
#include "readings_csv.h"

namespace holdfast::daemon {
namespace {

void Num(const char* key, double v, std::string* s, const char* fmt = "%.6g") {
  *s += '"';
  *s += key;
  *s += "\":";
  if (!std::isfinite(v)) {
    *s += "null";
    return;
  }
  char buf[48];
  std::snprintf(buf, sizeof buf, fmt, v);
  *s += buf;
}

void Time(const char* key, double t, std::string* s) {
  *s += '"';
  *s += key;
  *s += "\":";
  if (std::isfinite(t) && t > 0.0) AppendJsonString(FormatIsoUtc(t, 3), s);
  else *s += "null";
}

}  // namespace

std::string AlarmStateJson(const Monitor& m, int segment) {
  std::string s = "{\"segment\":";
  AppendJsonString(m.site().segments[static_cast<size_t>(segment)].id, &s);
  s += ',';
  Time("time", m.segment(segment).time_s, &s);
  s += ",\"alarms\":{";
  for (int k = 0; k < kAlarmTypeCount; ++k) {
    const Alarm& a = m.alarm(segment, static_cast<AlarmType>(k));
    if (k) s += ',';
    AppendJsonString(AlarmTypeName(static_cast<AlarmType>(k)), &s);
    s += ":{\"state\":\"";
    s += AlarmStateName(a.state());
    s += "\",\"condition_active\":";
    s += a.condition_active() ? "true" : "false";
    s += ",\"priority\":\"";
    s += AlarmPriorityName(a.options().priority);
    s += "\",";
    Time("shelved_until", a.shelved_until_s(), &s);
    s += '}';
  }
  s += "},\"next_seq\":" + std::to_string(m.next_sequence()) + "}";
  return s;
}

std::string SegmentStatusJson(const Monitor& m, int segment) {
  const SegmentTick& t = m.segment(segment);
  std::string s = "{\"segment\":";
  AppendJsonString(m.site().segments[static_cast<size_t>(segment)].id, &s);
  s += ',';
  Time("time", t.time_s, &s);
  s += ",\"status\":\"";
  s += SegmentStatusName(t.status);
  s += "\",\"flags\":";
  AppendJsonString(SegmentFlagNames(t.flags), &s);
  s += ',';
  Num("inflow_kg_s", t.inflow_kg_s, &s);
  s += ',';
  Num("outflow_kg_s", t.outflow_kg_s, &s);
  s += ',';
  Num("residual_kg_s", t.residual_kg_s, &s);
  s += ',';
  Num("linepack_kg", t.linepack_kg, &s, "%.1f");
  s += ',';
  Num("tank_kg", t.tank_kg, &s, "%.1f");
  s += ',';
  Num("inventory_kg", t.inventory_kg, &s, "%.1f");
  s += ",\"windows\":[";
  for (int w = 0; w < t.window_count; ++w) {
    const WindowResult& r = t.windows[static_cast<size_t>(w)];
    if (w) s += ',';
    s += '{';
    Num("window_s", r.window_s, &s, "%.0f");
    s += ',';
    Num("covered_s", r.covered_s, &s, "%.1f");
    s += ',';
    Num("imbalance_kg_s", r.imbalance_kg_s, &s);
    s += ',';
    Num("sigma_kg", r.sigma_kg, &s);
    s += ',';
    Num("mdl_kg_s", r.mdl_kg_s, &s);
    s += ",\"full\":";
    s += r.full ? "true" : "false";
    s += '}';
  }
  s += "],\"decision\":";
  if (t.decision_enabled) {
    s += "{\"state\":\"";
    s += DecisionStateName(t.decision.state);
    s += "\",\"reduced_sensitivity\":";
    s += t.decision.reduced_sensitivity ? "true" : "false";
    s += ',';
    Num("leak_rate_kg_s", t.decision.leak_rate_kg_s, &s);
    s += ',';
    Num("sigma_kg_s", t.decision.sigma_kg_s, &s);
    s += '}';
  } else {
    s += "null";
  }
  s += ",\"data_quality\":{\"points_unusable\":" + std::to_string(t.points_unusable) + ",\"flags\":[";
  bool first = true;
  auto flag = [&](uint8_t bit, const char* name) {
    if (!(t.point_dq & bit)) return;
    if (!first) s += ',';
    first = false;
    s += '"';
    s += name;
    s += '"';
  };
  flag(kDqOutOfRange, "out_of_range");
  flag(kDqRateOfChange, "rate_of_change");
  flag(kDqFlatline, "flatline");
  flag(kDqSpike, "spike");
  s += "]}}";
  return s;
}

}  // namespace holdfast::daemon
