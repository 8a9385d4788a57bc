// Offline tuning from leak-free data: the block statistics each segment's
// decision stage sees (bias, sigma, phi), and the figures derived from them
// (the bank at the false-alarm budget, the minimum detectable leak against
// detection time). `holdfast tune` and `holdfast evaluate` both use it.
//
//   holdfast::Tuner tuner;
//   tuner.Init(site, monitor_options, &why);
//   ... RunReplay(&monitor, &source, site.tick_s, {.on_tick = [&](double t) {
//         tuner.Tick(monitor, t); return true; }});
//   holdfast::TuningFile file;
//   std::vector<holdfast::TunerSegmentReport> reports;
//   tuner.Finish(&file, &reports);
//
// Each segment's per-tick decision input (DecisionInput, tuning_file.h: the
// change of the low-pass filtered cumulative imbalance) is summed into blocks
// exactly as the decision stage forms them: a block starts after the previous
// one, and a tick without a balance drops the block in progress. Blocks
// within six filter time constants of a filter restart are left out.
//
// The block means are estimated robustly: bias by the median, sigma by
// 1.4826 * MAD (the normal-consistent median absolute deviation, Hampel 1974,
// J. Amer. Statist. Assoc. 69, from memory; the constant is 1/Phi^-1(3/4)),
// phi by the lag-one autocorrelation of consecutive blocks with deviations
// clipped at 3 sigma (as the decision stage clips its learning).
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "holdfast/decision.h"
#include "holdfast/monitor.h"
#include "holdfast/site.h"
#include "tuning_file.h"

namespace holdfast {

// Plain statistics of one series of block means.
struct BlockStatistics {
  double median = 0.0, sigma = 0.0;  // median and 1.4826 MAD (sd when the MAD is 0)
  double mean = 0.0, sd = 0.0;
  double phi = 0.0;                  // lag one, clipped deviations, consecutive blocks only
  int64_t pairs = 0;
};

// What the tuner found beside the tuning itself, for reports.
struct TunerSegmentReport {
  std::string not_tuned;          // empty when tuned; otherwise why not
  BlockStatistics raw;            // the plain balance residual, for comparison
  double inflation = 1.0;         // (1 + phi) / (1 - phi)
  double unavailable_s = 0.0;     // time without a balance
  int64_t settling_blocks = 0;    // left out while the decision input's filter settled
  int64_t transient_blocks = 0;   // block inventory rate beyond kTransientSigmas spreads
  double drift_z = 0.0;           // mean of the second half against the first, standard errors
  double drift_kg_s = 0.0;
};

class Tuner {
 public:
  // Detection times the minimum detectable leak is stated for.
  static constexpr double kDetectionTimes_s[] = {600.0, 3600.0, 6.0 * 3600.0, 24.0 * 3600.0};
  // Fewer blocks than this and a segment is not tuned.
  static constexpr int64_t kMinBlocks = 30;
  // A step between the halves of the data beyond this many standard errors
  // is worth a warning (two-sided, 0.27 % of leak-free runs if normal).
  static constexpr double kDriftWarnZ = 3.0;

  // The options of the monitor the ticks come from: the decision's block
  // length, budget and bank, and the filter ahead of it.
  bool Init(const Site& site, const Monitor::Options& options, std::string* why);

  // After every Monitor::Advance(t) of a monitor on the same site.
  void Tick(const Monitor& monitor, double t);

  // Estimates every segment. Tuned segments go to file->segments (in site
  // order); reports has one entry per site segment. False when no segment
  // could be tuned (each report says why).
  bool Finish(TuningFile* file, std::vector<TunerSegmentReport>* reports) const;

  uint64_t ticks() const { return ticks_; }

 private:
  struct Block {
    double start_s = 0.0, end_s = 0.0;
    double r_kg_s = 0.0;      // mean imbalance the decision sees
    double inv_kg_s = 0.0;    // mean inventory rate
    double raw_r_kg_s = 0.0;  // mean plain balance residual
  };
  struct Builder {
    Builder(double filter_s, double settle_s) : input(filter_s, settle_s) {}
    DecisionInput input;
    double filter_start_s = 0.0;
    bool in_gap = false;  // the previous tick was not valid (false at first: the first tick starts a gap)
    double kg = 0.0, raw_kg = 0.0, dt = 0.0, inv_kg = 0.0, start_s = 0.0;
    std::vector<Block> blocks;
    int64_t dropped = 0, settling = 0;
    double unavailable_s = 0.0;
  };
  void TickSegment(Builder* b, const SegmentTick& t, double dt) const;
  bool Estimate(const SegmentSpec& spec, const Builder& b, SegmentTuning* s, TunerSegmentReport* x) const;

  const Site* site_ = nullptr;
  DecisionOptions decision_;
  double filter_s_ = 300.0;
  std::vector<Builder> builders_;
  bool ticked_ = false;
  double prev_tick_s_ = 0.0;
  uint64_t ticks_ = 0;
};

// Robust helpers, shared with the evaluation.
double MedianOf(std::vector<double> v);                            // NaN when empty
double RobustSigmaOf(const std::vector<double>& v, double median);  // 1.4826 MAD

}  // namespace holdfast
