// Instrument models for the simulator: what a field transmitter and its
// telemetry do to the true value before it reaches a readings file. Noise,
// calibration bias, drift, quantisation, sampling, report by exception with a
// heartbeat, latency, timestamp jitter, dropouts, flatlines (a stuck
// transmitter), quality flags and spikes.
//
// Deterministic: every random number comes from std::mt19937_64 (its output
// sequence is fixed by the C++ standard) through the explicit transforms
// below, never through the standard library's distributions, whose
// algorithms differ between implementations. Each point draws from its own
// streams, seeded from the scenario seed and the point id, so adding a point
// does not change the readings of the others.
#pragma once

#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "holdfast/reading.h"

namespace holdfast::sim {

// SplitMix64 (Steele, Lea & Flood 2014): a well-mixed 64-bit value from a seed.
uint64_t SplitMix64(uint64_t x);
// Seed of a named stream: SplitMix64 of the scenario seed combined with the
// FNV-1a hash of the name ("noise/CF-PT-101").
uint64_t StreamSeed(uint64_t seed, const std::string& name);

class Rng {
 public:
  explicit Rng(uint64_t seed = 0) : gen_(seed) {}
  // Uniform on [0, 1) from the top 53 bits of one draw.
  double Uniform();
  // Standard normal deviate by the Marsaglia & Bray (1964) polar method;
  // the second deviate of each pair is kept for the next call.
  double Normal();

 private:
  std::mt19937_64 gen_;
  bool has_spare_ = false;
  double spare_ = 0.0;
};

struct TimeWindow {
  double from_s = 0.0;  // since the scenario start; [from, to)
  double to_s = 0.0;
  bool Contains(double t) const { return t >= from_s && t < to_s; }
};

struct QualityWindow {
  TimeWindow window;
  Quality quality = Quality::kBad;
};

struct Spike {
  double at_s = 0.0;  // the first sample at or after this time carries it
  double size = 0.0;  // point unit
};

// One instrument's error model. Values are in the point's own unit; the
// *_fraction fields are fractions of the reading (flow meters).
struct InstrumentSpec {
  bool enabled = true;
  double sample_period_s = 1.0;
  double phase_s = 0.0;  // first sample at phase, then every period
  double noise = 0.0;    // one sigma, independent sample to sample
  double noise_fraction = 0.0;
  double bias = 0.0;     // fixed offset (when not drawn)
  double bias_fraction = 0.0;
  // Bias drawn once from N(0, sigma) with the point's bias stream, when > 0
  // (the default: the point's declared systematic accuracy).
  double bias_draw_sigma = 0.0;
  double bias_draw_sigma_fraction = 0.0;
  // Wandering error: a first-order autoregressive (AR(1)) process
  // w_k = phi w_(k-1) + sqrt(1 - phi^2) e_k, e_k ~ N(0, 1), started from its
  // stationary law, times a sigma (wander, point unit, plus wander_fraction of
  // the reading): stationary variance sigma^2, lag-one autocorrelation phi
  // per sample (Box & Jenkins 1976, ch. 3). Off when wander_phi is 0. Drawn
  // on its own stream ("wander/ID"), so the other errors do not change.
  double wander = 0.0;
  double wander_fraction = 0.0;
  double wander_phi = 0.0;  // per sample, in [0, 1)
  // Flows whose magnitude is below this read exactly 0 (a meter's low-flow
  // cut-off), point unit; 0: none.
  double low_flow_cutoff = 0.0;
  double drift_per_day = 0.0;  // grows linearly from the start
  double drift_fraction_per_day = 0.0;
  double quantum = 0.0;        // resolution; 0 = none
  // Report by exception: send when the value has moved by more than the
  // deadband since the last report, or when heartbeat_s has passed. Both 0:
  // every sample is sent.
  double deadband = 0.0;
  double heartbeat_s = 0.0;
  double latency_s = 0.0;         // arrival delay
  double latency_spread_s = 0.0;  // plus uniform [0, spread)
  double jitter_s = 0.0;          // timestamp error, uniform (-jitter, +jitter)
  std::vector<TimeWindow> dropouts;   // nothing is sent
  std::vector<TimeWindow> flatlines;  // the value freezes (still sent, as good)
  std::vector<QualityWindow> quality_windows;
  std::vector<Spike> spikes;
  double spike_rate_per_h = 0.0;  // random spikes of +-spike_size
  double spike_size = 0.0;
  int decimals = -1;  // output decimals; -1: from the quantum, else 6

  bool IsValid(std::string* why) const;
};

// A reading as produced, before it is written: arrival decides the order of
// the file, time is the (jittered) timestamp it carries.
struct SimReading {
  double arrival_s = 0.0;
  double time_s = 0.0;
  double value = 0.0;
  int32_t point = -1;
  Quality quality = Quality::kGood;
  uint32_t sequence = 0;  // per point, for a stable order
};

class Instrument {
 public:
  // `seed` is the scenario seed; `id` names the streams.
  // `seed` drives the noise, timing and wander; `bias_seed` the systematic
  // errors (the same meters keep the same biases from run to run).
  void Init(int point, const std::string& id, const InstrumentSpec& spec, uint64_t seed, uint64_t bias_seed,
            double duration_s);
  void Init(int point, const std::string& id, const InstrumentSpec& spec, uint64_t seed, double duration_s) {
    Init(point, id, spec, seed, seed, duration_s);
  }

  bool enabled() const { return spec_.enabled; }
  // Time of the next sample due (since the start); infinity when done.
  double next_sample_s() const { return next_s_; }
  // Takes the sample due at next_sample_s() from the true value there (point
  // unit) and moves on. Returns true and fills `out` when a reading is sent.
  bool Sample(double true_value, SimReading* out);

  const InstrumentSpec& spec() const { return spec_; }
  double bias() const { return bias_; }                    // actual, point unit
  double bias_fraction() const { return bias_fraction_; }  // actual, fraction
  int decimals() const { return decimals_; }
  uint64_t samples() const { return samples_; }
  uint64_t sent() const { return sent_; }
  // Upper bound of the readings this instrument can produce (for reserving).
  uint64_t MaxReadings() const;

 private:
  InstrumentSpec spec_;
  int point_ = -1;
  Rng noise_, timing_, wander_rng_;
  double wander_state_ = 0.0;  // the AR(1) process, unit variance
  double bias_ = 0.0, bias_fraction_ = 0.0;
  double duration_s_ = 0.0;
  double next_s_ = 0.0;
  uint64_t k_ = 0;
  int decimals_ = 6;
  size_t next_spike_ = 0;
  bool have_last_ = false, in_flatline_ = false;
  double last_measured_ = 0.0, frozen_ = 0.0;
  bool have_sent_ = false;
  double last_sent_value_ = 0.0, last_sent_s_ = 0.0;
  uint64_t samples_ = 0, sent_ = 0;
};

}  // namespace holdfast::sim
