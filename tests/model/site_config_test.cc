// Site config compiler: the example config compiles to the expected SI model,
// every class of config error is reported with its exact JSON pointer, and
// garbage never crashes the compiler.
#include <algorithm>
#include <cmath>
#include <fstream>
#include <initializer_list>
#include <sstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include "holdfast/fluid.h"
#include "holdfast/site.h"
#include "holdfast/site_config.h"
#include "holdfast/units.h"

namespace holdfast {
namespace {

using nlohmann::json;

json LoadExample() {
  std::ifstream in(std::string(HOLDFAST_SOURCE_DIR) + "/config/example-site.json");
  EXPECT_TRUE(in.good()) << "config/example-site.json not readable";
  std::stringstream ss;
  ss << in.rdbuf();
  return json::parse(ss.str());
}

// A small valid site; each error test breaks one thing in it.
json Base() {
  return json::parse(R"json({
    "format": "holdfast-site/1",
    "site": {"name": "Test site (fictional)"},
    "fluids": {
      "oil": {"model": "crude_oil", "base_density": {"value": 850, "unit": "kg/m3"}},
      "gas": {"model": "natural_gas", "gas_gravity": 0.6}
    },
    "points": {
      "FT-IN": {"kind": "flow", "unit": "m3/h"},
      "FT-OUT": {"kind": "flow", "unit": "kg/s"},
      "PT-IN": {"kind": "pressure", "unit": "bar", "reference": "gauge"},
      "PT-OUT": {"kind": "pressure", "unit": "bar", "reference": "absolute"},
      "TT-IN": {"kind": "temperature", "unit": "degC"},
      "LT-1": {"kind": "level", "unit": "m"}
    },
    "segments": [{
      "id": "S1",
      "fluid": "oil",
      "sections": [
        {"length_m": 6000, "outside_diameter_mm": 323.9, "wall_thickness_mm": 6.35},
        {"length_m": 4000, "outside_diameter_mm": 323.9, "wall_thickness_mm": 7.14}
      ],
      "elevation_profile": [{"chainage_m": 0, "elevation_m": 10}, {"chainage_m": 10000, "elevation_m": 30}],
      "meters": [
        {"point": "FT-IN", "role": "inlet", "type": "line_volume",
         "pressure_point": "PT-IN", "temperature_point": "TT-IN"},
        {"point": "FT-OUT", "role": "outlet", "type": "mass"}
      ],
      "pressure_points": [
        {"point": "PT-OUT", "chainage_m": 10000, "elevation_m": 30},
        {"point": "PT-IN", "chainage_m": 0, "elevation_m": 10}
      ],
      "temperature_points": [{"point": "TT-IN", "chainage_m": 0}],
      "tanks": [{"id": "TK-1", "level_point": "LT-1",
                 "strapping_table": {"level_unit": "m", "volume_unit": "m3",
                                     "rows": [[0, 0], [1, 100], [2, 210]]}}],
      "landmarks": [{"name": "Valve 1", "chainage_m": 5000}],
      "temperature_model": {"filter_s": 120},
      "balance": {"windows_s": [3600, 300], "buckets_per_window": 60, "confidence": 0.95}
    }]
  })json");
}

struct Result {
  bool ok = false;
  Site site;
  std::vector<ConfigProblem> problems;
  std::string All() const {
    std::string s;
    for (const ConfigProblem& p : problems) s += "  " + p.ToString() + "\n";
    return s;
  }
};

Result Compile(const json& doc) {
  Result r;
  r.ok = CompileSite(doc, &r.site, &r.problems);
  return r;
}

// True if a problem has exactly `path` and its message contains `reason`.
::testing::AssertionResult HasProblem(const Result& r, const std::string& path,
                                      const std::string& reason) {
  if (r.ok) return ::testing::AssertionFailure() << "compiled without problems";
  for (const ConfigProblem& p : r.problems) {
    if (p.path == path && p.message.find(reason) != std::string::npos) {
      return ::testing::AssertionSuccess();
    }
  }
  return ::testing::AssertionFailure() << "no problem at \"" << path << "\" mentioning \"" << reason
                                       << "\"; got:\n"
                                       << r.All();
}

// Compiles Base() with the value at `pointer` replaced (or removed if `v` is discarded).
Result With(const std::string& pointer, const json& v) {
  json doc = Base();
  doc[json::json_pointer(pointer)] = v;
  return Compile(doc);
}

Result Without(const std::string& pointer) {
  json doc = Base();
  const json::json_pointer p(pointer);
  doc[p.parent_pointer()].erase(p.back());
  return Compile(doc);
}

// --- Valid configs -----------------------------------------------------------

TEST(SiteConfigTest, BaseCompiles) {
  const Result r = Compile(Base());
  ASSERT_TRUE(r.ok) << r.All();
  EXPECT_TRUE(r.problems.empty());
}

TEST(SiteConfigTest, ExampleConfigCompiles) {
  const Result r = Compile(LoadExample());
  ASSERT_TRUE(r.ok) << r.All();
  const Site& site = r.site;
  EXPECT_EQ(site.segments.size(), 4u);
  EXPECT_EQ(site.points.size(), 33u);
  EXPECT_EQ(site.fluids.size(), 5u);
  EXPECT_DOUBLE_EQ(site.atmospheric_pressure_pa, 100900.0);  // 1009 mbar
  EXPECT_DOUBLE_EQ(site.standard_pressure_pa, 101325.0);
  EXPECT_DOUBLE_EQ(site.standard_temperature_k, 288.15);

  // Crude segment: three sections, gauges sorted, the delivery in the middle.
  const SegmentSpec& crude = site.segments[0];
  EXPECT_EQ(crude.id, "QB-CRUDE");
  EXPECT_DOUBLE_EQ(crude.length_m(), 62600.0);
  EXPECT_DOUBLE_EQ(crude.reach_length_m, 1000.0);
  EXPECT_EQ(site.fluids[crude.fluid].kind, FluidKind::kCrudeOil);
  ASSERT_EQ(crude.sections.size(), 3u);
  EXPECT_DOUBLE_EQ(crude.sections[1].wall_thickness_m, 0.0127);
  EXPECT_DOUBLE_EQ(crude.sections[0].youngs_modulus_pa, 207e9);  // default
  ASSERT_EQ(crude.pressure_gauges.size(), 4u);
  for (std::size_t i = 1; i < crude.pressure_gauges.size(); ++i) {
    EXPECT_LT(crude.pressure_gauges[i - 1].chainage_m, crude.pressure_gauges[i].chainage_m);
  }
  EXPECT_EQ(site.points[crude.pressure_gauges[0].point].id, "PT-Q101");
  // Temperature gauge without elevation: interpolated from the profile.
  EXPECT_DOUBLE_EQ(crude.temperature_gauges[1].elevation_m, 265.0);
  ASSERT_EQ(crude.meters.size(), 3u);
  EXPECT_EQ(crude.meters[1].role, MeterRole::kDelivery);
  EXPECT_DOUBLE_EQ(crude.meters[1].chainage_m, 31200.0);
  EXPECT_DOUBLE_EQ(crude.meters[0].chainage_m, 0.0);      // inlet default
  EXPECT_DOUBLE_EQ(crude.meters[2].chainage_m, 62600.0);  // outlet default
  EXPECT_EQ(site.points[crude.meters[1].pressure_point].id, "PT-F310");
  ASSERT_EQ(crude.tanks.size(), 1u);
  EXPECT_EQ(crude.tanks[0].strapping.size(), 8u);
  EXPECT_EQ(site.points[crude.tanks[0].level_point].id, "LT-T7");
  EXPECT_EQ(crude.landmarks.size(), 5u);
  EXPECT_DOUBLE_EQ(crude.temperature_filter_s, 600.0);
  EXPECT_DOUBLE_EQ(crude.ground_temperature_k, 285.15);
  EXPECT_DOUBLE_EQ(crude.thermal_time_constant_s, 21600.0);
  EXPECT_EQ(crude.windows_s.size(), 4u);
  // 38 000 bbl/d at the density at standard conditions.
  const double rho = FluidDensity(site.fluids[crude.fluid], 101325.0, 288.15);
  EXPECT_NEAR(crude.nominal_flow_kg_s, 38000.0 * 0.158987294928 / 86400.0 * rho, 1e-9);

  // Water segment: windows sorted; the injection.
  const SegmentSpec& water = site.segments[1];
  EXPECT_EQ(water.windows_s, (std::vector<double>{900.0, 14400.0}));
  EXPECT_EQ(water.buckets_per_window, 90);
  EXPECT_DOUBLE_EQ(water.confidence, 0.99);
  EXPECT_TRUE(std::isnan(water.ground_temperature_k));
  EXPECT_EQ(water.meters[1].role, MeterRole::kInjection);
  EXPECT_EQ(water.meters[1].kind, MeterKind::kStandardVolume);
  EXPECT_EQ(water.sections[0].restraint, Restraint::kAnchoredUpstream);
  EXPECT_DOUBLE_EQ(water.sections[1].youngs_modulus_pa, 170e9);
  EXPECT_DOUBLE_EQ(water.sections[1].roughness_m, 1e-4);

  // Gas and products: defaults.
  const SegmentSpec& gas = site.segments[2];
  EXPECT_EQ(site.fluids[gas.fluid].kind, FluidKind::kNaturalGas);
  EXPECT_EQ(gas.meters[0].kind, MeterKind::kStandardVolume);
  EXPECT_EQ(gas.windows_s, (std::vector<double>{300.0, 3600.0, 86400.0}));
  const SegmentSpec& products = site.segments[3];
  EXPECT_EQ(site.fluids[products.fluid].commodity, ApiCommodity::kFuelOil);
  EXPECT_DOUBLE_EQ(site.fluids[products.fluid].base_density_kg_m3, 842.0);
  EXPECT_DOUBLE_EQ(products.reach_length_m, 500.0);
  EXPECT_EQ(products.sections[0].restraint, Restraint::kExpansionJoints);
  EXPECT_DOUBLE_EQ(products.nominal_flow_kg_s, 320000.0 / 3600.0);
  EXPECT_DOUBLE_EQ(products.landmarks[0].chainage_m, 600.0) << "landmarks sorted by chainage";
}

TEST(SiteConfigTest, PointsConvertAtTheDoor) {
  const Result r = Compile(LoadExample());
  ASSERT_TRUE(r.ok) << r.All();
  const Site& site = r.site;
  // Gauge pressure: factor then the site's atmospheric pressure.
  const PointSpec& pg = site.points[site.FindPoint("PT-Q101")];
  EXPECT_TRUE(pg.gauge);
  EXPECT_DOUBLE_EQ(pg.unit.ToSi(50.0), 50e5 + 100900.0);
  // Accuracy converts with the factor only: 0.02 bar -> 2000 Pa.
  EXPECT_DOUBLE_EQ(pg.random_sigma, 2000.0);
  EXPECT_DOUBLE_EQ(pg.systematic_sigma, 8000.0);
  EXPECT_DOUBLE_EQ(pg.range_min, 100900.0);
  EXPECT_DOUBLE_EQ(pg.range_max, 100e5 + 100900.0);
  EXPECT_DOUBLE_EQ(pg.staleness_s, 30.0);
  // Absolute pressure: no offset.
  const PointSpec& pa = site.points[site.FindPoint("PT-T401")];
  EXPECT_FALSE(pa.gauge);
  EXPECT_DOUBLE_EQ(pa.unit.ToSi(1.5), 1.5e6);
  // Flow accuracy: percent of reading -> fraction.
  const PointSpec& ft = site.points[site.FindPoint("FT-Q101")];
  EXPECT_EQ(ft.unit.quantity, Quantity::kVolumeFlow);
  EXPECT_DOUBLE_EQ(ft.random_sigma, 0.0005);
  EXPECT_DOUBLE_EQ(ft.systematic_sigma, 0.0015);
  // Temperature accuracy in degF -> K without the offset.
  const PointSpec& tf = site.points[site.FindPoint("TT-F310")];
  EXPECT_DOUBLE_EQ(tf.random_sigma, 0.1 / 1.8);
  EXPECT_DOUBLE_EQ(tf.unit.ToSi(32.0), 273.15);
  // Level in mm; default staleness where none is given.
  const PointSpec& lt = site.points[site.FindPoint("LT-T7")];
  EXPECT_DOUBLE_EQ(lt.unit.ToSi(1500.0), 1.5);
  EXPECT_DOUBLE_EQ(lt.systematic_sigma, 0.003);
  EXPECT_DOUBLE_EQ(site.points[site.FindPoint("TT-Q205")].staleness_s, 60.0);
  EXPECT_TRUE(std::isnan(site.points[site.FindPoint("TT-Q205")].range_min));
  EXPECT_EQ(site.FindPoint("no-such-point"), -1);
}

TEST(SiteConfigTest, DefaultsOfOptionalFields) {
  json doc = Base();
  json& seg = doc["segments"][0];
  seg.erase("temperature_model");
  seg.erase("balance");
  seg.erase("tanks");
  seg.erase("landmarks");
  const Result r = Compile(doc);
  ASSERT_TRUE(r.ok) << r.All();
  const SegmentSpec& s = r.site.segments[0];
  const SegmentSpec defaults;
  EXPECT_EQ(s.name, "S1") << "name defaults to the id";
  EXPECT_DOUBLE_EQ(s.reach_length_m, defaults.reach_length_m);
  EXPECT_DOUBLE_EQ(s.temperature_filter_s, defaults.temperature_filter_s);
  EXPECT_EQ(s.windows_s, defaults.windows_s);
  EXPECT_EQ(s.buckets_per_window, defaults.buckets_per_window);
  EXPECT_DOUBLE_EQ(s.confidence, defaults.confidence);
  EXPECT_TRUE(std::isnan(s.nominal_flow_kg_s));
  EXPECT_DOUBLE_EQ(s.sections[0].poisson_ratio, 0.30);
  EXPECT_DOUBLE_EQ(s.sections[0].roughness_m, 45e-6);
  EXPECT_EQ(s.sections[0].restraint, Restraint::kAnchoredThroughout);
  EXPECT_DOUBLE_EQ(r.site.atmospheric_pressure_pa, 101325.0);
  EXPECT_DOUBLE_EQ(r.site.tick_s, 1.0);
  EXPECT_DOUBLE_EQ(r.site.standard_temperature_k, 288.15);
  EXPECT_DOUBLE_EQ(r.site.points[r.site.FindPoint("PT-IN")].staleness_s, 60.0);
  EXPECT_EQ(r.site.points[r.site.FindPoint("PT-IN")].random_sigma, 0.0);
}

TEST(SiteConfigTest, CommentMembersAreIgnored) {
  json doc = Base();
  doc["_comment"] = "top";
  doc["segments"][0]["sections"][0]["_note"] = json::array({1, 2, 3});
  const Result r = Compile(doc);
  EXPECT_TRUE(r.ok) << r.All();
}

TEST(SiteConfigTest, FormatVersion) { EXPECT_STREQ(SiteFormatVersion(), "holdfast-site/1"); }

// --- One test per class of error ----------------------------------------------

TEST(SiteConfigErrors, MissingRequiredField) {
  EXPECT_TRUE(HasProblem(Without("/segments/0/sections/1/length_m"),
                         "/segments/0/sections/1/length_m", "missing required field"));
  EXPECT_TRUE(HasProblem(Without("/site/name"), "/site/name", "missing required field"));
  EXPECT_TRUE(HasProblem(Without("/format"), "/format", "missing required field"));
  EXPECT_TRUE(HasProblem(Without("/points/TT-IN/unit"), "/points/TT-IN/unit", "missing"));
  EXPECT_TRUE(HasProblem(Without("/segments/0/fluid"), "/segments/0/fluid", "missing"));
  EXPECT_TRUE(HasProblem(Without("/segments/0/sections"), "/segments/0/sections", "missing"));
  EXPECT_TRUE(HasProblem(Without("/segments/0/pressure_points/0/elevation_m"),
                         "/segments/0/pressure_points/0/elevation_m", "missing"));
  EXPECT_TRUE(HasProblem(Without("/fluids/oil/base_density"), "/fluids/oil/base_density", "missing"));
  EXPECT_TRUE(HasProblem(Without("/segments/0/tanks/0/strapping_table"),
                         "/segments/0/tanks/0/strapping_table", "missing"));
  EXPECT_TRUE(HasProblem(Without("/segments"), "/segments", "missing"));
}

TEST(SiteConfigErrors, WrongType) {
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/0/length_m", "6000"),
                         "/segments/0/sections/0/length_m", "must be a number (got a string \"6000\")"));
  EXPECT_TRUE(HasProblem(With("/site/name", 7), "/site/name", "must be a string"));
  EXPECT_TRUE(HasProblem(With("/points", json::array()), "/points", "must be an object (got an array)"));
  EXPECT_TRUE(HasProblem(With("/segments", json::object()), "/segments", "must be an array"));
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/1", "FT-OUT"), "/segments/0/meters/1",
                         "must be an object"));
  EXPECT_TRUE(HasProblem(With("/fluids/oil/base_density", 850), "/fluids/oil/base_density",
                         "must be a quantity"));
  EXPECT_TRUE(HasProblem(With("/fluids/oil/base_density/value", true),
                         "/fluids/oil/base_density/value", "must be a number (got a boolean (true))"));
  EXPECT_TRUE(HasProblem(With("/segments/0/balance/buckets_per_window", 60.5),
                         "/segments/0/balance/buckets_per_window", "whole number"));
}

