// Scenario compiler: the demo scenario compiles to what it says, and bad
// scenarios are reported with the JSON pointer of each problem.
#include "scenario.h"

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include <unistd.h>

#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include "site_file.h"

namespace holdfast::sim {
namespace {

using nlohmann::json;

const std::string kSite = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/quillfen-site.json";
const std::string kScenario = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/quillfen-scenario.json";

Site DemoSite() {
  Site site;
  std::vector<ConfigProblem> problems;
  EXPECT_TRUE(LoadSiteFile(kSite, &site, &problems));
  return site;
}

json Minimal() {
  return json::parse(R"({
    "format": "holdfast-scenario/1",
    "start": "2026-03-14T06:00:00Z",
    "duration_s": 600,
    "upstream": {"type": "reservoir", "head_m": 700},
    "downstream": {"type": "tank", "initial_level_m": 5},
    "temperature": {"inlet": {"value": 18, "unit": "degC"}}
  })");
}

// Compiles `doc`; returns the problems as "path: message" lines.
std::vector<std::string> Problems(const json& doc, Scenario* out = nullptr) {
  const Site site = DemoSite();
  Scenario sc;
  std::vector<ConfigProblem> problems;
  const bool ok = CompileScenario(doc, site, out != nullptr ? out : &sc, &problems);
  std::vector<std::string> lines;
  for (const auto& p : problems) lines.push_back(p.ToString());
  EXPECT_EQ(ok, lines.empty());
  return lines;
}

bool Has(const std::vector<std::string>& lines, const std::string& text) {
  for (const auto& l : lines)
    if (l.find(text) != std::string::npos) return true;
  return false;
}

std::string Joined(const std::vector<std::string>& lines) {
  std::string s;
  for (const auto& l : lines) s += l + "\n";
  return s;
}

TEST(Scenario, DemoCompilesToWhatItSays) {
  const Site site = DemoSite();
  Scenario sc;
  std::vector<ConfigProblem> problems;
  ASSERT_TRUE(LoadScenarioFile(kScenario, site, &sc, &problems)) << (problems.empty() ? "" : problems[0].ToString());
  EXPECT_EQ(site.segments[static_cast<size_t>(sc.segment)].id, "QS-1");
  EXPECT_DOUBLE_EQ(sc.duration_s, 6 * 3600.0);
  EXPECT_DOUBLE_EQ(sc.start_epoch_s, 1773468000.0);  // calendar.timegm((2026, 3, 14, 6, 0, 0))
  const MocSetup& m = sc.moc;
  EXPECT_EQ(m.upstream.type, UpstreamType::kPump);
  // H = H0 - c Q^2 through (900 m3/h, 600 m) from 760 m: c = 160 / 0.25^2.
  EXPECT_NEAR(m.upstream.curve_c_s2_m5, 160.0 / 0.0625, 1e-9);
  EXPECT_EQ(m.downstream.type, DownstreamType::kTank);
  EXPECT_EQ(m.downstream.strapping.size(), 7u);
  ASSERT_EQ(m.laterals.size(), 1u);
  EXPECT_EQ(sc.lateral_points[0], "TJ-FT-201");
  EXPECT_DOUBLE_EQ(m.laterals[0].chainage_m, 22000.0);
  EXPECT_NEAR(m.laterals[0].flow.At(0.0), 150.0 / 3.6, 1e-12);     // t/h -> kg/s
  EXPECT_NEAR(m.laterals[0].flow.At(7350.0), 185.0 / 3.6, 1e-12);  // halfway up the 300 s ramp
  EXPECT_NEAR(m.laterals[0].flow.At(9000.0), 220.0 / 3.6, 1e-12);
  ASSERT_EQ(m.leaks.size(), 1u);
  EXPECT_DOUBLE_EQ(m.leaks[0].onset_s, 14400.0);
  EXPECT_NEAR(m.leaks[0].rate_kg_s, 0.015 * site.segments[0].nominal_flow_kg_s, 1e-12);
  // Ground model from the site: 11 degC, 36000 s.
  EXPECT_NEAR(m.ground_temperature_k, 284.15, 1e-9);
  EXPECT_DOUBLE_EQ(m.thermal_time_constant_s, 36000.0);
  // Every point of the segment gets readings, with the site's accuracies as defaults.
  EXPECT_EQ(sc.points.size(), 10u);
  for (const PointPlan& p : sc.points) {
    const PointSpec& ps = site.points[static_cast<size_t>(p.point)];
    if (ps.id == "CF-PT-101") {
      EXPECT_EQ(p.measure, Measure::kPressure);
      EXPECT_NEAR(p.instrument.noise, 0.02, 1e-12);            // bar, from the site
      EXPECT_NEAR(p.instrument.bias_draw_sigma, 0.05, 1e-12);  // bar
      EXPECT_DOUBLE_EQ(p.instrument.sample_period_s, 2.0);
    }
    if (ps.id == "MB-FT-302") {
      EXPECT_EQ(p.measure, Measure::kTankOutflow);
    }
    if (ps.id == "MB-TT-301") {
      EXPECT_EQ(p.measure, Measure::kTemperature);  // on the line at 48 km
      EXPECT_DOUBLE_EQ(p.instrument.sample_period_s, 10.0);
    }
    if (ps.id == "MB-TT-302") {
      EXPECT_EQ(p.measure, Measure::kTankTemperature);  // the tank's own thermometer: the contents
    }
    if (ps.id == "MB-LT-301") {
      EXPECT_EQ(p.measure, Measure::kTankLevel);
    }
  }
}

TEST(Scenario, MinimalIsValid) {
  Scenario sc;
  const auto lines = Problems(Minimal(), &sc);
  EXPECT_TRUE(lines.empty()) << Joined(lines);
  EXPECT_EQ(sc.seed, 1u);
  EXPECT_DOUBLE_EQ(sc.moc.time_step_hint_s, 0.1);
}

TEST(Scenario, ProblemsCarryTheirJsonPath) {
  json doc = Minimal();
  doc["duration_s"] = -5;
  doc["time_stpe_s"] = 0.1;
  doc["upstream"] = json::parse(R"({"type": "pumb"})");
  doc["downstream"]["initial_level_m"] = 25;
  doc["leaks"] = json::parse(R"([{"chainage_m": 60000, "onset_s": 10, "rate": {"value": 3, "unit": "bar"}},
                                  {"chainage_m": 100, "onset_s": 10}])");
  doc["instruments"] = json::parse(R"({"CF-PT-1O1": {"noise": 0.01}, "CF-FT-101": {"noise": 0.1}})");
  doc["laterals"] = json::parse(R"({"MB-FT-302": {"flow": {"value": 1, "unit": "kg/s"}}})");
  const auto lines = Problems(doc);
  const std::string all = Joined(lines);
  EXPECT_TRUE(Has(lines, "/duration_s: must be positive (got -5)")) << all;
  EXPECT_TRUE(Has(lines, "/time_stpe_s: unknown key \"time_stpe_s\" (did you mean \"time_step_s\"?)")) << all;
  EXPECT_TRUE(Has(lines, "/upstream/type: unknown type \"pumb\" (did you mean \"pump\"?)")) << all;
  EXPECT_TRUE(Has(lines, "/downstream/initial_level_m: is above the strapping table (18 m)")) << all;
  EXPECT_TRUE(Has(lines, "/leaks/0/chainage_m: chainage 60000 m is outside the segment [0, 48000 m]")) << all;
  EXPECT_TRUE(Has(lines, "/leaks/0/rate/unit: unit \"bar\" is a pressure unit, expected a mass flow or volume flow unit")) << all;
  EXPECT_TRUE(Has(lines, "/leaks/1: give the leak's size one way")) << all;
  EXPECT_TRUE(Has(lines, "/instruments/CF-PT-1O1: point \"CF-PT-1O1\" is not simulated in segment \"QS-1\" (did you mean \"CF-PT-101\"?)"))
      << all;
  EXPECT_TRUE(Has(lines, "/instruments/CF-FT-101/noise: unknown key \"noise\" (did you mean \"noise_pct\"?)")) << all;
  EXPECT_TRUE(Has(lines, "/laterals/MB-FT-302: \"MB-FT-302\" is not an injection or delivery meter")) << all;
}

