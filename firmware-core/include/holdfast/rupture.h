// Fast path for large sudden leaks (ruptures), for any line: no fixed
// pressure drop, no blanket inhibit after operating changes.
//
// The signal is the characteristic invariant at each end of the line. Along
// the characteristics of an elastic liquid pipe (Wylie & Streeter, Fluid
// Transients in Systems, 1993, ch. 3, compatibility equations written for
// the mass flow; equation numbers not cited, from memory)
//     C+:  dm + B dP = 0,   C-:  dm - B dP = 0,   B = A / a,
// so a wave travelling towards an end carries dm_i = -B dP_i (upstream end)
// or dm_i = B dP_i (downstream end), and whatever the boundary does with it
// (a pump on its curve, a control valve, a tank, a flow controller), the
// reflected wave satisfies the other invariant. Adding the two, at the inlet
//     s_in  =  dm_in  - B dP_in  = 2 dm_i,
// and at the outlet
//     s_out = -dm_out - B dP_out = 2 |dm_i|,
// where m is the mass flow in the direction of the line at that end. A leak
// of rate q sends a drop of dm_i = q / 2 towards each end: both s grow by
// about q, whether the pump runs out along its curve, a valve holds the
// flow, or a tank holds the pressure. An operating change made at one end
// leaves that end's s unchanged (the wave it sends satisfies the invariant
// there), so it cannot look like a leak at both ends at once. A metered
// delivery opening mid-line is hydraulically a leak; its metered change is
// subtracted from both; but its waves reach the ends later than its meter
// shows it, so a look-back in which a lateral changed by more than
// quiet_share x the threshold is left to the decision.
//
// A rupture is raised when, over the look-back (window_s), all of:
//   * s_in (less the change in metered laterals) grew by wave_share x the
//     threshold (leak_fraction x nominal flow);
//   * at the outlet: s_out likewise when the outlet meters measure the pipe
//     end (no tank inside the segment); otherwise the outlet pressure fell
//     by pressure_sigmas standard deviations of its look-back difference;
//   * the metered shortfall (inflow - outflow) grew by metered_share x the
//     threshold (a pump trip or a valve opening at the outlet lowers it);
//   * the line was quiet before the look-back: between reference_s ago and
//     the look-back's start, neither the inlet's signal (less laterals) nor
//     the metered shortfall moved by more than quiet_share x the threshold.
//     On a long, friction-dominated line the invariant fades within the
//     wave's travel (friction damps it), and the recovery after an
//     operating change (the inflow after a pump slowdown, the line filling
//     after a restart) can look like a leak at the inlet. A sudden leak
//     comes out of a quiet line; one within reference_s of an operating
//     change is left to the decision.
//   * the compensated imbalance over the look-back (the balance residual,
//     line pack and tanks included) is at least balance_share x the
//     threshold (a restart into a tank inside the segment fills the tank).
// Values at both ends of the look-back are means over average_s.
//
// One end first. The later end hears a leak at chainage x only after
// max(x, L - x) / a, at least L / 2a (45 s on a 90 km line) and damped by
// friction, so waiting for both ends cannot alarm within a minute on a long
// line. The other invariant at each end tells an operator's change from an
// arriving wave: at the inlet g_in = m_in + B P_in, at the outlet g_out =
// -m_out + B P_out change only by the wave the end itself sends into the
// line, which for a passive boundary (pump on its curve, fixed valve,
// reservoir) is a reflection no larger than the arriving wave (|dg| <= |ds|),
// and for an operator's change is all of it (ds = 0). A rupture is also
// raised from one end (one_end) when that end's signal grew by wave_share x
// the threshold out of a quiet line (as above), the compensated imbalance
// agrees, the metered shortfall did not fall, no metered lateral changed,
// the far end showed no operator's change (|dg| <= |ds| + quiet) over
// the look-back plus 1.25 L / a (the time its waves take to arrive), and
// the far end's own signal did not move the other way by more than a
// quarter of the leading end's over the look-back (a blocked-in line's waves slosh between its closed
// ends: a fall at one end while the other rises). With a tank inside the
// segment the outlet's signal is not measured: only the inlet may lead, and
// the outlet pressure must not have risen (B dP within that quarter).
// On a long line neither end may hear a far rupture within a minute, while
// the transmitters near it see the line pack fall at once: it is also raised
// from the line itself (one_end 3) when the compensated imbalance over the
// last half of the look-back is a lasting shortfall (at least the threshold
// over it, and half of it in each of its thirds: a transmitter's step is one
// instant of line-pack change, not a rate), the line was balanced from the
// reference to it, and neither end made a change of its own or hears a
// compression. The line pack's own noise over seconds can be a good share
// of the threshold on a long line with few transmitters, so each of those
// thirds must also exceed 6 of its learnt in-control sigmas (learnt over the
// first half hour after a start, while this path stays off).
// The end that leads must itself be passive over the far end's span (|dg| -
// |ds| within the quiet margin, as the far end): the reflection of an
// operator's change made at that end (a pump slowing on its ramp) returns to
// it after 2 L / a and moves its own s as an arriving wave would.
// A standing line (both end flows within the quiet margin at the reference or
// at the look-back's start, the inlet's alone with a tank inside the segment,
// whose outlet meters measure what leaves the tank: blocked in, or a restart
// from it) raises no rupture: its valves opening and the line settling after
// a shut-in send the waves a leak would, and a leak in it is the shut-in
// watch's (decision.h). The end flows come from the two invariants, m_in =
// (s_in + g_in) / 2 and m_out = -(s_out + g_out) / 2.
//
// At rest: once a standing line has stood for rest_settle_s (its shut-in
// waves have died down) a rupture is raised from the ends' pressures alone.
// A leak in a blocked-in line sends a rarefaction each way; at a closed end
// it reflects and the pressure falls by twice the wave's, so B x the fall
// is the whole leak rate at each end (Wylie & Streeter 1993, ch. 3: a
// wave at a dead end, from memory). Raised when both ends show it (each at
// least wave_share x the threshold), the line was quiet before, no meter
// moved (|metered| within the quiet margin: a valve that opens shows on its
// meter) and the compensated imbalance over the look-back is a shortfall
// (at least balance_share x the threshold).
#pragma once