TEST(SiteConfigErrors, UnknownUnit) {
  const Result r = With("/points/FT-IN/unit", "m3/hr");
  EXPECT_TRUE(HasProblem(r, "/points/FT-IN/unit", "unknown"));
  EXPECT_TRUE(HasProblem(r, "/points/FT-IN/unit", "did you mean \"m3/h\""));
  EXPECT_TRUE(HasProblem(r, "/points/FT-IN/unit", "kg/s, kg/min")) << "lists the accepted units";
  const Result q = With("/fluids/oil/base_density/unit", "kg/l");
  EXPECT_TRUE(HasProblem(q, "/fluids/oil/base_density/unit", "accepted: kg/m3, g/cm3"));
}

TEST(SiteConfigErrors, UnitOfTheWrongQuantity) {
  EXPECT_TRUE(HasProblem(With("/points/PT-IN/unit", "degC"), "/points/PT-IN/unit",
                         "is a temperature unit, expected a pressure unit"));
  EXPECT_TRUE(HasProblem(With("/points/FT-IN/unit", "bar"), "/points/FT-IN/unit",
                         "expected a mass flow or volume flow unit"));
  EXPECT_TRUE(HasProblem(With("/site/atmospheric_pressure", json{{"value", 1}, {"unit", "m"}}),
                         "/site/atmospheric_pressure/unit", "expected a pressure unit"));
  EXPECT_TRUE(HasProblem(With("/segments/0/tanks/0/strapping_table/volume_unit", "m"),
                         "/segments/0/tanks/0/strapping_table/volume_unit", "expected a volume unit"));
  // A flow point's unit must suit its meter's type.
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/1/type", "standard_volume"),
                         "/segments/0/meters/1/type", "needs a volume-flow point"));
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/0/type", "mass"), "/segments/0/meters/0/type",
                         "needs a mass-flow point"));
}

