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
#include <cmath>
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "holdfast/alarm.h"

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
// Local time
// ---------------------------------------------------------------------------

// A compiled schedule of UTC offsets: offset_s[i] applies from transition
// from_s[i] (UTC epoch s) until the next transition. Built at the boundary
// from the system tz database (io/time_zone.h) or a fixed offset; the core
// only looks values up (no allocation per lookup). Local time = UTC + offset.
struct UtcOffsetSchedule {
  std::vector<double> from_s;    // ascending; empty = one fixed offset
  std::vector<double> offset_s;  // same size as from_s
  double fixed_offset_s = 0.0;   // before the first transition, or always when empty
  std::string zone;              // the IANA name or POSIX rule it came from ("" = fixed)

  static UtcOffsetSchedule Fixed(double offset_s);
  double OffsetAt(double utc_s) const;
  double Local(double utc_s) const { return utc_s + OffsetAt(utc_s); }
  bool IsValid(std::string* why) const;
};

// Days since 1970-01-01 of a local time (floor), and the weekday of such a
// day (0 = Sunday ... 6 = Saturday; 1970-01-01 was a Thursday).
int64_t LocalDayOf(double local_s);
int WeekdayOf(int64_t local_day);

// ---------------------------------------------------------------------------
// Minimum night flow analysis
// ---------------------------------------------------------------------------

struct NightFlowOptions {
  // Local time (summer time included when the schedule comes from a zone).
  UtcOffsetSchedule offsets;
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
  // Filled by the district monitor when the district has customer meters
  // (NaN otherwise): the night window's mean zone flow and the metered
  // customer use scaled by coverage; night leakage is then their difference.
  double window_zone_flow_m3_h = std::numeric_limits<double>::quiet_NaN();
  double metered_night_use_m3_h = std::numeric_limits<double>::quiet_NaN();
  // The burst detector's view of this night (see NightStepDetector below).
  double step_baseline_m3_h = std::numeric_limits<double>::quiet_NaN();
  double step_m3_h = std::numeric_limits<double>::quiet_NaN();  // night value - baseline
  double step_sigma_m3_h = std::numeric_limits<double>::quiet_NaN();
  bool burst_alarm = false;          // a burst alarm was raised on this night
  std::string ToString() const;
};