TEST(Scenario, OperationsAreChecked) {
  json doc = Minimal();
  doc["operations"] = json::parse(R"([
    {"at_s": 100, "action": "pump_trip"},
    {"at_s": 200, "action": "valve", "opening": 0.5},
    {"at_s": 300, "action": "restart"},
    {"at_s": 400, "action": "setpoint", "target": "TJ-FT-2O1", "flow": {"value": 1, "unit": "t/h"}},
    {"at_s": 500, "action": "setpoint", "target": "TJ-FT-201", "flow": {"value": 200, "unit": "t/h"}, "ramp": 60}
  ])");
  const auto lines = Problems(doc);
  const std::string all = Joined(lines);
  EXPECT_TRUE(Has(lines, "/operations/0/action: \"pump_trip\" needs a pump upstream")) << all;
  EXPECT_TRUE(Has(lines, "/operations/1/action: \"valve\" needs a valve at the downstream boundary")) << all;
  EXPECT_TRUE(Has(lines, "/operations/2/action: \"restart\" needs an earlier \"shut_in\"")) << all;
  EXPECT_TRUE(Has(lines, "/operations/3/target: no flow setpoint \"TJ-FT-2O1\"")) << all;
  EXPECT_TRUE(Has(lines, "/operations/4/ramp: unknown key \"ramp\" (did you mean \"ramp_s\"?)")) << all;
}

