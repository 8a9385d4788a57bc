// Water-utility mode: the published water-loss methods as pure functions and
// small classes. No I/O, no threads, no clock, no allocation per sample.
//
//   * FAVAD pressure-leakage ratio (May 1994; Thornton & Lambert 2005):
//       L1 / L0 = (P1 / P0)^N1.
//   * Hour-day factor (HDF): hours per day that the night leakage rate must
//     be multiplied by to give the day's leakage, from the zone pressure
//     pattern: HDF = sum_i (P_i / P_night)^N1 * dt_i, in hours.
//   * Unavoidable annual real losses (Lambert et al. 1999, as recalled; the
//     coefficients are quoted from memory and match the form in the IWA
//     performance-indicator manual, Alegre et al. 2000/2006):
//       UARL [L/day] = (18 Lm + 0.8 Nc + 25 Lp) * P,
//     Lm mains length km, Nc service connections, Lp length of private
//     service pipe between the property line and the customer meter km,
//     P average operating pressure m. ILI = CARL / UARL.
//   * The IWA standard water balance (Alegre et al. 2000; Lambert & Hirner
//     2000): system input = authorised consumption + water losses;
//     losses = apparent + real; non-revenue water = unbilled authorised +
//     losses. 95 % confidence limits by summing variances of independent
//     inputs, each input's 95 % limit taken as 1.96 standard deviations.
//
// Units inside: volumes m3, flows m3/s, pressure as metres of water head
// (gauge), lengths km where the published formula uses km. Names say which.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <vector>

#include "holdfast/alarm.h"
#include "holdfast/decision.h"

