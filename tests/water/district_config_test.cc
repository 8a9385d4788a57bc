// The "districts" section of holdfast-site/1 and the holdfast-water-year/1
// file: valid documents compile to SI; every class of error is reported with
// its file name and JSON pointer.
#include <cstdio>
#include <fstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include "holdfast/site.h"
#include "holdfast/site_config.h"
#include "site_file.h"
#include "water_files.h"

namespace holdfast {
namespace {

using nlohmann::json;

json Base() {
  return json::parse(R"json({
    "format": "holdfast-site/1",
    "site": {"name": "District test (fictional)"},
    "fluids": {"water": {"model": "water"}},
    "points": {
      "FT-IN": {"kind": "flow", "unit": "L/s"},
      "FT-OUT": {"kind": "flow", "unit": "m3/h"},
      "FT-MASS": {"kind": "flow", "unit": "kg/s"},
      "LT-1": {"kind": "level", "unit": "m"},
      "PT-AZP": {"kind": "pressure", "unit": "bar", "reference": "gauge"},
      "FT-AMR": {"kind": "flow", "unit": "m3/h"}
    },
    "districts": [{
      "id": "D1",
      "inlets": ["FT-IN"],
      "outlets": ["FT-OUT"],
      "reservoirs": [{"id": "R1", "level_point": "LT-1",
                      "strapping_table": {"level_unit": "m", "volume_unit": "m3", "rows": [[0, 0], [5, 1000]]}}],
      "pressure_reference": {"point": "PT-AZP", "head_offset_m": -2.5},
      "customer_meters": {"point": "FT-AMR", "coverage": 0.8},
      "properties": {"households": 1200, "non_households": 40, "population": 2900},
      "service_connections": 1100,
      "mains_length_km": 18.5,
      "private_pipe_length_km": 1.2,
      "night_flow": {"utc_offset_h": 1, "window_start_h": 1, "window_end_h": 4, "averaging_s": 3600, "n1": 1.15},
      "burst_detection": {"false_alarm_interval_days": 180, "day_step_m3_h": 4.2}
    }]
  })json");
}

std::vector<std::string> Problems(const json& doc) {
  Site site;
  std::vector<ConfigProblem> problems;
  EXPECT_FALSE(CompileSite(doc, &site, &problems));
  std::vector<std::string> out;
  for (const auto& p : problems) out.push_back(p.ToString());
  return out;
}

bool Has(const std::vector<std::string>& list, const std::string& text) {
  for (const auto& s : list)
    if (s.find(text) != std::string::npos) return true;
  return false;
}

std::string All(const std::vector<std::string>& list) {
  std::string s;
  for (const auto& p : list) s += p + "\n";
  return s;
}

TEST(DistrictConfig, CompilesToSi) {
  Site site;
  std::vector<ConfigProblem> problems;
  ASSERT_TRUE(CompileSite(Base(), &site, &problems)) << (problems.empty() ? "" : problems[0].ToString());
  EXPECT_TRUE(site.segments.empty());  // a water-only site has no pipeline segments
  ASSERT_EQ(site.districts.size(), 1u);
  const DistrictSpec& d = site.districts[0];
  EXPECT_EQ(d.name, "D1");
  ASSERT_EQ(d.inlets.size(), 1u);
  EXPECT_EQ(site.points[d.inlets[0]].id, "FT-IN");
  EXPECT_DOUBLE_EQ(site.points[d.inlets[0]].unit.ToSi(1.0), 1e-3);  // L/s -> m3/s
  ASSERT_EQ(d.reservoirs.size(), 1u);
  EXPECT_DOUBLE_EQ(d.reservoirs[0].strapping[1].volume_m3, 1000.0);
  EXPECT_DOUBLE_EQ(d.pressure_head_offset_m, -2.5);
  EXPECT_EQ(site.points[d.customer_meter_point].id, "FT-AMR");
  EXPECT_DOUBLE_EQ(d.customer_meter_coverage, 0.8);
  EXPECT_DOUBLE_EQ(d.households, 1200.0);
  EXPECT_DOUBLE_EQ(d.utc_offset_s, 3600.0);
  EXPECT_DOUBLE_EQ(d.night_start_h, 1.0);
  EXPECT_DOUBLE_EQ(d.night_averaging_s, 3600.0);
  EXPECT_DOUBLE_EQ(d.n1, 1.15);
  EXPECT_DOUBLE_EQ(d.household_night_use_l_h, 1.7);  // default (common practice, from memory)
  EXPECT_DOUBLE_EQ(d.false_alarm_interval_s, 180.0 * 86400.0);
  EXPECT_DOUBLE_EQ(d.day_step_m3_h, 4.2);
}

TEST(DistrictConfig, SegmentsStillRequiredWithoutDistricts) {
  json doc = Base();
  doc.erase("districts");
  EXPECT_TRUE(Has(Problems(doc), "/segments: missing required field \"segments\""));
}

TEST(DistrictConfig, MeterErrors) {
  json doc = Base();
  doc["districts"][0]["inlets"] = json::array({"FT-MASS", "FT-NOPE", 7});
  doc["districts"][0]["outlets"] = json::array({"LT-1"});
  const auto p = Problems(doc);
  EXPECT_TRUE(Has(p, "/districts/0/inlets/0: point \"FT-MASS\" has a mass-flow unit (kg/s); district meters need a "
                     "volume-flow unit")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/inlets/1: point \"FT-NOPE\" is not defined in /points")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/inlets/2: must be the id of a flow point (got a number (7))")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/outlets/0: point \"LT-1\" is a level point; a district meter needs a flow point"))
      << All(p);
}