TEST(SiteConfigErrors, UnknownEnumValue) {
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/0/restraint", "anchored"),
                         "/segments/0/sections/0/restraint",
                         "accepted: expansion_joints, anchored_upstream, anchored_throughout"));
  EXPECT_TRUE(HasProblem(With("/points/TT-IN/kind", "temprature"), "/points/TT-IN/kind",
                         "did you mean \"temperature\""));
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/0/role", "source"), "/segments/0/meters/0/role",
                         "accepted: inlet, outlet, injection, delivery"));
  EXPECT_TRUE(HasProblem(With("/fluids/oil/model", "bitumen"), "/fluids/oil/model",
                         "accepted: water, generic_liquid, crude_oil, refined_product, natural_gas"));
  EXPECT_TRUE(HasProblem(With("/points/PT-IN/reference", "relative"), "/points/PT-IN/reference",
                         "accepted: gauge, absolute"));
}

TEST(SiteConfigErrors, NonPositiveGeometry) {
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/1/length_m", -5),
                         "/segments/0/sections/1/length_m", "must be positive (got -5)"));
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/0/length_m", 0),
                         "/segments/0/sections/0/length_m", "must be positive (got 0)"));
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/0/outside_diameter_mm", 0),
                         "/segments/0/sections/0/outside_diameter_mm", "must be positive"));
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/0/wall_thickness_mm", -6.35),
                         "/segments/0/sections/0/wall_thickness_mm", "must be positive"));
  EXPECT_TRUE(HasProblem(With("/segments/0/reach_length_m", 0), "/segments/0/reach_length_m",
                         "must be positive"));
}