namespace holdfast::water {

constexpr double kZ95 = 1.959963984540054;  // two-sided 95 % normal quantile
constexpr double kSecondsPerHour = 3600.0;
constexpr double kSecondsPerDay = 86400.0;

// ---------------------------------------------------------------------------
// FAVAD and the hour-day factor
// ---------------------------------------------------------------------------

// (P1/P0)^N1 (May 1994, "Leakage, pressure and control", BICS conference;
// Thornton & Lambert 2005). NaN unless p0 > 0, p1 >= 0 and n1 >= 0.
double FavadRatio(double p1_head_m, double p0_head_m, double n1);

// Hour-day factor in hours from `n` equal steps of `step_h` hours of zone
// pressure head, against the night reference head: sum (P_i/P_ref)^N1 step_h.
// A day of constant pressure equal to the reference gives exactly 24 h with
// 24 hourly, 48 half-hourly or 96 quarter-hourly values. NaN on bad input.
double HourDayFactor_h(const double* pressure_head_m, int n, double step_h, double night_ref_head_m, double n1);

// ---------------------------------------------------------------------------
// UARL and ILI
// ---------------------------------------------------------------------------

// A value with its 95 % confidence half-width in the same unit.
struct Estimate {
  double value = 0.0;
  double ci95 = 0.0;  // half-width: value +- ci95
  double sigma() const { return ci95 / kZ95; }
  std::string ToString(int decimals = 1) const;
};

struct SystemInfrastructure {
  Estimate mains_length_km;          // Lm
  Estimate service_connections;      // Nc
  Estimate private_pipe_length_km;   // Lp: property line to customer meter
  Estimate average_pressure_head_m;  // P, average operating pressure when pressurised
  double pressurised_fraction = 1.0; // fraction of the year the system is pressurised, (0, 1]
  bool IsValid(std::string* why) const;
};

struct UarlResult {
  Estimate litres_per_day;      // UARL, 95 % limits from the infrastructure inputs
  Estimate litres_per_connection_day;
  // Lambert et al. (1999) recommend the formula for systems with more than
  // about 5000 connections and pressures above about 25 m (from memory); a
  // note here says when the inputs are outside that.
  std::string applicability_note;
  std::string ToString() const;
};

// UARL = (18 Lm + 0.8 Nc + 25 Lp) P * pressurised_fraction, L/day, with the
// variance of each input propagated to first order.
UarlResult ComputeUarl(const SystemInfrastructure& s);

// ILI = CARL / UARL with relative variances added (first order). Both in
// L/day. NaN when UARL is not positive.
Estimate ComputeIli(const Estimate& carl_l_per_day, const Estimate& uarl_l_per_day);

// ---------------------------------------------------------------------------
// IWA water balance
// ---------------------------------------------------------------------------

// One metered or estimated annual volume with the 95 % accuracy of its
// figure, as a percentage of the volume (the form in which utilities state
// meter and estimate accuracies).
struct VolumeInput {
  std::string name;
  double volume_m3 = 0.0;
  double accuracy95_pct = 0.0;
};

struct WaterBalanceInputs {
  double period_days = 365.0;
  std::vector<VolumeInput> system_input;   // own sources and imported water, net of exports
  std::vector<VolumeInput> billed_metered;
  std::vector<VolumeInput> billed_unmetered;
  std::vector<VolumeInput> unbilled_metered;
  std::vector<VolumeInput> unbilled_unmetered;
  std::vector<VolumeInput> unauthorised;         // apparent losses: theft, illegal use
  std::vector<VolumeInput> meter_inaccuracies;   // apparent losses: under-registration, data errors
  SystemInfrastructure infrastructure;
  bool IsValid(std::string* why) const;
};

// The balance components. Volumes are held in whole litres (int64) so that
// the components add up exactly; confidence limits are in m3.
struct BalanceComponent {
  int64_t litres = 0;
  double ci95_m3 = 0.0;
  double m3() const { return static_cast<double>(litres) / 1000.0; }
};

struct WaterBalance {
  double period_days = 365.0;
  BalanceComponent system_input;
  BalanceComponent billed_metered, billed_unmetered, billed_authorised;   // = revenue water
  BalanceComponent unbilled_metered, unbilled_unmetered, unbilled_authorised;
  BalanceComponent authorised;
  BalanceComponent water_losses;
  BalanceComponent unauthorised, meter_inaccuracies, apparent_losses;
  BalanceComponent real_losses;   // = CARL over the period
  BalanceComponent non_revenue_water;
  UarlResult uarl;
  Estimate carl_l_per_day;
  Estimate ili;
  Estimate real_losses_l_per_connection_day;
  double nrw_pct_of_input = 0.0;
  std::vector<std::string> warnings;  // e.g. negative real losses
  std::string ToString() const;       // a text table
};

// Computes the balance (top-down, real losses as the remainder). False, with
// the reason, for invalid inputs.
bool ComputeWaterBalance(const WaterBalanceInputs& in, WaterBalance* out, std::string* why);

// ---------------------------------------------------------------------------
// Minimum night flow analysis
// ---------------------------------------------------------------------------

struct NightFlowOptions {
  // Local time = UTC + utc_offset_s (a fixed offset: give the standard-time
  // offset; daylight saving is not applied).
  double utc_offset_s = 0.0;
  // The night window in local hours, [start, end), within one calendar day.
  // Common practice: 02:00 to 04:00 (from memory).
  double window_start_h = 2.0;
  double window_end_h = 4.0;
  // MNF is the minimum of the moving average of zone flow over this span
  // (15 min, common practice for telemetry at 15-minute logging; from memory).
  double averaging_s = 900.0;
  // Sample step the analyzer is fed at (the tick), s.
  double step_s = 60.0;
  // Legitimate night use. Defaults are common practice for household night
  // use in the UK literature, quoted from memory: about 1.7 L/property/h, or
  // about 0.6 L/person/h when a population is given; non-household use about
  // 8 L/property/h. Override them with local survey values.
  double household_l_per_property_h = 1.7;
  double person_l_per_h = 0.6;
  bool per_person = false;  // use person_l_per_h * population instead
  double non_household_l_per_property_h = 8.0;
  double exceptional_night_use_m3_h = 0.0;  // known large night users
  // FAVAD exponent for the hour-day factor.
  double n1 = 1.0;
  // Change detection across nights on night leakage (one-sided upper CUSUM,
  // Page 1954): baseline mean and spread from the first `baseline_nights`
  // nights, reference k and threshold h in baseline standard deviations.
  int baseline_nights = 7;
  double cusum_k_sigmas = 0.5;
  double cusum_h_sigmas = 5.0;
  // The spread is never taken below this (a perfectly steady baseline would
  // otherwise make any change infinitely significant), m3/h.
  double min_sigma_m3_h = 0.1;
  // Trend: least-squares slope over the last `trend_nights` nights.
  int trend_nights = 14;
  bool IsValid(std::string* why) const;
};

struct DistrictProperties {
  double households = 0.0;
  double non_households = 0.0;
  double population = 0.0;  // optional (0 = not known)
};

struct NightResult {
  int64_t local_day = 0;             // days since 1970-01-01 in local time
  double mnf_time_s = 0.0;           // epoch s, centre of the MNF averaging span
  double mnf_m3_h = 0.0;             // minimum night flow
  double night_pressure_head_m = 0.0;// zone pressure over the MNF span (AZNP)
  double legitimate_night_use_m3_h = 0.0;
  double night_leakage_m3_h = 0.0;   // MNF - legitimate night use
  double hdf_h = 0.0;                // hour-day factor (NaN when the day's pressures are incomplete)
  double daily_leakage_m3 = 0.0;     // night leakage * HDF (NaN when HDF is)
  double cusum = 0.0;                // change statistic across nights, sigmas
  bool change = false;               // the CUSUM crossed its threshold on this night
  double trend_m3_h_per_day = 0.0;   // slope of night leakage (NaN until 3 nights)
  int valid_samples = 0;             // samples inside the window
  std::string ToString() const;
};

// Fed once per step with the zone's net flow (inflow - outflow - storage
// change) and the average-zone-pressure point's head; completes a night when
// the local day ends.
class NightFlowAnalyzer {
 public:
  bool Init(const NightFlowOptions& options, const DistrictProperties& properties, std::string* why);
  // valid = false for a sample with missing inputs. Returns true when this
  // sample closed a local day with a usable night; then result() holds it.
  bool Step(double t, bool valid, double zone_flow_m3_s, double pressure_head_m);
  // Closes the day in progress (at the end of a file). True if it had a night.
  bool Finish();
  const NightResult& result() const { return result_; }
  double legitimate_night_use_m3_h() const { return legit_m3_h_; }
  int nights() const { return nights_; }

