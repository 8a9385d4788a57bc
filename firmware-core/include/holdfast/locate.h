// Leak location for the decision stage: pure functions, called once a leak
// has been declared (not on every tick).
//
// 1. Pressure-gradient intersection. In steady flow the piezometric head
//    H = P/(rho g) + z falls along the line by Darcy-Weisbach,
//        dH/dx = -f Q|Q| / (2 g D A^2),   Q = mdot / rho,
//    with the Darcy friction factor f from Colebrook & White (1939) or
//    Swamee & Jain (1976) at the local Reynolds number Re = rho V D / mu.
//    A leak at x_L carries the inlet flow upstream of x_L and the outlet flow
//    downstream of it, so the grade line drawn from the inlet transmitter
//    with the inlet flow and the one drawn back from the outlet transmitter
//    with the outlet flow cross at x_L (the classical gradient-intersection
//    method, primer sec. 5; a pressure/flow-monitoring technique in the terms
//    of API RP 1130). Within a section of constant bore and between
//    lateral flows both lines are straight, so the crossing is found exactly,
//    without iteration, by walking the breakpoints.
//
// 2. Negative pressure wave. A sudden leak sends a pressure drop up and down
//    the line at the wave speed a; with arrival times t_in and t_out at the
//    ends of a span of length L the leak is at x = (L + a (t_in - t_out)) / 2
//    from the span's inlet. The arrival times come from DetectPressureDrop.
//
// 3. Nearest landmark, for the message the operator reads.
//
// Units are SI throughout; pressures are absolute; chainages are measured
// from the segment inlet as in SegmentSpec.
#pragma once

#include <string>
#include <vector>

#include "holdfast/pipe.h"
#include "holdfast/site.h"

namespace holdfast {

// ---------------------------------------------------------------------------
// 1. Pressure-gradient intersection
// ---------------------------------------------------------------------------

enum class FrictionModel {
  kColebrookWhite,  // Colebrook & White (1939), solved iteratively (ColebrookFriction)
  kSwameeJain,      // Swamee & Jain (1976), explicit (SwameeJainFriction)
};
const char* FrictionModelName(FrictionModel m);

// Darcy friction factor under a model: 64/Re below Re 2000 (Hagen-Poiseuille)
// for both models, the model's turbulent formula from 2000 up.
double FrictionFactor(FrictionModel model, double reynolds, double relative_roughness);

struct GradientLocateOptions {
  // Turbulent friction formula. Colebrook-White by default; Swamee-Jain
  // (1976) is an explicit fit to it, within about 3 % for 5e3 <= Re <= 1e7
  // and relative roughness up to 1e-2 (worst near Re 5e3 on rough pipe;
  // measured in locate_test), much closer at the usual Re and roughness.
  FrictionModel friction = FrictionModel::kColebrookWhite;
  // Multiplies every friction factor: the calibration of the line's real
  // friction against the formula, learned in steady flow before the leak by
  // FrictionScaleFromSteadyState(). The method is very sensitive to it: a
  // friction error e moves the crossing by about e * L / (2 * leak fraction).
  double friction_scale = 1.0;
  // Coverage factor of the band: the band is the crossing's shift under
  // perturbations of each input by +/- k sigma, combined in quadrature.
  // 1.96 covers about 95 % for a normal, nearly linear response.
  double coverage_k = 1.96;
  // The flows are taken as equal (nothing to locate) when the imbalance
  // inlet + laterals - outlet is within this fraction of the larger end flow.
  double equal_flow_fraction = 1e-6;
  double gravity_m_s2 = kStandardGravity_m_s2;