TEST(SiteConfigErrors, WallThicknessAtLeastHalfTheDiameter) {
  json doc = Base();
  doc["segments"][0]["sections"][0]["outside_diameter_mm"] = 100;
  doc["segments"][0]["sections"][0]["wall_thickness_mm"] = 50;
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/sections/0/wall_thickness_mm",
                         "less than half the outside diameter"));
}

TEST(SiteConfigErrors, ChainageOutsideTheSegment) {
  EXPECT_TRUE(HasProblem(With("/segments/0/pressure_points/0/chainage_m", 10000.5),
                         "/segments/0/pressure_points/0/chainage_m", "outside the segment [0, 10000 m]"));
  EXPECT_TRUE(HasProblem(With("/segments/0/landmarks/0/chainage_m", -1),
                         "/segments/0/landmarks/0/chainage_m", "outside the segment"));
  EXPECT_TRUE(HasProblem(With("/segments/0/elevation_profile/1/chainage_m", 12000),
                         "/segments/0/elevation_profile/1/chainage_m", "outside the segment"));
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/1/chainage_m", 20000),
                         "/segments/0/meters/1/chainage_m", "outside the segment"));
  EXPECT_TRUE(HasProblem(With("/segments/0/temperature_points/0/chainage_m", -0.5),
                         "/segments/0/temperature_points/0/chainage_m", "outside the segment"));
  // The end itself is inside.
  EXPECT_TRUE(With("/segments/0/landmarks/0/chainage_m", 10000).ok);
}