 private:
  bool CloseDay();
  NightFlowOptions o_;
  double legit_m3_h_ = 0.0;
  NightResult result_;
  // Moving average over the averaging span (ring of samples).
  std::vector<double> ring_q_, ring_p_;
  std::vector<uint8_t> ring_ok_;
  int ring_n_ = 0, ring_head_ = 0, ring_filled_ = 0, ring_valid_ = 0;
  double sum_q_ = 0.0, sum_p_ = 0.0;
  // Day in progress.
  bool have_day_ = false;
  int64_t day_ = 0;
  double min_avg_ = 0.0, min_p_ = 0.0, min_t_ = 0.0;
  bool have_min_ = false;
  int window_samples_ = 0;
  std::array<double, 24> hour_p_{};
  std::array<int, 24> hour_n_{};
  // Across nights.
  int nights_ = 0;
  double base_sum_ = 0.0, base_sum2_ = 0.0;
  double base_mean_ = 0.0, base_sigma_ = 0.0;
  double cusum_ = 0.0;
  std::vector<double> trend_ring_;
  int trend_n_ = 0, trend_head_ = 0;
};

// ---------------------------------------------------------------------------
// Continuous district balance and burst detection
// ---------------------------------------------------------------------------

struct DistrictMonitorOptions {
  // Block length: one time-of-day bin of the demand profile, s. 86400 must
  // be a whole number of blocks.
  double block_s = 900.0;
  // The cumulative balance is low-pass filtered with this time constant
  // before blocks are taken (level-transmitter noise on a reservoir enters
  // as a difference of two volumes; see DEVELOPERS.md), s.
  double filter_s = 600.0;
  // Days used to learn the time-of-day profile (mean and spread of each
  // block's residual) before the detectors run.
  int profile_learning_days = 7;
  // After that, the profile keeps learning with this time constant in days,
  // but only while no detector is raised.
  double profile_time_constant_days = 14.0;
  // Bins either side pooled into a bin's spread estimate.
  int spread_pool_bins = 2;
  // The detectors decide on the quiet hours only: blocks that start in
  // [quiet_start_h, quiet_end_h) local time (local = UTC + utc_offset_s).
  // Daytime demand varies from day to day by far more than a burst, and
  // slowly (a warm day is high all day), so daytime blocks are strongly
  // autocorrelated; at night the residual is small and nearly white, and a
  // burst stands out as a step in night flow. A daytime burst is therefore
  // reported in the following night.
  double utc_offset_s = 0.0;
  double quiet_start_h = 0.0;
  double quiet_end_h = 4.0;
  // Burst sizes the CUSUM bank is tuned to, in units of the profile's
  // spread (standardised residual). A 0.5-sigma detector false-alarmed on
  // days of generally higher demand (a day-long offset the AR(1)
  // prewhitening does not remove) in the simulated demo month.
  std::vector<double> target_sigmas = {1.0, 2.0, 4.0};
  // False-alarm budget: mean time between false burst alarms per district.
  double false_alarm_interval_s = 365.0 * 86400.0;
  // Fraction of a block's ticks that must be valid for the block to count.
  double min_valid_fraction = 0.5;
  // Non-latching by default: each detected burst raises the alarm once (a
  // one-tick condition), and it returns to normal after the hold, so that a
  // later burst raises it again.
  AlarmOptions alarm;
  bool IsValid(std::string* why) const;
};

struct DistrictTick {
  double time_s = 0.0;
  bool valid = false;
  double inflow_m3_s = 0.0;         // sum of inlets
  double outflow_m3_s = 0.0;        // sum of outlets
  double storage_m3 = 0.0;          // reservoir contents
  double zone_flow_m3_s = 0.0;      // inflow - outflow - dS/dt (filtered)
  double customer_use_m3_s = 0.0;   // estimated customer use (smart meters, else the learnt profile)
  double residual_m3_s = 0.0;       // zone flow - customer use (filtered)
  std::string ToString() const;
};

struct BurstEvidence {
  bool profile_ready = false;
  DecisionState state = DecisionState::kLearning;
  double statistic = 0.0, threshold = 0.0;  // leading detector, sigmas
  double change_point_s = 0.0;
  double burst_m3_s = 0.0;  // mean deviation from the profile since the change point
};

// Sample-and-hold values arrive as SI numbers from the caller (the aligner),
// one Step per tick.
class DistrictMonitor {
 public:
  // `district` is the index used in alarm events. `has_customer_meters`:
  // the caller passes the aggregated smart-meter flow (already scaled for
  // coverage) to Step; otherwise the learnt time-of-day profile is the
  // demand model and the residual is the deviation from it.
  bool Init(int district, const DistrictMonitorOptions& options, bool has_customer_meters,
            SequenceCounter* seq, AlarmEventSink* sink, std::string* why);
  void Step(double t, double dt, bool valid, double inflow_m3_s, double outflow_m3_s, double storage_m3,
            double customer_use_m3_s);
  const DistrictTick& tick() const { return tick_; }
  const BurstEvidence& evidence() const { return evidence_; }
  const Alarm& alarm() const { return alarm_; }
  Alarm& alarm() { return alarm_; }
  // Restarts the detectors (e.g. after a repair). A detected burst restarts
  // them by itself: its size is added to the profile as the new normal.
  void ResetDetectors(bool false_alarm);
  int bursts() const { return bursts_; }
  const BurstEvidence& last_burst() const { return last_burst_; }
  int bins() const { return bins_; }
  double profile_mean_m3_s(int bin) const { return mean_[bin]; }

