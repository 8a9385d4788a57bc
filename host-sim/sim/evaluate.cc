// `holdfast evaluate` (evaluate.h): tuning run, leak-free run and leak grid,
// each simulated and fed through the monitor; the baseline and the bound
// beside it; tables.
#include "evaluate.h"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <limits>
#include <map>
#include <mutex>
#include <random>
#include <sstream>
#include <thread>

#include "holdfast/json_check.h"
#include "holdfast/monitor.h"
#include "instruments.h"
#include "json_file.h"
#include "readings_csv.h"
#include "replay_driver.h"
#include "scenario.h"
#include "simulate.h"
#include "tuner.h"
#include "tuning_file.h"

namespace holdfast::sim {
namespace {

using nlohmann::json;
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kDay_s = 86400.0;
// Operator response to a false alarm in the evaluation: acknowledged, and
// the detectors restarted, this long after it was raised (data time).
constexpr double kOperatorResponse_s = 60.0;
// Daily operations closer than this to a shut-in or restart are skipped on
// shut-in days (the line is being shut in or is still coming back).
constexpr double kShutInClearance_s = 1800.0;
// The grid's onsets must leave the monitor this long after a run's start:
// start-up grace, the decision input's filter settling (6 x 300 s).
constexpr double kMinOnset_s = 1800.0;

// ---------------------------------------------------------------------------
// Batch file
// ---------------------------------------------------------------------------

// The batch file's readers: JsonCheck's, with `bool required` and numbers
// checked against [lo, hi] ((lo, hi] when strict_lo); absent keeps *out.
class BatchReader : public JsonCheck {
 public:
  BatchReader(std::string file, std::vector<ConfigProblem>* problems)
      : JsonCheck(problems, std::move(file)), start_(problems->size()) {}
  size_t count() const { return problems()->size() - start_; }

  using JsonCheck::Number;
  using JsonCheck::Object;
  bool Number(const json& obj, const char* key, const std::string& path, bool required, double lo, double hi,
              double* out, bool strict_lo = false) {
    return Range(obj, key, path, required ? Need::kRequired : Need::kOptional, lo, hi, out, strict_lo) == Got::kOk;
  }
  bool Seed(const json& obj, const char* key, const std::string& path, uint64_t* out) {
    double v = 0.0;
    if (!Number(obj, key, path, false, 0.0, 9007199254740992.0, &v)) return false;
    if (v != std::floor(v)) {
      Add(json_text::Join(path, key), "must be an integer");
      return false;
    }
    *out = static_cast<uint64_t>(v);
    return true;
  }
  // A required non-empty array of numbers; the good ones.
  std::vector<double> Numbers(const json& obj, const char* key, const std::string& path, double lo, double hi,
                              bool strict_lo) {
    std::vector<double> out;
    const std::string p = json_text::Join(path, key);
    const json* a = Present(obj, key, path, Need::kRequired, "a non-empty array of numbers");
    if (a == nullptr) return out;
    if (!a->is_array() || a->empty()) {
      Add(p, "must be a non-empty array of numbers");
      return out;
    }
    for (size_t i = 0; i < a->size(); ++i) {
      double x = 0.0;
      if (RangeValue((*a)[i], json_text::Join(p, i), lo, hi, &x, strict_lo) == Got::kOk) out.push_back(x);
    }
    return out;
  }
  const json* Object(const json& obj, const char* key, const std::string& path, bool required) {
    const json* m = nullptr;
    return Object(obj, key, path, required ? Need::kRequired : Need::kOptional, &m) == Got::kOk ? m : nullptr;
  }