TEST(Scenario, ShutInAndRestartRestoreTheSetpoints) {
  json doc = Minimal();
  doc["upstream"] = json::parse(
      R"({"type": "pump", "suction_head_m": 95, "shutoff_head_m": 760, "rated_flow": {"value": 900, "unit": "m3/h"}, "rated_head_m": 600})");
  doc["downstream"]["valve"] = json::parse(R"({"cda_m2": 0.02, "opening": 0.8})");
  doc["laterals"] = json::parse(R"({"TJ-FT-201": {"flow": {"value": 36, "unit": "t/h"}}})");
  doc["operations"] = json::parse(R"([
    {"at_s": 1000, "action": "shut_in", "ramp_s": 20},
    {"at_s": 2000, "action": "restart", "ramp_s": 30}
  ])");
  Scenario sc;
  const auto lines = Problems(doc, &sc);
  ASSERT_TRUE(lines.empty()) << Joined(lines);
  const MocSetup& m = sc.moc;
  // Outlet and lateral close over 20 s from 1000 s; the pump stops over the next 20 s.
  EXPECT_NEAR(m.downstream.opening.At(1010.0), 0.4, 1e-12);
  EXPECT_NEAR(m.laterals[0].flow.At(1020.0), 0.0, 1e-12);
  EXPECT_NEAR(m.upstream.speed.At(1020.0), 1.0, 1e-12);
  EXPECT_NEAR(m.upstream.speed.At(1030.0), 0.5, 1e-12);
  EXPECT_NEAR(m.upstream.speed.At(1500.0), 0.0, 1e-12);
  // Restart: the pump first, then the valve back to 0.8 and the lateral to 36 t/h.
  EXPECT_NEAR(m.upstream.speed.At(2030.0), 1.0, 1e-12);
  EXPECT_NEAR(m.downstream.opening.At(2030.0), 0.0, 1e-12);
  EXPECT_NEAR(m.downstream.opening.At(2060.0), 0.8, 1e-12);
  EXPECT_NEAR(m.laterals[0].flow.At(2060.0), 10.0, 1e-12);
}

TEST(Scenario, FileErrorsNameTheFileAndPlace) {
  const Site site = DemoSite();
  const std::string path =
      (std::filesystem::temp_directory_path() / ("holdfast-scenario-test-" + std::to_string(::getpid()) + ".json")).string();
  {
    std::ofstream f(path);
    f << "{\n  \"format\": \"holdfast-scenario/1\",\n  \"seed\": 1,\n  \"seed\": 2,\n  \"start\": 5,\n}\n";
  }
  Scenario sc;
  std::vector<ConfigProblem> problems;
  EXPECT_FALSE(LoadScenarioFile(path, site, &sc, &problems));
  ASSERT_EQ(problems.size(), 1u);
  EXPECT_NE(problems[0].ToString().find(":6:1: parse error"), std::string::npos) << problems[0].ToString();
  {
    std::ofstream f(path);
    f << "{\"format\": \"holdfast-scenario/1\", \"seed\": 1, \"seed\": 2}\n";
  }
  problems.clear();
  EXPECT_FALSE(LoadScenarioFile(path, site, &sc, &problems));
  std::vector<std::string> lines;
  for (const auto& p : problems) lines.push_back(p.ToString());
  EXPECT_TRUE(Has(lines, path + ":/seed: duplicate key \"seed\"")) << Joined(lines);
  EXPECT_TRUE(Has(lines, path + ":/start: missing required field \"start\"")) << Joined(lines);
  std::remove(path.c_str());
  problems.clear();
  EXPECT_FALSE(LoadScenarioFile(path, site, &sc, &problems));
  ASSERT_EQ(problems.size(), 1u);
  EXPECT_NE(problems[0].ToString().find("cannot read the file"), std::string::npos);
}

}  // namespace
}  // namespace holdfast::sim
