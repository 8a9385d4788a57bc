#include "tuning_file.h"

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "atomic_file.h"
#include "holdfast/json_check.h"
#include "holdfast/monitor.h"
#include "json_file.h"
#include "readings_csv.h"

namespace holdfast {
namespace {

using nlohmann::json;
using ojson = nlohmann::ordered_json;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::string Quote(const std::string& s) { return "\"" + s + "\""; }

std::string Shown(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%g", v);
  return buf;
}

// ---------------------------------------------------------------------------
// Writing
// ---------------------------------------------------------------------------

// Seven significant digits: far finer than the estimates are good for, and
// short enough to read. NaN and infinities become null.
ojson Num(double v) {
  if (!std::isfinite(v)) return nullptr;
  char buf[40];
  std::snprintf(buf, sizeof buf, "%.7g", v);
  return std::strtod(buf, nullptr);
}

ojson Time(double t) {
  if (!std::isfinite(t)) return nullptr;
  return FormatIsoUtc(t, 3);
}

ojson SegmentJson(const SegmentTuning& s) {
  ojson j;
  j["block_s"] = Num(s.block_s);
  j["bias_kg_s"] = Num(s.bias_kg_s);
  j["bias_mean_kg_s"] = Num(s.bias_mean_kg_s);
  j["sigma_kg_s"] = Num(s.sigma_kg_s);
  j["sigma_sd_kg_s"] = Num(s.sigma_sd_kg_s);
  j["phi"] = Num(s.phi);
  j["inventory_rate_kg_s"] = Num(s.inventory_rate_kg_s);
  j["inventory_rate_sigma_kg_s"] = Num(s.inventory_rate_sigma_kg_s);
  j["blocks"] = s.blocks;
  j["blocks_dropped"] = s.blocks_dropped;
  j["block_pairs"] = s.block_pairs;
  j["first_time"] = Time(s.first_time_s);
  j["last_time"] = Time(s.last_time_s);
  j["nominal_flow_kg_s"] = Num(s.nominal_flow_kg_s);
  j["sigma_eff_kg_s"] = Num(s.sigma_eff_kg_s);
  j["arl0_blocks"] = Num(s.arl0_blocks);
  ojson dets = ojson::array();
  for (const TuningDetector& d : s.detectors) {
    ojson o;
    o["target_kg_s"] = Num(d.target_kg_s);
    o["target_fraction"] = Num(d.target_fraction);
    o["k"] = Num(d.k);
    o["h"] = Num(d.h);
    o["arl0_blocks"] = Num(d.arl0_blocks);
    dets.push_back(std::move(o));
  }
  j["detectors"] = std::move(dets);
  j["bank_false_alarm_interval_s"] = Num(s.bank_false_alarm_interval_s);
  ojson det = ojson::array();
  for (const TuningDetection& d : s.detection) {
    ojson o;
    o["detection_s"] = Num(d.detection_s);
    o["leak_kg_s"] = Num(d.leak_kg_s);
    o["leak_fraction"] = Num(d.leak_fraction);
    o["shift_sigma"] = Num(d.shift_sigma);
    o["delay_s"] = Num(d.delay_s);
    det.push_back(std::move(o));
  }
  j["detection"] = std::move(det);
  return j;
}

// ---------------------------------------------------------------------------
// Reading
// ---------------------------------------------------------------------------

// Collects problems as "file:pointer: message".
class Checker {
 public:
  Checker(const std::string& file, std::vector<ConfigProblem>* problems) : check_(problems, file) {}

  void Problem(const std::string& ptr, const std::string& message) { check_.Add(ptr, message); }

  bool IsObject(const json& j, const std::string& ptr) { return check_.ElementObject(j, ptr); }

  void Keys(const json& obj, const std::string& ptr, const std::vector<std::string>& allowed) {
    check_.ExactKeys(obj, ptr, allowed);
  }

  // A number. Missing: a problem when required, else *out keeps its value.
  // null reads as NaN where allowed (figures that do not apply).
  bool Number(const json& obj, const std::string& ptr, const char* key, double* out, bool required,
              bool null_ok = false) {
    const json* m = JsonCheck::Member(obj, key);
    if (m != nullptr && m->is_null() && null_ok) {
      *out = kNaN;
      return true;
    }
    const Got g = check_.Number(obj, key, ptr, required ? Need::kRequired : Need::kOptional, out);
    return g == Got::kOk || (g == Got::kAbsent && !required);
  }