TEST(SiteConfigErrors, ElevationProfileNotIncreasing) {
  json doc = Base();
  doc["segments"][0]["elevation_profile"] =
      json::parse(R"([{"chainage_m": 0, "elevation_m": 1}, {"chainage_m": 5000, "elevation_m": 2},
                      {"chainage_m": 5000, "elevation_m": 3}, {"chainage_m": 4000, "elevation_m": 4}])");
  const Result r = Compile(doc);
  EXPECT_TRUE(HasProblem(r, "/segments/0/elevation_profile/2/chainage_m", "strictly increasing"));
  EXPECT_TRUE(HasProblem(r, "/segments/0/elevation_profile/3/chainage_m", "strictly increasing"));
  EXPECT_TRUE(HasProblem(Without("/segments/0/elevation_profile/1/elevation_m"),
                         "/segments/0/elevation_profile/1/elevation_m", "missing"));
  EXPECT_TRUE(HasProblem(With("/segments/0/elevation_profile", json::array()),
                         "/segments/0/elevation_profile", "at least one point"));
}

TEST(SiteConfigErrors, GaugesAreSortedButNotRepeated) {
  // Base lists the pressure gauges out of order: fine, they come out sorted.
  const Result ok = Compile(Base());
  ASSERT_TRUE(ok.ok) << ok.All();
  ASSERT_EQ(ok.site.segments[0].pressure_gauges.size(), 2u);
  EXPECT_DOUBLE_EQ(ok.site.segments[0].pressure_gauges[0].chainage_m, 0.0);
  EXPECT_DOUBLE_EQ(ok.site.segments[0].pressure_gauges[1].chainage_m, 10000.0);
  // The same point twice at the same chainage is an error.
  json doc = Base();
  doc["segments"][0]["pressure_points"].push_back(
      json{{"point", "PT-IN"}, {"chainage_m", 0}, {"elevation_m", 10}});
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/pressure_points/2/point",
                         "listed twice (also /segments/0/pressure_points/1) at the same chainage"));
  // Two different transmitters at one chainage are fine (redundant pair).
  doc = Base();
  doc["points"]["PT-IN-B"] = json{{"kind", "pressure"}, {"unit", "bar"}, {"reference", "gauge"}};
  doc["segments"][0]["pressure_points"].push_back(
      json{{"point", "PT-IN-B"}, {"chainage_m", 0}, {"elevation_m", 10}});
  EXPECT_TRUE(Compile(doc).ok);
}

TEST(SiteConfigErrors, StrappingTableNotIncreasing) {
  const std::string rows = "/segments/0/tanks/0/strapping_table/rows";
  EXPECT_TRUE(HasProblem(With(rows, json::parse("[[0, 0], [1, 100], [1, 150]]")), rows + "/2/0",
                         "levels must be strictly increasing"));
  EXPECT_TRUE(HasProblem(With(rows, json::parse("[[0, 0], [1, 100], [2, 90]]")), rows + "/2/1",
                         "volumes must be strictly increasing"));
  EXPECT_TRUE(HasProblem(With(rows, json::parse("[[0, 0]]")), rows, "at least two rows"));
  EXPECT_TRUE(HasProblem(With(rows, json::parse("[[0, 0], [1]]")), rows + "/1", "[level, volume]"));
  EXPECT_TRUE(HasProblem(With(rows, json::parse("[[0, 0], {\"level\": 1}]")), rows + "/1",
                         "[level, volume]"));
}

TEST(SiteConfigErrors, PointNotDefined) {
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/1/point", "FT-0UT"), "/segments/0/meters/1/point",
                         "point \"FT-0UT\" is not defined in /points (did you mean \"FT-OUT\"?)"));
  EXPECT_TRUE(HasProblem(With("/segments/0/tanks/0/level_point", "LT-9"),
                         "/segments/0/tanks/0/level_point", "not defined"));
}

TEST(SiteConfigErrors, PointOfTheWrongKind) {
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/1/point", "TT-IN"), "/segments/0/meters/1/point",
                         "\"TT-IN\" is a temperature point; a meter needs a flow point"));
  EXPECT_TRUE(HasProblem(With("/segments/0/pressure_points/0/point", "TT-IN"),
                         "/segments/0/pressure_points/0/point", "needs a pressure point"));
  EXPECT_TRUE(HasProblem(With("/segments/0/meters/0/temperature_point", "PT-IN"),
                         "/segments/0/meters/0/temperature_point", "needs a temperature point"));
  EXPECT_TRUE(HasProblem(With("/segments/0/tanks/0/level_point", "PT-OUT"),
                         "/segments/0/tanks/0/level_point", "needs a level point"));
}

TEST(SiteConfigErrors, DuplicateIds) {
  json doc = Base();
  doc["segments"].push_back(doc["segments"][0]);
  const Result r = Compile(doc);
  EXPECT_TRUE(HasProblem(r, "/segments/1/id", "duplicate segment id \"S1\" (also /segments/0/id)"));
  EXPECT_TRUE(HasProblem(r, "/segments/1/tanks/0/id", "duplicate tank id \"TK-1\""));
  // The same flow point twice in one segment would count its flow twice.
  doc = Base();
  doc["segments"][0]["meters"][1]["point"] = "FT-IN";
  doc["segments"][0]["meters"][1]["type"] = "line_volume";
  doc["segments"][0]["meters"][1]["pressure_point"] = "PT-OUT";
  doc["segments"][0]["meters"][1]["temperature_point"] = "TT-IN";
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/meters/1/point", "counted twice"));
}

