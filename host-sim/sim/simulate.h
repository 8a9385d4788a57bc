// Runs a compiled scenario: the method of characteristics for the hydraulics,
// the instruments on top, and the two outputs of `holdfast sim`:
//   readings.csv  time,point,value,quality (README "Readings file"), values in
//                 each point's configured unit, rows in order of arrival;
//   truth.json    what really happened: leaks, flows, the inventory every
//                 truth_every_s and the mass totals (config/SCENARIO.md).
// Deterministic: the same site, scenario and seed give the same bytes.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "holdfast/site.h"
#include "instruments.h"
#include "scenario.h"

namespace holdfast::sim {

struct SimulationResult {
  std::vector<SimReading> readings;  // sorted as written (arrival, then point, then sequence)
  std::vector<int> decimals;         // per site point index (-1: not simulated)
  std::string truth_json;            // the truth document, ready to write
  // Figures for the summary (not written to the files).
  uint64_t steps = 0;
  int nodes = 0;
  double dt_s = 0.0;
  double wall_s = 0.0;
  double node_updates_per_s = 0.0;
  double inventory_start_kg = 0.0, inventory_end_kg = 0.0;
  double in_kg = 0.0, out_kg = 0.0, leak_kg = 0.0, residual_kg = 0.0;
  std::vector<std::string> notes;  // grid and leak lines for the console
};

// Runs the scenario. Returns false with the reason when the hydraulics
// cannot start (no steady state, no time step within the tolerance).
bool Simulate(const Site& site, const Scenario& scenario, SimulationResult* result, std::string* why);

// The readings as CSV text (header included).
std::string ReadingsCsv(const Site& site, const Scenario& scenario, const SimulationResult& result);

// Creates `dir` if needed and writes readings.csv and truth.json there.
bool WriteSimulation(const Site& site, const Scenario& scenario, const SimulationResult& result, const std::string& dir,
                     std::string* why);

}  // namespace holdfast::sim