// Fed once per step with the zone's net flow (inflow - outflow - storage
// change) and the average-zone-pressure point's head; completes a night as
// soon as its window closes (the hour-day factor then uses the 24 hours
// before the window's end).
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
  bool day_closed_ = false;  // this local day's night already published
  // Hourly mean pressure of the last 24 local hours (slot = hour % 24).
  std::array<double, 24> hour_p_{};
  std::array<int, 24> hour_n_{};
  std::array<int64_t, 24> hour_id_{};
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
  // Block length: one time-of-day bin of the profile, and the longest
  // customer-meter interval the balance can use, s. 86400 must be a whole
  // number of blocks. Hourly blocks match hourly smart-meter totals.
  double block_s = 3600.0;
  // The cumulative zone volume is low-pass filtered with this time constant
  // (first order) before blocks are taken, so that reservoir-level noise
  // enters only through the filter (see DEVELOPERS.md), s.
  double filter_s = 600.0;
  // Local time, and the quiet hours that make a night for the step detector:
  // blocks starting in [quiet_start_h, quiet_end_h) local. start > end spans
  // midnight (e.g. 23 to 4); the night belongs to the date it ends on.
  UtcOffsetSchedule offsets;
  double quiet_start_h = 0.0;
  double quiet_end_h = 4.0;
  // The MNF night window (for the night table's metered use), local hours
  // within one day.
  double night_start_h = 2.0;
  double night_end_h = 4.0;
  // Weekend days (bit d set = weekday d, 0 = Sunday): Saturday and Sunday.
  // Nights and profile days are compared within their own kind.
  unsigned weekend_mask = (1u << 0) | (1u << 6);

  // --- Night path: a step in night flow from one night to the next.
  // Robust baseline: the median of the last `baseline_nights` usable nights
  // of the same kind (weekday or weekend; the pooled median while a kind has
  // fewer than 3), spread from the median absolute deviation (Hampel 1974;
  // sigma = 1.4826 MAD for normal data).
  int baseline_nights = 14;
  // Nights needed before the detector decides; at that point the learning
  // nights are searched for a step (a burst in the learning period).
  int min_nights = 5;
  // Alarm when tonight's value exceeds the baseline by night_alarm_sigmas,
  // or when two nights in a row exceed it by night_confirm_sigmas; in both
  // cases by at least min_step_m3_h.
  double night_alarm_sigmas = 5.0;
  double night_confirm_sigmas = 3.0;
  double min_step_m3_h = 0.6;
  // A night above suspect_sigmas is kept out of the baseline (frozen); after
  // accept_nights such nights in a row without an alarm the level is taken
  // as the new normal (a slow rise, not a burst).
  double suspect_sigmas = 2.5;
  int accept_nights = 3;
  // Floors of the spread: absolute, and relative to the baseline level.
  double min_sigma_m3_h = 0.05;
  double min_sigma_fraction = 0.005;

  // --- Day path (fast): an hourly CUSUM (Page 1954) on each block's
  // residual against the time-of-day profile of its kind of day, in units
  // of the bin's own spread.
  //   profile: the median of the last `profile_days` same-kind values per
  //     bin (learning stops while a step is suspected: the CUSUM above zero
  //     or the block above suspect_sigmas);
  //   spread: 1.4826 x the median absolute prediction error (the residual
  //     minus the profile it was compared with, so the profile's own error
  //     is included) of the last `spread_days` same-kind values of the bin
  //     and its two neighbours (Hampel 1974);
  //   z = (residual - profile) / spread; hourly prediction errors are
  //     autocorrelated (the demand noise of the unmetered properties lasts
  //     an hour or two; lag one about 0.6 on the generated districts), so
  //     the CUSUM runs on the prewhitened e = (z - phi z_prev) / sqrt(1 -
  //     phi^2) (AR(1), Box & Jenkins), phi learnt from the z series;
  //     S = max(0, S + e - k), k half the target step as it shows in e:
  //     k = day_step_m3_h / (2 x the median spread over the bins)
  //         x sqrt((1 - phi) / (1 + phi));
  //   threshold h from the declared budget: the one-sided in-control ARL
  //     (Siegmund 1985's approximation, arl.h) equals
  //     false_alarm_interval_days x blocks per day;
  //   alarm when S > h and S has risen over the last day_persist_blocks
  //     blocks (a single odd hour does not alarm).
  int profile_days = 7;
  int min_profile_days = 3;
  int spread_days = 21;
  // Target step of the day path (the CUSUM's reference is half of it), m3/h
  // of residual: the large burst the evaluation asks to find within 6 h
  // (5 m3/h at night pressure; a little less at daytime pressure).
  double day_step_m3_h = 5.0;
  // Prior lag-one autocorrelation of z and its weight in blocks (the
  // learnt value takes over as blocks come), and its upper clamp.
  double day_phi_prior = 0.5;
  double day_phi_prior_blocks = 48.0;
  double day_phi_max = 0.9;
  // Declared false-alarm budget of the day path: mean days between false
  // day-path alarms on one district.
  double false_alarm_interval_days = 3650.0;
  int day_persist_blocks = 2;

  // Customer meters: how long after a block ends to wait for its customer
  // volume (interval totals arrive at the end of their interval), s.
  double customer_wait_s = 7200.0;
  // Fraction of a block's time that must be valid for the block to count.
  double min_valid_fraction = 0.75;
  // Non-latching by default: each detected burst raises the alarm once (a
  // one-tick condition); it returns to normal after the hold.
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
  std::string ToString() const;
};

// One completed block of the balance.
struct DistrictBlock {
  double start_s = 0.0;
  bool ok = false;
  double zone_m3_h = 0.0;       // mean zone flow over the block
  double customer_m3_h = std::numeric_limits<double>::quiet_NaN();  // metered / coverage
  double residual_m3_h = 0.0;   // zone - customer (zone alone without meters)
  double profile_m3_h = std::numeric_limits<double>::quiet_NaN();   // its bin's median
  double sigma_m3_h = std::numeric_limits<double>::quiet_NaN();
  double z = 0.0;               // (residual - profile) / sigma
  double cusum = 0.0;           // the day path's statistic after this block, spreads
  std::string ToString() const;
};

