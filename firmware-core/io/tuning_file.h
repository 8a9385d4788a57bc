// Tuning files ("holdfast-tuning/1"): the block statistics of each segment,
// estimated offline from leak-free data by `holdfast tune`, and the figures
// derived from them (thresholds at the false-alarm budget, minimum detectable
// leak against detection time). The decision stage is seeded from them with
// ApplyTuning, so that a monitor starts from learnt statistics instead of
// learning them on the live line. The format is documented in config/TUNING.md.
//
//   {
//     "format": "holdfast-tuning/1",
//     "site": "...", "data": "...", "until": null,
//     "false_alarm_interval_s": 7776000, "detectors_in_bank": 5, "inventory_filter_s": 300,
//     "segments": {
//       "QS-1": {"block_s": 60, "bias_kg_s": ..., "sigma_kg_s": ..., "phi": ..., ...}
//     }
//   }
#pragma once

#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "holdfast/monitor.h"
#include "holdfast/site.h"

namespace holdfast {

// The format identifier this build reads and writes.
constexpr const char* kTuningFormat = "holdfast-tuning/1";

// One detector of the segment's bank at the file's false-alarm budget.
struct TuningDetector {
  double target_kg_s = 0.0;       // leak size the detector is tuned for
  double target_fraction = 0.0;   // the same, as a fraction of nominal flow
  double k = 0.0;                 // reference value, sigma_eff units: target / (2 sigma_eff)
  double h = 0.0;                 // decision interval for the per-detector ARL
  double arl0_blocks = 0.0;       // in-control ARL at (h, k), computed back from h
};

// The smallest step leak whose expected CUSUM detection delay is within
// detection_s (a CUSUM tuned to that leak, k = shift / 2, threshold from the
// per-detector ARL). NaN leak when no leak is detected that fast (the time is
// shorter than about one block).
struct TuningDetection {
  double detection_s = 0.0;
  double leak_kg_s = std::numeric_limits<double>::quiet_NaN();
  double leak_fraction = std::numeric_limits<double>::quiet_NaN();  // of nominal flow; NaN without one
  double shift_sigma = std::numeric_limits<double>::quiet_NaN();    // leak / sigma_eff
  double delay_s = std::numeric_limits<double>::quiet_NaN();        // expected delay of that leak
};

// Per segment. The first group is what ApplyTuning seeds and what the
// estimates rest on; the second is derived and informational.
struct SegmentTuning {
  std::string segment;               // segment id (the key in the file)
  double block_s = 60.0;             // length of the residual blocks
  double bias_kg_s = 0.0;            // median block imbalance as the detectors see it (robust; seeded)
  double bias_mean_kg_s = 0.0;       // plain mean, for comparison
  double sigma_kg_s = 0.0;           // 1.4826 * MAD of the block imbalance (robust; seeded)
  double sigma_sd_kg_s = 0.0;        // plain standard deviation, for comparison
  double phi = 0.0;                  // lag-one autocorrelation of consecutive blocks, in [-0.9, 0.9]
  double inventory_rate_kg_s = 0.0;  // median block inventory rate
  double inventory_rate_sigma_kg_s = 0.0;  // its 1.4826 * MAD (transient signature)
  int64_t blocks = 0;                // blocks used
  int64_t blocks_dropped = 0;        // blocks dropped: an unavailable tick inside
  int64_t block_pairs = 0;           // pairs of consecutive blocks behind phi
  double first_time_s = 0.0;         // start of the first block used (epoch s)
  double last_time_s = 0.0;          // end of the last block used (epoch s)

