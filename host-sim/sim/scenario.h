// Simulator scenarios: a "holdfast-scenario/1" JSON document, documented in
// config/SCENARIO.md, compiled against a site into the hydraulic setup
// (MocSetup) and the instrument model of every point of the segment.
// Like the site config, the compiler reports every problem with its JSON
// pointer ("scenario.json:/leaks/0/chainage_m: ...") and never throws.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "holdfast/site.h"
#include "holdfast/site_config.h"
#include "instruments.h"
#include "moc.h"

namespace holdfast::sim {

// What a point of the segment measures in the simulation.
enum class Measure {
  kInletFlow,        // the upstream boundary flow
  kPipeOutletFlow,   // the flow leaving the pipe's downstream end
  kTankOutflow,      // the receiving tank's outlet
  kLateralFlow,      // an injection or delivery (index into MocSetup::laterals)
  kPressure,         // line pressure at a chainage, seen from the transmitter's elevation
  kTemperature,      // line temperature at a chainage
  kTankLevel,        // the receiving tank's level
  kTankTemperature,  // the receiving tank's contents
};
const char* MeasureName(Measure m);

struct PointPlan {
  int point = -1;  // index into Site::points
  Measure measure = Measure::kPressure;
  int lateral = -1;
  double chainage_m = 0.0;
  double elevation_m = kNaN;  // pressure transmitters: their own elevation
  MeterKind meter = MeterKind::kMass;  // flows: what the meter reports
  InstrumentSpec instrument;
};

struct LeakPlan {
  double onset_s = 0.0, ramp_s = 0.0, chainage_m = 0.0;
  std::string size;  // as given: "rate 3.23 kg/s", "1.5 % of nominal flow", "orifice CdA 1.2e-4 m2"
};

struct Scenario {
  std::string name;
  int segment = -1;
  double start_epoch_s = 0.0;
  double duration_s = 0.0;
  uint64_t seed = 1;
  // Seed of the instruments' systematic errors (their biases): a site's meters
  // keep theirs from run to run, so runs of one site share it ("instrument_set_seed"; default: seed).
  uint64_t instrument_set_seed = 1;
  double truth_every_s = 60.0;
  MocSetup moc;
  std::vector<PointPlan> points;            // every point of the segment that gets readings
  std::vector<std::string> lateral_points;  // meter point id of each lateral
  std::vector<LeakPlan> leaks;              // as given, in MocSetup::leaks order
  std::string upstream_text, downstream_text;  // one-line descriptions for the truth file
  std::vector<std::string> operations_text;    // one line per operation
};

// Compiles `doc` for `site`. Returns true when valid; otherwise appends every
// problem (path = JSON pointer into the scenario) and returns false.
bool CompileScenario(const nlohmann::json& doc, const Site& site, Scenario* scenario,
                     std::vector<ConfigProblem>* problems);

// Reads, parses and compiles a scenario file; problem paths are prefixed with
// the file name, as LoadSiteFile does ("s.json:/leaks/0/onset_s: ...").
// Duplicate keys and parse errors (with line and column) are reported too.
bool LoadScenarioFile(const std::string& path, const Site& site, Scenario* scenario,
                      std::vector<ConfigProblem>* problems);

const char* ScenarioFormatVersion();  // "holdfast-scenario/1"

}  // namespace holdfast::sim