// The day path's CUSUM threshold (spreads) for reference k: the h at which
// Siegmund's (1985) approximation of the one-sided in-control ARL,
//   ARL0 = (exp(2 k b) - 2 k b - 1) / (2 k^2),  b = h + 1.166,
// equals false_alarm_interval_days x blocks_per_day blocks (arl.h,
// CusumThresholdForArl without the Markov chain). NaN on bad input.
double DayPathThreshold(double false_alarm_interval_days, double blocks_per_day, double k);

enum class BurstPath : uint8_t { kNight, kDay, kLearning };
const char* BurstPathName(BurstPath p);

struct BurstReport {
  double time_s = 0.0;            // when the alarm was raised
  BurstPath path = BurstPath::kNight;
  double size_m3_h = 0.0;         // step in the residual
  double size_ci95_m3_h = 0.0;
  double change_s = 0.0;          // estimated change time (middle of its interval)
  double change_ci_s = 0.0;       // half-width of the interval the change lies in
  double statistic = 0.0, threshold = 0.0;  // in spreads
  std::string ToString() const;
};

// The detector's summary of one night (quiet hours), published when the
// night's blocks are complete.
struct DistrictNight {
  int64_t local_day = 0;
  bool weekend = false;
  bool usable = false;
  double quiet_residual_m3_h = 0.0;      // mean residual over the quiet hours
  double window_zone_m3_h = std::numeric_limits<double>::quiet_NaN();  // mean zone flow, MNF window
  double window_customer_m3_h = std::numeric_limits<double>::quiet_NaN();
  double baseline_m3_h = std::numeric_limits<double>::quiet_NaN();
  double sigma_m3_h = std::numeric_limits<double>::quiet_NaN();
  double step_m3_h = std::numeric_limits<double>::quiet_NaN();
  bool suspect = false, alarm = false;
  double quiet_end_s = 0.0;              // UTC end of the quiet hours
};

// Sample-and-hold values arrive as SI numbers from the caller, one Step per
// tick; customer volumes arrive as volumes over intervals, whenever known.
class DistrictMonitor {
 public:
  bool Init(int district, const DistrictMonitorOptions& options, bool has_customer_meters,
            SequenceCounter* seq, AlarmEventSink* sink, std::string* why);
  void Step(double t, double dt, bool valid, double inflow_m3_s, double outflow_m3_s, double storage_m3);
  // Customer use (already divided by coverage) over [t0_s, t1_s), m3.
  // Spread over the blocks it overlaps in proportion to time. Intervals
  // longer than a block, or for blocks already decided, are counted and
  // ignored.
  void AddCustomerVolume(double t0_s, double t1_s, double volume_m3);
  const DistrictTick& tick() const { return tick_; }
  const Alarm& alarm() const { return alarm_; }
  Alarm& alarm() { return alarm_; }
  // Results of this Step (valid until the next Step): blocks decided, a
  // night completed, a burst reported.
  int new_blocks() const { return new_blocks_; }
  const DistrictBlock& block(int i) const { return done_blocks_[i]; }
  bool night_done() const { return night_done_; }
  const DistrictNight& night() const { return last_night_; }
  bool burst_raised() const { return burst_raised_; }
  const BurstReport& last_burst() const { return last_burst_; }
  int bursts() const { return bursts_; }
  uint64_t late_customer_intervals() const { return late_customer_; }
  int bins() const { return bins_; }
  // Profile median of a bin for weekdays (kind 0) or weekends (kind 1),
  // NaN until formed.
  double profile_m3_h(int kind, int bin) const;
  // The day path's CUSUM now, its reference k and threshold h (spreads; NaN
  // until the spreads have formed), and whether it waits for a night to
  // re-measure a step after an alarm.
  double day_cusum() const { return cusum_; }
  double day_k() const { return k_; }
  double day_phi() const { return phi_; }
  double day_h() const { return h_; }
  bool day_waiting() const { return std::isfinite(rebase_after_s_); }

