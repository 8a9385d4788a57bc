// Scenario compiler: "holdfast-scenario/1" JSON + Site -> Scenario. The
// format is documented in config/SCENARIO.md; the conventions (JSON pointers,
// every problem reported, unknown keys rejected with a suggestion, quantities
// with units, '_' comments) are those of the site config (config/FORMAT.md).
#include "scenario.h"

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <exception>
#include <functional>
#include <initializer_list>
#include <map>
#include <set>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "holdfast/json_check.h"

#include "json_file.h"
#include "readings_csv.h"

namespace holdfast::sim {
namespace {

using nlohmann::json;

constexpr const char* kFormat = "holdfast-scenario/1";
constexpr double kMaxSeed = 9007199254740992.0;  // 2^53: exact in a JSON number

// --- Wording (holdfast/json_check.h) ---------------------------------------------

using namespace json_text;

double ElevationAt(const std::vector<ElevationPoint>& profile, double x) {
  if (profile.empty()) return 0.0;
  if (x <= profile.front().chainage_m) return profile.front().elevation_m;
  for (size_t i = 1; i < profile.size(); ++i) {
    const ElevationPoint& a = profile[i - 1];
    const ElevationPoint& b = profile[i];
    if (x <= b.chainage_m) return a.elevation_m + (x - a.chainage_m) / (b.chainage_m - a.chainage_m) * (b.elevation_m - a.elevation_m);
  }
  return profile.back().elevation_m;
}

// A channel's ramps, collected in any order and added sorted by start.
struct PendingRamps {
  std::vector<Ramp> ramps;
  void Add(double start, double duration, double target) { ramps.push_back(Ramp{start, duration, target}); }
  void ApplyTo(Channel* c) {
    std::stable_sort(ramps.begin(), ramps.end(), [](const Ramp& a, const Ramp& b) { return a.start_s < b.start_s; });
    for (const Ramp& r : ramps) c->AddRamp(r.start_s, r.duration_s, r.target);
  }
};

// The member readers (Number, Range, Enum, ExactKeys ...) are JsonCheck's.
class Compiler : private JsonCheck {
 public:
  Compiler(const Site& site, Scenario* sc, std::vector<ConfigProblem>* problems)
      : JsonCheck(problems), site_(site), sc_(sc), problems_(problems) {}
  void Run(const json& doc);

 private:
  // A flow quantity (mass or volume); `is_volume` says which.
  Got Flow(const json& obj, const char* key, const std::string& path, Need need, double* si, bool* is_volume) {
    UnitConversion c;
    const Got g = Qty(obj, key, path, need, {Quantity::kMassFlow, Quantity::kVolumeFlow}, si, &c);
    if (g == Got::kOk) {
      *is_volume = c.quantity == Quantity::kVolumeFlow;
      if (*si < 0.0) {
        Add(Join(Join(path, key), "value"), "a flow must not be negative (got " + Num(*si) + " in SI)");
        return Got::kBad;
      }
    }
    return g;
  }
  Got Windows(const json& obj, const char* key, const std::string& path, std::vector<TimeWindow>* out) {
    const json* arr = nullptr;
    const Got g = Array(obj, key, path, Need::kOptional, &arr);
    if (g != Got::kOk) return g;
    const std::string apath = Join(path, key);
    for (size_t i = 0; i < arr->size(); ++i) {
      const std::string wp = Join(apath, i);
      const json& w = (*arr)[i];
      if (!ElementObject(w, wp)) continue;
      ExactKeys(w, wp, {"from_s", "to_s"});
      TimeWindow tw;
      const Got a = NonNegative(w, "from_s", wp, Need::kRequired, &tw.from_s);
      const Got b = NonNegative(w, "to_s", wp, Need::kRequired, &tw.to_s);
      if (a == Got::kOk && b == Got::kOk) {
        if (!(tw.to_s > tw.from_s)) {
          Add(Join(wp, "to_s"), "must be after from_s (got " + Num(tw.to_s) + " <= " + Num(tw.from_s) + ")");
        } else {
          out->push_back(tw);
        }
      }
    }
    return Got::kOk;
  }

  void CompileTop(const json& doc);
  void CompileUpstream(const json& doc);
  void CompileDownstream(const json& doc);
  void CompileValve(const json& v, const std::string& path, DownstreamSetup* dn);
  void CompileLaterals(const json& doc);
  void CompileOperations(const json& doc);
  void CompileLeaks(const json& doc);
  void CompileTemperature(const json& doc);
  void PlanPoints();
  void CompileInstruments(const json& doc);
  void InstrumentFields(const json& obj, const std::string& path, const PointSpec* point, InstrumentSpec* spec);

