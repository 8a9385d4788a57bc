// `holdfast evaluate`: measured detection performance of the monitor on
// simulated data, beside a classic fixed-window balance and a theoretical
// bound, in the manner of a periodic leak-detection performance test.
//
// A batch ("holdfast-batch/1", config/EVALUATE.md) names a base scenario for
// one segment of a site and asks for:
//   * a tuning run: leak-free days with the site's ordinary operations, from
//     which the decision stage is tuned (io/tuner.h), as an engineer would
//     tune from history before going live;
//   * a long leak-free run (30 days or more) with the same daily operations,
//     periodic shut-ins and restarts, and day-to-day inlet temperature
//     changes plus the daily swing: the false alarms per 30 days;
//   * a grid of leak runs: leak size x chainage x onset x seed, each the
//     base scenario with one leak opening at the onset, observed for a set
//     time: detection probability, time to detect, leak-rate and location
//     errors at the alarm and at the end of the run.
// Every run is simulated by the method of characteristics (simulate.h) and
// fed, reading by reading, through a Monitor seeded with the tuning: the
// same core, the same tick loop (io/replay_driver.h) as `holdfast replay`.
//
// Beside it, in the same runs:
//   * Baseline: the classic uncompensated balance over fixed windows W
//     (sum of metered inflow - outflow over the window, less the change of
//     the tank inventory, no line pack): alarm when the window's mean
//     shortfall exceeds a threshold. The threshold of each W is set on the
//     leak-free run so that the baseline raises exactly as many false alarms
//     there as the monitor did (the largest window when the monitor raised
//     none), which favours the baseline: its threshold is fit to the very
//     data it is scored on.
//   * Bound: Lorden (1971)'s asymptotic lower bound on the worst-case
//     detection delay of any procedure with an in-control run length of at
//     least ARL0: delay >= ln(ARL0) / I, I = delta^2 / 2 the Kullback-Leibler
//     information per sample of a Gaussian mean shift of delta standard
//     deviations, i.e. about 2 ln(ARL0) / delta^2 samples. Samples are the
//     monitor's blocks, delta the leak over the tuned block sigma corrected
//     for autocorrelation (sigma_eff), ARL0 the false-alarm budget in blocks.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "holdfast/alarm.h"
#include "holdfast/monitor.h"
#include "holdfast/site.h"
#include "holdfast/site_config.h"

