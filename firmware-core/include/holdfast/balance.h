// Mass balance of one control volume.
//
// Each tick: residual r = sum(in) - sum(out) - dM/dt (kg/s). Window
// imbalances R_W = integral(in - out) dt - (M(t) - M(t - W)) are kept as
// running sums over a ring of time buckets: O(1) per tick, fixed memory.
// A window covers its last `buckets` complete buckets plus the bucket in
// progress, so its covered span lies in [W, W + W/buckets); the covered span
// is reported and used for the rates.
//
// Uncertainty of R_W (one sigma), from the instrument model (cf. API RP 1130
// on sensitivity; API Publ. 1149 on instrument uncertainty and leak size):
//   meters, random:     sigma_r,m * |Q_m| * sqrt(dt * W)
//   meters, systematic: sigma_s,m * |Q_m| * W           (fixed over the window)
//   inventory:          sqrt(2 * s_P^2 + 2 * s_T^2 * (1 - d^n))
// with s_P the pressure/level part of one inventory state (independent tick
// to tick), s_T the temperature part after the first-order filter whose
// per-tick decay is d, and n the ticks in the window. Minimum detectable leak
// at one-sided confidence c:  q_min(W) = z_c * sigma_R(W) / W.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <vector>

#include "holdfast/site.h"

namespace holdfast {

struct WindowResult {
  double window_s = 0.0;       // nominal
  double covered_s = 0.0;      // time actually covered by valid ticks
  double imbalance_kg = 0.0;   // in - out - change of inventory (positive = missing mass)
  double imbalance_kg_s = 0.0; // imbalance_kg / covered_s
  double sigma_kg = 0.0;       // one-sigma uncertainty of imbalance_kg
  double mdl_kg_s = 0.0;       // minimum detectable leak at the segment's confidence
  bool full = false;           // covered_s >= window_s
};

// What the balance needs about each boundary meter, per tick.
struct MeterFlow {
  double flow_kg_s = 0.0;       // signed: + into the control volume
  double random_frac = 0.0;     // one sigma, fraction of reading, per sample
  double systematic_frac = 0.0; // one sigma, fraction of reading
};

class SegmentBalance {
 public:
  struct Options {
    std::vector<double> windows_s = {300.0, 3600.0, 86400.0};  // at most kMaxWindows
    int buckets_per_window = 60;  // ring length per window (>= 4)
    double confidence = 0.95;     // one-sided, for q_min
    bool IsValid(std::string* why) const;
  };

  bool Init(const Options& options, std::string* why);

  // One tick. `valid` false skips the tick: nothing is added to the windows
  // and the next valid tick re-baselines the inventory (the gap does not
  // produce a false imbalance). Allocates nothing.
  void Step(double t, bool valid, const MeterFlow* meters, int meter_count, double inventory_kg,
            double sigma_inventory_p_kg, double sigma_inventory_t_kg, double temperature_decay);

  double residual_kg_s() const { return residual_kg_s_; }
  double inventory_rate_kg_s() const { return inventory_rate_kg_s_; }
  double net_flow_kg_s() const { return net_flow_kg_s_; }
  // True when this tick's residual is a real difference (not a first or re-baselined tick).
  bool has_difference() const { return has_difference_; }
  int window_count() const { return static_cast<int>(windows_.size()); }
  const WindowResult& window(int i) const { return results_[i]; }
  double z() const { return z_; }

  // Forgets all history (windows emptied, inventory re-baselined).
  void Restart();

 private:
  struct Ring {
    double bucket_s = 0.0;
    std::vector<double> imbalance_kg;  // per complete bucket
    std::vector<double> duration_s;
    std::vector<int32_t> ticks;
    int head = 0;          // next slot to overwrite
    int filled = 0;        // complete buckets held
    int64_t current_index = INT64_MIN;  // bucket number (floor(t / bucket_s)) in progress
    double cur_imbalance_kg = 0.0, cur_duration_s = 0.0;
    int32_t cur_ticks = 0;
    double sum_imbalance_kg = 0.0, sum_duration_s = 0.0;  // complete buckets
    int64_t sum_ticks = 0;
    int pushes_since_resum = 0;
    double pow_decay = -1.0, pow_value = 1.0;  // cache of decay^pow_ticks
    int64_t pow_ticks = -2;
  };
  void Push(Ring& ring);
  void Advance(Ring& ring, int64_t index);

  Options options_;
  double z_ = 1.6448536269514722;
  std::vector<Ring> windows_;
  std::array<WindowResult, kMaxWindows> results_{};
  bool have_prev_ = false;
  double prev_t_ = 0.0, prev_net_kg_s_ = 0.0, prev_inventory_kg_ = 0.0;
  double residual_kg_s_ = 0.0, inventory_rate_kg_s_ = 0.0, net_flow_kg_s_ = 0.0;
  bool has_difference_ = false;
};

// Standard normal quantile: Newton iteration on Phi(x) = erfc(-x/sqrt 2)/2,
// to full double precision for 1e-300 < p < 1 - 1e-16.
double NormalQuantile(double p);

}  // namespace holdfast
