// Sequential leak decision for one segment.
//
// The balance's per-tick imbalance is gathered into blocks (default 60 s);
// each block mean r is prewhitened and standardised with learnt values,
//     e_t = r_t - bias,  z_t = (e_t - phi e_{t-1}) / (sigma * sqrt(1 - phi^2)),
// where bias, sigma (the blocks' marginal standard deviation) and the lag-one
// autocorrelation phi are slowly adapting, outlier-clipped estimates
// (Huber-style clipping at a few sigma). For AR(1) blocks z is the
// innovation, independent N(0, 1). The learning lags the detectors: a block
// is learnt only once every detector's statistic has been back at zero after
// it (no open leak hypothesis contains it), nothing is learnt while a
// detector is above freeze_ratio * h, and the blocks of an excursion that
// ends in an alarm are not learnt (unless the alarm is reset as false; one
// that clears by itself counts as real). So a building leak is not absorbed
// into the bias, and in control every block is learnt (no selection on its
// value). From a cold start the detectors begin deciding one by one, as the
// learnt bias becomes precise enough for each (kStartBiasErrorFraction).
//
// A bank of one-sided CUSUMs (Page 1954), one per target leak size d_i (as a
// fraction of nominal flow), runs on z with k_i = d_i/(2 sigma_eff), sigma_eff
// = sigma sqrt((1 + phi)/(1 - phi)) the long-run sigma of the blocks (a step
// d shifts z by d/sigma_eff once past its first block), and a
// threshold h_i chosen so that the in-control average run length of each
// detector meets the declared false-alarm budget (Brook & Evans 1972 Markov
// chain; arl.h). The change point of a detector is the last block at which
// its statistic was zero; the leak rate is the mean of (r - bias) since then.
//
// Operating transients (pump starts, valve moves) show as a large block
// inventory rate (or, seen by the monitor, as a step in inlet flow or end
// pressure): for a hold after one (transient_hold_s, or the monitor's from
// the line's wave crossing time) the detector statistics are held and
// learning stops ("reduced sensitivity"). A leak's own consequences are not
// a transient (SetTransientVeto). A leak that starts in a transient is found
// when the hold ends; a rupture by the monitor's fast path.
#pragma once

#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <cstdint>
#include <string>
#include <vector>

namespace holdfast {

constexpr int kMaxDetectors = 8;
constexpr double kTransientHold_s = 900.0;      // reduced sensitivity after a transient
constexpr double kTransientSigmas = 5.0;        // |inventory rate| beyond this many sd = transient
constexpr int kMaxHeldBlocks = 2048;            // most blocks the learning may lag the detectors
                                                // (then the oldest is learnt; while frozen, no more are held)
// A detector starts deciding once the learnt bias's standard error,
// sigma_lr / sqrt(n) for n learnt blocks, is at most this fraction of its
// reference value k (both in long-run sigmas): n >= 1 / (f k)^2, capped at
// the learning's effective sample size 2 * time constant / block. Seed()
// starts them all.
constexpr double kStartBiasErrorFraction = 0.25;

struct DecisionOptions {
  // Leak sizes the bank is tuned for, as fractions of the segment's nominal flow.
  std::vector<double> target_fractions = {0.005, 0.01, 0.02, 0.05, 0.20};
  // Declared false-alarm budget: mean time between false leak alarms per segment.
  double false_alarm_interval_s = 90.0 * 86400.0;
  // Length of the residual blocks the detectors see.
  double block_s = 60.0;
  // Time constant of the bias, variance and autocorrelation learning.
  double learning_time_constant_s = 2.0 * 86400.0;
  // Learning only (no decisions) for this long after start.
  double warmup_s = 3600.0;
  // Residuals are clipped at this many sigma before they update the learning.
  double clip_sigmas = 3.0;
  // Learning freezes while any detector is above this fraction of its
  // threshold (and learns only blocks that every detector has left behind).
  double freeze_ratio = 0.5;
  // Reduced sensitivity after an operating transient (the decision's own
  // inventory-rate test; MarkTransient may give its own duration).
  double transient_hold_s = kTransientHold_s;
  // Time constant of the first-order low-pass filter ahead of the decision
  // (0: none). The leak-rate estimate undoes its lag: the blocks are the
  // increments of F, the filtered cumulative imbalance C, and since
  // dF/dt = (C - F) / tau, C = F + tau dF/dt: the unfiltered change of C
  // since the change point is the blocks' sum plus tau times the change of
  // the block rate (exact for a first-order filter, whenever the leak began).
  double input_filter_s = 0.0;
  // Local volatility of the innovations. The detectors' z is divided by
  // sqrt(max(1, v - (volatility_free_ratio - 1))), where v is an exponentially
  // weighted variance (time constant volatility_time_constant_s) of z clipped
  // at +-volatility_clip_sigmas, taken around its own exponentially weighted
  // mean, so that a leak's lasting shift of the mean does not count and its
  // first large innovation is clipped. In steady operation v stays near 1: its
  // effective sample is about 2 tau / block - 1 = 59 blocks, so in control it
  // has a standard deviation of about sqrt(2/59) = 0.18 and 1.5 is some 2.7 of
  // them, and the detectors see z unchanged; beyond that free margin the
  // scale takes nearly all of the excess (at v = 9 the detectors see a
  // variance of 9 / 8.5). Where the line-pack model is
  // worse than the learnt noise (the hours after a restart while temperature
  // fronts move, pressure settling in a blocked-in line) the innovations
  // grow, and the detectors widen their sigma by what the residual itself
  // shows instead of alarming on model error. 0: off.
  double volatility_time_constant_s = 1800.0;
  double volatility_clip_sigmas = 4.0;
  double volatility_free_ratio = 1.5;