namespace holdfast::sim {

const char* BatchFormatVersion();  // "holdfast-batch/1"

struct BatchSpec {
  std::string name;
  std::string path;             // the batch file (for messages)
  std::string scenario_path;    // the base scenario, as resolved
  nlohmann::json base_scenario; // its document (leaks removed)
  int segment = -1;             // site segment index (from the scenario)
  double time_step_s = 1.0;     // simulator time-step bound for every run
  double budget_days = 90.0;    // the monitor's false-alarm budget
  // Every run simulates the same meters: their systematic errors come from
  // this seed (the tuning learns the biases the leak-free and leak runs have),
  // and every flow meter drifts slowly from the start of each run, by this
  // much of its reading a day, the sign alternating from meter to meter.
  uint64_t instrument_set_seed = 1;
  double meter_drift_pct_per_day = 0.005;
  // Tuning run.
  double tuning_days = 2.0;
  uint64_t tuning_seed = 1;
  // Leak-free run.
  double leak_free_days = 30.0;
  uint64_t leak_free_seed = 2;
  nlohmann::json daily_operations = nlohmann::json::array();  // scenario operations, at_s within the day
  double shut_in_every_days = 7.0;    // 0: none
  double shut_in_at_s = 10.0 * 3600;  // time of day the shut-in starts
  double shut_in_s = 4.0 * 3600;      // how long the line stays shut in
  double inlet_daily_spread_k = 0.0;  // sd of the day-to-day inlet temperature change
  // Grid.
  std::vector<double> leak_fractions;  // of nominal flow
  std::vector<double> chainages_m;
  std::vector<double> onsets_s;        // fixed onsets since the run's start (base operations), or
  std::vector<double> onset_hours;     // onsets at these clock hours, with the daily operations
  double lead_s = 2.0 * 3600;          // clock onsets: the run starts this long before the onset
  bool onsets_during_operations = false;  // clock onsets: also at each daily operation + kOperationOnsetDelay_s
  std::string design = "cross";        // "cross": every combination; "cycle": see LeakPlacement
  std::vector<uint64_t> seeds;
  double leak_ramp_s = 60.0;
  double observe_s = 8.0 * 3600;       // after the onset
  // Ruptures: sudden leaks at every onset of the grid, judged on the first
  // leak or rupture alarm.
  std::vector<double> rupture_fractions;  // of nominal flow
  double rupture_ramp_s = 2.0;
  double rupture_observe_s = 1800.0;
  // Instrument families: each is a whole evaluation (tuning, leak-free run,
  // grid); `family` is the one RunEvaluation runs.
  std::vector<std::string> families = {"standard"};
  std::string family = "standard";
  // Per point of the base scenario, what "rough" sets (json instrument
  // settings), filled by LoadBatchFile; and the ids that get dropouts.
  nlohmann::json rough_instruments = nlohmann::json::object();
  std::vector<std::string> point_ids;
  std::vector<std::string> flow_point_ids;  // the flow meters among them (drift)
  double base_start_epoch_s = 0.0;     // the clock's 00:00 for daily operations and onset hours
  // The leak-free run's status share ignores this much after its start.
  double startup_exclusion_s = 1800.0;
  // Baseline windows.
  std::vector<double> baseline_windows_s = {600.0, 3600.0, 4.0 * 3600};
};

// Reads and checks a batch file against a site; problem paths name the file
// and the JSON pointer ("b.json:/grid/chainages_m/2: ..."). Relative scenario
// paths are resolved against the batch file's directory.
bool LoadBatchFile(const std::string& path, const Site& site, BatchSpec* batch, std::vector<ConfigProblem>* problems);

// Instrument families (config/EVALUATE.md): "standard" keeps the base
// scenario's instruments; "rough" overrides them.
bool IsInstrumentFamily(const std::string& name);
// A leak opens this long after the daily operation it is placed on.
constexpr double kOperationOnsetDelay_s = 10.0;
// Rough instruments, relative to each point's declared random accuracy.
constexpr double kRoughNoiseFactor = 2.5;
constexpr double kRoughWanderFactor = 1.0;        // wander sigma, x random accuracy
constexpr double kRoughWanderPhiPerSecond = 0.95;  // per 1 s (phi^period per sample)
constexpr double kRoughDeadbandFactor = 2.0;      // pressure, temperature, level
constexpr double kRoughHeartbeat_s = 60.0;
constexpr double kRoughJitter_s = 0.25;
constexpr double kRoughDropoutsPerDay = 3.0;      // per point, 5-25 s each
constexpr double kRoughDropoutMin_s = 5.0, kRoughDropoutMax_s = 25.0;

// Exact (Garwood 1936) two-sided 95 % interval of a Poisson mean from a count.
void PoissonInterval95(int count, double* lo, double* hi);

// How many leak and rupture runs the grid makes (LeakPlans in evaluate.cc).
size_t LeakRunCount(const BatchSpec& batch);
// The scenario documents of those runs, in order, and of a leak-free run
// (for tests and inspection).
std::vector<nlohmann::json> LeakRunDocs(const BatchSpec& batch);
nlohmann::json LeakFreeRunDoc(const BatchSpec& batch, double days, uint64_t seed);

enum class RunKind : uint8_t { kTuning, kLeakFree, kLeak };
const char* RunKindName(RunKind k);

// One fixed baseline window: its end (epoch s) and mean shortfall (kg/s).
struct BaselineWindow {
  double end_s = 0.0;
  double shortfall_kg_s = 0.0;
};

struct RunOutcome {
  RunKind kind = RunKind::kLeak;
  int index = 0;                      // within its kind
  uint64_t seed = 0;
  double duration_s = 0.0;
  double start_epoch_s = 0.0;
  // The leak (kLeak only).
  double leak_fraction = 0.0;
  double chainage_m = 0.0;            // as asked
  double node_chainage_m = 0.0;       // where the simulator put it
  double onset_s = 0.0;               // since the run's start
  double onset_clock_s = 0.0;         // time of day of the onset (NaN: fixed onsets)
  bool rupture = false;               // a rupture run (rupture ramp)
  bool during_operation = false;      // placed on a daily operation
  double true_rate_kg_s = 0.0;        // when fully open (truth.json)
  // The monitor.
  int false_alarms = 0;               // leak or rupture alarms raised before the onset (all, leak-free)
  std::vector<double> false_alarm_times_s;  // epoch
  std::vector<AlarmType> false_alarm_types;
  bool detected = false;
  bool by_rupture = false;            // the first alarm after the onset was the rupture alarm
  double detect_delay_s = 0.0;        // alarm - onset
  double rate_at_alarm_kg_s = 0.0;    // NaN when not given
  double location_at_alarm_m = 0.0;   // NaN when not given
  double rate_at_end_kg_s = 0.0;      // the estimate at the end of the run (NaN if none)
  double location_at_end_m = 0.0;
  // Baseline: per window length, the fixed windows of the run.
  std::vector<std::vector<BaselineWindow>> baseline;
  // Book-keeping.
  uint64_t readings = 0, ticks = 0;
  double sim_residual_rel = 0.0;      // simulator mass residual / throughput
  double wall_s = 0.0;
  // Segment status (leak-free run): seconds observed after the start-up
  // exclusion, and of them unavailable.
  double status_observed_s = 0.0, unavailable_s = 0.0;
  std::string error;                  // non-empty: the run failed
};

// Per leak size and method: the aggregated table row.
struct MethodRow {
  std::string method;         // "holdfast", "baseline 10 min", "bound"
  int runs = 0, detected = 0;
  double p_detect = 0.0;
  double ttd_median_s = 0.0;  // +inf: not reached within the observation
  double ttd_p90_s = 0.0;
  double rate_error_pct_median = 0.0;  // |estimate - truth| / truth at the alarm, NaN without
  double location_error_m_median = 0.0;
  double location_error_m_p90 = 0.0;
  double rate_error_end_pct_median = 0.0;
  double location_error_end_m_median = 0.0;
  int false_alarms_pre_onset = 0;
};

struct SizeRows {
  double leak_fraction = 0.0;
  bool rupture = false;
  double rate_kg_s = 0.0;      // mean true rate over the runs
  double delta_sigma = 0.0;    // rate / sigma_eff
  std::vector<MethodRow> rows;
};

struct FalseAlarmRow {
  std::string method;
  int false_alarms = 0;
  double per_30_days = 0.0;
  double threshold_kg_s = 0.0;  // baseline only (NaN for the monitor)
};

// Issue 10's "Done when" list, measured on this evaluation. verdict: "pass",
// "fail", "inconclusive" or "n/a" (with the reason in note).
struct Criterion {
  std::string name, value, target, verdict, note;
};

struct EvaluationResult {
  std::string site, segment, batch, family = "standard";
  double nominal_flow_kg_s = 0.0;
  // Tuning the runs used.
  double bias_kg_s = 0.0, sigma_kg_s = 0.0, phi = 0.0, sigma_eff_kg_s = 0.0;
  double block_s = 60.0;
  double arl0_blocks = 0.0;    // the budget in blocks (whole bank)
  double leak_free_days = 0.0;
  double grid_exposure_s = 0.0;  // pre-onset time of the grid runs
  std::vector<RunOutcome> runs;  // tuning, leak-free, then the grid
  std::vector<FalseAlarmRow> false_alarms;
  std::vector<SizeRows> sizes;
  std::vector<Criterion> criteria;
  // The figures behind the criteria (NaN when not measured).
  double unavailable_share = 0.0, status_observed_s = 0.0;
  int runs_half_pct = 0, detected_half_pct = 0;
  double ttd_p90_1pct_s = 0.0;
  int runs_10pct = 0, within_60s_10pct = 0;
  double fa_per_30_days = 0.0, fa_lo_per_30_days = 0.0, fa_hi_per_30_days = 0.0, budget_per_30_days = 0.0;
  int shut_ins = 0;
  double wall_s = 0.0;
  int jobs = 1;