 private:
  void EndBlock(double t);
  void UpdateProfile(int bin, double dev, double sd);
  DistrictMonitorOptions o_;
  int district_ = 0;
  bool has_customer_ = false;
  int bins_ = 96;
  CusumThresholdTable table_;
  SegmentDecision decision_;
  Alarm alarm_;
  DistrictTick tick_;
  BurstEvidence evidence_;
  // Balance state.
  bool have_prev_ = false, started_ = false;
  double prev_storage_ = 0.0, start_s_ = 0.0;
  double cum_zone_m3_ = 0.0, cum_cust_m3_ = 0.0;
  double f_zone_ = 0.0, f_cust_ = 0.0;  // filtered cumulative volumes
  double prev_f_zone_ = 0.0, prev_f_cust_ = 0.0;
  // Block state.
  double block_start_s_ = 0.0, block_zone0_ = 0.0, block_cust0_ = 0.0;
  double block_dt_ = 0.0, block_valid_dt_ = 0.0;
  bool block_open_ = false;
  // Profile per bin (deviation = block residual - mean).
  std::vector<double> mean_, var_;
  std::vector<double> learn_;  // bins x profile_learning_days block residuals while learning (NaN = none)
  int64_t first_day_ = 0;
  bool profile_ready_ = false;
  // Raw deviations of recent blocks for the burst size (ring).
  bool burst_pending_ = false, was_quiet_ = false;
  BurstEvidence last_burst_;
  int bursts_ = 0;
  struct Block { double end_s = 0.0, dev_m3_s = 0.0; };
  std::vector<Block> recent_;
  int recent_head_ = 0, recent_n_ = 0;
};

}  // namespace holdfast::water
