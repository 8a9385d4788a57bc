// Monitor state persistence: alarm states, the sequence counter and learnt
// values, as one versioned JSON document. The core only formats and checks;
// the caller stores it (atomic write and fsync: see firmware-core/io).
#include <cmath>

#include <nlohmann/json.hpp>

#include "holdfast/monitor.h"

namespace holdfast {
namespace {
constexpr const char* kStateFormat = "holdfast-state/1";
}  // namespace

std::string Monitor::SaveState() const {
  nlohmann::json doc;
  doc["format"] = kStateFormat;
  doc["site"] = site_ ? site_->name : "";
  doc["last_tick_s"] = started_ ? last_t_ : 0.0;
  doc["ticks"] = ticks_;
  doc["alarms"] = SerializeAlarms(alarms_, sequence_.peek());
  nlohmann::json segs = nlohmann::json::array();
  for (const SegmentRuntime& s : segments_) {
    nlohmann::json j;
    j["id"] = s.spec->id;
    j["friction_scale"] = s.friction_scale;
    if (s.decision_enabled) {
      const DecisionResult& d = s.decision.result();
      j["bias_kg_s"] = d.bias_kg_s;
      j["sigma_kg_s"] = d.sigma_kg_s;
      j["phi"] = d.phi;
      j["inventory_rate_kg_s"] = s.decision.inventory_rate_kg_s();
      j["inventory_rate_sigma_kg_s"] = s.decision.inventory_rate_sigma_kg_s();
    }
    segs.push_back(j);
  }
  doc["segments"] = segs;
  return doc.dump(1);
}

bool Monitor::RestoreState(const std::string& blob, std::string* why) {
  auto fail = [&](const std::string& m) {
    if (why) *why = "state: " + m;
    return false;
  };
  if (site_ == nullptr) return fail("monitor not initialised");
  nlohmann::json doc = nlohmann::json::parse(blob, nullptr, false);
  if (doc.is_discarded() || !doc.is_object()) return fail("not a JSON object (truncated or corrupt)");
  if (!doc.contains("format") || !doc["format"].is_string()) return fail("missing \"format\"");
  if (doc["format"] != kStateFormat)
    return fail("format is '" + doc["format"].get<std::string>() + "', this build reads '" + kStateFormat + "'");
  for (const char* key : {"last_tick_s", "ticks", "alarms", "segments"})
    if (!doc.contains(key)) return fail(std::string("missing \"") + key + "\"");
  if (!doc["last_tick_s"].is_number() || !doc["ticks"].is_number_unsigned() || !doc["alarms"].is_string() ||
      !doc["segments"].is_array())
    return fail("wrong type of last_tick_s, ticks, alarms or segments");
  const auto& segs = doc["segments"];
  if (segs.size() != segments_.size())
    return fail("holds " + std::to_string(segs.size()) + " segments, the site has " +
                std::to_string(segments_.size()));
  for (size_t i = 0; i < segs.size(); ++i) {
    const auto& j = segs[i];
    if (!j.is_object() || !j.contains("id") || !j["id"].is_string() || j["id"] != segments_[i].spec->id)
      return fail("segments[" + std::to_string(i) + "] is not segment '" + segments_[i].spec->id + "'");
  }
  std::vector<Alarm> alarms;
  uint64_t next_seq = 0;
  std::string reason;
  if (!RestoreAlarms(doc["alarms"].get<std::string>(), &alarms, &next_seq, &reason)) return fail(reason);
  if (alarms.size() != alarms_.size()) return fail("alarm count does not match the site");
  for (size_t i = 0; i < alarms.size(); ++i) {
    if (alarms[i].segment() != static_cast<int>(i / kAlarmTypeCount) ||
        static_cast<int>(alarms[i].type()) != static_cast<int>(i % kAlarmTypeCount))
      return fail("alarm " + std::to_string(i) + " is not in site order");
  }
  // Everything checked: apply.
  sequence_ = SequenceCounter(next_seq);
  alarms_ = std::move(alarms);
  for (Alarm& a : alarms_) a.Bind(&sequence_, &forward_);
  for (size_t i = 0; i < segs.size(); ++i) {
    const auto& j = segs[i];
    SegmentRuntime& s = segments_[i];
    if (j.contains("friction_scale") && j["friction_scale"].is_number()) {
      s.friction_scale = j["friction_scale"].get<double>();
      s.friction_blocks = 50;
    }
    if (s.decision_enabled && j.contains("sigma_kg_s") && j["sigma_kg_s"].is_number() &&
        j["bias_kg_s"].is_number() && j["phi"].is_number())
      s.decision.Seed(j["bias_kg_s"].get<double>(), j["sigma_kg_s"].get<double>(), j["phi"].get<double>(),
                      j.value("inventory_rate_kg_s", kNaN), j.value("inventory_rate_sigma_kg_s", kNaN));
    if (s.decision_enabled) s.tick.decision = s.decision.result();
    for (int k = 0; k < kAlarmTypeCount; ++k) s.tick.alarms[k] = alarms_[i * kAlarmTypeCount + k].state();
  }
  return true;
}

}  // namespace holdfast