 private:
  struct Pending {
    double start_s = 0.0;
    double zone_m3 = 0.0, zone_valid_s = 0.0, zone_s = 0.0;
    double cust_m3 = 0.0, cust_s = 0.0;
  };
  struct NightAcc {
    int64_t day = INT64_MIN;
    double quiet_sum = 0.0; int quiet_ok = 0, quiet_n = 0;
    double win_zone = 0.0, win_cust = 0.0; int win_ok = 0, win_n = 0;
    double quiet_first_s = 0.0, quiet_end_s = 0.0;
  };
  void OpenBlock(double start_s);
  Pending* Block(double start_s);  // the pending block starting there, opened if ahead; null if decided
  void DecideReady(double t);
  void Decide(const Pending& p, double t);
  void DayPath(DistrictBlock& b, int kind, int bin, double t);
  void FinishNight(double t);
  void NightPath(DistrictNight* n, double t);
  void Raise(const BurstReport& r);
  void ShiftBaselines(double step_m3_h);
  double Median(const double* v, int n) const;
  bool Weekend(int64_t day) const { return (o_.weekend_mask >> WeekdayOf(day)) & 1u; }
  bool InQuiet(double hour) const;
  bool InWindow(double hour) const;

  DistrictMonitorOptions o_;
  int district_ = 0;
  bool has_customer_ = false;
  int bins_ = 24;
  Alarm alarm_;
  DistrictTick tick_;
  // Balance state.
  bool have_prev_ = false, started_ = false;
  double prev_storage_ = 0.0, prev_in_m3_s_ = 0.0, prev_out_m3_s_ = 0.0;
  double cum_zone_m3_ = 0.0, f_zone_ = 0.0, prev_f_zone_ = 0.0;
  // Blocks waiting for their customer volume (ring, oldest first).
  std::vector<Pending> pending_;
  int pend_head_ = 0, pend_n_ = 0;
  double open_start_s_ = 0.0;  // the block being filled (newest pending)
  bool have_open_ = false;
  uint64_t late_customer_ = 0;
  // Per-step outputs.
  std::vector<DistrictBlock> done_blocks_;
  int new_blocks_ = 0;
  bool night_done_ = false, burst_raised_ = false, alarm_pending_ = false;
  DistrictNight last_night_;
  BurstReport last_burst_;
  int bursts_ = 0;
  // Profiles: [kind][bin][profile_days] ring of residuals, m3/h.
  std::vector<double> prof_;
  std::vector<int> prof_n_, prof_head_;
  // Prediction errors per [kind][bin] (ring of spread_days) and the
  // spread they give (NaN until formed).
  std::vector<double> err_;
  std::vector<int> err_n_, err_head_;
  std::vector<double> bin_sigma_;
  // Day-path CUSUM: statistic, its reference and threshold (the threshold
  // is recomputed only when k moves), the excursion's start, blocks, rises
  // and summed excess.
  double cusum_ = 0.0, k_ = kNaNd(), h_ = kNaNd(), h_for_k_ = kNaNd();
  double phi_ = 0.0, phi_sxy_ = 0.0, phi_sxx_ = 0.0, z_prev_ = kNaNd();
  double run_start_s_ = 0.0, run_sum_ = 0.0, run_var_ = 0.0;
  int run_ = 0, rises_ = 0;
  static constexpr double kNaNd() { return std::numeric_limits<double>::quiet_NaN(); }
  void UpdateBinSigma(int kind, int bin);
  void UpdateReference();
  // Nights: ring of usable nights (value, weekend), oldest first.
  NightAcc acc_;
  std::vector<double> night_x_;
  std::vector<uint8_t> night_we_;
  std::vector<double> night_end_s_;
  int nights_head_ = 0, nights_n_ = 0;
  bool learning_checked_ = false;
  int suspect_run_ = 0, low_run_ = 0;
  double suspect_sum_ = 0.0, low_sum_ = 0.0;
  double prev_step_sigmas_ = 0.0, prev_step_m3_h_ = 0.0;
  double last_usable_end_s_ = std::numeric_limits<double>::quiet_NaN();
  // After any burst alarm: the first whole night that starts after this
  // time re-measures the step (no test), and the day path waits for it.
  double rebase_after_s_ = std::numeric_limits<double>::quiet_NaN();
  // After a day alarm the re-measuring night also tests what it finds above
  // the alarmed step by more than this (a second burst, or a day alarm that
  // was not a burst followed by one that is); NaN after a night alarm.
  double rebase_tolerance_m3_h_ = std::numeric_limits<double>::quiet_NaN();
  double run_first_excess_ = 0.0;
  std::vector<double> scratch_;
  mutable std::vector<double> scratch2_;  // Median's work space
};

}  // namespace holdfast::water