TEST(DistrictConfig, RequiredFieldsAndRanges) {
  json doc = Base();
  json& d = doc["districts"][0];
  d.erase("pressure_reference");
  d.erase("mains_length_km");
  d["properties"]["households"] = -5;
  d["customer_meters"]["coverage"] = 1.5;
  d["night_flow"]["window_start_h"] = 5;
  d["night_flow"]["n1"] = 4;
  d["night_flow"]["per_person"] = "yes";
  d["burst_detection"]["false_alarm_intervall_days"] = 30;
  const auto p = Problems(doc);
  EXPECT_TRUE(Has(p, "/districts/0/pressure_reference: missing required field \"pressure_reference\"")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/mains_length_km: missing required field")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/properties/households: must not be negative (got -5)")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/customer_meters/coverage: must be a fraction in (0, 1] (got 1.5)")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/night_flow/window_end_h: the night window must end after it starts")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/night_flow/n1: FAVAD N1 must be in [0, 3]")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/night_flow/per_person: must be true or false")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/0/burst_detection/false_alarm_intervall_days: unknown key "
                     "\"false_alarm_intervall_days\" (did you mean \"false_alarm_interval_days\"?)")) << All(p);
}

TEST(DistrictConfig, PerPersonNeedsPopulationAndIdsAreUnique) {
  json doc = Base();
  doc["districts"][0]["properties"].erase("population");
  doc["districts"][0]["night_flow"]["per_person"] = true;
  doc["districts"].push_back(doc["districts"][0]);
  const auto p = Problems(doc);
  EXPECT_TRUE(Has(p, "/districts/0/night_flow/per_person: per-person night use needs /properties/population")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/1/id: duplicate district id \"D1\"")) << All(p);
  EXPECT_TRUE(Has(p, "/districts/1/reservoirs/0/id: duplicate tank or reservoir id \"R1\"")) << All(p);
}

TEST(DistrictConfig, GarbageNeverCrashes) {
  for (const json& bad : {json(nullptr), json(5), json("x"), json::array({nullptr, 3, "a"}), json::object()}) {
    json doc = Base();
    doc["districts"] = bad;
    Site site;
    std::vector<ConfigProblem> problems;
    EXPECT_FALSE(CompileSite(doc, &site, &problems)) << bad.dump();
    EXPECT_FALSE(problems.empty());
    json doc2 = Base();
    for (auto it = doc2["districts"][0].begin(); it != doc2["districts"][0].end(); ++it) {
      json d3 = doc2;
      d3["districts"][0][it.key()] = bad;
      CompileSite(d3, &site, &problems);  // must not crash
    }
  }
}