  bool IsValid(std::string* why) const;
};

enum class DecisionState : uint8_t {
  kLearning,     // warming up: estimates forming, no decisions
  kWatching,     // all detectors below half their thresholds
  kSuspect,      // a detector above half its threshold: learning frozen
  kLeak,         // a detector crossed its threshold
  kUnavailable,  // the balance is unavailable: statistics held
};
const char* DecisionStateName(DecisionState s);

struct DetectorStatus {
  double target_kg_s = 0.0;
  double k = 0.0;          // reference value, sigma units
  double h = 0.0;          // threshold, sigma units
  double statistic = 0.0;  // CUSUM S
  double change_point_s = 0.0;
  double sum_kg_s = 0.0;   // sum of (r - bias) since the change point
  int64_t blocks = 0;      // blocks since the change point
  double cp_block_kg_s = 0.0;  // r - bias of the block at the change point (filter-lag correction)
};

struct DecisionResult {
  DecisionState state = DecisionState::kLearning;
  bool reduced_sensitivity = false;  // transient in progress
  int detector_count = 0;
  std::array<DetectorStatus, kMaxDetectors> detectors{};
  int leading = -1;                  // detector with the largest S/h
  double leak_rate_kg_s = 0.0;       // estimate since the change point (leading detector), lag-corrected
  double leak_rate_sigma_kg_s = 0.0; // its one-sigma uncertainty (long-run sigma of the blocks)
  double change_point_s = 0.0;
  double bias_kg_s = 0.0;
  double sigma_kg_s = 0.0;           // block standard deviation (learnt)
  double phi = 0.0;                  // lag-one autocorrelation of blocks
  double arl0_blocks = 0.0;          // per-detector in-control ARL from the budget
  double volatility_scale = 1.0;     // the detectors' sigma is widened by this (>= 1)
  std::string ToString() const;
};

// h(k) for one in-control ARL, tabulated once on a log grid of k (Markov
// chain), then interpolated: threshold lookups never solve anything per tick.
class CusumThresholdTable {
 public:
  bool Build(double arl0_samples, std::string* why);
  double Lookup(double k) const;
  double arl0() const { return arl0_; }

 private:
  double arl0_ = 0.0;
  std::vector<double> log_k_, h_;
};

class SegmentDecision {
 public:
  // `table` must outlive this object (tables are shared between segments
  // with the same budget). nominal_flow_kg_s > 0.
  bool Init(const DecisionOptions& options, double nominal_flow_kg_s, const CusumThresholdTable* table,
            std::string* why);
  // Per tick: `imbalance_kg` is the tick's in - out - dM (balance), dt the
  // tick length, inventory_rate_kg_s the tick's dM/dt. Allocates nothing.
  void Step(double t, double dt, bool valid, double imbalance_kg, double inventory_rate_kg_s);
  const DecisionResult& result() const { return result_; }