  std::string SummaryMarkdown() const;  // the tables, notes and the caution
  std::string CriteriaMarkdown() const; // the criteria block alone
  std::string SummaryCsv() const;       // one row per size and method
  std::string RunsCsv() const;          // one row per run
  nlohmann::json ToJson() const;        // everything, for the report script
};

struct EvaluateOptions {
  int jobs = 0;  // worker threads; 0: the machine's cores
  // Called after each run finishes (from the calling thread's lock): done, total, the run.
  std::function<void(int, int, const RunOutcome&)> on_run;
  // Called on every tick of the leak-free run (from its worker thread), after
  // the monitor's tick: for traces of why a false alarm was raised.
  std::function<void(const Monitor&, int segment, double t)> on_leak_free_tick;
  bool IsValid(std::string* why) const;
};

// Runs the whole batch. False with the reason when the tuning fails or a run
// cannot be simulated at all; individual run failures are kept in the runs.
bool RunEvaluation(const Site& site, const BatchSpec& batch, const EvaluateOptions& options, EvaluationResult* result,
                   std::string* why);

// The Lorden bound, seconds: max(1, 2 ln(arl0_blocks) / delta^2) blocks.
double LordenDelayBound_s(double delta_sigma, double arl0_blocks, double block_s);

}  // namespace holdfast::sim