  const Site& site_;
  Scenario* sc_;
  std::vector<ConfigProblem>* problems_;
  const SegmentSpec* seg_ = nullptr;
  double length_m_ = 0.0;
  double reference_density_ = 0.0;  // fluid at the site's standard conditions
  std::map<std::string, int> lateral_of_point_;
  int tank_index_ = -1;  // the segment tank that is the downstream boundary
  PendingRamps speed_, up_head_, up_flow_, dn_head_, dn_flow_, opening_, tank_out_;
  std::vector<PendingRamps> lat_ramps_;
  char up_flow_fixed_ = 0, dn_flow_fixed_ = 0, tank_out_fixed_ = 0;
  std::vector<char> lat_fixed_;
};

// --- Top level ---------------------------------------------------------------------

void Compiler::Run(const json& doc) {
  if (!doc.is_object()) {
    Add("", std::string("the document must be a JSON object with \"format\": \"") + kFormat + "\" (got " + Describe(doc) + ")");
    return;
  }
  ExactKeys(doc, "", {"format", "name", "segment", "start", "duration_s", "seed", "instrument_set_seed", "time_step_s", "wave_speed_tolerance_pct",
                      "property_step_s", "mass_fixer", "truth_every_s", "upstream", "downstream", "laterals", "operations",
                      "leaks", "temperature", "instrument_defaults", "instruments"});
  std::string format;
  if (String(doc, "format", "", Need::kRequired, &format, std::string("\"") + kFormat + "\"") == Got::kOk && format != kFormat)
    Add("/format", "unsupported format " + Quote(format) + "; this build reads \"" + kFormat + "\"");
  CompileTop(doc);
  if (seg_ == nullptr) return;  // nothing else can be checked without the segment
  CompileUpstream(doc);
  CompileDownstream(doc);
  CompileLaterals(doc);
  CompileTemperature(doc);
  CompileLeaks(doc);
  CompileOperations(doc);
  PlanPoints();
  CompileInstruments(doc);
  std::string why;
  if (problems_->empty() && !sc_->moc.IsValid(&why)) Add("", why);
}

void Compiler::CompileTop(const json& doc) {
  String(doc, "name", "", Need::kOptional, &sc_->name);
  // Segment.
  std::string seg_id;
  const Got gs = String(doc, "segment", "", site_.segments.size() == 1 ? Need::kOptional : Need::kRequired, &seg_id,
                        "the id of a segment in the site");
  if (gs == Got::kAbsent && site_.segments.size() == 1) {
    sc_->segment = 0;
  } else if (gs == Got::kOk) {
    std::vector<std::string> ids;
    for (size_t i = 0; i < site_.segments.size(); ++i) {
      ids.push_back(site_.segments[i].id);
      if (site_.segments[i].id == seg_id) sc_->segment = static_cast<int>(i);
    }
    if (sc_->segment < 0) {
      std::string msg = "segment " + Quote(seg_id) + " is not in the site";
      const std::string hint = Closest(seg_id, ids);
      if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
      Add("/segment", msg + "; segments: " + ListNames(ids));
    }
  }
  if (sc_->segment >= 0) {
    seg_ = &site_.segments[static_cast<size_t>(sc_->segment)];
    length_m_ = seg_->length_m();
    const FluidSpec& fluid = site_.fluids[static_cast<size_t>(seg_->fluid)];
    if (fluid.kind == FluidKind::kNaturalGas) {
      Add("/segment", "segment " + Quote(seg_->id) + " carries natural gas; the simulator models liquid lines only");
      seg_ = nullptr;
    } else {
      reference_density_ = FluidDensity(fluid, site_.standard_pressure_pa, site_.standard_temperature_k);
      MocSetup& m = sc_->moc;
      m.sections = seg_->sections;
      m.profile = seg_->profile;
      m.fluid = fluid;
      m.atmospheric_pressure_pa = site_.atmospheric_pressure_pa;
    }
  }
  // Times.
  std::string start;
  if (String(doc, "start", "", Need::kRequired, &start, "an ISO 8601 time with a zone, e.g. \"2026-03-14T06:00:00Z\"") ==
      Got::kOk) {
    if (!ParseTime(start, &sc_->start_epoch_s))
      Add("/start", "cannot read " + Quote(start) + " as a time; use ISO 8601 with a zone, e.g. \"2026-03-14T06:00:00Z\"");
  }
  Positive(doc, "duration_s", "", Need::kRequired, &sc_->duration_s);
  double seed = 1.0;
  if (Range(doc, "seed", "", Need::kOptional, 0.0, kMaxSeed, &seed) == Got::kOk) {
    if (seed != std::floor(seed)) {
      Add("/seed", "must be a whole number (got " + Num(seed) + ")");
    } else {
      sc_->seed = static_cast<uint64_t>(seed);
    }
  }
  sc_->instrument_set_seed = sc_->seed;
  double set_seed = 0.0;
  if (Range(doc, "instrument_set_seed", "", Need::kOptional, 0.0, kMaxSeed, &set_seed) == Got::kOk) {
    if (set_seed != std::floor(set_seed)) {
      Add("/instrument_set_seed", "must be a whole number (got " + Num(set_seed) + ")");
    } else {
      sc_->instrument_set_seed = static_cast<uint64_t>(set_seed);
    }
  }
  MocSetup& m = sc_->moc;
  Positive(doc, "time_step_s", "", Need::kOptional, &m.time_step_hint_s);
  double tol_pct = 100.0 * m.wave_speed_tolerance;
  if (Range(doc, "wave_speed_tolerance_pct", "", Need::kOptional, 0.0, 20.0, &tol_pct, true, false) == Got::kOk)
    m.wave_speed_tolerance = tol_pct / 100.0;
  Positive(doc, "property_step_s", "", Need::kOptional, &m.property_step_s);
  Bool(doc, "mass_fixer", "", Need::kOptional, &m.mass_fixer);
  Positive(doc, "truth_every_s", "", Need::kOptional, &sc_->truth_every_s);
}

void Compiler::CompileUpstream(const json& doc) {
  const json* up = nullptr;
  if (Object(doc, "upstream", "", Need::kRequired, &up) != Got::kOk) return;
  const std::string path = "/upstream";
  UpstreamSetup& u = sc_->moc.upstream;
  std::string type;
  if (Enum(*up, "type", path, Need::kRequired, {"reservoir", "pump", "flow"}, &type) != Got::kOk) return;
  char buf[256];
  if (type == "reservoir") {
    ExactKeys(*up, path, {"type", "head_m"});
    u.type = UpstreamType::kReservoir;
    double head = 0.0;
    if (Number(*up, "head_m", path, Need::kRequired, &head) == Got::kOk) u.head_m.Set(head);
    std::snprintf(buf, sizeof buf, "reservoir, head %.2f m", head);
  } else if (type == "pump") {
    ExactKeys(*up, path, {"type", "suction_head_m", "shutoff_head_m", "rated_flow", "rated_head_m", "speed", "check_valve"});
    u.type = UpstreamType::kPump;
    double suction = 0.0, h0 = 0.0, hr = 0.0, qr = 0.0, speed = 1.0;
    if (Number(*up, "suction_head_m", path, Need::kRequired, &suction) == Got::kOk) u.head_m.Set(suction);
    const Got g0 = Positive(*up, "shutoff_head_m", path, Need::kRequired, &h0);
    const Got gr = Positive(*up, "rated_head_m", path, Need::kRequired, &hr);
    const Got gq = Qty(*up, "rated_flow", path, Need::kRequired, {Quantity::kVolumeFlow}, &qr);
    if (gq == Got::kOk && !(qr > 0.0)) Add(path + "/rated_flow/value", "must be positive");
    if (g0 == Got::kOk && gr == Got::kOk && !(hr < h0))
      Add(path + "/rated_head_m", "must be below the shut-off head (" + Num(hr) + " >= " + Num(h0) + ")");
    if (g0 == Got::kOk && gr == Got::kOk && gq == Got::kOk && hr < h0 && qr > 0.0) {
      u.shutoff_head_m = h0;
      u.curve_c_s2_m5 = (h0 - hr) / (qr * qr);  // H = s^2 H0 - c Q^2 through the rated point
    }
    if (Range(*up, "speed", path, Need::kOptional, 0.0, 1.5, &speed) == Got::kOk) u.speed.Set(speed);
    Bool(*up, "check_valve", path, Need::kOptional, &u.check_valve);
    std::snprintf(buf, sizeof buf, "pump, suction head %.2f m, H = s^2 * %.1f m - %.1f s2/m5 * Q^2 (rated %.1f m at %.2f m3/h)",
                  suction, h0, u.curve_c_s2_m5, hr, qr * 3600.0);
  } else {
    ExactKeys(*up, path, {"type", "flow"});
    u.type = UpstreamType::kFlow;
    double q = 0.0;
    if (Flow(*up, "flow", path, Need::kRequired, &q, &u.flow_is_volume) == Got::kOk) u.flow.Set(q);
    up_flow_fixed_ = 1;
    std::snprintf(buf, sizeof buf, "controlled inflow %.6g %s", q, u.flow_is_volume ? "m3/s (line conditions)" : "kg/s");
  }
  sc_->upstream_text = buf;
}

void Compiler::CompileValve(const json& v, const std::string& path, DownstreamSetup* dn) {
  ExactKeys(v, path, {"cda_m2", "pressure_drop", "at_flow", "opening"});
  const bool has_cda = Member(v, "cda_m2") != nullptr;
  const bool has_drop = Member(v, "pressure_drop") != nullptr || Member(v, "at_flow") != nullptr;
  if (has_cda == has_drop) {
    Add(path, "give the valve either \"cda_m2\" or \"pressure_drop\" with \"at_flow\" (its full-open loss at a flow)");
    return;
  }
  if (has_cda) {
    Positive(v, "cda_m2", path, Need::kRequired, &dn->valve_cda_m2);
  } else {
    double dp = 0.0, q = 0.0;
    bool is_volume = false;
    const Got gd = Qty(v, "pressure_drop", path, Need::kRequired, {Quantity::kPressure}, &dp);
    const Got gq = Flow(v, "at_flow", path, Need::kRequired, &q, &is_volume);
    if (gd == Got::kOk && !(dp > 0.0)) Add(path + "/pressure_drop/value", "must be positive");
    if (gq == Got::kOk && !(q > 0.0)) Add(path + "/at_flow/value", "must be positive");
    if (gd == Got::kOk && gq == Got::kOk && dp > 0.0 && q > 0.0) {
      // m = CdA sqrt(2 rho dP); the density at the site's standard conditions.
      const double m = is_volume ? q * reference_density_ : q;
      dn->valve_cda_m2 = m / std::sqrt(2.0 * reference_density_ * dp);
    }
  }
  double opening = 1.0;
  if (Range(v, "opening", path, Need::kOptional, 0.0, 1.0, &opening) == Got::kOk) dn->opening.Set(opening);
}

void Compiler::CompileDownstream(const json& doc) {
  const json* dn = nullptr;
  if (Object(doc, "downstream", "", Need::kRequired, &dn) != Got::kOk) return;
  const std::string path = "/downstream";
  DownstreamSetup& d = sc_->moc.downstream;
  std::string type;
  if (Enum(*dn, "type", path, Need::kRequired, {"reservoir", "tank", "flow"}, &type) != Got::kOk) return;
  char buf[256];
  buf[0] = 0;
  const json* valve = nullptr;
  if (type == "reservoir") {
    ExactKeys(*dn, path, {"type", "head_m", "valve"});
    d.type = DownstreamType::kReservoir;
    double head = 0.0;
    if (Number(*dn, "head_m", path, Need::kRequired, &head) == Got::kOk) d.head_m.Set(head);
    if (Object(*dn, "valve", path, Need::kOptional, &valve) == Got::kOk) CompileValve(*valve, path + "/valve", &d);
    std::snprintf(buf, sizeof buf, "reservoir, head %.2f m", head);
  } else if (type == "tank") {
    ExactKeys(*dn, path,
              {"type", "tank", "initial_level_m", "base_elevation_m", "outflow", "level_control", "contents_temperature",
               "initial_temperature", "valve"});
    d.type = DownstreamType::kTank;
    std::string id;
    const Got gt = String(*dn, "tank", path, seg_->tanks.size() == 1 ? Need::kOptional : Need::kRequired, &id,
                          "the id of a tank of the segment");
    if (gt == Got::kAbsent && seg_->tanks.size() == 1) tank_index_ = 0;
    if (gt == Got::kOk) {
      for (size_t k = 0; k < seg_->tanks.size(); ++k)
        if (seg_->tanks[k].id == id) tank_index_ = static_cast<int>(k);
      if (tank_index_ < 0) Add(path + "/tank", "tank " + Quote(id) + " is not a tank of segment " + Quote(seg_->id));
    }
    if (gt == Got::kAbsent && seg_->tanks.empty())
      Add(path + "/tank", "segment " + Quote(seg_->id) + " has no tank; a receiving tank needs its strapping table from the site");
    if (tank_index_ >= 0) d.strapping = seg_->tanks[static_cast<size_t>(tank_index_)].strapping;
    double level = 0.0;
    if (NonNegative(*dn, "initial_level_m", path, Need::kRequired, &level) == Got::kOk) {
      d.tank_initial_level_m = level;
      if (!d.strapping.empty() && level > d.strapping.back().level_m)
        Add(path + "/initial_level_m", "is above the strapping table (" + Num(d.strapping.back().level_m) + " m)");
    }
    d.tank_base_elevation_m = ElevationAt(seg_->profile, length_m_);
    Number(*dn, "base_elevation_m", path, Need::kOptional, &d.tank_base_elevation_m);
    double out = 0.0;
    if (Flow(*dn, "outflow", path, Need::kOptional, &out, &d.flow_is_volume) == Got::kOk) {
      d.tank_outflow.Set(out);
      tank_out_fixed_ = 1;
    }
    const json* lc = nullptr;
    if (Object(*dn, "level_control", path, Need::kOptional, &lc) == Got::kOk) {
      const std::string lpath = path + "/level_control";
      ExactKeys(*lc, lpath, {"setpoint_m", "gain_per_m"});
      double sp = 0.0, gain = 0.0;
      bool gain_volume = false;
      if (NonNegative(*lc, "setpoint_m", lpath, Need::kRequired, &sp) == Got::kOk) {
        d.tank_level_setpoint_m = sp;
        if (!d.strapping.empty() && sp > d.strapping.back().level_m)
          Add(lpath + "/setpoint_m", "is above the strapping table (" + Num(d.strapping.back().level_m) + " m)");
      }
      if (Flow(*lc, "gain_per_m", lpath, Need::kRequired, &gain, &gain_volume) == Got::kOk) {
        if (tank_out_fixed_ && gain_volume != d.flow_is_volume)
          Add(lpath + "/gain_per_m", std::string("must be a ") + (d.flow_is_volume ? "volume" : "mass") +
                                         " flow like the outflow");
        d.flow_is_volume = gain_volume;
        d.tank_level_gain_per_m = gain;
      }
    }
    std::string mode = "mixed";
    Enum(*dn, "contents_temperature", path, Need::kOptional, {"mixed", "arriving"}, &mode);
    d.tank_mixed = mode == "mixed";
    Qty(*dn, "initial_temperature", path, Need::kOptional, {Quantity::kTemperature}, &d.tank_initial_temperature_k);
    if (Object(*dn, "valve", path, Need::kOptional, &valve) == Got::kOk) CompileValve(*valve, path + "/valve", &d);
    std::snprintf(buf, sizeof buf, "tank %s, level %.3f m at t = 0, base %.2f m, contents %s",
                  tank_index_ >= 0 ? seg_->tanks[static_cast<size_t>(tank_index_)].id.c_str() : "?", level,
                  d.tank_base_elevation_m, mode.c_str());
  } else {
    ExactKeys(*dn, path, {"type", "flow"});
    d.type = DownstreamType::kFlow;
    double q = 0.0;
    if (Flow(*dn, "flow", path, Need::kRequired, &q, &d.flow_is_volume) == Got::kOk) d.flow.Set(q);
    dn_flow_fixed_ = 1;
    std::snprintf(buf, sizeof buf, "controlled delivery %.6g %s", q, d.flow_is_volume ? "m3/s (line conditions)" : "kg/s");
  }
  std::string text = buf;
  if (d.valve_cda_m2 > 0.0) {
    char v[96];
    std::snprintf(v, sizeof v, ", valve CdA %.4g m2 open %.2f", d.valve_cda_m2, d.opening.initial());
    text += v;
  }
  sc_->downstream_text = text;
  // Tanks the simulator cannot model.
  for (size_t k = 0; k < seg_->tanks.size(); ++k) {
    if (static_cast<int>(k) == tank_index_) continue;
    Add(path, "segment " + Quote(seg_->id) + " has tank " + Quote(seg_->tanks[k].id) +
                  " in its control volume; the simulator models one receiving tank, as the downstream boundary "
                  "(\"type\": \"tank\", \"tank\": \"" + seg_->tanks[k].id + "\")");
  }
}

void Compiler::CompileLaterals(const json& doc) {
  // Every injection and delivery meter of the segment is a lateral; its flow
  // defaults to zero.
  for (const MeterSpec& m : seg_->meters) {
    if (m.role != MeterRole::kInjection && m.role != MeterRole::kDelivery) continue;
    LateralSetup l;
    l.chainage_m = m.chainage_m;
    l.injection = m.role == MeterRole::kInjection;
    lateral_of_point_[site_.points[static_cast<size_t>(m.point)].id] = static_cast<int>(sc_->moc.laterals.size());
    sc_->moc.laterals.push_back(l);
    sc_->lateral_points.push_back(site_.points[static_cast<size_t>(m.point)].id);
  }
  lat_ramps_.assign(sc_->moc.laterals.size(), PendingRamps{});
  lat_fixed_.assign(sc_->moc.laterals.size(), 0);
  const json* lats = nullptr;
  if (Object(doc, "laterals", "", Need::kOptional, &lats) != Got::kOk) return;
  std::vector<std::string> ids;
  for (const auto& kv : lateral_of_point_) ids.push_back(kv.first);
  for (auto it = lats->begin(); it != lats->end(); ++it) {
    const std::string& key = it.key();
    if (!key.empty() && key[0] == '_') continue;
    const std::string path = Join("/laterals", key);
    auto found = lateral_of_point_.find(key);
    if (found == lateral_of_point_.end()) {
      std::string msg = Quote(key) + " is not an injection or delivery meter of segment " + Quote(seg_->id);
      const std::string hint = Closest(key, ids);
      if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
      Add(path, msg + (ids.empty() ? "; the segment has none" : "; meters: " + ListNames(ids)));
      continue;
    }
    if (!ElementObject(it.value(), path)) continue;
    ExactKeys(it.value(), path, {"flow"});
    LateralSetup& l = sc_->moc.laterals[static_cast<size_t>(found->second)];
    double q = 0.0;
    if (Flow(it.value(), "flow", path, Need::kRequired, &q, &l.flow_is_volume) == Got::kOk) l.flow.Set(q);
    lat_fixed_[static_cast<size_t>(found->second)] = 1;
  }
}

void Compiler::CompileTemperature(const json& doc) {
  const json* t = nullptr;
  if (Object(doc, "temperature", "", Need::kRequired, &t) != Got::kOk) return;
  const std::string path = "/temperature";
  ExactKeys(*t, path, {"inlet", "swing", "ground", "thermal_time_constant_s", "parcel_spacing_m", "initial_line"});
  MocSetup& m = sc_->moc;
  TemperatureSchedule& ts = m.inlet_temperature;
  const json* inlet = Present(*t, "inlet", path, Need::kRequired, "a temperature quantity or a schedule");
  if (inlet != nullptr) {
    if (inlet->is_array()) {
      const std::string ip = path + "/inlet";
      if (inlet->empty()) Add(ip, "needs at least one {\"at_s\", \"value\"} point");
      for (size_t i = 0; i < inlet->size(); ++i) {
        const std::string pp = Join(ip, i);
        const json& e = (*inlet)[i];
        if (!ElementObject(e, pp)) continue;
        ExactKeys(e, pp, {"at_s", "value"});
        double at = 0.0, v = 0.0;
        const Got ga = NonNegative(e, "at_s", pp, Need::kRequired, &at);
        const Got gv = Qty(e, "value", pp, Need::kRequired, {Quantity::kTemperature}, &v);
        if (ga == Got::kOk && !ts.times_s.empty() && !(at > ts.times_s.back()))
          Add(Join(pp, "at_s"), "times must increase (got " + Num(at) + " after " + Num(ts.times_s.back()) + ")");
        else if (ga == Got::kOk && gv == Got::kOk) {
          ts.times_s.push_back(at);
          ts.values_k.push_back(v);
        }
      }
    } else {
      double v = 0.0;
      if (Qty(*t, "inlet", path, Need::kRequired, {Quantity::kTemperature}, &v) == Got::kOk) {
        ts.times_s = {0.0};
        ts.values_k = {v};
      }
    }
  }
  const json* swing = nullptr;
  if (Object(*t, "swing", path, Need::kOptional, &swing) == Got::kOk) {
    const std::string sp = path + "/swing";
    ExactKeys(*swing, sp, {"amplitude_k", "period_s", "phase_s"});
    NonNegative(*swing, "amplitude_k", sp, Need::kRequired, &ts.swing_amplitude_k);
    Positive(*swing, "period_s", sp, Need::kRequired, &ts.swing_period_s);
    Number(*swing, "phase_s", sp, Need::kOptional, &ts.swing_phase_s);
  }
  m.ground_temperature_k = seg_->ground_temperature_k;
  m.thermal_time_constant_s = std::isfinite(seg_->thermal_time_constant_s) ? seg_->thermal_time_constant_s : kInfinity;
  Qty(*t, "ground", path, Need::kOptional, {Quantity::kTemperature}, &m.ground_temperature_k);
  double tau = 0.0;
  if (Positive(*t, "thermal_time_constant_s", path, Need::kOptional, &tau) == Got::kOk) m.thermal_time_constant_s = tau;
  if (std::isfinite(m.thermal_time_constant_s) != std::isfinite(m.ground_temperature_k))
    Add(path, "give a ground temperature and a thermal time constant together (here or in the site's temperature_model), or neither");
  Positive(*t, "parcel_spacing_m", path, Need::kOptional, &m.parcel_spacing_m);
  Qty(*t, "initial_line", path, Need::kOptional, {Quantity::kTemperature}, &m.initial_line_temperature_k);
}

void Compiler::CompileLeaks(const json& doc) {
  const json* arr = nullptr;
  if (Array(doc, "leaks", "", Need::kOptional, &arr) != Got::kOk) return;
  for (size_t i = 0; i < arr->size(); ++i) {
    const std::string path = Join("/leaks", i);
    const json& e = (*arr)[i];
    if (!ElementObject(e, path)) continue;
    ExactKeys(e, path, {"chainage_m", "onset_s", "ramp_s", "rate", "fraction_of_nominal_flow", "cda_m2", "orifice_diameter_mm",
                        "discharge_coefficient"});
    LeakSetup l;
    LeakPlan plan;
    if (Number(e, "chainage_m", path, Need::kRequired, &l.chainage_m) == Got::kOk &&
        (l.chainage_m < 0.0 || l.chainage_m > length_m_ + 1e-6))
      Add(path + "/chainage_m", "chainage " + Num(l.chainage_m) + " m is outside the segment [0, " + Num(length_m_) + " m]");
    Number(e, "onset_s", path, Need::kRequired, &l.onset_s);
    NonNegative(e, "ramp_s", path, Need::kOptional, &l.ramp_s);
    const char* sizes[] = {"rate", "fraction_of_nominal_flow", "cda_m2", "orifice_diameter_mm"};
    int given = 0;
    for (const char* s : sizes) given += Member(e, s) != nullptr ? 1 : 0;
    char buf[128];
    buf[0] = 0;
    if (given != 1) {
      Add(path, "give the leak's size one way: \"rate\", \"fraction_of_nominal_flow\", \"cda_m2\" or \"orifice_diameter_mm\"");
    } else if (Member(e, "rate") != nullptr) {
      double q = 0.0;
      bool vol = false;
      if (Flow(e, "rate", path, Need::kRequired, &q, &vol) == Got::kOk) {
        l.rate_kg_s = vol ? q * reference_density_ : q;  // a volume is a standard volume, as nominal_flow
        std::snprintf(buf, sizeof buf, "rate %.4f kg/s at onset", l.rate_kg_s);
      }
    } else if (Member(e, "fraction_of_nominal_flow") != nullptr) {
      double f = 0.0;
      if (Range(e, "fraction_of_nominal_flow", path, Need::kRequired, 0.0, 1.0, &f) == Got::kOk) {
        if (!std::isfinite(seg_->nominal_flow_kg_s)) {
          Add(path + "/fraction_of_nominal_flow", "segment " + Quote(seg_->id) + " has no nominal_flow to take a fraction of");
        } else {
          l.rate_kg_s = f * seg_->nominal_flow_kg_s;
          std::snprintf(buf, sizeof buf, "%.3g %% of nominal flow = %.4f kg/s at onset", 100.0 * f, l.rate_kg_s);
        }
      }
    } else if (Member(e, "cda_m2") != nullptr) {
      if (NonNegative(e, "cda_m2", path, Need::kRequired, &l.cda_m2) == Got::kOk)
        std::snprintf(buf, sizeof buf, "orifice CdA %.4g m2", l.cda_m2);
    } else {
      double d_mm = 0.0, cd = 0.61;
      const Got gd = Positive(e, "orifice_diameter_mm", path, Need::kRequired, &d_mm);
      Range(e, "discharge_coefficient", path, Need::kOptional, 0.0, 1.0, &cd, true, false);
      if (gd == Got::kOk) {
        const double d = d_mm * 1e-3;
        l.cda_m2 = cd * 0.25 * 3.141592653589793 * d * d;
        std::snprintf(buf, sizeof buf, "orifice %.3g mm, Cd %.2f (CdA %.4g m2)", d_mm, cd, l.cda_m2);
      }
    }
    if (Member(e, "discharge_coefficient") != nullptr && Member(e, "orifice_diameter_mm") == nullptr)
      Add(path + "/discharge_coefficient", "applies only with \"orifice_diameter_mm\"");
    plan.onset_s = l.onset_s;
    plan.ramp_s = l.ramp_s;
    plan.chainage_m = l.chainage_m;
    plan.size = buf;
    sc_->moc.leaks.push_back(l);
    sc_->leaks.push_back(plan);
  }
}

void Compiler::CompileOperations(const json& doc) {
  MocSetup& m = sc_->moc;
  const json* arr = nullptr;
  const Got ga = Array(doc, "operations", "", Need::kOptional, &arr);
  struct Op {
    double at = 0.0;
    size_t index = 0;
  };
  std::vector<Op> order;
  if (ga == Got::kOk) {
    for (size_t i = 0; i < arr->size(); ++i) {
      const std::string path = Join("/operations", i);
      if (!ElementObject((*arr)[i], path)) continue;
      double at = 0.0;
      if (NonNegative((*arr)[i], "at_s", path, Need::kRequired, &at) == Got::kOk) order.push_back(Op{at, i});
    }
  }
  std::stable_sort(order.begin(), order.end(), [](const Op& a, const Op& b) { return a.at < b.at; });

  // Targets as the operations leave them, for restart after a shut-in.
  double speed = m.upstream.speed.initial(), opening = m.downstream.opening.initial();
  double up_flow = m.upstream.flow.initial(), dn_flow = m.downstream.flow.initial();
  std::vector<double> lat(m.laterals.size());
  for (size_t k = 0; k < lat.size(); ++k) lat[k] = m.laterals[k].flow.initial();
  struct Saved {
    bool valid = false;
    double speed = 0.0, opening = 0.0, up_flow = 0.0, dn_flow = 0.0;
    std::vector<double> lat;
  } saved;
  const bool pump = m.upstream.type == UpstreamType::kPump;
  const bool valve = m.downstream.valve_cda_m2 > 0.0;

  for (const Op& op : order) {
    const json& e = (*arr)[op.index];
    const std::string path = Join("/operations", op.index);
    std::string action;
    if (Enum(e, "action", path, Need::kRequired,
               {"pump_trip", "pump_start", "pump_speed", "valve", "setpoint", "head", "shut_in", "restart"},
               &action) != Got::kOk) {
      ExactKeys(e, path, {"at_s", "action", "ramp_s", "speed", "opening", "target", "flow", "head_m"});
      continue;
    }
    const double at = op.at;
    double ramp = action == "pump_trip" ? 10.0 : (action == "pump_start" || action == "shut_in" || action == "restart" ? 30.0 : 0.0);
    char line[200];
    if (action == "pump_trip" || action == "pump_start" || action == "pump_speed") {
      ExactKeys(e, path, action == "pump_trip" ? std::vector<std::string>{"at_s", "action", "ramp_s"}
                                               : std::vector<std::string>{"at_s", "action", "ramp_s", "speed"});
      NonNegative(e, "ramp_s", path, Need::kOptional, &ramp);
      double target = action == "pump_trip" ? 0.0 : 1.0;
      if (action != "pump_trip")
        Range(e, "speed", path, action == "pump_speed" ? Need::kRequired : Need::kOptional, 0.0, 1.5, &target);
      if (!pump) {
        Add(Join(path, "action"), "\"" + action + "\" needs a pump upstream (\"upstream\": {\"type\": \"pump\", ...})");
        continue;
      }
      speed_.Add(at, ramp, target);
      speed = target;
      std::snprintf(line, sizeof line, "%.0f s: %s to speed %.2f over %.0f s", at, action.c_str(), target, ramp);
    } else if (action == "valve") {
      ExactKeys(e, path, {"at_s", "action", "ramp_s", "opening"});
      NonNegative(e, "ramp_s", path, Need::kOptional, &ramp);
      double target = 0.0;
      if (Range(e, "opening", path, Need::kRequired, 0.0, 1.0, &target) != Got::kOk) continue;
      if (!valve) {
        Add(Join(path, "action"), "\"valve\" needs a valve at the downstream boundary (\"downstream\": {..., \"valve\": {...}})");
        continue;
      }
      opening_.Add(at, ramp, target);
      opening = target;
      std::snprintf(line, sizeof line, "%.0f s: valve to %.3f open over %.0f s", at, target, ramp);
    } else if (action == "setpoint") {
      ExactKeys(e, path, {"at_s", "action", "ramp_s", "target", "flow"});
      NonNegative(e, "ramp_s", path, Need::kOptional, &ramp);
      std::string target;
      double q = 0.0;
      bool vol = false;
      const Got gt = String(e, "target", path, Need::kRequired, &target,
                            "\"upstream\", \"downstream\", \"tank_outflow\" or a lateral meter's point id");
      const Got gq = Flow(e, "flow", path, Need::kRequired, &q, &vol);
      if (gt != Got::kOk || gq != Got::kOk) continue;
      bool* is_volume = nullptr;
      char* kind_fixed = nullptr;
      PendingRamps* ramps = nullptr;
      double* last = nullptr;
      if (target == "upstream" && m.upstream.type == UpstreamType::kFlow) {
        ramps = &up_flow_;
        is_volume = &m.upstream.flow_is_volume;
        kind_fixed = &up_flow_fixed_;
        last = &up_flow;
      } else if (target == "downstream" && m.downstream.type == DownstreamType::kFlow) {
        ramps = &dn_flow_;
        is_volume = &m.downstream.flow_is_volume;
        kind_fixed = &dn_flow_fixed_;
        last = &dn_flow;
      } else if (target == "tank_outflow" && m.downstream.type == DownstreamType::kTank) {
        ramps = &tank_out_;
        is_volume = &m.downstream.flow_is_volume;
        kind_fixed = &tank_out_fixed_;
      } else if (lateral_of_point_.count(target) != 0) {
        const size_t k = static_cast<size_t>(lateral_of_point_[target]);
        ramps = &lat_ramps_[k];
        is_volume = &m.laterals[k].flow_is_volume;
        kind_fixed = &lat_fixed_[k];
        last = &lat[k];
      } else {
        Add(Join(path, "target"), "no flow setpoint " + Quote(target) +
                                      " here: use \"upstream\" or \"downstream\" for a flow boundary, \"tank_outflow\" for the "
                                      "receiving tank, or the point id of an injection or delivery meter");
        continue;
      }
      // A channel keeps one kind of flow (mass, or volume at line conditions):
      // the kind it was given first; an unset channel (zero) takes this one.
      if (!*kind_fixed) {
        *is_volume = vol;
        *kind_fixed = 1;
      } else if (*is_volume != vol) {
        Add(Join(path, "flow"), std::string("this setpoint is a ") + (*is_volume ? "volume" : "mass") +
                                    " flow; give the change in the same kind of unit");
        continue;
      }
      ramps->Add(at, ramp, q);
      if (last != nullptr) *last = q;
      std::snprintf(line, sizeof line, "%.0f s: setpoint %s to %.6g %s over %.0f s", at, target.c_str(), q,
                    vol ? "m3/s" : "kg/s", ramp);
    } else if (action == "head") {
      ExactKeys(e, path, {"at_s", "action", "ramp_s", "target", "head_m"});
      NonNegative(e, "ramp_s", path, Need::kOptional, &ramp);
      std::string target;
      double head = 0.0;
      const Got gt = Enum(e, "target", path, Need::kRequired, {"upstream", "downstream"}, &target);
      const Got gh = Number(e, "head_m", path, Need::kRequired, &head);
      if (gt != Got::kOk || gh != Got::kOk) continue;
      if (target == "downstream" && m.downstream.type != DownstreamType::kReservoir) {
        Add(Join(path, "target"), "the downstream boundary has no head to set (it is not a reservoir)");
        continue;
      }
      if (target == "upstream" && m.upstream.type == UpstreamType::kFlow) {
        Add(Join(path, "target"), "the upstream boundary has no head to set (it is a flow)");
        continue;
      }
      (target == "upstream" ? up_head_ : dn_head_).Add(at, ramp, head);
      std::snprintf(line, sizeof line, "%.0f s: %s head to %.2f m over %.0f s", at, target.c_str(), head, ramp);
    } else if (action == "shut_in") {
      ExactKeys(e, path, {"at_s", "action", "ramp_s"});
      NonNegative(e, "ramp_s", path, Need::kOptional, &ramp);
      if (!valve && m.downstream.type != DownstreamType::kFlow) {
        Add(Join(path, "action"), "\"shut_in\" needs a downstream valve or a flow-controlled delivery to close");
        continue;
      }
      saved.valid = true;
      saved.speed = speed;
      saved.opening = opening;
      saved.up_flow = up_flow;
      saved.dn_flow = dn_flow;
      saved.lat = lat;
      // The outlet and the laterals close first, then the inlet stops.
      if (valve) opening_.Add(at, ramp, 0.0);
      if (m.downstream.type == DownstreamType::kFlow) dn_flow_.Add(at, ramp, 0.0);
      for (size_t k = 0; k < lat.size(); ++k) lat_ramps_[k].Add(at, ramp, 0.0);
      if (pump) speed_.Add(at + ramp, ramp, 0.0);
      if (m.upstream.type == UpstreamType::kFlow) up_flow_.Add(at + ramp, ramp, 0.0);
      opening = speed = dn_flow = up_flow = 0.0;
      std::fill(lat.begin(), lat.end(), 0.0);
      std::snprintf(line, sizeof line, "%.0f s: shut-in (outlet and laterals close over %.0f s, then the inlet stops)", at, ramp);
    } else {  // restart
      ExactKeys(e, path, {"at_s", "action", "ramp_s"});
      NonNegative(e, "ramp_s", path, Need::kOptional, &ramp);
      if (!saved.valid) {
        Add(Join(path, "action"), "\"restart\" needs an earlier \"shut_in\"");
        continue;
      }
      // The inlet starts first, then the outlet and the laterals open.
      if (pump) speed_.Add(at, ramp, saved.speed);
      if (m.upstream.type == UpstreamType::kFlow) up_flow_.Add(at, ramp, saved.up_flow);
      if (valve) opening_.Add(at + ramp, ramp, saved.opening);
      if (m.downstream.type == DownstreamType::kFlow) dn_flow_.Add(at + ramp, ramp, saved.dn_flow);
      for (size_t k = 0; k < lat.size(); ++k) lat_ramps_[k].Add(at + ramp, ramp, saved.lat[k]);
      speed = saved.speed;
      opening = saved.opening;
      up_flow = saved.up_flow;
      dn_flow = saved.dn_flow;
      lat = saved.lat;
      saved.valid = false;
      std::snprintf(line, sizeof line, "%.0f s: restart (inlet starts over %.0f s, then outlet and laterals reopen)", at, ramp);
    }
    sc_->operations_text.push_back(line);
  }
  speed_.ApplyTo(&m.upstream.speed);
  up_head_.ApplyTo(&m.upstream.head_m);
  up_flow_.ApplyTo(&m.upstream.flow);
  dn_head_.ApplyTo(&m.downstream.head_m);
  dn_flow_.ApplyTo(&m.downstream.flow);
  opening_.ApplyTo(&m.downstream.opening);
  tank_out_.ApplyTo(&m.downstream.tank_outflow);
  for (size_t k = 0; k < lat_ramps_.size(); ++k) lat_ramps_[k].ApplyTo(&m.laterals[k].flow);
}

// --- Points and instruments ----------------------------------------------------------

void Compiler::PlanPoints() {
  const MocSetup& m = sc_->moc;
  const bool tank = m.downstream.type == DownstreamType::kTank;
  std::set<int> planned;
  auto add = [&](PointPlan p) {
    if (!planned.insert(p.point).second) return;
    sc_->points.push_back(std::move(p));
  };
  for (const MeterSpec& mt : seg_->meters) {
    PointPlan p;
    p.point = mt.point;
    p.meter = mt.kind;
    p.chainage_m = mt.chainage_m;
    switch (mt.role) {
      case MeterRole::kInlet: p.measure = Measure::kInletFlow; break;
      case MeterRole::kOutlet: p.measure = tank ? Measure::kTankOutflow : Measure::kPipeOutletFlow; break;
      default:
        p.measure = Measure::kLateralFlow;
        p.lateral = lateral_of_point_[site_.points[static_cast<size_t>(mt.point)].id];
        break;
    }
    add(p);
  }
  for (const GaugeSpec& g : seg_->pressure_gauges) {
    PointPlan p;
    p.point = g.point;
    p.measure = Measure::kPressure;
    p.chainage_m = g.chainage_m;
    p.elevation_m = g.elevation_m;
    add(p);
  }
  for (const GaugeSpec& g : seg_->temperature_gauges) {
    PointPlan p;
    p.point = g.point;
    p.measure = Measure::kTemperature;
    p.chainage_m = g.chainage_m;
    add(p);
  }
  if (tank && tank_index_ >= 0) {
    const TankSpec& t = seg_->tanks[static_cast<size_t>(tank_index_)];
    PointPlan p;
    p.point = t.level_point;
    p.measure = Measure::kTankLevel;
    p.chainage_m = length_m_;
    add(p);
    if (t.temperature_point >= 0) {
      p.point = t.temperature_point;
      p.measure = Measure::kTankTemperature;
      add(p);
    }
  }
  // Defaults from the site's declared accuracy: noise is the random part,
  // and the bias is drawn once from the systematic part.
  for (PointPlan& p : sc_->points) {
    const PointSpec& ps = site_.points[static_cast<size_t>(p.point)];
    InstrumentSpec& s = p.instrument;
    if (ps.kind == PointKind::kFlow) {
      s.noise_fraction = ps.random_sigma;
      s.bias_draw_sigma_fraction = ps.systematic_sigma;
    } else {
      s.noise = ps.random_sigma / ps.unit.factor;
      s.bias_draw_sigma = ps.systematic_sigma / ps.unit.factor;
    }
  }
}

// Fields of an instrument object. `point` null: the defaults object, which
// takes only the unit-free fields.
void Compiler::InstrumentFields(const json& obj, const std::string& path, const PointSpec* point, InstrumentSpec* s) {
  std::vector<std::string> keys = {"enabled", "sample_period_s", "phase_s", "heartbeat_s", "latency_s", "latency_spread_s",
                                   "jitter_s", "spike_rate_per_h", "decimals", "wander_phi"};
  const bool flow = point != nullptr && point->kind == PointKind::kFlow;
  if (point != nullptr) {
    if (flow) {
      keys.insert(keys.end(), {"noise_pct", "bias_pct", "drift_pct_per_day", "wander_pct", "low_flow_cutoff"});
    } else {
      keys.insert(keys.end(), {"noise", "bias", "drift_per_day", "wander"});
    }
    keys.insert(keys.end(), {"quantum", "deadband", "spike_size", "dropouts", "flatlines", "quality", "spikes"});
  } else {
    keys.insert(keys.end(), {"flow", "pressure", "temperature", "level"});
  }
  ExactKeys(obj, path, keys);
  Bool(obj, "enabled", path, Need::kOptional, &s->enabled);
  Positive(obj, "sample_period_s", path, Need::kOptional, &s->sample_period_s);
  NonNegative(obj, "phase_s", path, Need::kOptional, &s->phase_s);
  NonNegative(obj, "heartbeat_s", path, Need::kOptional, &s->heartbeat_s);
  NonNegative(obj, "latency_s", path, Need::kOptional, &s->latency_s);
  NonNegative(obj, "latency_spread_s", path, Need::kOptional, &s->latency_spread_s);
  NonNegative(obj, "jitter_s", path, Need::kOptional, &s->jitter_s);
  NonNegative(obj, "spike_rate_per_h", path, Need::kOptional, &s->spike_rate_per_h);
  Range(obj, "wander_phi", path, Need::kOptional, 0.0, 1.0, &s->wander_phi, false, true);
  double decimals = 0.0;
  if (Range(obj, "decimals", path, Need::kOptional, 0.0, 9.0, &decimals) == Got::kOk)
    s->decimals = static_cast<int>(decimals);
  if (point == nullptr) return;
  // Bias: a number, or "draw" for one draw from the declared systematic accuracy.
  auto bias = [&](const char* key, double scale, double* fixed, double* sigma) {
    const json* b = Member(obj, key);
    if (b == nullptr) return;
    if (b->is_string() && b->get<std::string>() == "draw") return;  // the default
    double v = 0.0;
    if (b->is_string()) {
      Add(Join(path, key), "must be a number or \"draw\" (got " + Describe(*b) + ")");
      return;
    }
    if (Number(obj, key, path, Need::kOptional, &v) == Got::kOk) {
      *fixed = v * scale;
      *sigma = 0.0;
    }
  };
  if (flow) {
    double pct = 0.0;
    if (NonNegative(obj, "noise_pct", path, Need::kOptional, &pct) == Got::kOk) s->noise_fraction = pct / 100.0;
    bias("bias_pct", 0.01, &s->bias_fraction, &s->bias_draw_sigma_fraction);
    if (Number(obj, "drift_pct_per_day", path, Need::kOptional, &pct) == Got::kOk) s->drift_fraction_per_day = pct / 100.0;
    if (NonNegative(obj, "wander_pct", path, Need::kOptional, &pct) == Got::kOk) s->wander_fraction = pct / 100.0;
    NonNegative(obj, "low_flow_cutoff", path, Need::kOptional, &s->low_flow_cutoff);
  } else {
    NonNegative(obj, "noise", path, Need::kOptional, &s->noise);
    bias("bias", 1.0, &s->bias, &s->bias_draw_sigma);
    Number(obj, "drift_per_day", path, Need::kOptional, &s->drift_per_day);
    NonNegative(obj, "wander", path, Need::kOptional, &s->wander);
  }
  NonNegative(obj, "quantum", path, Need::kOptional, &s->quantum);
  NonNegative(obj, "deadband", path, Need::kOptional, &s->deadband);
  NonNegative(obj, "spike_size", path, Need::kOptional, &s->spike_size);
  Windows(obj, "dropouts", path, &s->dropouts);
  Windows(obj, "flatlines", path, &s->flatlines);
  const json* arr = nullptr;
  if (Array(obj, "quality", path, Need::kOptional, &arr) == Got::kOk) {
    for (size_t i = 0; i < arr->size(); ++i) {
      const std::string wp = Join(path + "/quality", i);
      const json& w = (*arr)[i];
      if (!ElementObject(w, wp)) continue;
      ExactKeys(w, wp, {"from_s", "to_s", "quality"});
      QualityWindow qw;
      std::string q;
      const Got a = NonNegative(w, "from_s", wp, Need::kRequired, &qw.window.from_s);
      const Got b = NonNegative(w, "to_s", wp, Need::kRequired, &qw.window.to_s);
      const Got c = Enum(w, "quality", wp, Need::kRequired, {"uncertain", "bad"}, &q);
      if (a == Got::kOk && b == Got::kOk && !(qw.window.to_s > qw.window.from_s)) {
        Add(Join(wp, "to_s"), "must be after from_s");
      } else if (a == Got::kOk && b == Got::kOk && c == Got::kOk) {
        qw.quality = q == "bad" ? Quality::kBad : Quality::kUncertain;
        s->quality_windows.push_back(qw);
      }
    }
  }
  if (Array(obj, "spikes", path, Need::kOptional, &arr) == Got::kOk) {
    for (size_t i = 0; i < arr->size(); ++i) {
      const std::string wp = Join(path + "/spikes", i);
      const json& w = (*arr)[i];
      if (!ElementObject(w, wp)) continue;
      ExactKeys(w, wp, {"at_s", "size"});
      Spike sp;
      const Got a = NonNegative(w, "at_s", wp, Need::kRequired, &sp.at_s);
      const Got b = Number(w, "size", wp, Need::kRequired, &sp.size);
      if (a == Got::kOk && b == Got::kOk) s->spikes.push_back(sp);
    }
  }
}

void Compiler::CompileInstruments(const json& doc) {
  std::map<std::string, size_t> plan_of;
  for (size_t i = 0; i < sc_->points.size(); ++i) plan_of[site_.points[static_cast<size_t>(sc_->points[i].point)].id] = i;
  // Defaults: the top-level fields for every point, then the kind's object;
  // only the unit-free fields (the others are in each point's own unit).
  const json* defaults = nullptr;
  if (Object(doc, "instrument_defaults", "", Need::kOptional, &defaults) == Got::kOk) {
    InstrumentSpec base;
    InstrumentFields(*defaults, "/instrument_defaults", nullptr, &base);
    const PointKind kinds[] = {PointKind::kFlow, PointKind::kPressure, PointKind::kTemperature, PointKind::kLevel};
    for (PointKind kind : kinds) {
      InstrumentSpec t = base;
      const char* name = PointKindName(kind);
      const json* by_kind = Member(*defaults, name);
      if (by_kind != nullptr) {
        const std::string kp = Join("/instrument_defaults", name);
        if (!by_kind->is_object()) {
          Add(kp, "must be an object (got " + Describe(*by_kind) + ")");
        } else {
          for (const char* inner : {"flow", "pressure", "temperature", "level"})
            if (Member(*by_kind, inner) != nullptr) Add(Join(kp, inner), "kinds do not nest");
          InstrumentFields(*by_kind, kp, nullptr, &t);
        }
      }
      for (PointPlan& p : sc_->points) {
        if (site_.points[static_cast<size_t>(p.point)].kind != kind) continue;
        InstrumentSpec& s = p.instrument;
        s.enabled = t.enabled;
        s.sample_period_s = t.sample_period_s;
        s.phase_s = t.phase_s;
        s.heartbeat_s = t.heartbeat_s;
        s.latency_s = t.latency_s;
        s.latency_spread_s = t.latency_spread_s;
        s.jitter_s = t.jitter_s;
        s.spike_rate_per_h = t.spike_rate_per_h;
        s.decimals = t.decimals;
        s.wander_phi = t.wander_phi;
      }
    }
  }
  const json* inst = nullptr;
  if (Object(doc, "instruments", "", Need::kOptional, &inst) != Got::kOk) return;
  std::vector<std::string> ids;
  for (const auto& kv : plan_of) ids.push_back(kv.first);
  for (auto it = inst->begin(); it != inst->end(); ++it) {
    const std::string& key = it.key();
    if (!key.empty() && key[0] == '_') continue;
    const std::string path = Join("/instruments", key);
    auto found = plan_of.find(key);
    if (found == plan_of.end()) {
      std::string msg = "point " + Quote(key) + " is not simulated in segment " + Quote(seg_->id);
      const std::string hint = Closest(key, ids);
      if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
      Add(path, msg + "; points: " + ListNames(ids));
      continue;
    }
    if (!ElementObject(it.value(), path)) continue;
    PointPlan& p = sc_->points[found->second];
    InstrumentFields(it.value(), path, &site_.points[static_cast<size_t>(p.point)], &p.instrument);
  }
}

}  // namespace

const char* MeasureName(Measure m) {
  switch (m) {
    case Measure::kInletFlow: return "inlet_flow";
    case Measure::kPipeOutletFlow: return "pipe_outlet_flow";
    case Measure::kTankOutflow: return "tank_outflow";
    case Measure::kLateralFlow: return "lateral_flow";
    case Measure::kPressure: return "pressure";
    case Measure::kTemperature: return "temperature";
    case Measure::kTankLevel: return "tank_level";
    case Measure::kTankTemperature: return "tank_temperature";
  }
  return "unknown";
}

const char* ScenarioFormatVersion() { return kFormat; }

bool CompileScenario(const nlohmann::json& doc, const Site& site, Scenario* scenario, std::vector<ConfigProblem>* problems) {
  std::vector<ConfigProblem> local;
  std::vector<ConfigProblem>* out = problems != nullptr ? problems : &local;
  const size_t first = out->size();
  *scenario = Scenario{};
  std::vector<ConfigProblem> mine;
  try {
    Compiler c(site, scenario, &mine);
    c.Run(doc);
  } catch (const std::exception& e) {
    mine.push_back(ConfigProblem{"", std::string("internal error while compiling the scenario: ") + e.what()});
  }
  for (ConfigProblem& p : mine) out->push_back(std::move(p));
  return out->size() == first;
}

bool LoadScenarioFile(const std::string& path, const Site& site, Scenario* scenario, std::vector<ConfigProblem>* problems) {
  std::vector<ConfigProblem> local;
  std::vector<ConfigProblem>* out = problems != nullptr ? problems : &local;
  json doc;
  bool parsed = false;
  const bool unique = ReadJsonFile(path, &doc, out, &parsed);
  if (!parsed) return false;
  const size_t first = out->size();
  const bool ok = CompileScenario(doc, site, scenario, out) && unique;
  for (size_t i = first; i < out->size(); ++i) {
    ConfigProblem& p = (*out)[i];
    p.path = p.path.empty() ? path : path + ":" + p.path;
  }
  return ok;
}

}  // namespace holdfast::sim