  bool IsValid(std::string* why) const;  // false, with the reason, when unusable
};

// A flow into or out of the line between the two ends (a delivery or an
// injection). It changes the flow along the line for both grade lines.
struct LateralFlow {
  double chainage_m = 0.0;
  double flow_kg_s = 0.0;   // + injected into the line, - delivered out of it
  double sigma_kg_s = 0.0;  // one-sigma uncertainty of flow_kg_s
};

// One end of the span: its pressure transmitter and flow meter.
struct LineEnd {
  double chainage_m = 0.0;         // transmitter and meter position
  double pressure_pa = 0.0;        // absolute
  double pressure_sigma_pa = 0.0;  // one sigma
  double flow_kg_s = 0.0;          // mass flow in the line, + from inlet towards outlet
  double flow_sigma_kg_s = 0.0;    // one sigma (a meter's fraction of reading times the reading)
  // Elevation of the transmitter's tapping; NaN takes the profile's elevation
  // at chainage_m.
  double elevation_m = kNaN;
};

struct GradientLocateInput {
  double density_kg_m3 = 0.0;   // fluid density, taken as constant along the span
  double viscosity_pa_s = 0.0;  // dynamic viscosity
  LineEnd inlet;                // upstream end: its flow is the flow upstream of the leak
  LineEnd outlet;               // downstream end: its flow is the flow downstream of the leak
  // Optional. Only laterals strictly between the two ends count; the meters
  // at the ends are taken to measure the line flow on the inside of the span.
  std::vector<LateralFlow> laterals;
};

enum class LocateStatus {
  kFound,
  kInvalidInput,      // see reason
  kFlowsEqual,        // imbalance within equal_flow_fraction: nothing to locate
  kNoMissingFlow,     // outlet exceeds inlet plus laterals: a gain, not a leak
  kParallel,          // the grade lines do not converge inside the span or beyond it
  kUpstreamOfSpan,    // the lines cross upstream of the inlet end
  kDownstreamOfSpan,  // the lines cross downstream of the outlet end
};
const char* LocateStatusName(LocateStatus s);

struct GradientLocation {
  bool found = false;
  LocateStatus status = LocateStatus::kInvalidInput;
  std::string reason;              // empty when found
  // Crossing. When the lines cross outside the span, chainage_m is the
  // crossing of the lines extended with their end slopes (for diagnosis) and
  // found is false.
  double chainage_m = kNaN;
  double head_m = kNaN;            // piezometric head at the crossing
  double pressure_pa = kNaN;       // absolute, at the profile elevation of the crossing
  // Band at coverage_k from the transmitters', meters' and laterals'
  // uncertainties, clamped to the span. band_clamped is set when a side was
  // clamped, or when at some +/- k sigma perturbation the imbalance vanished
  // (then the band is the whole span: the location is undetermined).
  double chainage_low_m = kNaN;
  double chainage_high_m = kNaN;
  bool band_clamped = false;
  double coverage_k = 0.0;
  // Largest |shift| of the crossing (m) under +/- k sigma of each input.
  double shift_inlet_pressure_m = 0.0;
  double shift_outlet_pressure_m = 0.0;
  double shift_inlet_flow_m = 0.0;
  double shift_outlet_flow_m = 0.0;
  double shift_laterals_m = 0.0;   // all laterals, combined in quadrature
  // What the lines were drawn from.
  double inlet_head_m = kNaN;
  double outlet_head_m = kNaN;
  double imbalance_kg_s = kNaN;    // inlet + laterals - outlet: the leak the lines see
  int laterals_used = 0;

  std::string ToString() const;  // one line, for logs and test failures
  std::string Report() const;    // several lines, every field
};

// Locates a leak between input.inlet and input.outlet by the crossing of the
// two hydraulic grade lines (see the file comment). `sections` are the
// segment's sections in flow order from chainage 0, `profile` its elevation
// profile (linear between points, held beyond the ends; empty = flat at 0).
//
// Uncertainty: each input (both pressures, both flows, every lateral) is
// moved by +k sigma and by -k sigma alone, and the crossing recomputed; the
// upward shifts are combined in quadrature into the upper half of the band
// and the downward shifts into the lower half, i.e. the law of propagation of
// uncertainty for independent inputs with sensitivity coefficients from
// +/- evaluations (JCGM 100:2008 "GUM", sec. 5.1.2 and 5.1.3 note 2; memory),
// kept one-sided because the crossing is not linear in the flows.
GradientLocation LocateByPressureGradient(const std::vector<PipeSection>& sections,
                                          const std::vector<ElevationPoint>& profile,
                                          const GradientLocateInput& input,
                                          const GradientLocateOptions& options = {});

// Friction scale from a steady, leak-free state: the ratio of the measured
// head loss between the ends to the one the friction formula predicts for the
// same flows (inlet flow, changed by the laterals; the outlet flow is not
// used). Returns NaN, with the reason, when it cannot be formed (no flow,
// invalid input). Average it over a quiet period before trusting it.
double FrictionScaleFromSteadyState(const std::vector<PipeSection>& sections,
                                    const std::vector<ElevationPoint>& profile,
                                    const GradientLocateInput& input,
                                    const GradientLocateOptions& options, std::string* why);

// ---------------------------------------------------------------------------
// 2. Negative pressure wave
// ---------------------------------------------------------------------------

struct WaveLocateOptions {
  // Coverage factor of the band chainage +/- k * sigma. 1.96: about 95 %.
  double coverage_k = 1.96;
  bool IsValid(std::string* why) const;
};

struct WaveArrivals {
  double inlet_chainage_m = 0.0;   // span ends (transmitter positions)
  double outlet_chainage_m = 0.0;
  double wave_speed_m_s = 0.0;     // e.g. WaveSpeed() of pipe.h (Korteweg)
  double inlet_arrival_s = 0.0;    // arrival of the drop at the inlet transmitter
  double outlet_arrival_s = 0.0;   // ... at the outlet transmitter, on the same clock
  double inlet_sigma_s = 0.0;      // one-sigma timing uncertainty of each arrival
  double outlet_sigma_s = 0.0;     // (sampling, onset picking, clock offset)
};

struct WaveLocation {
  bool found = false;              // false only for invalid input (see reason)
  std::string reason;
  double chainage_m = kNaN;        // clamped into the span
  double raw_chainage_m = kNaN;    // before clamping
  bool clamped = false;            // |t_in - t_out| exceeded L/a: timing or wave speed is off
  double sigma_m = kNaN;           // a * sqrt(s_in^2 + s_out^2) / 2
  double chainage_low_m = kNaN;    // chainage -/+ k sigma, clamped to the span
  double chainage_high_m = kNaN;
  double coverage_k = 0.0;

