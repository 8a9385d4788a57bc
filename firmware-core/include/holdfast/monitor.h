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
#include "holdfast/balance.h"
#include "holdfast/decision.h"
#include "holdfast/inventory.h"
#include "holdfast/reading.h"
#include "holdfast/site.h"

namespace holdfast {

enum class SegmentStatus : uint8_t {
  kStarting,     // balance valid but the shortest window is not yet full
  kNormal,       // every input fresh, balance valid
  kDegraded,     // balance computed, but some input is stale or clamped
  kUnavailable,  // a boundary meter or a pressure transmitter is missing or stale
};
const char* SegmentStatusName(SegmentStatus s);

// Flags beyond InventoryFlag (inventory.h), same bit field.
enum SegmentFlag : uint32_t {
  kSegMeterMissing = 1u << 16,  // a boundary meter never reported
  kSegMeterStale = 1u << 17,    // a boundary meter's held value is stale or bad
  kSegMeterConditions = 1u << 18,  // a line-volume meter's P or T is missing
};
// Comma-separated names of the set flags ("" when none).
std::string SegmentFlagNames(uint32_t flags);

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
    bool IsValid(std::string* why) const { return decision.IsValid(why); }
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
  bool SeedDecision(int segment, double bias_kg_s, double sigma_kg_s, double phi);

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
  };
  void TickSegment(SegmentRuntime& s, double t, double dt);
  bool InitSegments(std::string* why);

  const Site* site_ = nullptr;
  Aligner aligner_;
  std::vector<std::unique_ptr<DensityTable>> tables_;  // one per fluid
  Options options_;
  CusumThresholdTable thresholds_;
  std::vector<SegmentRuntime> segments_;
  double last_t_ = 0.0;
  bool started_ = false;
  uint64_t ticks_ = 0;
};

}  // namespace holdfast
