#include "payload.h"

#include <cctype>
#include <cstdlib>

#include <cmath>

#include <nlohmann/json.hpp>

#include "readings_csv.h"  // ParseTime, ParseQuality

namespace holdfast::daemon {

const char* RejectName(Reject r) {
  switch (r) {
    case Reject::kOversized: return "oversized";
    case Reject::kMalformedJson: return "malformed_json";
    case Reject::kWrongShape: return "wrong_shape";
    case Reject::kBatchTooLarge: return "batch_too_large";
    case Reject::kUnknownTopic: return "unknown_topic";
    case Reject::kUnknownPoint: return "unknown_point";
    case Reject::kMissingField: return "missing_field";
    case Reject::kUnknownField: return "unknown_field";
    case Reject::kWrongType: return "wrong_type";
    case Reject::kNotFinite: return "not_finite";
    case Reject::kBadTime: return "bad_time";
    case Reject::kAbsurdTime: return "absurd_time";
    case Reject::kBadQuality: return "bad_quality";
  }
  return "?";
}

uint64_t ParseResult::rejected_total() const {
  uint64_t n = 0;
  for (const uint64_t v : rejected) n += v;
  return n;
}

namespace {

// Deepest bracket nesting outside strings; stops counting past `limit`.
int NestingDepth(std::string_view s, int limit) {
  int depth = 0, max_depth = 0;
  bool in_string = false, escape = false;
  for (const char c : s) {
    if (in_string) {
      if (escape) escape = false;
      else if (c == '\\') escape = true;
      else if (c == '"') in_string = false;
      continue;
    }
    if (c == '"') in_string = true;
    else if (c == '[' || c == '{') {
      if (++depth > max_depth) max_depth = depth;
      if (max_depth > limit) return max_depth;
    } else if (c == ']' || c == '}') {
      --depth;
    }
  }
  return max_depth;
}

struct Ctx {
  const PointIndex& points;
  const PayloadLimits& limits;
  ParseResult* result;
  std::vector<Reading>* out;