TEST(SiteConfigErrors, UnknownKeys) {
  json doc = Base();
  doc["segmnets"] = json::array();
  doc["segments"][0]["reach_lenght_m"] = 250;
  doc["segments"][0]["sections"][0]["youngs_modulus"] = 200;
  doc["points"]["FT-IN"]["acuracy"] = json::object();
  doc["site"]["atmospheric_pressure"] = json{{"value", 1}, {"unit", "bar"}, {"units", "bar"}};
  const Result r = Compile(doc);
  EXPECT_TRUE(HasProblem(r, "/segmnets", "unknown key \"segmnets\" (did you mean \"segments\"?)"));
  EXPECT_TRUE(HasProblem(r, "/segments/0/reach_lenght_m", "did you mean \"reach_length_m\""));
  EXPECT_TRUE(HasProblem(r, "/segments/0/sections/0/youngs_modulus", "did you mean \"youngs_modulus_gpa\""));
  EXPECT_TRUE(HasProblem(r, "/points/FT-IN/acuracy", "did you mean \"accuracy\""));
  EXPECT_TRUE(HasProblem(r, "/site/atmospheric_pressure/units", "unknown key"));
  // A flow point's accuracy is in percent: the unit-valued names are unknown there.
  EXPECT_TRUE(HasProblem(With("/points/FT-IN/accuracy", json{{"random", 0.1}}),
                         "/points/FT-IN/accuracy/random", "did you mean \"random_pct\""));
}

TEST(SiteConfigErrors, FluidNotDefined) {
  EXPECT_TRUE(HasProblem(With("/segments/0/fluid", "oill"), "/segments/0/fluid",
                         "fluid \"oill\" is not defined in /fluids (did you mean \"oil\"?)"));
  // A fluid outside its model's range is reported at the field.
  EXPECT_TRUE(HasProblem(With("/fluids/gas/gas_gravity", 5.0), "/fluids/gas/gas_gravity",
                         "outside the range of the natural_gas model"));
  EXPECT_TRUE(HasProblem(With("/fluids/oil/base_density/value", -850), "/fluids/oil/base_density/value",
                         "must be positive"));
}

TEST(SiteConfigErrors, LineVolumeMeterWithoutConditions) {
  const Result r = Without("/segments/0/meters/0/pressure_point");
  EXPECT_TRUE(HasProblem(r, "/segments/0/meters/0/pressure_point", "missing required field"));
  EXPECT_TRUE(HasProblem(r, "/segments/0/meters/0/pressure_point", "line_volume"));
  EXPECT_TRUE(HasProblem(Without("/segments/0/meters/0/temperature_point"),
                         "/segments/0/meters/0/temperature_point", "missing"));
}

TEST(SiteConfigErrors, GroundTemperatureAndTimeConstantTogether) {
  EXPECT_TRUE(HasProblem(With("/segments/0/temperature_model/ground_temperature",
                              json{{"value", 10}, {"unit", "degC"}}),
                         "/segments/0/temperature_model/thermal_time_constant_s",
                         "give both or neither"));
  EXPECT_TRUE(HasProblem(With("/segments/0/temperature_model/thermal_time_constant_s", 3600),
                         "/segments/0/temperature_model/ground_temperature", "give both or neither"));
  json doc = Base();
  doc["segments"][0]["temperature_model"]["ground_temperature"] = json{{"value", 50}, {"unit", "degF"}};
  doc["segments"][0]["temperature_model"]["thermal_time_constant_s"] = 3600;
  const Result r = Compile(doc);
  ASSERT_TRUE(r.ok) << r.All();
  EXPECT_DOUBLE_EQ(r.site.segments[0].ground_temperature_k, 283.15);
}

TEST(SiteConfigErrors, WindowsNotPositive) {
  const std::string w = "/segments/0/balance/windows_s";
  EXPECT_TRUE(HasProblem(With(w, json{300, -60}), w + "/1", "must be positive (got -60 s)"));
  EXPECT_TRUE(HasProblem(With(w, json{0}), w + "/0", "must be positive"));
  EXPECT_TRUE(HasProblem(With(w, json{300, 300}), w + "/1", "duplicate window"));
  EXPECT_TRUE(HasProblem(With(w, json{60, 120, 300, 600, 900, 1800, 3600, 7200, 86400}), w,
                         "at most 8 windows"));
  EXPECT_TRUE(HasProblem(With(w, json::array()), w, "at least one window"));
  EXPECT_TRUE(HasProblem(With(w, json{30}), w + "/0", "shorter than the tick"));
  EXPECT_TRUE(HasProblem(With("/segments/0/balance/buckets_per_window", 3),
                         "/segments/0/balance/buckets_per_window", "between 4 and 1000"));
  EXPECT_TRUE(HasProblem(With("/segments/0/temperature_model/filter_s", -1),
                         "/segments/0/temperature_model/filter_s", "must be positive"));
}

TEST(SiteConfigErrors, ConfidenceOutsideOpenInterval) {
  const std::string c = "/segments/0/balance/confidence";
  EXPECT_TRUE(HasProblem(With(c, 0.5), c, "must be in (0.5, 1)"));
  EXPECT_TRUE(HasProblem(With(c, 1.0), c, "must be in (0.5, 1)"));
  EXPECT_TRUE(HasProblem(With(c, 95), c, "must be in (0.5, 1)"));
  EXPECT_TRUE(With(c, 0.999).ok);
}

TEST(SiteConfigErrors, SegmentWithoutInletOrOutletMeter) {
  json doc = Base();
  doc["segments"][0]["meters"].erase(1);
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/meters", "no outlet-side meter"));
  doc = Base();
  doc["segments"][0]["meters"].erase(0);
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/meters", "no inlet-side meter"));
  // An injection counts as inlet-side, a delivery as outlet-side.
  doc = Base();
  doc["segments"][0]["meters"][0]["role"] = "injection";
  doc["segments"][0]["meters"][0]["chainage_m"] = 100;
  doc["segments"][0]["meters"][1]["role"] = "delivery";
  doc["segments"][0]["meters"][1]["chainage_m"] = 9000;
  EXPECT_TRUE(Compile(doc).ok);
  // ... and each needs its chainage.
  doc["segments"][0]["meters"][1].erase("chainage_m");
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/meters/1/chainage_m", "missing required field"));
}