  double nominal_flow_kg_s = std::numeric_limits<double>::quiet_NaN();
  double sigma_eff_kg_s = 0.0;       // sigma * sqrt((1 + phi) / (1 - phi))
  double arl0_blocks = 0.0;          // per-detector in-control ARL from the budget
  std::vector<TuningDetector> detectors;       // the bank (empty without nominal flow)
  double bank_false_alarm_interval_s = std::numeric_limits<double>::quiet_NaN();  // union bound
  std::vector<TuningDetection> detection;      // minimum detectable leak vs detection time
};

struct TuningFile {
  std::string site;                  // site name (informational)
  std::string data;                  // readings file the estimates came from (informational)
  double until_s = std::numeric_limits<double>::quiet_NaN();  // --until, NaN when not given
  double false_alarm_interval_s = 90.0 * 86400.0;  // the budget the derived figures use
  int detectors_in_bank = 5;
  // Time constant of the low-pass filter ahead of the decision
  // (Monitor::Options::decision_inventory_filter_s) the blocks were formed with.
  double inventory_filter_s = 300.0;
  std::vector<SegmentTuning> segments;

  const SegmentTuning* Find(const std::string& segment_id) const;  // nullptr if absent
};

// Reads and checks a tuning file against `site`. On failure returns false
// and sets *why to every problem found, one per line, each naming the file
// and the JSON pointer:
//   "tuning.json:/segments/QS-9: no segment \"QS-9\" in the site"
//   "tuning.json:/format: expected \"holdfast-tuning/1\" (got \"holdfast-tuning/2\")"
//   "tuning.json:14:3: parse error: ..."
// Unknown keys are problems (they are typos in a hand-edited file). Never throws.
bool LoadTuningFile(const std::string& path, const Site& site, TuningFile* file, std::string* why);

// Writes atomically: to path + ".tmp", flushed and fsync'ed, renamed over
// `path`, then the directory fsync'ed, so a crash leaves either the old file
// or the new one, never a torn one. Numbers are written to 7 significant
// digits. Returns false with the reason (and removes the .tmp).
bool WriteTuningFile(const std::string& path, const TuningFile& file, std::string* why);

// Seeds the decision stage of every segment in the file through
// Monitor::SeedDecision (bias, sigma, phi). Segments without a decision stage
// (no nominal flow) are skipped. The file's block_s and inventory_filter_s
// must be the monitor's DecisionOptions::block_s and
// Options::decision_inventory_filter_s: the monitor does not expose its
// options, so this is not checked here. False, with the reason, for a segment id the monitor's site
// does not have or values the monitor refuses.
bool ApplyTuning(const TuningFile& file, Monitor* monitor, std::string* why);

}  // namespace holdfast

namespace holdfast {

// The per-tick input the monitor gives a segment's decision stage, rebuilt
// from the segment's SegmentTick stream as Monitor::TickSegment forms it: the
// cumulative imbalance C = sum(residual * dt) through a first-order low-pass
// filter of time constant Monitor::Options::decision_inventory_filter_s, the
// tick's input being the change of the filtered C; both restart at zero on
// every tick without a balance (status unavailable, or the first tick after
// one, which only re-baselines the inventory). `holdfast tune` blocks this
// input, so that the statistics it writes are those of what the detectors
// see. tests/core/tuning_file_test.cc checks it against the monitor's own
// decision stage, bit for bit: if the monitor changes what its decision
// sees, that test fails and this must follow.
class DecisionInput {
 public:
  // filter_s and settle_s: Monitor::Options::decision_inventory_filter_s and
  // decision_settle_s.
  DecisionInput(double filter_s, double settle_s) : filter_s_(filter_s), settle_s_(settle_s) {}
  // One tick of the segment; dt is the time since the previous tick (0 for
  // the first).
  void Tick(const SegmentTick& t, double dt);
  bool valid() const { return valid_; }                 // the decision counts this tick
  double imbalance_kg() const { return imbalance_kg_; }  // 0 when not valid
  double inventory_rate_kg_s() const { return inventory_rate_kg_s_; }  // 0 when not valid

 private:
  double filter_s_, settle_s_;
  double filter_start_s_ = 0.0;
  bool started_ = false, prev_available_ = false, valid_ = false, running_ = false;
  double cumulative_kg_ = 0.0, filtered_kg_ = 0.0;
  double imbalance_kg_ = 0.0, inventory_rate_kg_s_ = 0.0;
};

}  // namespace holdfast
