// The core's facade: one object that takes readings and tick times and gives
// per-segment results. Pure and deterministic: no I/O, no threads, no clock;
// the same readings and the same tick times give the same results, bit for bit.
//
//   holdfast::Monitor m;
//   if (!m.Init(site, &why)) ...;
//   m.Feed(reading) ...;        // any number, any order (counted if late)
//   m.Advance(t);               // tick: every segment is balanced at time t
//   const SegmentTick& s = m.segment(0);
#pragma once

#include <array>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "holdfast/aligner.h"
#include "holdfast/alarm.h"
#include "holdfast/balance.h"
#include "holdfast/decision.h"
#include "holdfast/inventory.h"
#include "holdfast/locate.h"
#include "holdfast/reading.h"
#include "holdfast/rupture.h"
#include "holdfast/site.h"

namespace holdfast {

enum class SegmentStatus : uint8_t {
  kStarting,     // balance valid but the shortest window is not yet full
  kNormal,       // every input fresh, balance valid
  kDegraded,     // balance computed, but some input is suspect, substituted or clamped
  kUnavailable,  // a boundary meter or a pressure transmitter is missing or stale
  kShutIn,       // blocked in: no flow at any boundary; the balance and the decision go on
                 // (the inventory must hold apart from its predicted thermal change)
};
const char* SegmentStatusName(SegmentStatus s);

// Data-quality and unavailable alarms wait this long after the first tick, so
// that every point has had time to report (longer than usual staleness limits).
constexpr double kStartupGrace_s = 120.0;
// A point must stay unusable this long before the data-quality alarm rises.
constexpr double kDataQualityOnDelay_s = 60.0;
// The balance must stay unavailable this long before its alarm rises.
constexpr double kUnavailableOnDelay_s = 30.0;

// Flags beyond InventoryFlag (inventory.h), same bit field.
enum SegmentFlag : uint32_t {
  kSegMeterMissing = 1u << 16,  // a boundary meter never reported
  kSegMeterStale = 1u << 17,    // a boundary meter's held value is stale or bad
  kSegMeterConditions = 1u << 18,  // a line-volume meter's P or T is missing
  kSegPointSuspect = 1u << 19,     // a point's latest reading was excluded, or it looks frozen (data quality)
};
// Comma-separated names of the set flags ("" when none).
std::string SegmentFlagNames(uint32_t flags);

// Where a leak is, by pressure-gradient intersection (locate.h), refreshed
// once per decision block while a leak is suspected or alarmed.
struct LeakLocation {
  bool valid = false;
  double time_s = 0.0;
  double chainage_m = kNaN;
  double low_m = kNaN, high_m = kNaN;   // band at the locate options' coverage
  int landmark = -1;                    // nearest SegmentSpec::landmarks entry
  double landmark_offset_m = kNaN;      // chainage - landmark chainage
  bool by_wave = false;                 // from pressure-wave arrival times (a rupture), else the gradients
};

enum class AlarmCommand : uint8_t {
  kAcknowledge, kShelve, kUnshelve, kRemoveFromService, kReturnToService, kSuppress, kUnsuppress,
};
const char* AlarmCommandName(AlarmCommand c);
bool ParseAlarmCommand(std::string_view name, AlarmCommand* out);

struct SegmentTick {
  double time_s = 0.0;
  SegmentStatus status = SegmentStatus::kUnavailable;
  uint32_t flags = 0;
  double inflow_kg_s = 0.0;
  double outflow_kg_s = 0.0;
  double linepack_kg = 0.0;
  double tank_kg = 0.0;
  double inventory_kg = 0.0;
  double inventory_rate_kg_s = 0.0;
  double residual_kg_s = 0.0;        // in - out - dM/dt this tick
  double mean_pressure_pa = 0.0;
  double mean_temperature_k = 0.0;
  int window_count = 0;
  std::array<WindowResult, kMaxWindows> windows{};
  bool decision_enabled = false;     // needs the segment's nominal flow
  DecisionResult decision;
  uint8_t point_dq = 0;              // union of PointDq flags of the segment's points
  int points_unusable = 0;           // points missing, stale, bad or failing a check
  bool rupture = false;              // fast-path condition this tick
  RuptureStatus rupture_status;      // the fast path's signals (rupture.h)
  bool transient = false;            // an operating change was seen at this tick's block end
  bool leak_like = false;            // the ends show a leak's signature (not an operator's change)
  double friction_scale = 1.0;       // learnt measured/predicted friction (location)
  LeakLocation location;
  std::array<AlarmState, kAlarmTypeCount> alarms{};  // by AlarmType

  std::string ToString() const;  // one line, for logs and test failures
};

class Monitor {
 public:
  Monitor();
  ~Monitor();
  Monitor(const Monitor&) = delete;
  Monitor& operator=(const Monitor&) = delete;