  std::string ToString() const;
  std::string Report() const;
};

// x = x_in + (L + a (t_in - t_out)) / 2, L = x_out - x_in; from the travel
// times x_L/a to the inlet and (L - x_L)/a to the outlet (the negative
// pressure wave method; primer sec. 5; wave speed by Korteweg, Wylie &
// Streeter 1993 sec. 2.4). sigma_x = a sqrt(s_in^2 + s_out^2) / 2 by the
// law of propagation of uncertainty (JCGM 100:2008, eq. 10).
WaveLocation LocateByWaveArrival(const WaveArrivals& arrivals, const WaveLocateOptions& options = {});

// One pressure reading at one end.
struct PressureSample {
  double time_s = 0.0;
  double pressure_pa = 0.0;
};

struct OnsetOptions {
  // A drop is a fall below the running reference by more than this. Set it
  // well above the transmitter noise (5 sigma or more) and below the drop a
  // leak of the size to be located makes (Joukowsky: rho * a * dV).
  double drop_threshold_pa = 10.0e3;
  // Running reference: mean of this many samples, ending reference_gap_samples
  // before the candidate.
  int reference_samples = 5;
  // Samples skipped between the reference window and the candidate, so that
  // the beginning of a front that is not quite sharp does not pull the
  // reference down. Cover the part of the front above the threshold.
  int reference_gap_samples = 2;
  // The drop must persist for this many consecutive samples (1 = none);
  // rejects single-sample spikes.
  int confirm_samples = 2;
  // Depth of the drop: the lowest value within this many samples from the
  // first one beyond the threshold. Cover the front's rise time.
  int settle_samples = 5;
  // Largest sample interval accepted; 0.2 s is 5 Hz. Slower sampling makes
  // the arrival time uncertain by more than a * interval / 2 per end.
  // Intervals up to 5 % longer pass (timestamp jitter).
  double max_sample_interval_s = 0.2;
  bool IsValid(std::string* why) const;
};

struct OnsetResult {
  bool found = false;
  const char* reason = "";         // static text; empty when found
  double arrival_s = kNaN;         // time the signal crossed half the drop
  double reference_pa = kNaN;      // running reference before the drop
  double drop_pa = kNaN;           // reference minus the settled minimum (positive)
  int sample_index = -1;           // first sample beyond the threshold

  std::string ToString() const;
};

// Finds the arrival of a sharp pressure drop in a short buffer of samples
// (time-ordered) from one end. The first sample k whose value lies more than
// drop_threshold_pa below the mean of the reference_samples before it (ending
// reference_gap_samples before k), and stays there for confirm_samples, marks
// the front; the depth of the drop is
// taken from the lowest value over the next settle_samples; the arrival time
// is where the signal, interpolated linearly between samples, first falls
// through the reference minus half the depth (a constant-fraction pick,
// cf. constant-fraction timing of pulse fronts).
// Assumptions: sampling at 5 Hz or faster (checked against
// max_sample_interval_s); the clocks at the two ends are synchronised (GPS or
// PTP) to well within a sample interval; the pressure is steady within the
// threshold over the reference window (no pump or valve transient); the same
// front shape arrives at both ends (its constant offset then cancels in
// t_in - t_out). For an ideal step the error of one pick is within half a
// sample interval, so a located leak is within a * interval / 2 of the truth
// when both ends sample at the same interval; a linear front longer than two
// sample intervals is picked exactly.
// Allocates nothing.
OnsetResult DetectPressureDrop(const PressureSample* samples, int count,
                               const OnsetOptions& options = {});

// ---------------------------------------------------------------------------
// 3. Nearest landmark
// ---------------------------------------------------------------------------

struct NearestLandmarkResult {
  bool found = false;              // false when there are no landmarks
  int index = -1;                  // into the landmark list
  std::string name;
  double landmark_chainage_m = kNaN;
  // chainage - landmark chainage: positive when the point lies downstream of
  // the landmark (further from the inlet).
  double signed_distance_m = kNaN;

  std::string ToString() const;    // e.g. "1250.0 m downstream of Valve V12 (chainage 31000.0 m)"
};

// The landmark closest to `chainage_m` (the first of equals, in list order).
NearestLandmarkResult NearestLandmark(const std::vector<LandmarkSpec>& landmarks, double chainage_m);

}  // namespace holdfast