#include <limits>
#include <string>
#include <vector>

#include "holdfast/locate.h"
#include "holdfast/site.h"

namespace holdfast {

struct RuptureOptions {
  double window_s = 60.0;       // look-back, s
  double reference_s = 180.0;   // the longer reference (>= window_s), s
  double average_s = 5.0;       // means at each end of the look-back, s
  double min_span_s = 15.0;     // no decision on a shorter look-back (after a start or gap), s
  double leak_fraction = 0.10;  // threshold, fraction of the segment's nominal flow
  double wave_share = 0.5;      // each end's characteristic signal, share of the threshold
  double metered_share = 0.25;  // growth of the metered shortfall, share of the threshold
  double balance_share = 0.5;   // compensated imbalance over the look-back, share of the threshold
  double quiet_share = 0.5;     // largest move before the look-back, share of the threshold
  double pressure_sigmas = 4.0; // outlet without a pipe-end meter: its fall, in sigmas
  bool one_end = true;          // also raise from one end (the header's "One end first")
  double rest_settle_s = 600.0; // a line at rest (the header) gets a rupture path this long after its flows stopped, s
  bool IsValid(std::string* why) const;
};

// What the detector reads each tick (SI, kg/s and Pa absolute).
struct RuptureInput {
  double inflow_kg_s = 0.0;       // inlet meters (pipe start)
  double outflow_kg_s = 0.0;      // outlet meters
  double lateral_out_kg_s = 0.0;  // deliveries - injections (metered, mid-line)
  double p_inlet_pa = 0.0;        // first pressure transmitter
  double p_outlet_pa = 0.0;       // last pressure transmitter
  double residual_kg_s = 0.0;     // the balance's compensated residual this tick
};

struct RuptureStatus {
  bool rupture = false;          // every condition holds this tick
  double wave_in_kg_s = 0.0;     // growth of s_in less laterals over the look-back
  double wave_out_kg_s = 0.0;    // growth of s_out less laterals (NaN: outlet not metered at the pipe end)
  double outlet_fall_pa = 0.0;   // fall of the outlet pressure over the look-back
  double metered_kg_s = 0.0;     // growth of the metered shortfall
  double lateral_change_kg_s = 0.0;  // change of the metered laterals (deliveries - injections)
  double balance_kg_s = 0.0;     // compensated imbalance over the look-back
  double estimate_kg_s = 0.0;    // leak rate: the wave estimate (mean of the ends' signals)
  double span_s = 0.0;           // look-back actually covered
  double wave_in_before_kg_s = 0.0;  // move of s_in less laterals from reference_s ago to the look-back (NaN: not yet)
  double metered_before_kg_s = 0.0;  // move of the metered shortfall over the same
  double far_in_kg_s = 0.0;      // inlet's own change |dg_in| - |ds_in| over the extended look-back
  double far_out_kg_s = 0.0;     // outlet's likewise (tank inside: B x the outlet pressure rise)
  bool standing = false;         // the line stood still at the reference or the look-back's start (header)
  bool at_rest = false;          // the rupture was raised on a line at rest, from its end pressures (header)
  int one_end = 0;               // 0: both ends (or none); 1: raised from the inlet alone; 2: the outlet alone;
                                 // 3: from the line's own imbalance before either end hears it
  // True when the look-back shows a leak-like change at both ends (the wave
  // conditions and the metered growth at `threshold_kg_s`, no lateral
  // changed by more than half of it) or a one-end rupture: an operating
  // change never does, so the monitor does not hold the decision for it.
  // On a standing line only a rupture raised at rest is (a restart from a
  // shut-in looks like a leak at the ends).
  bool LeakLike(double threshold_kg_s) const;
  std::string ToString() const;
};

class RuptureDetector {
 public:
  // Sizes the ring from the options and the tick; `segment` gives the end
  // sections (B = A / a from its fluid at `density_kg_m3`,
  // `bulk_modulus_pa`) and whether the outlet meters measure the pipe end.
  bool Init(const RuptureOptions& options, const SegmentSpec& segment, double tick_s, double density_kg_m3,
            double bulk_modulus_pa, double outlet_pressure_sigma_pa, std::string* why);
  // Forgets the look-back (after a gap or a restart).
  void Restart() {
    count_ = 0;
    rest_since_s_ = std::numeric_limits<double>::quiet_NaN();
  }
  // One valid tick. Allocates nothing.
  const RuptureStatus& Step(double t, const RuptureInput& in);
  const RuptureStatus& status() const { return status_; }
  double threshold_kg_s() const { return threshold_kg_s_; }
  double b_inlet_m_s() const { return b_in_; }
  double b_outlet_m_s() const { return b_out_; }
  // The end pressures over the look-back, oldest first, for the wave-arrival
  // pick (locate.h DetectPressureDrop). Fills the caller's buffers (sized
  // capacity() or more); returns the count. Allocates nothing.
  int EndPressures(PressureSample* inlet, PressureSample* outlet) const;
  int capacity() const { return static_cast<int>(ring_.size()); }