  struct Options {
    // The leak decision (detector bank, false-alarm budget, learning).
    DecisionOptions decision;
    // Plausibility checks on every reading (range, rate of change, flatline).
    DataQualityOptions data_quality;
    RuptureOptions rupture;
    GradientLocateOptions locate;
    // Wave-arrival location of a rupture (locate.h), used when the ticks are
    // at most max_sample_interval_s apart; the drop threshold is set per
    // segment from the Joukowsky drop of half the rupture threshold.
    OnsetOptions wave_onset = {10.0e3, 5, 2, 2, 5, 1.0};
    WaveLocateOptions wave_locate;
    // Time constant of the low-pass filter on the cumulative imbalance ahead
    // of the decision, s.
    double decision_inventory_filter_s = 300.0;
    // After the filter (re)starts (the first balance, or the first after a
    // gap) the decision ignores this long of its output: the filter starts
    // from zero while C carries the noise of the inventory it started from
    // (one tank gauge reading can be a tonne), which the filter would pass on
    // as a decaying false shortfall. Three time constants leave exp(-3) = 5 %
    // of it. The rupture fast path is not affected.
    double decision_settle_s = 900.0;
    // An operating change: block-to-block step of the inlet flow beyond this
    // fraction of nominal flow, or of an end pressure beyond this, Pa. A
    // step whose signature at the line ends is a leak's (rupture.h,
    // RuptureStatus::LeakLike at transient_flow_fraction of nominal flow) is
    // not an operating change: the leak's own consequences (a pump running
    // out along its curve, pressures falling) must not hold the detectors.
    double transient_flow_fraction = 0.02;
    double transient_pressure_pa = 0.5e5;
    // How long the detectors are held after an operating change: this many
    // pressure-wave crossings of the segment (L / a), and at least
    // transient_min_hold_s, at most transient_max_hold_s (the decision
    // filter's settling bounds the useful hold from above).
    double transient_hold_crossings = 6.0;
    double transient_min_hold_s = 300.0;
    double transient_max_hold_s = 900.0;
    // A step of the inlet flow beyond this fraction of nominal flow (a
    // restart after a shut-in, a trip) holds for transient_max_hold_s: the
    // line-pack error such a change leaves decays with the decision filter
    // (300 s), not with the waves.
    double transient_large_fraction = 0.25;
    // Shut-in watch: the segment is blocked in when every boundary meter
    // reads at most this fraction of nominal flow.
    double shut_in_flow_fraction = 0.005;
    // One alarm of each type per segment (ISA-18.2 states, alarm.h). Leak and
    // rupture alarms latch: they need an acknowledgement even if the
    // condition goes away.
    AlarmOptions leak_alarm = {true, AlarmPriority::kHigh, kReturnToNormalHold_s, kMaxShelve_s};
    AlarmOptions rupture_alarm = {true, AlarmPriority::kUrgent, kReturnToNormalHold_s, kMaxShelve_s};
    AlarmOptions data_quality_alarm = {false, AlarmPriority::kLow, kReturnToNormalHold_s, kMaxShelve_s};
    AlarmOptions unavailable_alarm = {false, AlarmPriority::kMedium, kReturnToNormalHold_s, kMaxShelve_s};
    bool IsValid(std::string* why) const;
  };

  // Builds density tables, reach grids, windows and the threshold table. The
  // site must outlive the monitor. Returns false with the reason.
  bool Init(const Site& site, std::string* why) { return Init(site, Options{}, why); }
  bool Init(const Site& site, const Options& options, std::string* why);

  // Forgets every reading and all history (held values, filters, windows)
  // but keeps the compiled tables: the state right after Init.
  void Reset();

  FeedStatus Feed(const Reading& r) { return aligner_.Feed(r); }
  // Balances every segment at tick time t (seconds since the epoch).
  // Ticks must increase; a tick not after the previous one is ignored.
  // Allocates nothing.
  void Advance(double t);

  // Seeds a segment's learnt residual statistics (from a tuning file):
  // block bias and standard deviation (kg/s) and lag-one autocorrelation.
  // False if the segment has no decision stage (no nominal flow).
  bool SeedDecision(int segment, double bias_kg_s, double sigma_kg_s, double phi,
                    double inventory_rate_kg_s = kNaN, double inventory_rate_sigma_kg_s = kNaN);

  // Alarm events, oldest first, from an internal ring of kEventRingSize (the
  // oldest are overwritten and counted when nobody drains it), unless a sink
  // was set: then every event goes to the sink as it happens.
  static constexpr std::size_t kEventRingSize = 1024;
  bool PopEvent(AlarmEvent* out) { return ring_.Pop(out); }
  uint64_t events_overwritten() const { return ring_.overwritten(); }
  void SetEventSink(AlarmEventSink* sink) { forward_.external = sink; }
  uint64_t next_sequence() const { return sequence_.peek(); }

  // An operator or design command on one alarm, applied at time t.
  AlarmResult Command(int segment, AlarmType type, AlarmCommand command, double t, double duration_s,
                      std::string_view user);
  // After an operator has dealt with a leak alarm: restarts the segment's
  // detectors. `false_alarm` true lets the learning take in the blocks of the
  // excursion (it was normal operation); false drops them (it was a leak).
  bool ResetLeakDetectors(int segment, bool false_alarm);