  // An operating change seen elsewhere (a step in flow or pressure at the
  // line ends): sensitivity is reduced from now for hold_s (negative: the
  // options' transient_hold_s).
  void MarkTransient(double t, double hold_s = -1.0) {
    transient_until_s_ = std::max(transient_until_s_, t + (hold_s >= 0.0 ? hold_s : options_.transient_hold_s));
  }
  // The caller has evidence that large inventory rates now are a leak's own
  // (the line ends show a leak's signature, rupture.h): while set, the
  // decision's inventory-rate test does not call them a transient.
  void SetTransientVeto(bool veto) { transient_veto_ = veto; }

  // Seeds the learning (from a tuning file): bias, block sigma, phi, and the
  // block inventory rate's mean and sigma behind the transient test. Without
  // the latter (NaN), the transient test waits for 30 blocks of its own.
  void Seed(double bias_kg_s, double sigma_kg_s, double phi,
            double inventory_rate_kg_s = std::numeric_limits<double>::quiet_NaN(),
            double inventory_rate_sigma_kg_s = std::numeric_limits<double>::quiet_NaN());
  // The learnt block inventory rate (transient test): mean and sigma.
  double inventory_rate_kg_s() const { return inv_mean_; }
  double inventory_rate_sigma_kg_s() const { return inv_var_ > 0.0 ? std::sqrt(inv_var_) : 0.0; }

  // Restarts the CUSUMs after an alarm has been handled: detector `index`, or
  // every detector when index < 0. Its statistic, change point (the last
  // block end), leak sum and block count go back to zero, and the state and
  // leading detector are recomputed from the remaining statistics; the
  // learnt values and the block being gathered are untouched. Each detector
  // is then a renewal process, the model behind ArlFromBudget (arl.h).
  // The blocks of a pending alarm's excursion (since the alarming detector's
  // last zero) are dropped from the learning, unless `false_alarm` says the
  // alarm was false: then they are learnt like any in-control block.
  void ResetDetectors(int index = -1, bool false_alarm = false);

 private:
  void EndBlock(double t);
  void EstimateRate(const DetectorStatus& lead);
  void Learn(double r, double inv_rate);

  DecisionOptions options_;
  const CusumThresholdTable* table_ = nullptr;
  double nominal_kg_s_ = 0.0;
  DecisionResult result_;
  double start_s_ = 0.0;
  bool started_ = false;
  // Block accumulation.
  double block_kg_ = 0.0, block_dt_ = 0.0, block_inv_kg_ = 0.0, block_start_s_ = 0.0;
  // Learning state.
  int64_t learnt_blocks_ = 0;
  double mean_ = 0.0, var_ = 0.0, cov1_ = 0.0, prev_dev_ = 0.0;
  double inv_mean_ = 0.0, inv_var_ = 0.0;
  int64_t inv_blocks_ = 0;  // blocks behind inv_mean_ / inv_var_ (its own count: seeding may skip it)
  double transient_until_s_ = -1e300;
  bool transient_veto_ = false;
  bool seeded_ = false;  // Seed() was called: no warm-up
  // Blocks waiting to be learnt, oldest first (a ring of kMaxHeldBlocks):
  // block `index` is learnt once every detector has been at zero at or after
  // it and none is above freeze_ratio * h; the blocks after alarm_from_ (an
  // alarming detector's last zero) wait for the alarm to be handled and are
  // dropped unless it was false. zero_index_[i] is the last block at which
  // detector i was at zero.
  struct HeldBlock {
    int64_t index = 0;
    double r = 0.0, inv_rate = 0.0;
  };
  void LearnOldestHeld();
  void DropHeldAfter(int64_t index);
  std::vector<HeldBlock> held_;
  int held_head_ = 0, held_n_ = 0;
  int64_t block_index_ = 0;
  std::array<int64_t, kMaxDetectors> zero_index_{};
  int64_t alarm_from_ = INT64_MAX;
  uint32_t deciding_ = 0;  // bit i: detector i has started (kStartBiasErrorFraction)
  // Previous block's deviation r - bias, for prewhitening.
  double prev_e_ = 0.0;
  bool has_prev_e_ = false;
  // Exponentially weighted mean and variance of the clipped z (West 1979,
  // weighted incremental form), volatility_time_constant_s.
  double volatility_ = 1.0, volatility_mean_ = 0.0;
};

}  // namespace holdfast