TEST(SiteConfigErrors, PressurePointRequired) {
  EXPECT_TRUE(HasProblem(With("/segments/0/pressure_points", json::array()),
                         "/segments/0/pressure_points", "at least one pressure point"));
  EXPECT_TRUE(HasProblem(Without("/segments/0/pressure_points"), "/segments/0/pressure_points",
                         "missing required field"));
  EXPECT_TRUE(HasProblem(With("/segments/0/temperature_points", json::array()),
                         "/segments/0/temperature_points", "at least one temperature point"));
}

TEST(SiteConfigErrors, PressureReference) {
  EXPECT_TRUE(HasProblem(Without("/points/PT-IN/reference"), "/points/PT-IN/reference",
                         "missing required field \"reference\" (one of: gauge, absolute)"));
  EXPECT_TRUE(HasProblem(With("/points/TT-IN/reference", "gauge"), "/points/TT-IN/reference",
                         "only allowed on pressure points"));
}

TEST(SiteConfigErrors, FormatAndDocument) {
  EXPECT_TRUE(HasProblem(With("/format", "holdfast-site/2"), "/format", "unsupported format"));
  EXPECT_TRUE(HasProblem(Compile(json::array()), "", "must be a JSON object"));
  EXPECT_TRUE(HasProblem(Compile(json()), "", "(got null)"));
}

TEST(SiteConfigErrors, PointerTokensAreEscaped) {
  json doc = Base();
  doc["points"]["FT/1~a"] = json{{"kind", "flow"}, {"unit", "furlong/h"}};
  EXPECT_TRUE(HasProblem(Compile(doc), "/points/FT~11~0a/unit", "unknown"));
}

TEST(SiteConfigErrors, EveryProblemIsCollected) {
  json doc = Base();
  doc["site"].erase("name");
  doc["points"]["FT-IN"]["unit"] = "m3/hr";
  doc["segments"][0]["sections"][1]["length_m"] = -5;
  doc["segments"][0]["balance"]["confidence"] = 2;
  doc["segments"][0]["landmarks"][0]["chainage_m"] = "far";
  const Result r = Compile(doc);
  EXPECT_TRUE(HasProblem(r, "/site/name", "missing"));
  EXPECT_TRUE(HasProblem(r, "/points/FT-IN/unit", "unknown"));
  EXPECT_TRUE(HasProblem(r, "/segments/0/sections/1/length_m", "must be positive (got -5)"));
  EXPECT_TRUE(HasProblem(r, "/segments/0/balance/confidence", "(0.5, 1)"));
  EXPECT_TRUE(HasProblem(r, "/segments/0/landmarks/0/chainage_m", "must be a number"));
  EXPECT_EQ(r.problems.size(), 5u) << "no cascades from one mistake:\n" << r.All();
  EXPECT_EQ(r.problems[0].ToString().find(r.problems[0].path + ": "), 0u);
}

TEST(SiteConfigErrors, OutOfRangeNumbers) {
  EXPECT_TRUE(HasProblem(With("/fluids/oil/base_density", json{{"value", 1e308}, {"unit", "g/cm3"}}),
                         "/fluids/oil/base_density/value", "out of range"));
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/0/poisson_ratio", 0.5),
                         "/segments/0/sections/0/poisson_ratio", "[0, 0.5)"));
  EXPECT_TRUE(HasProblem(With("/points/FT-IN/accuracy", json{{"random_pct", -1}}),
                         "/points/FT-IN/accuracy/random_pct", "must not be negative"));
  EXPECT_TRUE(HasProblem(With("/points/PT-IN/range", json{10, 0}), "/points/PT-IN/range",
                         "min must be below max"));
  EXPECT_TRUE(HasProblem(With("/points/PT-IN/staleness_s", 0), "/points/PT-IN/staleness_s",
                         "must be positive"));
  EXPECT_TRUE(HasProblem(With("/site/tick_s", -1), "/site/tick_s", "must be positive"));
}

// --- Size limits (SiteLimits): each message carries its bound ----------------------

TEST(SiteConfigLimits, ReachLengthTooShortOrTooManyReaches) {
  // 0.001 m reaches on 10 km would be 10 million reaches (issue 13: it passed
  // and balance then ran out of memory).
  EXPECT_TRUE(HasProblem(With("/segments/0/reach_length_m", 0.001), "/segments/0/reach_length_m",
                         "must be at least 1 m (got 0.001 m)"));
  // 1 m reaches on 10 km: allowed (10000 reaches).
  EXPECT_TRUE(With("/segments/0/reach_length_m", 1.0).ok);
  // 1 m reaches on 1000 km: 1e6 reaches, beyond 20000 per segment.
  json doc = Base();
  doc["segments"][0]["reach_length_m"] = 1.0;
  doc["segments"][0]["sections"][1]["length_m"] = 994000.0;
  doc["segments"][0]["elevation_profile"][1]["chainage_m"] = 1000000.0;
  doc["segments"][0]["pressure_points"][0]["chainage_m"] = 1000000.0;
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/reach_length_m",
                         "gives 1000000 reaches; at most 20000 per segment (use a reach of at least 50 m)"));
}

TEST(SiteConfigLimits, SegmentLength) {
  EXPECT_TRUE(HasProblem(With("/segments/0/sections/0/length_m", 1e300), "/segments/0/sections/0/length_m",
                         "at most 2000000 m per segment (got 1e+300 m)"));
  json doc = Base();
  doc["segments"][0]["sections"][0]["length_m"] = 1.5e6;
  doc["segments"][0]["sections"][1]["length_m"] = 1.5e6;
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/sections", "at most 2000000 m per segment"));
}

