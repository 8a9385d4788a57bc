// `holdfast sim` end to end on the demo site and scenario, shortened: the
// same seed gives the same bytes, the readings file round-trips through the
// core's reader, the instruments report the simulated quantities in their
// configured units, and the run conserves mass.
#include "simulate.h"

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include <unistd.h>

#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include "readings_csv.h"
#include "scenario.h"
#include "site_file.h"

namespace holdfast::sim {
namespace {

const std::string kSite = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/quillfen-site.json";
const std::string kScenario = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/quillfen-scenario.json";

struct Demo {
  Site site;
  Scenario scenario;
};

// The demo, cut to 15 minutes with the leak opening after 5.
Demo LoadDemo(double duration_s = 900.0) {
  Demo d;
  std::vector<ConfigProblem> problems;
  EXPECT_TRUE(LoadSiteFile(kSite, &d.site, &problems));
  EXPECT_TRUE(LoadScenarioFile(kScenario, d.site, &d.scenario, &problems));
  for (const auto& p : problems) ADD_FAILURE() << p.ToString();
  d.scenario.duration_s = duration_s;
  if (!d.scenario.moc.leaks.empty()) d.scenario.moc.leaks[0].onset_s = 300.0;
  return d;
}

std::string TempPath(const std::string& name) {
  return (std::filesystem::temp_directory_path() / ("holdfast-sim-test-" + std::to_string(::getpid()) + "-" + name)).string();
}

TEST(SimRun, SameSeedSameBytes) {
  Demo d = LoadDemo();
  SimulationResult a, b, c;
  std::string why;
  ASSERT_TRUE(Simulate(d.site, d.scenario, &a, &why)) << why;
  ASSERT_TRUE(Simulate(d.site, d.scenario, &b, &why)) << why;
  const std::string csv_a = ReadingsCsv(d.site, d.scenario, a);
  EXPECT_EQ(csv_a, ReadingsCsv(d.site, d.scenario, b));
  EXPECT_EQ(a.truth_json, b.truth_json);
  d.scenario.seed += 1;
  ASSERT_TRUE(Simulate(d.site, d.scenario, &c, &why)) << why;
  EXPECT_NE(csv_a, ReadingsCsv(d.site, d.scenario, c));
  // The hydraulics do not depend on the seed, only the instruments do.
  const auto ta = nlohmann::json::parse(a.truth_json), tc = nlohmann::json::parse(c.truth_json);
  EXPECT_EQ(ta["series"], tc["series"]);
  EXPECT_EQ(ta["totals"], tc["totals"]);
}

TEST(SimRun, WritesBothFilesAndTheyMatchTheResult) {
  const Demo d = LoadDemo(120.0);
  SimulationResult r;
  std::string why;
  ASSERT_TRUE(Simulate(d.site, d.scenario, &r, &why)) << why;
  const std::string dir = TempPath("out");
  ASSERT_TRUE(WriteSimulation(d.site, d.scenario, r, dir, &why)) << why;
  std::ifstream csv(dir + "/readings.csv", std::ios::binary), truth(dir + "/truth.json", std::ios::binary);
  std::stringstream s1, s2;
  s1 << csv.rdbuf();
  s2 << truth.rdbuf();
  EXPECT_EQ(s1.str(), ReadingsCsv(d.site, d.scenario, r));
  EXPECT_EQ(s2.str(), r.truth_json);
  std::filesystem::remove_all(dir);
}

TEST(SimRun, ReadingsRoundTripThroughTheCoreReader) {
  const Demo d = LoadDemo();
  SimulationResult r;
  std::string why;
  ASSERT_TRUE(Simulate(d.site, d.scenario, &r, &why)) << why;
  ASSERT_GT(r.readings.size(), 1000u);
  const std::string path = TempPath("readings.csv");
  {
    std::ofstream f(path, std::ios::binary);
    f << ReadingsCsv(d.site, d.scenario, r);
  }
  ReadingsCsvReader reader;
  ASSERT_TRUE(reader.Open(path, d.site, &why)) << why;
  Reading x;
  size_t k = 0;
  while (reader.Next(&x)) {
    ASSERT_LT(k, r.readings.size());
    const SimReading& s = r.readings[k];
    EXPECT_EQ(x.point, s.point);
    EXPECT_NEAR(x.time_s, d.scenario.start_epoch_s + s.time_s, 0.0005 + 1e-6);  // milliseconds in the file
    const int decimals = r.decimals[static_cast<size_t>(s.point)];
    EXPECT_NEAR(x.value, s.value, 0.5 * std::pow(10.0, -decimals) + 1e-9);
    EXPECT_EQ(x.quality, s.quality);
    ++k;
  }
  EXPECT_EQ(k, r.readings.size());
  EXPECT_EQ(reader.bad_rows(), 0u);
  std::remove(path.c_str());
}

TEST(SimRun, InstrumentsReportTheSimulatedQuantitiesInTheirUnits) {
  Demo d = LoadDemo(600.0);
  // Perfect instruments, so that a reading is the truth in the point's unit.
  for (PointPlan& p : d.scenario.points) {
    p.instrument = InstrumentSpec{};
    p.instrument.sample_period_s = 10.0;
  }
  SimulationResult r;
  std::string why;
  ASSERT_TRUE(Simulate(d.site, d.scenario, &r, &why)) << why;
  const auto truth = nlohmann::json::parse(r.truth_json);
  const auto& first = truth["series"][0];  // t = 0
  auto reading_at_zero = [&](const char* id) {
    const int p = d.site.FindPoint(id);
    for (const SimReading& s : r.readings)
      if (s.point == p && s.time_s == 0.0) return s.value;
    ADD_FAILURE() << "no reading of " << id << " at t = 0";
    return 0.0;
  };
  const double patm = d.site.atmospheric_pressure_pa;
  // Pressure transmitter at the inlet, gauge, bar, at the pipe's elevation.
  EXPECT_NEAR(reading_at_zero("CF-PT-101"), (first["inlet_pressure_pa"].get<double>() - patm) / 1e5, 1e-6);
  // Delivery meter: mass, t/h.
  EXPECT_NEAR(reading_at_zero("TJ-FT-201"), first["delivery_kg_s"].get<double>() * 3.6, 1e-3);
  // Inlet meter: volume at line conditions, m3/h, near the nominal 900 m3/h.
  const double q_in = reading_at_zero("CF-FT-101");
  EXPECT_GT(q_in, 850.0);
  EXPECT_LT(q_in, 950.0);
  // Tank level in m; tank outlet meter reads zero (the tank only fills).
  EXPECT_NEAR(reading_at_zero("MB-LT-301"), 5.2, 1e-9);
  EXPECT_NEAR(reading_at_zero("MB-FT-302"), 0.0, 1e-12);
  // Temperatures in degC.
  EXPECT_NEAR(reading_at_zero("MB-TT-301"), first["outlet_temperature_k"].get<double>() - 273.15, 1e-4);
}

TEST(SimRun, DemoRunConservesMass) {
  const Demo d = LoadDemo(1800.0);
  SimulationResult r;
  std::string why;
  ASSERT_TRUE(Simulate(d.site, d.scenario, &r, &why)) << why;
  EXPECT_GT(r.leak_kg, 0.0);
  EXPECT_LT(std::fabs(r.residual_kg), 1e-6 * r.in_kg);
  const auto truth = nlohmann::json::parse(r.truth_json);
  const auto& series = truth["series"];
  ASSERT_EQ(series.size(), 31u);  // every 60 s, both ends included
  EXPECT_EQ(series.back()["time"], "2026-03-14T06:30:00.000Z");
  // The series agrees with itself: inventory change = in - out - leak.
  const auto& a = series.front();
  const auto& b = series.back();
  const double change = b["inventory_kg"].get<double>() - a["inventory_kg"].get<double>();
  const double net = b["in_kg"].get<double>() - b["out_kg"].get<double>() - b["leak_kg"].get<double>();
  EXPECT_NEAR(change, net, 0.01);
  EXPECT_EQ(truth["leaks"][0]["onset"], "2026-03-14T06:05:00.000Z");
}

}  // namespace
}  // namespace holdfast::sim
