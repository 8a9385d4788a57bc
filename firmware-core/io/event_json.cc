#include "event_json.h"

#include <cinttypes>
#include <cmath>
#include <cstdio>
#include <cstring>

#include "readings_csv.h"

namespace holdfast {
namespace {

void AppendNumber(double v, const char* fmt, std::string* out) {
  if (!std::isfinite(v)) {
    out->append("null");
    return;
  }
  char buf[64];
  const int n = std::snprintf(buf, sizeof buf, fmt, v);
  if (n > 0) out->append(buf, static_cast<size_t>(n) < sizeof buf ? static_cast<size_t>(n) : sizeof buf - 1);
}

}  // namespace

void AppendJsonString(std::string_view text, std::string* out) {
  out->push_back('"');
  for (const char c : text) {
    const auto u = static_cast<unsigned char>(c);
    if (c == '"' || c == '\\') {
      out->push_back('\\');
      out->push_back(c);
    } else if (u < 0x20) {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\u%04x", static_cast<unsigned>(u));
      out->append(buf);
    } else {
      out->push_back(c);
    }
  }
  out->push_back('"');
}

const char* StatisticUnit(AlarmType type) {
  switch (type) {
    case AlarmType::kLeak: return "block_sigma";
    // The rupture path's statistic is the inlet's characteristic signal
    // (rupture.h), a mass flow, against its threshold.
    case AlarmType::kRupture: return "kg/s";
    case AlarmType::kDataQuality: return "points";
    case AlarmType::kBalanceUnavailable: return "none";
  }
  return "none";
}

void AppendEventJson(const Site& site, const AlarmEvent& e, std::string* out) {
  out->append("{\"time\":\"");
  out->append(FormatIsoUtc(e.time_s, 3));
  out->append("\",\"segment\":");
  const bool known = e.segment >= 0 && static_cast<size_t>(e.segment) < site.segments.size();
  AppendJsonString(known ? std::string_view(site.segments[static_cast<size_t>(e.segment)].id) : std::string_view("?"),
                   out);
  out->append(",\"type\":\"");
  out->append(AlarmTypeName(e.type));
  out->append("\",\"state\":\"");
  out->append(AlarmStateName(e.to));
  out->append("\",\"from\":\"");
  out->append(AlarmStateName(e.from));
  out->append("\",\"cause\":\"");
  out->append(AlarmCauseName(e.cause));
  out->append("\",\"priority\":\"");
  out->append(AlarmPriorityName(e.priority));
  out->append("\",\"seq\":");
  char seq[24];
  std::snprintf(seq, sizeof seq, "%" PRIu64, e.seq);
  out->append(seq);
  out->append(",\"leak_rate_kg_s\":");
  AppendNumber(e.evidence.leak_rate_kg_s, "%.6f", out);
  out->append(",\"location_m\":");
  AppendNumber(e.evidence.location_m, "%.1f", out);
  out->append(",\"statistic\":");
  AppendNumber(e.evidence.statistic, "%.4f", out);
  out->append(",\"threshold\":");
  AppendNumber(e.evidence.threshold, "%.4f", out);
  // The unit of statistic and threshold: the leak and rupture detectors are
  // CUSUMs of block residuals standardised by the learnt block sigma
  // (dimensionless, in sigmas); the data-quality statistic counts the
  // segment's unusable points. null when the event carries no statistic.
  out->append(",\"statistic_unit\":");
  if (!std::isfinite(e.evidence.statistic)) {
    out->append("null");
  } else {
    out->push_back('"');
    out->append(StatisticUnit(e.type));
    out->push_back('"');
  }
  out->append(",\"window_s\":");
  AppendNumber(e.evidence.window_s, "%.1f", out);
  // What an operator acts on: the rate's uncertainty, the location band,
  // the detector that leads (its target leak size) and a short detail
  // (the nearest landmark, or the points and reasons of a data-quality
  // alarm, or the rupture path's signals).
  out->append(",\"leak_rate_sigma_kg_s\":");
  AppendNumber(e.evidence.leak_rate_sigma_kg_s, "%.6f", out);
  out->append(",\"location_low_m\":");
  AppendNumber(e.evidence.location_low_m, "%.1f", out);
  out->append(",\"location_high_m\":");
  AppendNumber(e.evidence.location_high_m, "%.1f", out);
  out->append(",\"detector_target_kg_s\":");
  AppendNumber(e.evidence.detector_target_kg_s, "%.4f", out);
  out->append(",\"detail\":");
  AppendJsonString(std::string_view(e.evidence.detail, strnlen(e.evidence.detail, AlarmEvidence::kDetailSize)), out);
  out->append(",\"user\":");
  AppendJsonString(std::string_view(e.user, strnlen(e.user, AlarmEvent::kUserSize)), out);
  out->push_back('}');
}

std::string EventJson(const Site& site, const AlarmEvent& e) {
  std::string s;
  s.reserve(320);
  AppendEventJson(site, e, &s);
  return s;
}

}  // namespace holdfast