 private:
  size_t start_;
};

// ---------------------------------------------------------------------------
// Scenario documents for the runs
// ---------------------------------------------------------------------------

// The "rough" instrument family: the per-point settings LoadBatchFile
// prepared, plus a few short dropouts per point and day at random times
// (their own stream per point, from the run's seed).
void ApplyFamily(const BatchSpec& b, double duration_s, uint64_t seed, json* doc) {
  if (b.family != "rough") return;
  json& inst = (*doc)["instruments"];
  if (!inst.is_object()) inst = json::object();
  for (auto it = b.rough_instruments.begin(); it != b.rough_instruments.end(); ++it) {
    json& p = inst[it.key()];
    if (!p.is_object()) p = json::object();
    for (auto kv = it.value().begin(); kv != it.value().end(); ++kv) p[kv.key()] = kv.value();
    Rng rng(StreamSeed(seed, "rough-dropouts/" + it.key()));
    const double expected = kRoughDropoutsPerDay * duration_s / kDay_s;
    const int n = static_cast<int>(std::floor(expected + rng.Uniform()));
    json drops = p.contains("dropouts") && p["dropouts"].is_array() ? p["dropouts"] : json::array();
    for (int k = 0; k < n; ++k) {
      const double from = std::floor(rng.Uniform() * duration_s);
      const double len = std::round(kRoughDropoutMin_s + (kRoughDropoutMax_s - kRoughDropoutMin_s) * rng.Uniform());
      drops.push_back(json{{"from_s", from}, {"to_s", from + len}});
    }
    p["dropouts"] = drops;
  }
}

json RunDoc(const BatchSpec& b, double duration_s, uint64_t seed) {
  json doc = b.base_scenario;
  doc["duration_s"] = duration_s;
  doc["seed"] = seed;
  doc["time_step_s"] = b.time_step_s;
  doc.erase("leaks");
  // One truth sample an hour is plenty here (the evaluation reads the leak
  // rates and the totals from the truth, not the series).
  doc["truth_every_s"] = 3600.0;
  doc["instrument_set_seed"] = b.instrument_set_seed;
  ApplyFamily(b, duration_s, seed, &doc);
  if (b.meter_drift_pct_per_day > 0.0) {
    json& inst = doc["instruments"];
    if (!inst.is_object()) inst = json::object();
    double sign = 1.0;
    for (const std::string& id : b.flow_point_ids) {
      json& p = inst[id];
      if (!p.is_object()) p = json::object();
      if (!p.contains("drift_pct_per_day")) p["drift_pct_per_day"] = sign * b.meter_drift_pct_per_day;
      sign = -sign;
    }
  }
  return doc;
}

// Leak-free days: the daily operations every day, a shut-in and restart
// every shut_in_every_days, and the inlet temperature moved day to day.
json LeakFreeDoc(const BatchSpec& b, double days, uint64_t seed) {
  json doc = RunDoc(b, days * kDay_s, seed);
  json ops = json::array();
  const int n_days = static_cast<int>(std::ceil(days));
  // The shut-in windows (with their clearance); one may run past midnight.
  std::vector<std::pair<double, double>> shut;
  for (int d = 0; d < n_days; ++d)
    if (b.shut_in_every_days > 0.0 && std::fmod(static_cast<double>(d + 1), b.shut_in_every_days) == 0.0)
      shut.emplace_back(d * kDay_s + b.shut_in_at_s - kShutInClearance_s,
                        d * kDay_s + b.shut_in_at_s + b.shut_in_s + kShutInClearance_s);
  for (int d = 0; d < n_days; ++d) {
    const double day0 = d * kDay_s;
    const bool shut_day = b.shut_in_every_days > 0.0 &&
                          std::fmod(static_cast<double>(d + 1), b.shut_in_every_days) == 0.0;
    for (const json& op : b.daily_operations) {
      json o = op;
      const double at = day0 + op.value("at_s", 0.0);
      if (at >= days * kDay_s) continue;
      bool skip = false;
      for (const auto& w : shut) skip = skip || (at >= w.first && at <= w.second);
      if (skip) continue;
      o["at_s"] = at;
      ops.push_back(o);
    }
    if (shut_day && day0 + b.shut_in_at_s + b.shut_in_s < days * kDay_s) {
      ops.push_back(json{{"at_s", day0 + b.shut_in_at_s}, {"action", "shut_in"}, {"ramp_s", 120}});
      ops.push_back(json{{"at_s", day0 + b.shut_in_at_s + b.shut_in_s}, {"action", "restart"}, {"ramp_s", 120}});
    }
  }
  std::stable_sort(ops.begin(), ops.end(),
                   [](const json& x, const json& y) { return x["at_s"].get<double>() < y["at_s"].get<double>(); });
  // The run starts running: a daily restart before the first daily shut-in
  // has nothing to restart, and a shut-in while shut in is dropped.
  json kept = json::array();
  bool shut_in = false;
  for (const json& op : ops) {
    const std::string action = op.value("action", std::string());
    if (action == "restart" && !shut_in) continue;
    if (action == "shut_in" && shut_in) continue;
    if (action == "restart") shut_in = false;
    if (action == "shut_in") shut_in = true;
    kept.push_back(op);
  }
  doc["operations"] = kept;
  // Day-to-day inlet temperature: independent normal deviations around the
  // base inlet at each midnight, linear in between (the daily swing of the
  // base scenario stays on top). Box-Muller on the batch's own stream.
  if (b.inlet_daily_spread_k > 0.0 && doc.contains("temperature") && doc["temperature"].contains("inlet") &&
      doc["temperature"]["inlet"].is_object()) {
    const json base = doc["temperature"]["inlet"];
    const double t0 = base.value("value", 15.0);
    std::mt19937_64 rng(seed ^ 0x7465'6d70'6572'6174ULL);
    auto uniform = [&] { return (static_cast<double>(rng() >> 11) + 0.5) * (1.0 / 9007199254740992.0); };
    json schedule = json::array();
    for (int d = 0; d <= n_days; ++d) {
      const double u1 = uniform(), u2 = uniform();
      const double z = std::sqrt(-2.0 * std::log(u1)) * std::cos(2.0 * M_PI * u2);
      json v = base;
      v["value"] = t0 + b.inlet_daily_spread_k * z;
      schedule.push_back(json{{"at_s", d * kDay_s}, {"value", v}});
    }
    doc["temperature"]["inlet"] = schedule;
  }
  return doc;
}

json LeakDoc(const BatchSpec& b, double fraction, double chainage_m, double onset_s, double ramp_s, double observe_s,
             uint64_t seed) {
  json doc = RunDoc(b, onset_s + observe_s, seed);
  doc["leaks"] = json::array({json{{"chainage_m", chainage_m},
                                   {"onset_s", onset_s},
                                   {"ramp_s", ramp_s},
                                   {"fraction_of_nominal_flow", fraction}}});
  return doc;
}

// An operation that happened before a run's start, written into the base
// scenario's initial settings instead (the simulator then starts at rest in
// that state). False when it cannot be (a shut-in): it then runs at t = 0.
bool SetInitially(const json& op, json* doc) {
  const std::string action = op.value("action", std::string());
  json& up = (*doc)["upstream"];
  json& dn = (*doc)["downstream"];
  if (action == "pump_speed" && up.value("type", std::string()) == "pump" && op.contains("speed")) {
    up["speed"] = op["speed"];
    return true;
  }
  if (action == "valve" && dn.contains("valve") && dn["valve"].is_object() && op.contains("opening")) {
    dn["valve"]["opening"] = op["opening"];
    return true;
  }
  if (action == "setpoint" && op.contains("flow") && op.contains("target")) {
    const std::string target = op.value("target", std::string());
    if (target == "upstream") up["flow"] = op["flow"];
    else if (target == "downstream") dn["flow"] = op["flow"];
    else if (target == "tank_outflow") dn["outflow"] = op["flow"];
    else (*doc)["laterals"][target] = json{{"flow", op["flow"]}};
    return true;
  }
  return false;
}

// A leak opening at a clock time of day: the run starts lead_s before it
// (the base scenario's start is the clock's 00:00), with the daily operations
// in place of the base scenario's own. The operations of the 24 h up to the
// start (inclusive) are applied at t = 0 in their order, so that the line starts in the
// state the day's schedule leaves it in (the last one on each quantity
// wins), as initial settings where they can be (SetInitially), else as
// operations at t = 0; the lead time lets that settle. The swing keeps its
// clock phase.
json LeakDocAtClock(const BatchSpec& b, double fraction, double chainage_m, double onset_clock_s, double ramp_s,
                    double observe_s, uint64_t seed) {
  const double offset = onset_clock_s - b.lead_s;  // the run's start on the clock (may be < 0: the day before)
  const double duration = b.lead_s + observe_s;
  json doc = LeakDoc(b, fraction, chainage_m, b.lead_s, ramp_s, observe_s, seed);
  doc["start"] = FormatIsoUtc(b.base_start_epoch_s + offset, 3);
  std::vector<std::pair<double, json>> before, during;
  const int d0 = static_cast<int>(std::floor(offset / kDay_s)) - 1;
  const int d1 = static_cast<int>(std::ceil((offset + duration) / kDay_s)) + 1;
  for (int d = d0; d <= d1; ++d)
    for (const json& op : b.daily_operations) {
      const double t = d * kDay_s + op.value("at_s", 0.0) - offset;
      // An operation exactly at the start belongs to the state the run
      // starts in (a restart there ends the night's shut-in).
      if (t <= 0.0 && t > -kDay_s) before.emplace_back(t, op);
      else if (t > 0.0 && t < duration) during.emplace_back(t, op);
    }
  auto by_time = [](const std::pair<double, json>& x, const std::pair<double, json>& y) { return x.first < y.first; };
  std::stable_sort(before.begin(), before.end(), by_time);
  std::stable_sort(during.begin(), during.end(), by_time);
  json ops = json::array();
  // A shut-in and its restart both before the start cancel; a restart whose
  // shut-in lies further back is dropped; a shut-in still in force stays.
  int pending_shut_in = -1;
  for (auto& [t, op] : before) {
    const std::string action = op.value("action", std::string());
    if (action == "restart") {
      if (pending_shut_in >= 0) ops.erase(static_cast<size_t>(pending_shut_in));
      pending_shut_in = -1;
      continue;
    }
    if (action == "shut_in") pending_shut_in = static_cast<int>(ops.size());
    if (SetInitially(op, &doc)) continue;
    json o = op;
    o["at_s"] = 0.0;
    ops.push_back(o);
  }
  for (auto& [t, op] : during) {
    json o = op;
    o["at_s"] = t;
    ops.push_back(o);
  }
  doc["operations"] = ops;
  if (doc.contains("temperature") && doc["temperature"].contains("swing") && doc["temperature"]["swing"].is_object()) {
    json& sw = doc["temperature"]["swing"];
    const double period = sw.value("period_s", kDay_s);
    double phase = std::fmod(sw.value("phase_s", 0.0) - offset, period);
    if (phase < 0.0) phase += period;
    sw["phase_s"] = phase;
  }
  return doc;
}

// ---------------------------------------------------------------------------
// One run
// ---------------------------------------------------------------------------

class VectorSource final : public ReadingSource {
 public:
  VectorSource(const SimulationResult& r, double start_epoch_s) : r_(r), start_(start_epoch_s) {
    scale_.resize(r.decimals.size());
    for (size_t i = 0; i < r.decimals.size(); ++i) scale_[i] = std::pow(10.0, std::max(0, r.decimals[i]));
  }
  // As the readings file would carry them: times to the millisecond, values
  // to the point's decimals (simulate.h ReadingsCsv).
  bool Next(Reading* out) override {
    if (i_ >= r_.readings.size()) return false;
    const SimReading& s = r_.readings[i_++];
    out->point = s.point;
    out->time_s = std::round((start_ + s.time_s) * 1000.0) / 1000.0;
    const double k = scale_[static_cast<size_t>(s.point)];
    out->value = std::round(s.value * k) / k;
    out->quality = s.quality;
    return true;
  }

 private:
  const SimulationResult& r_;
  double start_;
  std::vector<double> scale_;
  size_t i_ = 0;
};

// Fixed windows of the uncompensated balance, aligned on multiples of W.
class BaselineAccumulator {
 public:
  explicit BaselineAccumulator(double window_s) : w_(window_s) {}
  void Tick(const SegmentTick& st, double t, double dt) {
    const double idx = std::ceil(t / w_ - 1e-9) - 1.0;  // a tick at (k+1)W closes window k
    if (idx != idx_) {
      if (started_ && valid_ && covered_ >= w_ - 1.5 * dt_max_)
        windows_.push_back(BaselineWindow{(idx_ + 1.0) * w_, (net_kg_ - (last_tank_ - tank0_)) / w_});
      idx_ = idx;
      net_kg_ = covered_ = 0.0;
      valid_ = true;
      tank0_ = have_last_ ? last_tank_ : st.tank_kg;
      started_ = have_last_;
    }
    if (st.status == SegmentStatus::kUnavailable) valid_ = false;
    net_kg_ += (st.inflow_kg_s - st.outflow_kg_s) * dt;
    covered_ += dt;
    dt_max_ = std::max(dt_max_, dt);
    last_tank_ = st.tank_kg;
    have_last_ = true;
  }
  std::vector<BaselineWindow> Take() { return std::move(windows_); }

 private:
  double w_;
  double idx_ = -1e300;
  double net_kg_ = 0.0, covered_ = 0.0, tank0_ = 0.0, last_tank_ = 0.0, dt_max_ = 0.0;
  bool valid_ = false, started_ = false, have_last_ = false;
  std::vector<BaselineWindow> windows_;
};

bool IsRaise(const AlarmEvent& e) {
  return (e.type == AlarmType::kLeak || e.type == AlarmType::kRupture) && e.from == AlarmState::kNormal &&
         e.to == AlarmState::kUnackActive;
}

double LeakRateFromTruth(const std::string& truth_json, double* node_chainage_m) {
  try {
    const json t = json::parse(truth_json);
    const json& l = t.at("leaks").at(0);
    *node_chainage_m = l.value("node_chainage_m", kNaN);
    return l.value("rate_when_open_kg_s", kNaN);
  } catch (const json::exception&) {
    return kNaN;
  }
}

struct RunPlan {
  RunKind kind = RunKind::kLeak;
  int index = 0;
  uint64_t seed = 0;
  json doc;
  double leak_fraction = 0.0, chainage_m = 0.0, onset_s = 0.0;
  double onset_clock_s = kNaN;
  bool rupture = false, during_operation = false;
};

// Simulates one run and feeds it through a monitor (seeded with `tuning`
// unless it is null); `tuner` (tuning run only) sees every tick.
RunOutcome ExecuteRun(const Site& site, const BatchSpec& b, const RunPlan& plan, const TuningFile* tuning,
                      const Monitor::Options& mopt, Tuner* tuner,
                      const std::function<void(const Monitor&, int, double)>* trace = nullptr) {
  const auto t0 = std::chrono::steady_clock::now();
  RunOutcome o;
  o.kind = plan.kind;
  o.index = plan.index;
  o.seed = plan.seed;
  o.leak_fraction = plan.leak_fraction;
  o.chainage_m = plan.chainage_m;
  o.onset_s = plan.onset_s;
  o.onset_clock_s = plan.onset_clock_s;
  o.rupture = plan.rupture;
  o.during_operation = plan.during_operation;
  o.rate_at_alarm_kg_s = o.location_at_alarm_m = o.rate_at_end_kg_s = o.location_at_end_m = kNaN;
  o.node_chainage_m = o.true_rate_kg_s = kNaN;

  Scenario sc;
  std::vector<ConfigProblem> problems;
  if (!CompileScenario(plan.doc, site, &sc, &problems)) {
    o.error = "scenario: " + (problems.empty() ? std::string("invalid") : problems.front().ToString());
    return o;
  }
  o.duration_s = sc.duration_s;
  o.start_epoch_s = sc.start_epoch_s;
  SimulationResult sim;
  std::string why;
  if (!Simulate(site, sc, &sim, &why)) {
    o.error = "simulation: " + why;
    return o;
  }
  const double throughput = std::max(1.0, sim.in_kg);
  o.sim_residual_rel = sim.residual_kg / throughput;
  if (plan.kind == RunKind::kLeak) o.true_rate_kg_s = LeakRateFromTruth(sim.truth_json, &o.node_chainage_m);
  sim.truth_json.clear();
  sim.truth_json.shrink_to_fit();

  Monitor monitor;
  if (!monitor.Init(site, mopt, &why)) {
    o.error = "monitor: " + why;
    return o;
  }
  if (tuning != nullptr && !ApplyTuning(*tuning, &monitor, &why)) {
    o.error = "tuning: " + why;
    return o;
  }
  const int seg = b.segment;
  const double onset_epoch = plan.kind == RunKind::kLeak ? sc.start_epoch_s + plan.onset_s : kInf;
  std::vector<BaselineAccumulator> base;
  for (double w : b.baseline_windows_s) base.emplace_back(w);
  double respond_at = kInf;  // pending operator response to a false alarm
  bool ticked = false;
  double prev_t = 0.0;

  VectorSource source(sim, sc.start_epoch_s);
  ReplayOptions ropt;
  ropt.on_event = [&](const AlarmEvent& e) {
    if (e.segment != seg || !IsRaise(e)) return;
    if (e.time_s >= onset_epoch) {
      if (!o.detected) {
        o.detected = true;
        o.by_rupture = e.type == AlarmType::kRupture;
        o.detect_delay_s = e.time_s - onset_epoch;
        o.rate_at_alarm_kg_s = e.evidence.leak_rate_kg_s;
        o.location_at_alarm_m = e.evidence.location_m;
      }
      return;
    }
    ++o.false_alarms;
    o.false_alarm_times_s.push_back(e.time_s);
    o.false_alarm_types.push_back(e.type);
    respond_at = std::min(respond_at, e.time_s + kOperatorResponse_s);
  };
  ropt.on_tick = [&](double t) {
    const double dt = ticked ? t - prev_t : 0.0;
    ticked = true;
    prev_t = t;
    const SegmentTick& st = monitor.segment(seg);
    for (auto& acc : base) acc.Tick(st, t, dt);
    if (plan.kind == RunKind::kLeakFree && t - sc.start_epoch_s > b.startup_exclusion_s) {
      o.status_observed_s += dt;
      if (st.status == SegmentStatus::kUnavailable) o.unavailable_s += dt;
    }
    if (tuner != nullptr) tuner->Tick(monitor, t);
    if (trace != nullptr && *trace) (*trace)(monitor, seg, t);
    if (t >= respond_at) {
      // The operator finds no leak: acknowledges and restarts the detectors
      // (the excursion counts as normal operation for the learning).
      for (AlarmType type : {AlarmType::kLeak, AlarmType::kRupture})
        if (monitor.alarm(seg, type).state() == AlarmState::kUnackActive ||
            monitor.alarm(seg, type).state() == AlarmState::kUnackReturned)
          monitor.Command(seg, type, AlarmCommand::kAcknowledge, t, 0.0, "evaluate");
      monitor.ResetLeakDetectors(seg, true);
      respond_at = kInf;
    }
    return true;
  };
  const ReplayResult rr = RunReplay(&monitor, &source, site.tick_s, ropt);
  o.readings = rr.readings_fed;
  o.ticks = rr.ticks;
  if (o.detected) {
    const SegmentTick& st = monitor.segment(seg);
    o.rate_at_end_kg_s = st.decision.leak_rate_kg_s;
    if (st.location.valid) o.location_at_end_m = st.location.chainage_m;
  }
  for (auto& acc : base) o.baseline.push_back(acc.Take());
  o.wall_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return o;
}

// ---------------------------------------------------------------------------
// Aggregation
// ---------------------------------------------------------------------------

// Percentile q in [0, 1] (nearest rank on the sorted values; +inf entries
// sort last, so a percentile beyond the detected share is +inf).
double Percentile(std::vector<double> v, double q) {
  if (v.empty()) return kNaN;
  std::sort(v.begin(), v.end());
  const size_t rank = static_cast<size_t>(std::ceil(q * static_cast<double>(v.size())));
  return v[std::min(v.size() - 1, rank == 0 ? 0 : rank - 1)];
}

double MedianFinite(const std::vector<double>& v) {
  std::vector<double> f;
  for (double x : v)
    if (std::isfinite(x)) f.push_back(x);
  return f.empty() ? kNaN : Percentile(f, 0.5);
}

std::string Duration(double s) {
  if (std::isnan(s)) return "-";
  if (!std::isfinite(s)) return "not seen";
  char buf[32];
  if (s < 120.0) std::snprintf(buf, sizeof buf, "%.0f s", s);
  else if (s < 7200.0) std::snprintf(buf, sizeof buf, "%.1f min", s / 60.0);
  else std::snprintf(buf, sizeof buf, "%.1f h", s / 3600.0);
  return buf;
}

std::string WindowName(double w) {
  char buf[32];
  if (w < 3600.0) std::snprintf(buf, sizeof buf, "%g min", w / 60.0);
  else std::snprintf(buf, sizeof buf, "%g h", w / 3600.0);
  return buf;
}

std::string Fmt(const char* f, double v) {
  if (!std::isfinite(v)) return "-";
  char buf[48];
  std::snprintf(buf, sizeof buf, f, v);
  return buf;
}

// Issue 10's "Done when" list on this evaluation.
void Criteria(const BatchSpec& b, const RunOutcome* free_run, EvaluationResult* r) {
  r->criteria.clear();
  auto pct = [](double x) { return Fmt("%.2f %%", 100.0 * x); };
  // 1. A healthy segment is never unavailable (leak-free run, after the start-up exclusion).
  {
    Criterion c;
    c.name = "time `unavailable` (leak-free run)";
    c.target = "0 %";
    if (free_run == nullptr || !(free_run->status_observed_s > 0.0)) {
      r->unavailable_share = kNaN;
      c.value = "-";
      c.verdict = "n/a";
    } else {
      r->status_observed_s = free_run->status_observed_s;
      r->unavailable_share = free_run->unavailable_s / free_run->status_observed_s;
      c.value = pct(r->unavailable_share) + " (" + Duration(free_run->unavailable_s) + ")";
      c.verdict = free_run->unavailable_s == 0.0 ? "pass" : "fail";
    }
    c.note = "the first " + Fmt("%.0f", b.startup_exclusion_s / 60.0) + " min after the start are not counted";
    r->criteria.push_back(c);
  }
  // 2. Every leak of 0.5 % and more is detected, whatever its hour.
  {
    r->runs_half_pct = r->detected_half_pct = 0;
    for (const RunOutcome& o : r->runs)
      if (o.kind == RunKind::kLeak && o.error.empty() && o.leak_fraction >= 0.005 - 1e-12) {
        ++r->runs_half_pct;
        r->detected_half_pct += o.detected;
      }
    Criterion c;
    c.name = "P(detect), leaks >= 0.5 % (all hours, ruptures included)";
    c.target = "1";
    c.value = r->runs_half_pct ? Fmt("%.3f", static_cast<double>(r->detected_half_pct) / r->runs_half_pct) + " (" +
                                     std::to_string(r->detected_half_pct) + "/" + std::to_string(r->runs_half_pct) + ")"
                               : "-";
    c.verdict = r->runs_half_pct == 0 ? "n/a" : r->detected_half_pct == r->runs_half_pct ? "pass" : "fail";
    c.note = "detected within the observation (" + Duration(b.observe_s) + " leaks, " + Duration(b.rupture_observe_s) +
             " ruptures)";
    r->criteria.push_back(c);
  }
  // 3. P90 time to detect of a 1 % leak (standard instruments).
  {
    std::vector<double> d;
    for (const RunOutcome& o : r->runs)
      if (o.kind == RunKind::kLeak && o.error.empty() && !o.rupture && std::fabs(o.leak_fraction - 0.01) < 1e-9)
        d.push_back(o.detected ? o.detect_delay_s : kInf);
    r->ttd_p90_1pct_s = d.empty() ? kNaN : Percentile(d, 0.9);
    Criterion c;
    c.name = "P90 time to detect, 1 % leak";
    c.target = "<= 10 min (standard instruments)";
    c.value = Duration(r->ttd_p90_1pct_s) + (d.empty() ? "" : " (" + std::to_string(d.size()) + " runs)");
    if (d.empty()) c.verdict = "n/a";
    else if (b.family != "standard") c.verdict = "n/a", c.note = "the target is for standard instruments";
    else c.verdict = r->ttd_p90_1pct_s <= 600.0 ? "pass" : "fail";
    r->criteria.push_back(c);
  }
  // 4. Leaks of 10 % and more alarm within 60 s.
  {
    r->runs_10pct = r->within_60s_10pct = 0;
    for (const RunOutcome& o : r->runs)
      if (o.kind == RunKind::kLeak && o.error.empty() && o.leak_fraction >= 0.10 - 1e-12) {
        ++r->runs_10pct;
        r->within_60s_10pct += o.detected && o.detect_delay_s <= 60.0;
      }
    Criterion c;
    c.name = "share of leaks >= 10 % alarmed within 60 s";
    c.target = "1";
    c.value = r->runs_10pct ? Fmt("%.3f", static_cast<double>(r->within_60s_10pct) / r->runs_10pct) + " (" +
                                  std::to_string(r->within_60s_10pct) + "/" + std::to_string(r->runs_10pct) + ")"
                            : "-";
    c.verdict = r->runs_10pct == 0 ? "n/a" : r->within_60s_10pct == r->runs_10pct ? "pass" : "fail";
    c.note = "first leak or rupture alarm after the onset of the opening";
    r->criteria.push_back(c);
  }
  // 5. False alarms within the budget over >= 30 leak-free days with shut-ins.
  {
    Criterion c;
    c.name = "false alarms per 30 days (leak-free run)";
    r->budget_per_30_days = 30.0 / b.budget_days;
    c.target = "<= " + Fmt("%.2f", r->budget_per_30_days) + " (budget: one per " + Fmt("%g", b.budget_days) + " days)";
    if (free_run == nullptr) {
      c.value = "-";
      c.verdict = "n/a";
    } else {
      const double days = free_run->duration_s / kDay_s;
      double lo = 0.0, hi = 0.0;
      PoissonInterval95(free_run->false_alarms, &lo, &hi);
      r->fa_per_30_days = free_run->false_alarms * 30.0 / days;
      r->fa_lo_per_30_days = lo * 30.0 / days;
      r->fa_hi_per_30_days = hi * 30.0 / days;
      c.value = Fmt("%.2f", r->fa_per_30_days) + " [" + Fmt("%.2f", r->fa_lo_per_30_days) + ", " +
                Fmt("%.2f", r->fa_hi_per_30_days) + "] (" + std::to_string(free_run->false_alarms) + " in " +
                Fmt("%g", days) + " days)";
      if (days < 30.0 - 1e-9) c.verdict = "n/a", c.note = "needs 30 leak-free days or more; ";
      else if (r->fa_per_30_days <= r->budget_per_30_days) c.verdict = "pass";
      else if (r->fa_lo_per_30_days > r->budget_per_30_days) c.verdict = "fail";
      else c.verdict = "inconclusive";
      c.note += "exact Poisson 95 % interval (Garwood 1936); " + std::to_string(r->shut_ins) + " shut-in(s)";
    }
    r->criteria.push_back(c);
  }
}

void Aggregate(const BatchSpec& b, EvaluationResult* r) {
  // Thresholds of the baseline on the leak-free run: as many exceedances as
  // the monitor's false alarms there.
  const RunOutcome* free_run = nullptr;
  for (const RunOutcome& o : r->runs)
    if (o.kind == RunKind::kLeakFree) free_run = &o;
  const int target = free_run ? free_run->false_alarms : 0;
  std::vector<double> thresholds(b.baseline_windows_s.size(), kInf), medians(b.baseline_windows_s.size(), 0.0);
  r->false_alarms.clear();
  FalseAlarmRow mon;
  mon.method = "holdfast";
  mon.false_alarms = target;
  mon.per_30_days = free_run ? target * 30.0 * kDay_s / std::max(1.0, free_run->duration_s) : kNaN;
  mon.threshold_kg_s = kNaN;
  r->false_alarms.push_back(mon);
  for (size_t w = 0; w < b.baseline_windows_s.size(); ++w) {
    FalseAlarmRow row;
    row.method = "baseline " + WindowName(b.baseline_windows_s[w]);
    if (free_run != nullptr && w < free_run->baseline.size() && !free_run->baseline[w].empty()) {
      std::vector<double> v;
      for (const BaselineWindow& x : free_run->baseline[w]) v.push_back(x.shortfall_kg_s);
      medians[w] = MedianOf(v);
      std::sort(v.begin(), v.end(), std::greater<double>());
      const size_t k = std::min(static_cast<size_t>(target), v.size() - 1);
      // Just above the (target+1)-th largest: exactly `target` exceed it
      // (unless values tie).
      thresholds[w] = v[k] + 1e-9 * std::max(1.0, std::fabs(v[k]));
      int n = 0;
      for (double x : v) n += x > thresholds[w];
      row.false_alarms = n;
      row.per_30_days = n * 30.0 * kDay_s / std::max(1.0, free_run->duration_s);
    } else {
      row.per_30_days = kNaN;
    }
    row.threshold_kg_s = thresholds[w];
    r->false_alarms.push_back(row);
  }

  // Per leak size.
  // Leaks first, then ruptures, each by size.
  std::map<std::pair<bool, double>, std::vector<const RunOutcome*>> by_size;
  for (const RunOutcome& o : r->runs)
    if (o.kind == RunKind::kLeak && o.error.empty()) by_size[{o.rupture, o.leak_fraction}].push_back(&o);
  r->sizes.clear();
  r->grid_exposure_s = 0.0;
  for (const auto& [key, runs] : by_size) {
    const double fraction = key.second;
    SizeRows sr;
    sr.leak_fraction = fraction;
    sr.rupture = key.first;
    double sum = 0.0;
    int n = 0;
    for (const RunOutcome* o : runs)
      if (std::isfinite(o->true_rate_kg_s)) sum += o->true_rate_kg_s, ++n;
    sr.rate_kg_s = n ? sum / n : kNaN;
    sr.delta_sigma = sr.rate_kg_s / r->sigma_eff_kg_s;

    MethodRow h;
    h.method = "holdfast";
    std::vector<double> ttd, rate_err, loc_err, rate_err_end, loc_err_end;
    for (const RunOutcome* o : runs) {
      ++h.runs;
      h.false_alarms_pre_onset += o->false_alarms;
      ttd.push_back(o->detected ? o->detect_delay_s : kInf);
      if (!o->detected) continue;
      ++h.detected;
      const double truth = o->true_rate_kg_s;
      rate_err.push_back(100.0 * std::fabs(o->rate_at_alarm_kg_s - truth) / truth);
      rate_err_end.push_back(100.0 * std::fabs(o->rate_at_end_kg_s - truth) / truth);
      loc_err.push_back(std::fabs(o->location_at_alarm_m - o->node_chainage_m));
      loc_err_end.push_back(std::fabs(o->location_at_end_m - o->node_chainage_m));
    }
    h.p_detect = h.runs ? static_cast<double>(h.detected) / h.runs : kNaN;
    h.ttd_median_s = Percentile(ttd, 0.5);
    h.ttd_p90_s = Percentile(ttd, 0.9);
    h.rate_error_pct_median = MedianFinite(rate_err);
    h.location_error_m_median = MedianFinite(loc_err);
    h.rate_error_end_pct_median = MedianFinite(rate_err_end);
    h.location_error_end_m_median = MedianFinite(loc_err_end);
    {
      std::vector<double> f;
      for (double x : loc_err_end)
        if (std::isfinite(x)) f.push_back(x);
      h.location_error_m_p90 = f.empty() ? kNaN : Percentile(f, 0.9);
    }
    sr.rows.push_back(h);

    for (size_t w = 0; w < b.baseline_windows_s.size(); ++w) {
      MethodRow m;
      m.method = "baseline " + WindowName(b.baseline_windows_s[w]);
      std::vector<double> d, err;
      for (const RunOutcome* o : runs) {
        ++m.runs;
        const double onset = o->start_epoch_s + o->onset_s;
        double delay = kInf;
        for (const BaselineWindow& x : o->baseline[w]) {
          if (!(x.shortfall_kg_s > thresholds[w])) continue;
          if (x.end_s <= onset) {
            ++m.false_alarms_pre_onset;
            continue;
          }
          delay = x.end_s - onset;
          err.push_back(100.0 * std::fabs((x.shortfall_kg_s - medians[w]) - o->true_rate_kg_s) / o->true_rate_kg_s);
          break;
        }
        if (std::isfinite(delay)) ++m.detected;
        d.push_back(delay);
      }
      m.p_detect = m.runs ? static_cast<double>(m.detected) / m.runs : kNaN;
      m.ttd_median_s = Percentile(d, 0.5);
      m.ttd_p90_s = Percentile(d, 0.9);
      m.rate_error_pct_median = MedianFinite(err);
      m.location_error_m_median = m.location_error_m_p90 = kNaN;
      m.rate_error_end_pct_median = m.location_error_end_m_median = kNaN;
      sr.rows.push_back(m);
    }

    MethodRow bound;
    bound.method = "bound (Lorden)";
    bound.runs = static_cast<int>(runs.size());
    bound.detected = bound.runs;
    bound.p_detect = kNaN;
    bound.ttd_median_s = bound.ttd_p90_s = LordenDelayBound_s(sr.delta_sigma, r->arl0_blocks, r->block_s);
    bound.rate_error_pct_median = bound.location_error_m_median = bound.location_error_m_p90 = kNaN;
    bound.rate_error_end_pct_median = bound.location_error_end_m_median = kNaN;
    sr.rows.push_back(bound);
    r->sizes.push_back(sr);
  }
  for (const RunOutcome& o : r->runs)
    if (o.kind == RunKind::kLeak && o.error.empty()) r->grid_exposure_s += o.onset_s;
  Criteria(b, free_run, r);
}


// The grid's leak and rupture runs. Onsets: onsets_s as given, or the clock
// hours (then each daily operation + kOperationOnsetDelay_s when asked).
// "cross" runs every size x chainage x onset x seed; "cycle" runs every size
// x onset once, with chainage (i + k) mod n and seed (i + k) mod m for onset
// i and size k, so that each size meets every chainage at different hours.
// Ruptures are always placed by the cycle.
std::vector<RunPlan> LeakPlans(const BatchSpec& b) {
  struct Onset {
    double at_s;  // since the start (fixed) or on the clock
    bool clock, during_operation;
  };
  std::vector<Onset> onsets;
  for (double on : b.onsets_s) onsets.push_back({on, false, false});
  for (double h : b.onset_hours) onsets.push_back({h * 3600.0, true, false});
  if (!b.onset_hours.empty() && b.onsets_during_operations)
    for (const json& op : b.daily_operations)
      onsets.push_back({std::fmod(op.value("at_s", 0.0) + kOperationOnsetDelay_s, kDay_s), true, true});
  std::vector<RunPlan> plans;
  int idx = 0;
  auto add = [&](double f, bool rupture, double c, const Onset& on, uint64_t seed) {
    RunPlan p;
    p.kind = RunKind::kLeak;
    p.index = idx++;
    p.seed = seed;
    p.leak_fraction = f;
    p.chainage_m = c;
    p.rupture = rupture;
    p.during_operation = on.during_operation;
    const double ramp = rupture ? b.rupture_ramp_s : b.leak_ramp_s;
    const double observe = rupture ? b.rupture_observe_s : b.observe_s;
    if (on.clock) {
      p.onset_s = b.lead_s;
      p.onset_clock_s = on.at_s;
      p.doc = LeakDocAtClock(b, f, c, on.at_s, ramp, observe, seed);
    } else {
      p.onset_s = on.at_s;
      p.doc = LeakDoc(b, f, c, on.at_s, ramp, observe, seed);
    }
    plans.push_back(std::move(p));
  };
  const size_t nc = b.chainages_m.size(), ns = b.seeds.size();
  if (nc == 0 || ns == 0) return plans;
  for (size_t k = 0; k < b.leak_fractions.size(); ++k) {
    if (b.design == "cycle") {
      for (size_t i = 0; i < onsets.size(); ++i)
        add(b.leak_fractions[k], false, b.chainages_m[(i + k) % nc], onsets[i], b.seeds[(i + k) % ns]);
    } else {
      for (double c : b.chainages_m)
        for (const Onset& on : onsets)
          for (uint64_t s : b.seeds) add(b.leak_fractions[k], false, c, on, s);
    }
  }
  for (size_t k = 0; k < b.rupture_fractions.size(); ++k)
    for (size_t i = 0; i < onsets.size(); ++i)
      add(b.rupture_fractions[k], true, b.chainages_m[(i + k) % nc], onsets[i], b.seeds[(i + k) % ns]);
  return plans;
}
}  // namespace

const char* BatchFormatVersion() { return "holdfast-batch/1"; }

size_t LeakRunCount(const BatchSpec& b) { return LeakPlans(b).size(); }

std::vector<json> LeakRunDocs(const BatchSpec& b) {
  std::vector<json> out;
  for (RunPlan& p : LeakPlans(b)) out.push_back(std::move(p.doc));
  return out;
}

json LeakFreeRunDoc(const BatchSpec& b, double days, uint64_t seed) { return LeakFreeDoc(b, days, seed); }

const char* RunKindName(RunKind k) {
  switch (k) {
    case RunKind::kTuning: return "tuning";
    case RunKind::kLeakFree: return "leak_free";
    case RunKind::kLeak: return "leak";
  }
  return "?";
}

double LordenDelayBound_s(double delta_sigma, double arl0_blocks, double block_s) {
  if (!(delta_sigma > 0.0) || !(arl0_blocks > 1.0)) return kNaN;
  return std::max(1.0, 2.0 * std::log(arl0_blocks) / (delta_sigma * delta_sigma)) * block_s;
}

bool IsInstrumentFamily(const std::string& name) { return name == "standard" || name == "rough"; }

void PoissonInterval95(int count, double* lo, double* hi) {
  // Garwood (1936): lo solves P(N >= n | lo) = 0.025, hi solves
  // P(N <= n | hi) = 0.025; the Poisson sums by bisection on the mean.
  auto cdf = [](int n, double mu) {  // P(N <= n | mu)
    double term = std::exp(-mu), sum = term;
    for (int k = 1; k <= n; ++k) {
      term *= mu / k;
      sum += term;
    }
    return sum;
  };
  auto solve = [](auto f, double a, double b) {  // f decreasing in mu, root in [a, b]
    for (int i = 0; i < 200; ++i) {
      const double m = 0.5 * (a + b);
      (f(m) > 0.0 ? a : b) = m;
    }
    return 0.5 * (a + b);
  };
  const int n = std::max(0, count);
  const double top = 10.0 * (n + 10);
  *hi = solve([&](double mu) { return cdf(n, mu) - 0.025; }, 0.0, top);
  *lo = n == 0 ? 0.0 : solve([&](double mu) { return (1.0 - cdf(n - 1, mu)) < 0.025 ? 1.0 : -1.0; }, 0.0, top);
}

bool EvaluateOptions::IsValid(std::string* why) const {
  if (jobs < 0 || jobs > 256) {
    *why = "jobs must be in [0, 256] (0: the machine's cores)";
    return false;
  }
  return true;
}

bool LoadBatchFile(const std::string& path, const Site& site, BatchSpec* b, std::vector<ConfigProblem>* problems) {
  BatchReader rd(path, problems);
  json doc;
  bool parsed = false;
  const bool unique_keys = ReadJsonFile(path, &doc, problems, &parsed);
  if (!parsed) return false;
  if (!doc.is_object()) {
    rd.Add("", "the batch must be a JSON object");
    return false;
  }
  b->path = path;
  rd.ExactKeys(doc, "", {"format", "name", "scenario", "time_step_s", "budget_days", "tuning", "leak_free", "grid",
                    "baseline", "ruptures", "instrument_families", "instrument_set_seed",
                    "meter_drift_pct_per_day"});
  if (!doc.contains("format") || doc["format"] != BatchFormatVersion())
    rd.Add("/format", std::string("expected \"") + BatchFormatVersion() + "\"");
  b->name = doc.value("name", std::string());
  rd.Number(doc, "time_step_s", "", false, 0.0, 10.0, &b->time_step_s, true);
  rd.Number(doc, "budget_days", "", false, 0.0, 36500.0, &b->budget_days, true);
  rd.Seed(doc, "instrument_set_seed", "", &b->instrument_set_seed);
  rd.Number(doc, "meter_drift_pct_per_day", "", false, 0.0, 1.0, &b->meter_drift_pct_per_day, false);

  if (!doc.contains("scenario") || !doc["scenario"].is_string()) {
    rd.Add("/scenario", "is required: the path of the base scenario (\"holdfast-scenario/1\")");
  } else {
    std::filesystem::path sp = doc["scenario"].get<std::string>();
    if (sp.is_relative()) sp = std::filesystem::path(path).parent_path() / sp;
    b->scenario_path = sp.string();
    json sdoc;
    std::vector<ConfigProblem> read_problems;
    if (!ReadJsonFile(b->scenario_path, &sdoc, &read_problems)) {
      for (const ConfigProblem& p : read_problems) rd.Add("/scenario", p.ToString());
    } else if (!sdoc.is_object()) {
      rd.Add("/scenario", b->scenario_path + ": not a JSON object");
    } else {
      sdoc.erase("leaks");
      b->base_scenario = sdoc;
      Scenario sc;
      std::vector<ConfigProblem> sp_problems;
      if (!CompileScenario(sdoc, site, &sc, &sp_problems)) {
        for (ConfigProblem p : sp_problems) {
          p.path = b->scenario_path + ":" + p.path;
          problems->push_back(p);
        }
        rd.Add("/scenario", "the base scenario has problems (listed above)");
      } else {
        b->segment = sc.segment;
        b->base_start_epoch_s = sc.start_epoch_s;
        // What "rough" sets on each simulated point (config/EVALUATE.md).
        b->rough_instruments = json::object();
        b->point_ids.clear();
        b->flow_point_ids.clear();
        for (const PointPlan& pp : sc.points) {
          const PointSpec& ps = site.points[static_cast<size_t>(pp.point)];
          const double phi = std::pow(kRoughWanderPhiPerSecond, pp.instrument.sample_period_s);
          json o = {{"wander_phi", phi}, {"jitter_s", kRoughJitter_s}};
          if (ps.kind == PointKind::kFlow) {
            o["noise_pct"] = 100.0 * kRoughNoiseFactor * ps.random_sigma;
            o["wander_pct"] = 100.0 * kRoughWanderFactor * ps.random_sigma;
          } else {
            const double random = ps.random_sigma / ps.unit.factor;
            o["noise"] = kRoughNoiseFactor * random;
            o["wander"] = kRoughWanderFactor * random;
            o["deadband"] = kRoughDeadbandFactor * random;
            o["heartbeat_s"] = kRoughHeartbeat_s;
          }
          b->rough_instruments[ps.id] = o;
          b->point_ids.push_back(ps.id);
          if (ps.kind == PointKind::kFlow) b->flow_point_ids.push_back(ps.id);
        }
        const SegmentSpec& seg = site.segments[static_cast<size_t>(sc.segment)];
        if (!(seg.nominal_flow_kg_s > 0.0))
          rd.Add("/scenario", "segment \"" + seg.id + "\" has no nominal flow: it has no decision stage to evaluate");
      }
    }
  }

  if (const json* t = rd.Object(doc, "tuning", "", false)) {
    rd.ExactKeys(*t, "/tuning", {"days", "seed"});
    rd.Number(*t, "days", "/tuning", false, 0.25, 365.0, &b->tuning_days);
    rd.Seed(*t, "seed", "/tuning", &b->tuning_seed);
  }
  if (const json* lf = rd.Object(doc, "leak_free", "", true)) {
    const std::string p = "/leak_free";
    rd.ExactKeys(*lf, p, {"days", "seed", "daily_operations", "shut_in_every_days", "shut_in_at_s", "shut_in_s",
                     "inlet_daily_spread_k"});
    rd.Number(*lf, "days", p, false, 1.0, 3650.0, &b->leak_free_days);
    rd.Seed(*lf, "seed", p, &b->leak_free_seed);
    rd.Number(*lf, "shut_in_every_days", p, false, 0.0, 3650.0, &b->shut_in_every_days);
    rd.Number(*lf, "shut_in_at_s", p, false, 0.0, kDay_s, &b->shut_in_at_s);
    rd.Number(*lf, "shut_in_s", p, false, 600.0, kDay_s - 2.0 * kShutInClearance_s, &b->shut_in_s);
    rd.Number(*lf, "inlet_daily_spread_k", p, false, 0.0, 20.0, &b->inlet_daily_spread_k);
    if (lf->contains("daily_operations")) {
      const json& ops = (*lf)["daily_operations"];
      if (!ops.is_array()) {
        rd.Add(p + "/daily_operations", "must be an array of scenario operations (config/SCENARIO.md)");
      } else {
        for (size_t i = 0; i < ops.size(); ++i) {
          const std::string op = p + "/daily_operations/" + std::to_string(i);
          double at = 0.0;
          if (!ops[i].is_object()) rd.Add(op, "must be an object (a scenario operation)");
          else rd.Number(ops[i], "at_s", op, true, 0.0, kDay_s - 1.0, &at);
        }
        b->daily_operations = ops;
      }
    }
    if (b->shut_in_every_days > 0.0 && b->shut_in_s + 2.0 * kShutInClearance_s >= b->shut_in_every_days * kDay_s)
      rd.Add(p + "/shut_in_s", "the shut-ins would overlap (shut_in_s + 1 h must be shorter than shut_in_every_days)");
  }
  if (const json* g = rd.Object(doc, "grid", "", true)) {
    const std::string p = "/grid";
    rd.ExactKeys(*g, p, {"leak_fractions_pct", "chainages_m", "onsets_s", "onset_hours", "lead_s",
                    "onsets_during_operations", "design", "seeds", "ramp_s", "observe_s"});
    for (double pct : rd.Numbers(*g, "leak_fractions_pct", p, 0.0, 100.0, true)) b->leak_fractions.push_back(pct / 100.0);
    const double length = b->segment >= 0 ? site.segments[static_cast<size_t>(b->segment)].length_m() : kInf;
    b->chainages_m = rd.Numbers(*g, "chainages_m", p, 0.0, length, false);
    rd.Number(*g, "ramp_s", p, false, 0.0, 86400.0, &b->leak_ramp_s);
    rd.Number(*g, "observe_s", p, false, 600.0, 30.0 * kDay_s, &b->observe_s);
    if (g->contains("onset_hours") == g->contains("onsets_s")) {
      rd.Add(p + "/onsets_s", "give either onsets_s (since each run's start) or onset_hours (clock hours), not both");
    } else if (g->contains("onsets_s")) {
      b->onsets_s = rd.Numbers(*g, "onsets_s", p, kMinOnset_s, 30.0 * kDay_s, false);
      for (const char* k : {"lead_s", "onsets_during_operations"})
        if (g->contains(k)) rd.Add(p + "/" + k, "only with onset_hours");
    } else {
      b->onset_hours = rd.Numbers(*g, "onset_hours", p, 0.0, 24.0, false);
      for (size_t i = 0; i < b->onset_hours.size(); ++i)
        if (b->onset_hours[i] >= 24.0) rd.Add(p + "/onset_hours/" + std::to_string(i), "must be below 24");
      rd.Number(*g, "lead_s", p, false, kMinOnset_s, kDay_s, &b->lead_s);
      if (g->contains("onsets_during_operations")) {
        if (!(*g)["onsets_during_operations"].is_boolean()) rd.Add(p + "/onsets_during_operations", "must be true or false");
        else b->onsets_during_operations = (*g)["onsets_during_operations"].get<bool>();
      }
      const json& inlet = b->base_scenario.contains("temperature") ? b->base_scenario["temperature"].value("inlet", json())
                                                                     : json();
      if (inlet.is_array())
        rd.Add(p + "/onset_hours", "clock onsets need a constant inlet temperature in the base scenario (a swing may be on top)");
    }
    if (g->contains("design")) {
      const json& d = (*g)["design"];
      if (!d.is_string() || (d.get<std::string>() != "cross" && d.get<std::string>() != "cycle"))
        rd.Add(p + "/design", "must be \"cross\" or \"cycle\"");
      else b->design = d.get<std::string>();
    }
    for (double s : rd.Numbers(*g, "seeds", p, 0.0, 9007199254740992.0, false)) {
      if (s != std::floor(s)) rd.Add(p + "/seeds", "seeds must be integers");
      b->seeds.push_back(static_cast<uint64_t>(s));
    }
  }
  if (const json* ru = rd.Object(doc, "ruptures", "", false)) {
    const std::string p = "/ruptures";
    rd.ExactKeys(*ru, p, {"fractions_pct", "ramp_s", "observe_s"});
    for (double pct : rd.Numbers(*ru, "fractions_pct", p, 0.0, 100.0, true)) b->rupture_fractions.push_back(pct / 100.0);
    rd.Number(*ru, "ramp_s", p, false, 0.0, 600.0, &b->rupture_ramp_s);
    rd.Number(*ru, "observe_s", p, false, 300.0, kDay_s, &b->rupture_observe_s);
  }
  if (doc.contains("instrument_families")) {
    const json& f = doc["instrument_families"];
    b->families.clear();
    if (!f.is_array() || f.empty()) {
      rd.Add("/instrument_families", "must be a non-empty array of \"standard\" and \"rough\"");
    } else {
      for (size_t i = 0; i < f.size(); ++i) {
        const std::string fp = "/instrument_families/" + std::to_string(i);
        if (!f[i].is_string() || !IsInstrumentFamily(f[i].get<std::string>())) {
          rd.Add(fp, "must be \"standard\" or \"rough\"");
        } else if (std::find(b->families.begin(), b->families.end(), f[i].get<std::string>()) != b->families.end()) {
          rd.Add(fp, "listed twice");
        } else {
          b->families.push_back(f[i].get<std::string>());
        }
      }
    }
    if (!b->families.empty()) b->family = b->families.front();
  }
  if (const json* bl = rd.Object(doc, "baseline", "", false)) {
    rd.ExactKeys(*bl, "/baseline", {"windows_s"});
    b->baseline_windows_s = rd.Numbers(*bl, "windows_s", "/baseline", 60.0, 7.0 * kDay_s, false);
  }
  return rd.count() == 0 && unique_keys;
}

bool RunEvaluation(const Site& site, const BatchSpec& b, const EvaluateOptions& options, EvaluationResult* r,
                   std::string* why) {
  if (!options.IsValid(why)) return false;
  if (b.segment < 0 || b.segment >= static_cast<int>(site.segments.size())) {
    *why = "the batch has no segment (load it with LoadBatchFile)";
    return false;
  }
  const auto t0 = std::chrono::steady_clock::now();
  const SegmentSpec& seg = site.segments[static_cast<size_t>(b.segment)];
  *r = EvaluationResult{};
  r->family = b.family;
  r->site = site.name;
  r->segment = seg.id;
  r->batch = b.name.empty() ? b.path : b.name;
  r->nominal_flow_kg_s = seg.nominal_flow_kg_s;
  r->leak_free_days = b.leak_free_days;

  Monitor::Options mopt;
  mopt.decision.false_alarm_interval_s = b.budget_days * kDay_s;
  if (!mopt.IsValid(why)) return false;
  r->block_s = mopt.decision.block_s;
  r->arl0_blocks = mopt.decision.false_alarm_interval_s / mopt.decision.block_s;

  int done = 0;
  std::mutex mu;
  std::vector<RunPlan> plans;

  // 1. Tuning run (alone: the others need its result).
  RunPlan tune_plan;
  tune_plan.kind = RunKind::kTuning;
  tune_plan.seed = b.tuning_seed;
  tune_plan.doc = LeakFreeDoc(b, b.tuning_days, b.tuning_seed);
  Tuner tuner;
  if (!tuner.Init(site, mopt, why)) return false;
  // Build the work list first, so that progress reports know the total.
  RunPlan free_plan;
  free_plan.kind = RunKind::kLeakFree;
  free_plan.seed = b.leak_free_seed;
  free_plan.doc = LeakFreeDoc(b, b.leak_free_days, b.leak_free_seed);
  plans.push_back(free_plan);
  for (const json& op : free_plan.doc["operations"]) r->shut_ins += op.value("action", std::string()) == "shut_in";
  for (RunPlan& p : LeakPlans(b)) plans.push_back(std::move(p));
  const int total = static_cast<int>(plans.size()) + 1;

  RunOutcome tune_out = ExecuteRun(site, b, tune_plan, nullptr, mopt, &tuner);
  if (!tune_out.error.empty()) {
    *why = "tuning run: " + tune_out.error;
    return false;
  }
  TuningFile tuning;
  std::vector<TunerSegmentReport> reports;
  tuner.Finish(&tuning, &reports);
  const SegmentTuning* st = tuning.Find(seg.id);
  if (st == nullptr) {
    *why = "tuning run: segment " + seg.id + " not tuned: " + reports[static_cast<size_t>(b.segment)].not_tuned;
    return false;
  }
  r->bias_kg_s = st->bias_kg_s;
  r->sigma_kg_s = st->sigma_kg_s;
  r->phi = st->phi;
  r->sigma_eff_kg_s = st->sigma_eff_kg_s;
  // Only this segment is seeded (the others are not simulated).
  TuningFile seeded = tuning;
  seeded.segments.assign(1, *st);
  ++done;
  if (options.on_run) options.on_run(done, total, tune_out);

  // 2. The leak-free run and the grid, in parallel; outcomes by plan index.
  std::vector<RunOutcome> outcomes(plans.size());
  std::atomic<size_t> next{0};
  int jobs = options.jobs > 0 ? options.jobs : static_cast<int>(std::max(1u, std::thread::hardware_concurrency()));
  jobs = std::min<int>(jobs, static_cast<int>(plans.size()));
  r->jobs = std::max(1, jobs);
  auto worker = [&] {
    for (;;) {
      const size_t i = next.fetch_add(1);
      if (i >= plans.size()) return;
      RunOutcome o = ExecuteRun(site, b, plans[i], &seeded, mopt, nullptr,
                                plans[i].kind == RunKind::kLeakFree ? &options.on_leak_free_tick : nullptr);
      std::lock_guard<std::mutex> lock(mu);
      outcomes[i] = std::move(o);
      ++done;
      if (options.on_run) options.on_run(done, total, outcomes[i]);
    }
  };
  std::vector<std::thread> threads;
  for (int j = 1; j < jobs; ++j) threads.emplace_back(worker);
  worker();
  for (auto& t : threads) t.join();

  r->runs.push_back(std::move(tune_out));
  for (RunOutcome& o : outcomes) r->runs.push_back(std::move(o));
  if (!r->runs[1].error.empty()) {
    *why = "leak-free run: " + r->runs[1].error;
    return false;
  }
  Aggregate(b, r);
  r->wall_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return true;
}

// ---------------------------------------------------------------------------
// Tables
// ---------------------------------------------------------------------------

std::string EvaluationResult::SummaryMarkdown() const {
  std::ostringstream o;
  o << "# Detection performance: " << site << ", segment " << segment << " (" << family << " instruments)\n\n";
  o << "> **Caution.** These figures come from simulation of a model of the line. Holdfast is a supplementary "
       "monitoring aid: it does not replace the leak detection required by regulation, the operator's procedures, "
       "local codes or licensed engineering judgement. Prove performance on the real line before relying on it.\n\n";
  o << "Batch `" << batch << "`. Tuned on the tuning run: bias " << Fmt("%+.3f", bias_kg_s) << " kg/s, block sigma "
    << Fmt("%.3f", sigma_kg_s) << " kg/s, phi " << Fmt("%.3f", phi) << ", sigma_eff " << Fmt("%.3f", sigma_eff_kg_s)
    << " kg/s (blocks of " << Fmt("%g", block_s) << " s). False-alarm budget: one per "
    << Fmt("%.0f", arl0_blocks * block_s / kDay_s) << " days (ARL0 " << Fmt("%.0f", arl0_blocks)
    << " blocks). Nominal flow " << Fmt("%.1f", nominal_flow_kg_s) << " kg/s.\n\n";

  o << CriteriaMarkdown();
  o << "## False alarms (leak-free run, " << Fmt("%g", leak_free_days) << " days)\n\n";
  o << "| method | false alarms | per 30 days | threshold kg/s |\n|---|---:|---:|---:|\n";
  for (const FalseAlarmRow& f : false_alarms)
    o << "| " << f.method << " | " << f.false_alarms << " | " << Fmt("%.2f", f.per_30_days) << " | "
      << Fmt("%.3f", f.threshold_kg_s) << " |\n";
  o << "\n";

  o << "## Detection (leak grid)\n\n";
  o << "| leak % nominal | kg/s | delta (sigma_eff) | method | runs | P(detect) | time to detect median | P90 | "
       "rate error at alarm (median) | rate error at end | location error at end median | P90 | false alarms before onset |\n"
       "|---:|---:|---:|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|\n";
  for (const SizeRows& s : sizes) {
    for (const MethodRow& m : s.rows) {
      o << "| " << Fmt("%.2f", 100.0 * s.leak_fraction) << (s.rupture ? " rupture" : "") << " | "
        << Fmt("%.2f", s.rate_kg_s) << " | "
        << Fmt("%.1f", s.delta_sigma) << " | " << m.method << " | " << m.runs << " | "
        << (m.method.rfind("bound", 0) == 0 ? "-" : Fmt("%.2f", m.p_detect)) << " | " << Duration(m.ttd_median_s)
        << " | " << Duration(m.ttd_p90_s) << " | " << Fmt("%.0f %%", m.rate_error_pct_median) << " | "
        << Fmt("%.0f %%", m.rate_error_end_pct_median) << " | " << Fmt("%.0f m", m.location_error_end_m_median)
        << " | " << Fmt("%.0f m", m.location_error_m_p90) << " | "
        << (m.method.rfind("bound", 0) == 0 ? "-" : std::to_string(m.false_alarms_pre_onset)) << " |\n";
    }
  }
  o << "\nTimes to detect count the runs where nothing was seen as infinitely late (\"not seen\" when the median or "
       "P90 falls on them). Rate and location errors are over the detected runs; \"at end\" is the estimate at the "
       "end of the observation. Baseline: the uncompensated balance (metered in - out - tank change, no line pack) "
       "over fixed windows, thresholds fit on the leak-free run for the monitor's false-alarm count there (which "
       "favours the baseline); its rate estimate is the window shortfall less the leak-free median. Bound: Lorden "
       "(1971), 2 ln(ARL0) / delta^2 blocks, the asymptotic least worst-case delay of any procedure at that "
       "false-alarm rate for a step of delta sigma_eff; the monitor also waits out a low-pass filter and a bank of "
       "fixed leak sizes, so it cannot reach the bound.\n";
  if (grid_exposure_s > 0.0)
    o << "\nThe grid runs add " << Fmt("%.1f", grid_exposure_s / 3600.0)
      << " h of pre-onset operation (counted in the last column).\n";
  o << "\nWall time " << Fmt("%.1f", wall_s) << " s on " << jobs << " thread(s); " << runs.size() << " runs.\n";
  return o.str();
}

std::string EvaluationResult::CriteriaMarkdown() const {
  std::ostringstream o;
  o << "## Criteria (issue 10, \"Done when\"; " << family << " instruments)\n\n";
  o << "| criterion | value | target | verdict | note |\n|---|---|---|---|---|\n";
  for (const Criterion& c : criteria)
    o << "| " << c.name << " | " << c.value << " | " << c.target << " | " << c.verdict << " | " << c.note << " |\n";
  o << "\nFalse alarms: \"pass\" when the observed rate is within the budget, \"fail\" when even the interval's lower "
       "end exceeds it, otherwise \"inconclusive\" (too few leak-free days to tell).\n\n";
  return o.str();
}

std::string EvaluationResult::SummaryCsv() const {
  std::ostringstream o;
  o << "leak_fraction,rate_kg_s,delta_sigma,method,runs,detected,p_detect,ttd_median_s,ttd_p90_s,"
       "rate_error_at_alarm_pct,rate_error_at_end_pct,location_error_at_end_median_m,location_error_p90_m,"
       "false_alarms_before_onset\n";
  auto num = [](double v) {
    if (std::isnan(v)) return std::string();
    if (!std::isfinite(v)) return std::string("inf");
    char buf[32];
    std::snprintf(buf, sizeof buf, "%.6g", v);
    return std::string(buf);
  };
  for (const SizeRows& s : sizes)
    for (const MethodRow& m : s.rows)
      o << num(s.leak_fraction) << ',' << num(s.rate_kg_s) << ',' << num(s.delta_sigma) << ',' << m.method << ','
        << m.runs << ',' << m.detected << ',' << num(m.p_detect) << ',' << num(m.ttd_median_s) << ','
        << num(m.ttd_p90_s) << ',' << num(m.rate_error_pct_median) << ',' << num(m.rate_error_end_pct_median) << ','
        << num(m.location_error_end_m_median) << ',' << num(m.location_error_m_p90) << ','
        << m.false_alarms_pre_onset << '\n';
  return o.str();
}

std::string EvaluationResult::RunsCsv() const {
  std::ostringstream o;
  o << "kind,index,seed,leak_fraction,chainage_m,node_chainage_m,onset_s,true_rate_kg_s,detected,by_rupture,"
       "detect_delay_s,rate_at_alarm_kg_s,location_at_alarm_m,rate_at_end_kg_s,location_at_end_m,false_alarms,"
       "duration_s,readings,ticks,sim_residual_rel,wall_s,error,rupture,onset_clock_s,during_operation\n";
  auto num = [](double v) {
    if (!std::isfinite(v)) return std::string();
    char buf[32];
    std::snprintf(buf, sizeof buf, "%.6g", v);
    return std::string(buf);
  };
  for (const RunOutcome& r : runs) {
    const bool leak = r.kind == RunKind::kLeak;
    o << RunKindName(r.kind) << ',' << r.index << ',' << r.seed << ',' << (leak ? num(r.leak_fraction) : "") << ','
      << (leak ? num(r.chainage_m) : "") << ',' << (leak ? num(r.node_chainage_m) : "") << ','
      << (leak ? num(r.onset_s) : "") << ',' << (leak ? num(r.true_rate_kg_s) : "") << ',' << (r.detected ? 1 : 0)
      << ',' << (r.by_rupture ? 1 : 0) << ',' << (r.detected ? num(r.detect_delay_s) : "") << ','
      << num(r.rate_at_alarm_kg_s) << ',' << num(r.location_at_alarm_m) << ',' << num(r.rate_at_end_kg_s) << ','
      << num(r.location_at_end_m) << ',' << r.false_alarms << ',' << num(r.duration_s) << ',' << r.readings << ','
      << r.ticks << ',' << num(r.sim_residual_rel) << ',' << num(r.wall_s) << ',';
    std::string e = r.error;
    std::replace(e.begin(), e.end(), ',', ';');
    std::replace(e.begin(), e.end(), '\n', ' ');
    o << e << ',' << (r.rupture ? 1 : 0) << ',' << (leak ? num(r.onset_clock_s) : "") << ','
      << (r.during_operation ? 1 : 0) << '\n';
  }
  return o.str();
}

json EvaluationResult::ToJson() const {
  auto num = [](double v) -> json {
    if (std::isnan(v)) return nullptr;
    if (!std::isfinite(v)) return "inf";
    return v;
  };
  json j;
  j["format"] = "holdfast-evaluation/1";
  j["site"] = site;
  j["segment"] = segment;
  j["batch"] = batch;
  j["family"] = family;
  j["criteria"] = json::array();
  for (const Criterion& c : criteria)
    j["criteria"].push_back({{"name", c.name}, {"value", c.value}, {"target", c.target}, {"verdict", c.verdict},
                             {"note", c.note}});
  j["criteria_figures"] = {{"unavailable_share", num(unavailable_share)},
                           {"status_observed_s", num(status_observed_s)},
                           {"runs_half_pct", runs_half_pct},
                           {"detected_half_pct", detected_half_pct},
                           {"ttd_p90_1pct_s", num(ttd_p90_1pct_s)},
                           {"runs_10pct", runs_10pct},
                           {"within_60s_10pct", within_60s_10pct},
                           {"false_alarms_per_30_days", num(fa_per_30_days)},
                           {"false_alarms_per_30_days_95", {num(fa_lo_per_30_days), num(fa_hi_per_30_days)}},
                           {"budget_per_30_days", num(budget_per_30_days)},
                           {"shut_ins", shut_ins}};
  j["nominal_flow_kg_s"] = num(nominal_flow_kg_s);
  j["tuning"] = {{"bias_kg_s", num(bias_kg_s)}, {"sigma_kg_s", num(sigma_kg_s)}, {"phi", num(phi)},
                 {"sigma_eff_kg_s", num(sigma_eff_kg_s)}, {"block_s", num(block_s)}, {"arl0_blocks", num(arl0_blocks)}};
  j["leak_free_days"] = num(leak_free_days);
  j["false_alarms"] = json::array();
  for (const FalseAlarmRow& f : false_alarms)
    j["false_alarms"].push_back({{"method", f.method}, {"false_alarms", f.false_alarms},
                                 {"per_30_days", num(f.per_30_days)}, {"threshold_kg_s", num(f.threshold_kg_s)}});
  j["sizes"] = json::array();
  for (const SizeRows& s : sizes) {
    json js = {{"leak_fraction", num(s.leak_fraction)}, {"rupture", s.rupture}, {"rate_kg_s", num(s.rate_kg_s)},
               {"delta_sigma", num(s.delta_sigma)}, {"rows", json::array()}};
    for (const MethodRow& m : s.rows)
      js["rows"].push_back({{"method", m.method}, {"runs", m.runs}, {"detected", m.detected},
                            {"p_detect", num(m.p_detect)}, {"ttd_median_s", num(m.ttd_median_s)},
                            {"ttd_p90_s", num(m.ttd_p90_s)}, {"rate_error_pct_median", num(m.rate_error_pct_median)},
                            {"rate_error_end_pct_median", num(m.rate_error_end_pct_median)},
                            {"location_error_end_m_median", num(m.location_error_end_m_median)},
                            {"location_error_m_p90", num(m.location_error_m_p90)},
                            {"false_alarms_before_onset", m.false_alarms_pre_onset}});
    j["sizes"].push_back(js);
  }
  j["runs"] = json::array();
  for (const RunOutcome& r : runs) {
    if (r.kind != RunKind::kLeak) continue;
    j["runs"].push_back({{"leak_fraction", num(r.leak_fraction)}, {"chainage_m", num(r.chainage_m)},
                         {"node_chainage_m", num(r.node_chainage_m)}, {"onset_s", num(r.onset_s)},
                         {"seed", r.seed}, {"true_rate_kg_s", num(r.true_rate_kg_s)}, {"detected", r.detected},
                         {"rupture", r.rupture}, {"onset_clock_s", num(r.onset_clock_s)},
                         {"during_operation", r.during_operation},
                         {"detect_delay_s", r.detected ? num(r.detect_delay_s) : json(nullptr)},
                         {"location_at_end_m", num(r.location_at_end_m)}, {"rate_at_end_kg_s", num(r.rate_at_end_kg_s)}});
  }
  j["false_alarm_times"] = json::array();
  for (const RunOutcome& r : runs)
    if (r.kind == RunKind::kLeakFree)
      for (size_t k = 0; k < r.false_alarm_times_s.size(); ++k)
        j["false_alarm_times"].push_back(
            {{"time", FormatIsoUtc(r.false_alarm_times_s[k], 0)}, {"type", AlarmTypeName(r.false_alarm_types[k])}});
  j["wall_s"] = num(wall_s);
  return j;
}

}  // namespace holdfast::sim