  bool Integer(const json& obj, const std::string& ptr, const char* key, int64_t* out) {
    auto it = obj.find(key);
    if (it == obj.end()) return true;
    if (!it->is_number_integer() || it->get<int64_t>() < 0) {
      Problem(ptr + "/" + key, "must be a whole number, zero or more");
      return false;
    }
    *out = it->get<int64_t>();
    return true;
  }

  bool String(const json& obj, const std::string& ptr, const char* key, std::string* out) {
    auto it = obj.find(key);
    if (it == obj.end() || it->is_null()) return true;
    if (!it->is_string()) {
      Problem(ptr + "/" + key, "must be a string");
      return false;
    }
    *out = it->get<std::string>();
    return true;
  }

  bool TimeField(const json& obj, const std::string& ptr, const char* key, double* out) {
    auto it = obj.find(key);
    if (it == obj.end()) return true;
    if (it->is_null()) {
      *out = kNaN;
      return true;
    }
    double t = 0.0;
    if (!it->is_string() || !ParseTime(it->get<std::string>(), &t)) {
      Problem(ptr + "/" + key, "must be an ISO 8601 time with a zone, e.g. \"2026-03-14T06:00:00Z\"");
      return false;
    }
    *out = t;
    return true;
  }

  // Checks a value that was read: `ok` false gives the problem.
  void Require(bool ok, const std::string& ptr, const char* key, const std::string& what, double got) {
    if (!ok) Problem(ptr + "/" + key, what + " (got " + Shown(got) + ")");
  }