 private:
  struct Sample {
    double t = 0.0, s_in = 0.0, s_out = 0.0, lat = 0.0, net = 0.0, p_in = 0.0, p_out = 0.0, cum_res_kg = 0.0;
    double g_in = 0.0, g_out = 0.0;  // the other invariant at each end (the header's "One end first")
  };
  // Mean of the samples with time in [from, to] among n from slot `first` (start found by bisection).
  Sample MeanOver(int first, int n, double from, double to) const;
  // The first offset from head_ in [lo, hi) whose sample time is >= from (hi if none).
  int FirstFrom(int lo, int hi, double from) const;

  RuptureOptions options_;
  double threshold_kg_s_ = 0.0;
  double b_in_ = 0.0, b_out_ = 0.0;  // A / a at each end, m s
  bool outlet_at_pipe_end_ = true;
  double outlet_sigma_pa_ = 0.0;
  double span_s_ = 0.0;  // kept look-back: max(reference_s, window_s + 1.25 L / a + 2 average_s)
  bool one_end_ok_ = false;  // the ring covers the far end's travel time
  std::vector<Sample> ring_;
  int head_ = 0, count_ = 0;
  double cum_res_kg_ = 0.0, last_t_ = 0.0;
  double rest_since_s_ = std::numeric_limits<double>::quiet_NaN();  // both end flows quiet since (NaN: flowing)
  // The line-itself path's noise gate: the in-control spread of the
  // imbalance over a sixth of the look-back (exponentially weighted, one
  // hour), and how long it has been learnt.
  double part_rate_var_ = 0.0, part_rate_learnt_s_ = 0.0;
  RuptureStatus status_;
};

}  // namespace holdfast