  const Alarm& alarm(int segment, AlarmType type) const {
    return alarms_[static_cast<size_t>(segment) * kAlarmTypeCount + static_cast<size_t>(type)];
  }

  // Alarm states, sequence counter and learnt values as a versioned JSON
  // document ("holdfast-state/1"); the caller stores it (atomically).
  std::string SaveState() const;
  // Restores what SaveState wrote for the same site. On error nothing changes.
  bool RestoreState(const std::string& blob, std::string* why);

  int segment_count() const { return static_cast<int>(segments_.size()); }
  const SegmentTick& segment(int i) const { return segments_[i].tick; }
  const SegmentInventory& inventory(int i) const { return segments_[i].inventory; }
  const AlignerCounters& counters() const { return aligner_.counters(); }
  const Aligner& aligner() const { return aligner_; }
  const Site& site() const { return *site_; }
  uint64_t tick_count() const { return ticks_; }

 private:
  struct SegmentRuntime {
    const SegmentSpec* spec = nullptr;
    SegmentInventory inventory;
    SegmentBalance balance;
    SegmentDecision decision;
    bool decision_enabled = false;
    std::vector<MeterFlow> flows;
    std::vector<double> signed_flow;  // kg/s, + into the control volume
    double standard_density_kg_m3 = 0.0;
    const DensityTable* table = nullptr;
    SegmentTick tick;
    // End transmitters (first and last pressure gauge) and block averages.
    std::vector<int> points;  // the segment's own points
    double dq_since_s = kNaN, unavailable_since_s = kNaN;  // on-delay clocks
    double cumulative_kg = 0.0, cumulative_filtered_kg = 0.0;
    double filter_dt = -1.0, filter_gain = 0.0;
    double filter_start_s = 0.0;  // when the filter last (re)started
    bool filter_running = false;
    int p_first = -1, p_last = -1;
    double block_dt = 0.0, block_p_first = 0.0, block_p_last = 0.0, block_in = 0.0;
    std::vector<double> block_lateral;  // per meter, kg s
    double friction_scale = 1.0;
    int friction_blocks = 0;
    bool have_prev_block = false;
    double prev_block_q_in = 0.0, prev_block_p0 = 0.0, prev_block_p1 = 0.0;
    // Sums of block means since a leak hypothesis formed (location).
    int leak_blocks = 0;
    double leak_p0 = 0.0, leak_p1 = 0.0, leak_q_in = 0.0;
    std::vector<double> leak_lateral;
    std::vector<double> scratch_lateral;  // per meter, kg/s (rupture location)
    std::vector<PressureSample> wave_in, wave_out;  // rupture look-back pressures (wave-arrival location)
    double wave_speed_m_s = 0.0;      // L / sum(L_i / a_i) between the end transmitters
    GradientLocateInput locate_input;   // reused: laterals reserved at Init
    RuptureDetector rupture;
    int rupture_ready = 0;            // 1 when the detector could be built (decision and end transmitters)
    double leak_like_until_s = -1e300;  // a leak-like change was seen: no operating-change hold until then
    double transient_hold_s = 900.0;  // per segment, from its wave crossing time
    double inventory_offset_kg = 0.0; // steps of the inventory from a change of its sources
    double shut_in_since_s = kNaN;    // blocked in since (NaN: flowing)
  };
  struct ForwardSink final : AlarmEventSink {
    AlarmEventRing<kEventRingSize>* ring = nullptr;
    AlarmEventSink* external = nullptr;
    void OnAlarmEvent(const AlarmEvent& e) override {
      if (external) external->OnAlarmEvent(e); else ring->OnAlarmEvent(e);
    }
  };
  void EndBlock(SegmentRuntime& s, double t);
  void Locate(SegmentRuntime& s, double t, double inlet_kg_s, double p_first, double p_last, double n_samples,
              const double* lateral_kg_s, double leak_kg_s);
  void UpdateRupture(SegmentRuntime& s, double t, bool valid, double lateral_out_kg_s, double inlet_kg_s,
                     double outlet_kg_s);
  double FrictionScale(const SegmentRuntime& s) const;
  void UpdateAlarms(SegmentRuntime& s, int index, double t);
  bool LocateByWaves(SegmentRuntime& s, double t);
  void TickSegment(SegmentRuntime& s, double t, double dt);
  bool InitSegments(std::string* why);

  const Site* site_ = nullptr;
  Aligner aligner_;
  std::vector<std::unique_ptr<DensityTable>> tables_;  // one per fluid
  Options options_;
  CusumThresholdTable thresholds_;
  SequenceCounter sequence_;
  AlarmEventRing<kEventRingSize> ring_;
  ForwardSink forward_;
  std::vector<Alarm> alarms_;  // kAlarmTypeCount per segment
  std::vector<SegmentRuntime> segments_;
  double last_t_ = 0.0, first_t_ = 0.0;
  bool started_ = false;
  uint64_t ticks_ = 0;
};

}  // namespace holdfast