 private:
  JsonCheck check_;
};

void ReadSegment(Checker& c, const json& j, const std::string& ptr, SegmentTuning* s) {
  if (!c.IsObject(j, ptr)) return;
  c.Keys(j, ptr, {"block_s", "bias_kg_s", "bias_mean_kg_s", "sigma_kg_s", "sigma_sd_kg_s", "phi",
                  "inventory_rate_kg_s", "inventory_rate_sigma_kg_s", "blocks", "blocks_dropped", "block_pairs",
                  "first_time", "last_time", "nominal_flow_kg_s", "sigma_eff_kg_s", "arl0_blocks", "detectors",
                  "bank_false_alarm_interval_s", "detection"});
  // What the monitor is seeded with: required and checked.
  if (c.Number(j, ptr, "block_s", &s->block_s, true))
    c.Require(std::isfinite(s->block_s) && s->block_s > 0.0, ptr, "block_s", "must be positive", s->block_s);
  if (c.Number(j, ptr, "bias_kg_s", &s->bias_kg_s, true))
    c.Require(std::isfinite(s->bias_kg_s), ptr, "bias_kg_s", "must be finite", s->bias_kg_s);
  if (c.Number(j, ptr, "sigma_kg_s", &s->sigma_kg_s, true))
    c.Require(std::isfinite(s->sigma_kg_s) && s->sigma_kg_s > 0.0, ptr, "sigma_kg_s", "must be positive",
              s->sigma_kg_s);
  if (c.Number(j, ptr, "phi", &s->phi, true))
    c.Require(s->phi > -1.0 && s->phi < 1.0, ptr, "phi", "must lie strictly between -1 and 1", s->phi);
  // The rest is informational.
  c.Number(j, ptr, "bias_mean_kg_s", &s->bias_mean_kg_s, false, true);
  c.Number(j, ptr, "sigma_sd_kg_s", &s->sigma_sd_kg_s, false, true);
  c.Number(j, ptr, "inventory_rate_kg_s", &s->inventory_rate_kg_s, false, true);
  if (c.Number(j, ptr, "inventory_rate_sigma_kg_s", &s->inventory_rate_sigma_kg_s, false, true))
    c.Require(!(s->inventory_rate_sigma_kg_s < 0.0), ptr, "inventory_rate_sigma_kg_s", "must not be negative",
              s->inventory_rate_sigma_kg_s);
  c.Integer(j, ptr, "blocks", &s->blocks);
  c.Integer(j, ptr, "blocks_dropped", &s->blocks_dropped);
  c.Integer(j, ptr, "block_pairs", &s->block_pairs);
  c.TimeField(j, ptr, "first_time", &s->first_time_s);
  c.TimeField(j, ptr, "last_time", &s->last_time_s);
  c.Number(j, ptr, "nominal_flow_kg_s", &s->nominal_flow_kg_s, false, true);
  c.Number(j, ptr, "sigma_eff_kg_s", &s->sigma_eff_kg_s, false, true);
  c.Number(j, ptr, "arl0_blocks", &s->arl0_blocks, false, true);
  c.Number(j, ptr, "bank_false_alarm_interval_s", &s->bank_false_alarm_interval_s, false, true);
  if (auto it = j.find("detectors"); it != j.end()) {
    const std::string p = ptr + "/detectors";
    if (!it->is_array()) {
      c.Problem(p, "must be an array");
    } else {
      for (size_t i = 0; i < it->size(); ++i) {
        const std::string pi = p + "/" + std::to_string(i);
        const json& o = (*it)[i];
        if (!c.IsObject(o, pi)) continue;
        c.Keys(o, pi, {"target_kg_s", "target_fraction", "k", "h", "arl0_blocks"});
        TuningDetector d;
        c.Number(o, pi, "target_kg_s", &d.target_kg_s, true, true);
        c.Number(o, pi, "target_fraction", &d.target_fraction, false, true);
        c.Number(o, pi, "k", &d.k, false, true);
        c.Number(o, pi, "h", &d.h, false, true);
        c.Number(o, pi, "arl0_blocks", &d.arl0_blocks, false, true);
        s->detectors.push_back(d);
      }
    }
  }
  if (auto it = j.find("detection"); it != j.end()) {
    const std::string p = ptr + "/detection";
    if (!it->is_array()) {
      c.Problem(p, "must be an array");
    } else {
      for (size_t i = 0; i < it->size(); ++i) {
        const std::string pi = p + "/" + std::to_string(i);
        const json& o = (*it)[i];
        if (!c.IsObject(o, pi)) continue;
        c.Keys(o, pi, {"detection_s", "leak_kg_s", "leak_fraction", "shift_sigma", "delay_s"});
        TuningDetection d;
        c.Number(o, pi, "detection_s", &d.detection_s, true);
        c.Number(o, pi, "leak_kg_s", &d.leak_kg_s, false, true);
        c.Number(o, pi, "leak_fraction", &d.leak_fraction, false, true);
        c.Number(o, pi, "shift_sigma", &d.shift_sigma, false, true);
        c.Number(o, pi, "delay_s", &d.delay_s, false, true);
        s->detection.push_back(d);
      }
    }
  }
}

std::string Join(const std::vector<ConfigProblem>& problems) {
  std::string out;
  for (const ConfigProblem& p : problems) {
    if (!out.empty()) out += '\n';
    out += p.ToString();
  }
  return out;
}

}  // namespace

const SegmentTuning* TuningFile::Find(const std::string& segment_id) const {
  for (const SegmentTuning& s : segments)
    if (s.segment == segment_id) return &s;
  return nullptr;
}

bool LoadTuningFile(const std::string& path, const Site& site, TuningFile* file, std::string* why) {
  std::vector<ConfigProblem> problems;
  auto fail = [&] {
    if (why) *why = Join(problems);
    return false;
  };
  json doc;
  bool parsed = false;
  ReadJsonFile(path, &doc, &problems, &parsed);  // a repeated key: reported, the rest still checked
  if (!parsed) return fail();
  Checker c(path, &problems);
  if (!c.IsObject(doc, "")) return fail();

  TuningFile out;
  auto fmt = doc.find("format");
  if (fmt == doc.end()) {
    c.Problem("/format", std::string("missing; expected \"") + kTuningFormat + "\"");
    return fail();
  }
  if (!fmt->is_string() || fmt->get<std::string>() != kTuningFormat) {
    c.Problem("/format", std::string("expected \"") + kTuningFormat + "\" (got " + fmt->dump() +
                             "): this build reads only that version");
    return fail();
  }
  c.Keys(doc, "", {"format", "site", "data", "until", "false_alarm_interval_s", "detectors_in_bank",
                   "inventory_filter_s", "segments"});
  c.String(doc, "", "site", &out.site);
  c.String(doc, "", "data", &out.data);
  c.TimeField(doc, "", "until", &out.until_s);
  if (c.Number(doc, "", "false_alarm_interval_s", &out.false_alarm_interval_s, false))
    c.Require(std::isfinite(out.false_alarm_interval_s) && out.false_alarm_interval_s > 0.0, "",
              "false_alarm_interval_s", "must be positive", out.false_alarm_interval_s);
  if (c.Number(doc, "", "inventory_filter_s", &out.inventory_filter_s, false))
    c.Require(std::isfinite(out.inventory_filter_s) && out.inventory_filter_s > 0.0, "", "inventory_filter_s",
              "must be positive", out.inventory_filter_s);
  int64_t bank = out.detectors_in_bank;
  if (c.Integer(doc, "", "detectors_in_bank", &bank)) out.detectors_in_bank = static_cast<int>(bank);

  auto segs = doc.find("segments");
  if (segs == doc.end()) {
    c.Problem("/segments", "missing required field");
  } else if (c.IsObject(*segs, "/segments")) {
    if (segs->empty()) c.Problem("/segments", "no segments");
    for (auto it = segs->begin(); it != segs->end(); ++it) {
      const std::string ptr = json_text::Join("/segments", it.key());
      bool known = false;
      for (const SegmentSpec& spec : site.segments) known = known || spec.id == it.key();
      if (!known) {
        std::string ids;
        for (const SegmentSpec& spec : site.segments) ids += (ids.empty() ? "" : ", ") + spec.id;
        c.Problem(ptr, "no segment " + Quote(it.key()) + " in the site (it has: " + ids + ")");
        continue;
      }
      SegmentTuning s;
      s.segment = it.key();
      ReadSegment(c, it.value(), ptr, &s);
      out.segments.push_back(std::move(s));
    }
  }
  if (!problems.empty()) return fail();
  *file = std::move(out);
  return true;
}

bool WriteTuningFile(const std::string& path, const TuningFile& file, std::string* why) {
  auto fail = [&](const std::string& m) {
    if (why) *why = path + ": " + m;
    return false;
  };
  ojson doc;
  doc["format"] = kTuningFormat;
  doc["site"] = file.site;
  doc["data"] = file.data;
  doc["until"] = Time(file.until_s);
  doc["false_alarm_interval_s"] = Num(file.false_alarm_interval_s);
  doc["detectors_in_bank"] = file.detectors_in_bank;
  doc["inventory_filter_s"] = Num(file.inventory_filter_s);
  ojson segs = ojson::object();
  for (const SegmentTuning& s : file.segments) {
    if (s.segment.empty()) return fail("a segment without an id");
    if (segs.contains(s.segment)) return fail("segment " + Quote(s.segment) + " twice");
    segs[s.segment] = SegmentJson(s);
  }
  doc["segments"] = std::move(segs);
  std::string text;
  try {
    text = doc.dump(2) + "\n";
  } catch (const std::exception& e) {
    return fail(std::string("cannot serialise: ") + e.what());
  }

  std::string reason;
  if (!WriteFileAtomic(path, text, &reason)) {
    if (why) *why = reason;
    return false;
  }
  return true;
}

bool ApplyTuning(const TuningFile& file, Monitor* monitor, std::string* why) {
  auto fail = [&](const std::string& m) {
    if (why) *why = m;
    return false;
  };
  if (monitor == nullptr || monitor->segment_count() == 0) return fail("tuning: the monitor is not initialised");
  const Site& site = monitor->site();
  for (const SegmentTuning& s : file.segments) {
    int index = -1;
    for (size_t i = 0; i < site.segments.size(); ++i)
      if (site.segments[i].id == s.segment) index = static_cast<int>(i);
    if (index < 0) return fail("tuning: no segment " + Quote(s.segment) + " in the monitor's site");
    if (!monitor->segment(index).decision_enabled) continue;  // no nominal flow: no decision stage
    if (!monitor->SeedDecision(index, s.bias_kg_s, s.sigma_kg_s, s.phi, s.inventory_rate_kg_s,
                               s.inventory_rate_sigma_kg_s))
      return fail("tuning: segment " + Quote(s.segment) + ": the monitor refused bias " + Shown(s.bias_kg_s) +
                  " kg/s, sigma " + Shown(s.sigma_kg_s) + " kg/s, phi " + Shown(s.phi));
  }
  return true;
}

void DecisionInput::Tick(const SegmentTick& t, double dt) {
  const bool available = t.status != SegmentStatus::kUnavailable;
  // The balance has a difference only when this tick and the one before had
  // a balance (SegmentBalance::has_difference).
  const bool ok = started_ && available && prev_available_ && dt > 0.0;
  started_ = true;
  prev_available_ = available;
  valid_ = false;
  imbalance_kg_ = inventory_rate_kg_s_ = 0.0;
  if (!ok) {
    cumulative_kg_ = filtered_kg_ = 0.0;
    running_ = false;
    return;
  }
  if (!running_) {
    running_ = true;
    filter_start_s_ = t.time_s;
  }
  cumulative_kg_ += t.residual_kg_s * dt;
  const double before = filtered_kg_;
  filtered_kg_ += (1.0 - std::exp(-dt / filter_s_)) * (cumulative_kg_ - filtered_kg_);
  // The monitor's decision ignores the filter while it settles
  // (Monitor::Options::decision_settle_s).
  if (t.time_s - filter_start_s_ < settle_s_) return;
  valid_ = true;
  imbalance_kg_ = filtered_kg_ - before;
  inventory_rate_kg_s_ = t.inventory_rate_kg_s;
}

}  // namespace holdfast