  void Fail(Reject r, const std::string& where, const std::string& what) {
    ++result->rejected[static_cast<int>(r)];
    if (result->first_error.empty()) {
      result->first_error = (where.empty() ? "" : where + ": ") + what;
      result->first_reason = r;
    }
  }
};

std::string Clip(std::string_view s) {
  std::string c(s.substr(0, 40));
  for (char& ch : c)
    if (static_cast<unsigned char>(ch) < 0x20 || ch == '"') ch = '?';
  return s.size() > 40 ? c + "..." : c;
}

void ParseItem(const nlohmann::json& j, const std::string& where, std::string_view topic_point, Ctx* ctx) {
  if (!j.is_object()) return ctx->Fail(Reject::kWrongShape, where, "a reading must be a JSON object");
  for (auto it = j.begin(); it != j.end(); ++it) {
    const std::string& k = it.key();
    if (k != "time" && k != "value" && k != "quality" && k != "point")
      return ctx->Fail(Reject::kUnknownField, where, "unknown field \"" + Clip(k) + "\"");
  }
  std::string_view point_id = topic_point;
  if (j.contains("point")) {
    const auto& p = j["point"];
    if (!p.is_string()) return ctx->Fail(Reject::kWrongType, where + ".point", "must be a string");
    const std::string& id = p.get_ref<const std::string&>();
    if (!topic_point.empty() && id != topic_point)
      return ctx->Fail(Reject::kWrongShape, where + ".point", "\"" + Clip(id) + "\" differs from the topic's point");
    point_id = id;
  }
  if (point_id.empty()) return ctx->Fail(Reject::kMissingField, where, "missing \"point\"");
  if (!j.contains("time")) return ctx->Fail(Reject::kMissingField, where, "missing \"time\"");
  if (!j.contains("value")) return ctx->Fail(Reject::kMissingField, where, "missing \"value\"");
  const auto found = ctx->points.find(std::string(point_id));
  if (found == ctx->points.end())
    return ctx->Fail(Reject::kUnknownPoint, where, "unknown point \"" + Clip(point_id) + "\"");
  Reading r;
  r.point = found->second;
  const auto& t = j["time"];
  if (t.is_number()) {
    r.time_s = t.get<double>();
    if (!std::isfinite(r.time_s)) return ctx->Fail(Reject::kNotFinite, where + ".time", "not finite");
  } else if (t.is_string()) {
    const std::string& ts = t.get_ref<const std::string&>();
    if (ts.size() > 40 || !ParseTime(ts, &r.time_s))
      return ctx->Fail(Reject::kBadTime, where + ".time",
                       "\"" + Clip(ts) + "\" is not ISO 8601 with a zone or epoch seconds");
    if (!std::isfinite(r.time_s)) return ctx->Fail(Reject::kNotFinite, where + ".time", "not finite");
  } else {
    return ctx->Fail(Reject::kWrongType, where + ".time", "must be an ISO 8601 string or epoch seconds");
  }
  if (r.time_s < kEarliestTime_s || r.time_s >= kLatestTime_s)
    return ctx->Fail(Reject::kAbsurdTime, where + ".time", "outside 2000..2100");
  if (std::isfinite(ctx->limits.now_s) && ctx->limits.max_future_s > 0.0 &&
      r.time_s > ctx->limits.now_s + ctx->limits.max_future_s)
    return ctx->Fail(Reject::kAbsurdTime, where + ".time", "ahead of the daemon's clock");
  const auto& v = j["value"];
  if (v.is_string()) {
    const std::string& vs = v.get_ref<const std::string&>();
    if (vs == "NaN" || vs == "nan" || vs == "Infinity" || vs == "-Infinity" || vs == "inf" || vs == "-inf")
      return ctx->Fail(Reject::kNotFinite, where + ".value", "\"" + vs + "\" is not a finite number");
  }
  if (!v.is_number()) return ctx->Fail(Reject::kWrongType, where + ".value", "must be a number");
  r.value = v.get<double>();
  if (!std::isfinite(r.value)) return ctx->Fail(Reject::kNotFinite, where + ".value", "not finite");
  if (j.contains("quality")) {
    const auto& q = j["quality"];
    if (!q.is_string()) return ctx->Fail(Reject::kWrongType, where + ".quality", "must be a string");
    if (!ParseQuality(q.get_ref<const std::string&>(), &r.quality) || q.get_ref<const std::string&>().empty())
      return ctx->Fail(Reject::kBadQuality, where + ".quality", "must be good, uncertain or bad");
  }
  ctx->out->push_back(r);
  ++ctx->result->accepted;
}

// True when a payload that is not valid JSON holds a non-finite number: a
// NaN or Infinity token outside strings, or a number literal beyond the
// range of a double (1e999). Such a reading is counted as not_finite, not as
// malformed JSON: the sender has a value, and it is not a number.
bool HasNonFiniteToken(std::string_view p) {
  bool in_string = false;
  for (size_t i = 0; i < p.size(); ++i) {
    const char c = p[i];
    if (in_string) {
      if (c == '\\') ++i;
      else if (c == '"') in_string = false;
      continue;
    }
    if (c == '"') {
      in_string = true;
    } else if (p.compare(i, 3, "NaN") == 0 || p.compare(i, 8, "Infinity") == 0) {
      return true;
    } else if ((c == '-' || (c >= '0' && c <= '9')) && (i == 0 || !std::isalnum(static_cast<unsigned char>(p[i - 1])))) {
      size_t j = i + 1;
      while (j < p.size() && (std::isdigit(static_cast<unsigned char>(p[j])) || p[j] == '.' || p[j] == 'e' ||
                              p[j] == 'E' || p[j] == '+' || p[j] == '-'))
        ++j;
      if (j - i < 64) {
        const std::string num(p.substr(i, j - i));
        if (std::isinf(std::strtod(num.c_str(), nullptr))) return true;
      }
      i = j - 1;
    }
  }
  return false;
}

}  // namespace

ParseResult ParseReadings(std::string_view payload, std::string_view topic_point, const PointIndex& points,
                          const PayloadLimits& limits, std::vector<Reading>* out) {
  ParseResult result;
  Ctx ctx{points, limits, &result, out};
  if (payload.size() > limits.max_payload_bytes) {
    ctx.Fail(Reject::kOversized, "", std::to_string(payload.size()) + " bytes, more than " +
                                         std::to_string(limits.max_payload_bytes));
    return result;
  }
  if (NestingDepth(payload, limits.max_depth) > limits.max_depth) {
    ctx.Fail(Reject::kMalformedJson, "", "nested deeper than " + std::to_string(limits.max_depth));
    return result;
  }
  const nlohmann::json doc = nlohmann::json::parse(payload.begin(), payload.end(), nullptr, false);
  if (doc.is_discarded()) {
    if (HasNonFiniteToken(payload))
      ctx.Fail(Reject::kNotFinite, "", "a NaN or infinite number (JSON cannot carry one)");
    else
      ctx.Fail(Reject::kMalformedJson, "", "not valid JSON");
    return result;
  }
  if (doc.is_object()) {
    ParseItem(doc, topic_point.empty() ? "batch" : "reading", topic_point, &ctx);
  } else if (doc.is_array()) {
    if (doc.size() > limits.max_batch) {
      ctx.Fail(Reject::kBatchTooLarge, "", std::to_string(doc.size()) + " items, more than " +
                                               std::to_string(limits.max_batch));
      return result;
    }
    if (doc.empty()) ctx.Fail(Reject::kWrongShape, "", "empty array");
    for (size_t i = 0; i < doc.size(); ++i) ParseItem(doc[i], "[" + std::to_string(i) + "]", topic_point, &ctx);
  } else {
    ctx.Fail(Reject::kWrongShape, "", "must be a JSON object or an array of objects");
  }
  return result;
}

}  // namespace holdfast::daemon