TEST(SiteConfigLimits, ReachesOverTheSite) {
  // 20 segments of 1000 km at 50 m reaches = 20000 each, 400000 in all.
  json doc = Base();
  json seg = doc["segments"][0];
  seg["reach_length_m"] = 50.0;
  seg["sections"][1]["length_m"] = 994000.0;
  seg["elevation_profile"][1]["chainage_m"] = 1000000.0;
  seg["pressure_points"][0]["chainage_m"] = 1000000.0;
  doc["segments"] = json::array();
  for (int i = 0; i < 20; ++i) {
    seg["id"] = "S" + std::to_string(i);
    doc["segments"].push_back(seg);
  }
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/10/reach_length_m",
                         "the site now has 220000 reaches; at most 200000 over all segments"));
}

TEST(SiteConfigLimits, CountsAndTimes) {
  // The monitor's rupture locator holds 64 meters (monitor.cc).
  json doc = Base();
  json meters = json::array();
  for (int i = 0; i < 65; ++i) meters.push_back(doc["segments"][0]["meters"][1]);
  doc["segments"][0]["meters"] = meters;
  EXPECT_TRUE(HasProblem(Compile(doc), "/segments/0/meters", "at most 64 meters per segment (got 65)"));
  EXPECT_TRUE(HasProblem(With("/site/tick_s", 1e-6), "/site/tick_s", "must be between 0.01 and 3600 s"));
  EXPECT_TRUE(HasProblem(With("/segments/0/balance/windows_s", json{300, 1e12}), "/segments/0/balance/windows_s/1",
                         "at most 31622400 s"));
}

// --- Garbage ---------------------------------------------------------------------

// Every position of the example (containers and leaves), by JSON pointer.
void Positions(const json& j, const std::string& path, std::vector<std::string>* out) {
  out->push_back(path);
  if (j.is_object()) {
    for (auto it = j.begin(); it != j.end(); ++it) {
      std::string token;
      for (char ch : it.key()) token += ch == '~' ? "~0" : ch == '/' ? "~1" : std::string(1, ch);
      Positions(it.value(), path + "/" + token, out);
    }
  } else if (j.is_array()) {
    for (std::size_t i = 0; i < j.size(); ++i) Positions(j[i], path + "/" + std::to_string(i), out);
  }
}

bool IsComment(const std::string& pointer) { return pointer.find("/_") != std::string::npos; }

TEST(SiteConfigGarbage, NullEverywhereIsReportedNeverFatal) {
  const json example = LoadExample();
  std::vector<std::string> positions;
  Positions(example, "", &positions);
  ASSERT_GT(positions.size(), 500u);
  for (const std::string& p : positions) {
    json doc = example;
    doc[json::json_pointer(p)] = nullptr;
    std::vector<ConfigProblem> problems;
    Site site;
    bool ok = true;
    EXPECT_NO_THROW(ok = CompileSite(doc, &site, &problems)) << p;
    if (IsComment(p)) continue;
    EXPECT_FALSE(ok) << "null at " << p << " was accepted";
    EXPECT_FALSE(problems.empty()) << p;
  }
}

TEST(SiteConfigGarbage, WrongShapesEverywhereNeverCrash) {
  const json example = LoadExample();
  std::vector<std::string> positions;
  Positions(example, "", &positions);
  const json replacements[] = {
      json::array(), json::object(), json("garbage"), json(-1), json(1e308), json(true),
      json::parse(R"({"value": "5", "unit": ["bar"], "point": {}, "rows": [[null]]})"),
      json::parse(R"([[1, 2], {"chainage_m": null}, "x", []])"),
  };
  int compiled = 0;
  for (const std::string& p : positions) {
    for (const json& r : replacements) {
      json doc = example;
      doc[json::json_pointer(p)] = r;
      std::vector<ConfigProblem> problems;
      Site site;
      EXPECT_NO_THROW(CompileSite(doc, &site, &problems)) << p;
      for (const ConfigProblem& pr : problems) {
        ASSERT_FALSE(pr.message.empty()) << p;
        ASSERT_TRUE(pr.path.empty() || pr.path[0] == '/') << pr.path;
      }
      ++compiled;
    }
  }
  EXPECT_GT(compiled, 4000);
}

TEST(SiteConfigGarbage, DeepNesting) {
  // Built by the (iterative) parser and moved into place: never copied, so
  // nothing here recurses 10 000 levels deep except what is under test.
  constexpr int kDepth = 10000;
  const std::string arrays = std::string(kDepth, '[') + std::string(kDepth, ']');
  std::string objects;
  for (int i = 0; i < kDepth; ++i) objects += "{\"site\":";
  objects += "null" + std::string(kDepth, '}');
  for (const char* p : {"", "/site", "/points", "/segments", "/segments/0",
                        "/segments/0/sections/0/length_m", "/fluids/oil", "/_comment"}) {
    for (const std::string* text : std::initializer_list<const std::string*>{&arrays, &objects}) {
      json doc = Base();
      const std::string pointer = p;
      if (pointer.empty()) {
        doc = json::parse(*text);
      } else {
        doc[json::json_pointer(pointer)] = json::parse(*text);
      }
      const Result r = Compile(doc);
      if (pointer == "/_comment") {
        EXPECT_TRUE(r.ok) << r.All();
      } else {
        EXPECT_FALSE(r.ok) << pointer;
        EXPECT_FALSE(r.problems.empty()) << pointer;
      }
    }
  }
}

TEST(SiteConfigGarbage, NullOutputs) {
  // A caller that only wants the verdict.
  EXPECT_TRUE(CompileSite(Base(), nullptr, nullptr));
  EXPECT_FALSE(CompileSite(json(42), nullptr, nullptr));
}

}  // namespace
}  // namespace holdfast