std::string WriteTemp(const std::string& name, const std::string& text) {
  const std::string path = ::testing::TempDir() + name;
  std::ofstream(path) << text;
  return path;
}

TEST(WaterYearFile, DemoFileLoads) {
  water::WaterBalanceInputs in;
  std::string name;
  std::vector<ConfigProblem> problems;
  ASSERT_TRUE(LoadWaterYearFile(std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/delvenmoor-year.json", &in, &name,
                                &problems))
      << problems[0].ToString();
  EXPECT_EQ(in.system_input.size(), 2u);
  EXPECT_DOUBLE_EQ(in.infrastructure.private_pipe_length_km.ci95, 9.5 * 0.20);
}

TEST(WaterYearFile, ErrorsNameFileAndField) {
  const std::string path = WriteTemp("year-bad.json", R"json({
    "format": "holdfast-water-year/1",
    "system_input": [{"name": "works", "volume_m3": -10, "accuracy_pct": 2}, {"volume_m3": 5}],
    "billed_meterd": {"volume_m3": 1, "accuracy_pct": 1},
    "infrastructure": {"mains_length_km": 0, "service_connections": {"value": 10, "accuracy_pct": 200}}
  })json");
  water::WaterBalanceInputs in;
  std::string name;
  std::vector<ConfigProblem> problems;
  EXPECT_FALSE(LoadWaterYearFile(path, &in, &name, &problems));
  std::vector<std::string> p;
  for (const auto& x : problems) p.push_back(x.ToString());
  EXPECT_TRUE(Has(p, path + ":/system_input/0/volume_m3: must be a volume in [0, 1e12] m3 (got -10)")) << All(p);
  EXPECT_TRUE(Has(p, path + ":/system_input/1/accuracy_pct: missing required field")) << All(p);
  EXPECT_TRUE(Has(p, path + ":/billed_meterd: unknown key \"billed_meterd\" (did you mean \"billed_metered\"?)")) << All(p);
  EXPECT_TRUE(Has(p, path + ":/infrastructure/mains_length_km: must be positive (got 0)")) << All(p);
  EXPECT_TRUE(Has(p, path + ":/infrastructure/service_connections/accuracy_pct: must be a 95 % accuracy")) << All(p);
  EXPECT_TRUE(Has(p, path + ":/infrastructure/average_pressure_m: missing required field")) << All(p);
}

TEST(WaterYearFile, ParseErrorsAndMissingFiles) {
  water::WaterBalanceInputs in;
  std::string name;
  std::vector<ConfigProblem> problems;
  const std::string path = WriteTemp("year-syntax.json", "{\n  \"format\": \"holdfast-water-year/1\",\n  \"x\": [1,\n}\n");
  EXPECT_FALSE(LoadWaterYearFile(path, &in, &name, &problems));
  ASSERT_FALSE(problems.empty());
  EXPECT_NE(problems[0].ToString().find(path + ":4:"), std::string::npos) << problems[0].ToString();
  problems.clear();
  EXPECT_FALSE(LoadWaterYearFile("/nonexistent/year.json", &in, &name, &problems));
  ASSERT_FALSE(problems.empty());
  EXPECT_NE(problems[0].ToString().find("/nonexistent/year.json: cannot read the file"), std::string::npos);
  problems.clear();
  const std::string dup = WriteTemp("year-dup.json", R"({"format": "holdfast-water-year/1", "format": "x"})");
  EXPECT_FALSE(LoadWaterYearFile(dup, &in, &name, &problems));
  ASSERT_FALSE(problems.empty());
  EXPECT_NE(problems[0].ToString().find("duplicate key \"format\""), std::string::npos) << problems[0].ToString();
}

}  // namespace
}  // namespace holdfast
