// Site config compiler: "holdfast-site/1" JSON -> Site. See config/FORMAT.md.
//
// The compiler walks the document once, converting as it goes, and records
// every problem with the RFC 6901 pointer of the offending value (or of the
// missing member). It never stops early and never throws: every access checks
// the JSON type first, and CompileSite also catches anything unexpected.
#include "holdfast/site_config.h"

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstdio>
#include <exception>
#include <initializer_list>
#include <map>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "holdfast/json_check.h"

namespace holdfast {
namespace {

using nlohmann::json;

constexpr const char* kFormat = "holdfast-site/1";
constexpr double kChainageTolerance_m = 1e-6;

using namespace json_text;

const EnumName<PointKind> kPointKinds[] = {{"flow", PointKind::kFlow},
                                           {"pressure", PointKind::kPressure},
                                           {"temperature", PointKind::kTemperature},
                                           {"level", PointKind::kLevel}};
const EnumName<MeterRole> kMeterRoles[] = {{"inlet", MeterRole::kInlet},
                                           {"outlet", MeterRole::kOutlet},
                                           {"injection", MeterRole::kInjection},
                                           {"delivery", MeterRole::kDelivery}};
const EnumName<MeterKind> kMeterKinds[] = {{"mass", MeterKind::kMass},
                                           {"line_volume", MeterKind::kLineVolume},
                                           {"standard_volume", MeterKind::kStandardVolume}};
const EnumName<Restraint> kRestraints[] = {{"expansion_joints", Restraint::kExpansionJoints},
                                           {"anchored_upstream", Restraint::kAnchoredUpstream},
                                           {"anchored_throughout", Restraint::kAnchoredThroughout}};
const EnumName<FluidKind> kFluidModels[] = {{"water", FluidKind::kWater},
                                            {"generic_liquid", FluidKind::kGenericLiquid},
                                            {"crude_oil", FluidKind::kCrudeOil},
                                            {"refined_product", FluidKind::kRefinedProduct},
                                            {"natural_gas", FluidKind::kNaturalGas}};
const EnumName<ApiCommodity> kProducts[] = {{"gasoline", ApiCommodity::kGasoline},
                                            {"transition_zone", ApiCommodity::kTransitionZone},
                                            {"jet_fuel", ApiCommodity::kJetFuel},
                                            {"fuel_oil", ApiCommodity::kFuelOil},
                                            {"lube_oil", ApiCommodity::kLubeOil}};
const EnumName<bool> kReferences[] = {{"gauge", true}, {"absolute", false}};

const char* ModelName(FluidKind k) {
  for (const auto& e : kFluidModels) {
    if (e.value == k) return e.name;
  }
  return "unknown";
}

double ElevationAt(const std::vector<ElevationPoint>& profile, double x) {
  if (profile.empty()) return 0.0;
  if (x <= profile.front().chainage_m) return profile.front().elevation_m;
  for (std::size_t i = 1; i < profile.size(); ++i) {
    const ElevationPoint& a = profile[i - 1];
    const ElevationPoint& b = profile[i];
    if (x <= b.chainage_m) {
      const double w = (x - a.chainage_m) / (b.chainage_m - a.chainage_m);
      return a.elevation_m + w * (b.elevation_m - a.elevation_m);
    }
  }
  return profile.back().elevation_m;
}

// --- The compiler ------------------------------------------------------------

// The member readers (Number, Positive, Enum, ExactKeys ...) are JsonCheck's.
class Compiler : private JsonCheck {
 public:
  Compiler(Site* site, std::vector<ConfigProblem>* problems)
      : JsonCheck(problems), site_(site), problems_(problems) {}

  void Run(const json& doc);

 private:
  struct PointInfo {
    int index = -1;
    bool kind_known = false;
    bool unit_known = false;
  };
  struct FluidInfo {
    int index = -1;
    bool valid = false;
  };

  // A reference to a point of `kind`; `user` says what needs it.
  Got PointRef(const json& obj, const char* key, const std::string& path, Need need,
               PointKind kind, const char* user, int* out) {
    std::string id;
    const Got g = String(obj, key, path, need, &id,
                         std::string("the id of a ") + PointKindName(kind) + " point; " + user +
                             " needs it");
    if (g != Got::kOk) return g;
    auto it = points_.find(id);
    if (it == points_.end()) {
      std::string msg = "point " + Quote(id) + " is not defined in /points";
      std::vector<std::string> ids;
      for (const auto& p : points_) ids.push_back(p.first);
      const std::string hint = Closest(id, ids);
      if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
      Add(Join(path, key), msg);
      return Got::kBad;
    }
    const PointInfo& info = it->second;
    if (info.kind_known && site_->points[info.index].kind != kind) {
      Add(Join(path, key), "point " + Quote(id) + " is a " +
                               PointKindName(site_->points[info.index].kind) + " point; " + user +
                               " needs a " + PointKindName(kind) + " point");
      return Got::kBad;
    }
    *out = info.index;
    return info.kind_known ? Got::kOk : Got::kBad;
  }

  bool CheckChainage(const std::string& path, double x, double length, bool length_known) {
    if (x < 0.0 || (length_known && x > length + kChainageTolerance_m)) {
      Add(path, "chainage " + Num(x) + " m is outside the segment [0, " +
                    (length_known ? Num(length) + " m]" : "length]"));
      return false;
    }
    return true;
  }

  void CompileSiteBlock(const json& doc);
  void CompileFluids(const json& doc);
  void CompileFluid(const json& f, const std::string& path, FluidSpec* fluid, bool* valid);
  void CompilePoints(const json& doc);
  void CompilePoint(const json& p, const std::string& path, PointSpec* point, PointInfo* info);
  void CompileSegments(const json& doc);
  void CompileDistricts(const json& doc);
  void CompileDistrict(const json& d, const std::string& path, DistrictSpec* out);
  void CompileFlowList(const json& d, const char* key, const std::string& path, Need need, std::vector<int>* out);
  void CompileSegment(const json& s, const std::string& path, SegmentSpec* seg);
  bool CompileReachLength(const json& s, const std::string& path, SegmentSpec* seg);
  void CheckReaches(const std::string& path, const SegmentSpec& seg);
  long site_reaches_ = 0;  // over the segments compiled so far (SiteLimits)
  long site_nodes_ = 0;
  bool CompileSections(const json& s, const std::string& path, SegmentSpec* seg);
  void CompileProfile(const json& s, const std::string& path, bool length_known, SegmentSpec* seg);
  void CompileMeters(const json& s, const std::string& path, bool length_known, SegmentSpec* seg);
  void CompileGauges(const json& s, const char* key, PointKind kind, bool elevation_required,
                     const std::string& path, bool length_known, SegmentSpec* seg,
                     std::vector<GaugeSpec>* out);
  void CompileTanks(const json& s, const std::string& path, SegmentSpec* seg);
  void CompileStrapping(const json& e, const std::string& p, std::vector<StrapPoint>* out);
  void CompileLandmarks(const json& s, const std::string& path, bool length_known,
                        SegmentSpec* seg);
  void CompileTemperatureModel(const json& s, const std::string& path, SegmentSpec* seg);
  void CompileBalance(const json& s, const std::string& path, SegmentSpec* seg);
  void CompileNominalFlow(const json& s, const std::string& path, SegmentSpec* seg);

  Site* site_;
  std::vector<ConfigProblem>* problems_;
  std::map<std::string, PointInfo> points_;
  std::map<std::string, FluidInfo> fluids_;
  std::map<std::string, std::string> tank_ids_;  // id -> path of its first definition
};

void Compiler::Run(const json& doc) {
  if (!doc.is_object()) {
    Add("", "the document must be a JSON object with \"format\": \"" + std::string(kFormat) +
                "\" (got " + Describe(doc) + ")");
    return;
  }
  ExactKeys(doc, "", {"format", "site", "fluids", "points", "segments", "districts"});
  std::string format;
  const json* f = Member(doc, "format");
  if (f == nullptr) {
    Add("/format", std::string("missing required field \"format\" (must be \"") + kFormat + "\")");
  } else if (!f->is_string()) {
    Add("/format", std::string("must be the string \"") + kFormat + "\" (got " + Describe(*f) + ")");
  } else if (f->get_ref<const std::string&>() != kFormat) {
    Add("/format", "unsupported format " + Quote(f->get<std::string>()) + "; this build reads \"" +
                       kFormat + "\"");
  }
  // Order matters: points need the atmospheric pressure, segments need
  // points and fluids.
  CompileSiteBlock(doc);
  CompileFluids(doc);
  CompilePoints(doc);
  CompileSegments(doc);
  CompileDistricts(doc);
}

void Compiler::CompileSiteBlock(const json& doc) {
  const json* s = nullptr;
  if (Object(doc, "site", "", Need::kRequired, &s) != Got::kOk) return;
  const std::string path = "/site";
  ExactKeys(*s, path, {"name", "atmospheric_pressure", "standard_conditions", "tick_s"});
  String(*s, "name", path, Need::kRequired, &site_->name);

  double v = 0.0;
  if (Qty(*s, "atmospheric_pressure", path, Need::kOptional, {Quantity::kPressure}, &v) ==
      Got::kOk) {
    if (v <= 0.0) {
      Add(path + "/atmospheric_pressure/value", "must be positive (absolute), got " + Num(v) + " Pa");
    } else {
      site_->atmospheric_pressure_pa = v;
    }
  }
  const json* sc = nullptr;
  if (Object(*s, "standard_conditions", path, Need::kOptional, &sc) == Got::kOk) {
    const std::string scp = path + "/standard_conditions";
    ExactKeys(*sc, scp, {"pressure", "temperature"});
    if (Qty(*sc, "pressure", scp, Need::kRequired, {Quantity::kPressure}, &v) == Got::kOk) {
      if (v <= 0.0) {
        Add(scp + "/pressure/value", "must be positive (absolute), got " + Num(v) + " Pa");
      } else {
        site_->standard_pressure_pa = v;
      }
    }
    if (Qty(*sc, "temperature", scp, Need::kRequired, {Quantity::kTemperature}, &v) == Got::kOk) {
      if (v <= 0.0) {
        Add(scp + "/temperature/value", "must be above absolute zero, got " + Num(v) + " K");
      } else {
        site_->standard_temperature_k = v;
      }
    }
  }
  double tick = site_->tick_s;
  if (Positive(*s, "tick_s", path, Need::kOptional, &tick) == Got::kOk) {
    if (tick < SiteLimits::kMinTick_s || tick > SiteLimits::kMaxTick_s) {
      Add(path + "/tick_s", "must be between " + Num(SiteLimits::kMinTick_s) + " and " + Num(SiteLimits::kMaxTick_s) +
                                " s (got " + Num(tick) + " s)");
    } else {
      site_->tick_s = tick;
    }
  }
}

void Compiler::CompileFluids(const json& doc) {
  const json* fl = nullptr;
  if (Object(doc, "fluids", "", Need::kRequired, &fl) != Got::kOk) return;
  if (fl->empty()) {
    Add("/fluids", "must define at least one fluid");
    return;
  }
  for (auto it = fl->begin(); it != fl->end(); ++it) {
    const std::string path = Join("/fluids", it.key());
    if (it.key().empty()) {
      Add(path, "a fluid id must not be empty");
      continue;
    }
    FluidSpec fluid;
    fluid.name = it.key();
    bool valid = false;
    CompileFluid(it.value(), path, &fluid, &valid);
    fluids_[it.key()] = FluidInfo{static_cast<int>(site_->fluids.size()), valid};
    site_->fluids.push_back(fluid);
    site_->fluid_ids.push_back(it.key());
  }
}

void Compiler::CompileFluid(const json& f, const std::string& path, FluidSpec* fluid,
                            bool* valid) {
  *valid = false;
  if (!f.is_object()) {
    Add(path, "a fluid must be an object with a \"model\" (got " + Describe(f) + ")");
    return;
  }
  const std::size_t before = problems_->size();
  if (Enum(f, "model", path, Need::kRequired, kFluidModels, &fluid->kind) != Got::kOk) return;
  double v = 0.0;
  switch (fluid->kind) {
    case FluidKind::kWater:
      ExactKeys(f, path, {"model", "viscosity_cp"});
      break;
    case FluidKind::kGenericLiquid:
      ExactKeys(f, path,
                {"model", "reference_density", "reference_pressure", "reference_temperature",
                 "bulk_modulus", "thermal_expansion_per_k", "viscosity_cp"});
      if (Qty(f, "reference_density", path, Need::kRequired, {Quantity::kDensity}, &v) == Got::kOk) {
        if (v <= 0.0) Add(path + "/reference_density/value", "must be positive (got " + Num(v) + ")");
        fluid->reference_density_kg_m3 = v;
      }
      if (Qty(f, "reference_pressure", path, Need::kRequired, {Quantity::kPressure}, &v) ==
          Got::kOk) {
        if (v <= 0.0) {
          Add(path + "/reference_pressure/value",
              "must be positive: the reference pressure is absolute (got " + Num(v) + " Pa)");
        }
        fluid->reference_pressure_pa = v;
      }
      if (Qty(f, "reference_temperature", path, Need::kRequired, {Quantity::kTemperature}, &v) ==
          Got::kOk) {
        if (v <= 0.0) {
          Add(path + "/reference_temperature/value", "must be above absolute zero (got " + Num(v) + " K)");
        }
        fluid->reference_temperature_k = v;
      }
      if (Qty(f, "bulk_modulus", path, Need::kRequired, {Quantity::kPressure}, &v) == Got::kOk) {
        if (v <= 0.0) Add(path + "/bulk_modulus/value", "must be positive (got " + Num(v) + " Pa)");
        fluid->bulk_modulus_pa = v;
      }
      Number(f, "thermal_expansion_per_k", path, Need::kRequired, &fluid->thermal_expansion_per_k);
      break;
    case FluidKind::kCrudeOil:
    case FluidKind::kRefinedProduct:
      if (fluid->kind == FluidKind::kCrudeOil) {
        ExactKeys(f, path, {"model", "base_density", "viscosity_cp"});
        fluid->commodity = ApiCommodity::kCrudeOil;
      } else {
        ExactKeys(f, path, {"model", "product", "base_density", "viscosity_cp"});
        Enum(f, "product", path, Need::kRequired, kProducts, &fluid->commodity);
      }
      if (Qty(f, "base_density", path, Need::kRequired, {Quantity::kDensity}, &v) == Got::kOk) {
        if (v <= 0.0) Add(path + "/base_density/value", "must be positive (got " + Num(v) + ")");
        fluid->base_density_kg_m3 = v;
      }
      break;
    case FluidKind::kNaturalGas:
      ExactKeys(f, path, {"model", "gas_gravity", "viscosity_cp"});
      Positive(f, "gas_gravity", path, Need::kRequired, &fluid->gas_gravity);
      break;
  }
  // Dynamic viscosity (for friction in leak location), centipoise = mPa s.
  double viscosity_cp = 0.0;
  if (Positive(f, "viscosity_cp", path, Need::kOptional, &viscosity_cp) == Got::kOk) {
    fluid->viscosity_pa_s = viscosity_cp * 1e-3;
  } else {
    fluid->viscosity_pa_s = DefaultViscosity(fluid->kind, fluid->commodity);
  }
  if (problems_->size() != before) return;
  // The model's own limits (ranges of the correlations).
  std::string why;
  if (!fluid->IsValid(&why)) {
    // What the model can reject beyond the checks above is one field per model.
    std::string field;
    switch (fluid->kind) {
      case FluidKind::kGenericLiquid: field = "/thermal_expansion_per_k"; break;
      case FluidKind::kCrudeOil:
      case FluidKind::kRefinedProduct: field = "/base_density"; break;
      case FluidKind::kNaturalGas: field = "/gas_gravity"; break;
      case FluidKind::kWater: break;
    }
    Add(path + field, "outside the range of the " + std::string(ModelName(fluid->kind)) +
                          " model: " + why);
    return;
  }
  *valid = true;
}

void Compiler::CompilePoints(const json& doc) {
  const json* pts = nullptr;
  if (Object(doc, "points", "", Need::kRequired, &pts) != Got::kOk) return;
  if (pts->size() > static_cast<std::size_t>(SiteLimits::kMaxPoints)) {
    Add("/points", "at most " + std::to_string(SiteLimits::kMaxPoints) + " points per site (got " +
                       std::to_string(pts->size()) + ")");
    return;
  }
  for (auto it = pts->begin(); it != pts->end(); ++it) {
    const std::string path = Join("/points", it.key());
    if (it.key().empty()) {
      Add(path, "a point id must not be empty");
      continue;
    }
    PointSpec point;
    point.id = it.key();
    PointInfo info;
    info.index = static_cast<int>(site_->points.size());
    CompilePoint(it.value(), path, &point, &info);
    points_[it.key()] = info;
    site_->points.push_back(point);
  }
}

void Compiler::CompilePoint(const json& p, const std::string& path, PointSpec* point,
                            PointInfo* info) {
  if (!p.is_object()) {
    Add(path, "a point must be an object with \"kind\" and \"unit\" (got " + Describe(p) + ")");
    return;
  }
  ExactKeys(p, path, {"kind", "unit", "reference", "staleness_s", "accuracy", "range"});
  const bool kind_ok = Enum(p, "kind", path, Need::kRequired, kPointKinds, &point->kind) == Got::kOk;
  info->kind_known = kind_ok;
  const bool unit_given = String(p, "unit", path, Need::kRequired, &point->unit_name) == Got::kOk;
  bool unit_ok = false;
  if (kind_ok && unit_given) {
    const std::string upath = path + "/unit";
    switch (point->kind) {
      case PointKind::kFlow:
        unit_ok = Unit(point->unit_name, {Quantity::kMassFlow, Quantity::kVolumeFlow}, upath,
                       &point->unit);
        break;
      case PointKind::kPressure:
        unit_ok = Unit(point->unit_name, {Quantity::kPressure}, upath, &point->unit);
        break;
      case PointKind::kTemperature:
        unit_ok = Unit(point->unit_name, {Quantity::kTemperature}, upath, &point->unit);
        break;
      case PointKind::kLevel:
        unit_ok = Unit(point->unit_name, {Quantity::kLength}, upath, &point->unit);
        break;
    }
  }
  info->unit_known = unit_ok;

  // Pressure reference: required for pressures, meaningless for the rest.
  if (kind_ok) {
    if (point->kind == PointKind::kPressure) {
      if (Enum(p, "reference", path, Need::kRequired, kReferences, &point->gauge) == Got::kOk &&
          point->gauge) {
        point->unit.offset += site_->atmospheric_pressure_pa;
      }
    } else if (Member(p, "reference") != nullptr) {
      Add(path + "/reference", std::string("is only allowed on pressure points (this is a ") +
                                   PointKindName(point->kind) + " point)");
    }
  }

  Positive(p, "staleness_s", path, Need::kOptional, &point->staleness_s);

  const json* acc = nullptr;
  if (Object(p, "accuracy", path, Need::kOptional, &acc) == Got::kOk && kind_ok) {
    const std::string apath = path + "/accuracy";
    double random = 0.0;
    double systematic = 0.0;
    if (point->kind == PointKind::kFlow) {
      ExactKeys(*acc, apath, {"random_pct", "systematic_pct"});
      if (NonNegative(*acc, "random_pct", apath, Need::kOptional, &random) == Got::kOk &&
          random >= 100.0) {
        Add(apath + "/random_pct", "is a percentage of reading and must be below 100 (got " +
                                       Num(random) + ")");
      }
      if (NonNegative(*acc, "systematic_pct", apath, Need::kOptional, &systematic) == Got::kOk &&
          systematic >= 100.0) {
        Add(apath + "/systematic_pct", "is a percentage of reading and must be below 100 (got " +
                                           Num(systematic) + ")");
      }
      point->random_sigma = random / 100.0;
      point->systematic_sigma = systematic / 100.0;
    } else {
      ExactKeys(*acc, apath, {"random", "systematic"});
      NonNegative(*acc, "random", apath, Need::kOptional, &random);
      NonNegative(*acc, "systematic", apath, Need::kOptional, &systematic);
      if (unit_ok) {
        point->random_sigma = point->unit.DeltaToSi(random);
        point->systematic_sigma = point->unit.DeltaToSi(systematic);
      }
    }
  }

  const json* range = nullptr;
  if (Array(p, "range", path, Need::kOptional, &range) == Got::kOk) {
    const std::string rpath = path + "/range";
    if (range->size() != 2 || !(*range)[0].is_number() || !(*range)[1].is_number()) {
      Add(rpath, "must be [min, max], two numbers in the point's unit");
    } else {
      const double lo = (*range)[0].get<double>();
      const double hi = (*range)[1].get<double>();
      if (!(lo < hi)) {
        Add(rpath, "min must be below max (got [" + Num(lo) + ", " + Num(hi) + "])");
      } else if (unit_ok) {
        point->range_min = point->unit.ToSi(lo);
        point->range_max = point->unit.ToSi(hi);
      }
    }
  }
}

void Compiler::CompileSegments(const json& doc) {
  const json* segs = nullptr;
  // A water-utility site may have districts and no pipeline segments.
  const bool has_districts = Member(doc, "districts") != nullptr;
  if (ArrayAtMost(doc, "segments", "", has_districts ? Need::kOptional : Need::kRequired,
                  SiteLimits::kMaxSegments, "segments per site", &segs) != Got::kOk) return;
  if (segs->empty() && !has_districts) {
    Add("/segments", "must list at least one segment");
    return;
  }
  std::map<std::string, std::string> ids;  // id -> path of first use
  for (std::size_t i = 0; i < segs->size(); ++i) {
    const std::string path = Join("/segments", i);
    const json& s = (*segs)[i];
    if (!ElementObject(s, path)) continue;
    SegmentSpec seg;
    CompileSegment(s, path, &seg);
    if (!seg.id.empty()) {
      auto [it, fresh] = ids.emplace(seg.id, path + "/id");
      if (!fresh) {
        Add(path + "/id", "duplicate segment id " + Quote(seg.id) + " (also " + it->second + ")");
      }
    }
    site_->segments.push_back(std::move(seg));
  }
}

void Compiler::CompileSegment(const json& s, const std::string& path, SegmentSpec* seg) {
  ExactKeys(s, path,
            {"id", "name", "fluid", "reach_length_m", "sections", "elevation_profile", "meters",
             "pressure_points", "temperature_points", "tanks", "landmarks", "temperature_model",
             "balance", "nominal_flow"});
  String(s, "id", path, Need::kRequired, &seg->id);
  if (String(s, "name", path, Need::kOptional, &seg->name) != Got::kOk) seg->name = seg->id;

  std::string fluid;
  if (String(s, "fluid", path, Need::kRequired, &fluid) == Got::kOk) {
    auto it = fluids_.find(fluid);
    if (it == fluids_.end()) {
      std::vector<std::string> ids;
      for (const auto& f : fluids_) ids.push_back(f.first);
      std::string msg = "fluid " + Quote(fluid) + " is not defined in /fluids";
      const std::string hint = Closest(fluid, ids);
      if (!hint.empty()) msg += " (did you mean \"" + hint + "\"?)";
      if (!ids.empty()) msg += "; defined: " + ListNames(ids);
      Add(path + "/fluid", msg);
    } else {
      seg->fluid = it->second.index;
    }
  }
  const bool reach_ok = CompileReachLength(s, path, seg);

  const bool length_known = CompileSections(s, path, seg);
  if (length_known && reach_ok) CheckReaches(path, *seg);
  CompileProfile(s, path, length_known, seg);
  CompileMeters(s, path, length_known, seg);
  CompileGauges(s, "pressure_points", PointKind::kPressure, true, path, length_known, seg,
                &seg->pressure_gauges);
  CompileGauges(s, "temperature_points", PointKind::kTemperature, false, path, length_known, seg,
                &seg->temperature_gauges);
  CompileTanks(s, path, seg);
  CompileLandmarks(s, path, length_known, seg);
  CompileTemperatureModel(s, path, seg);
  CompileBalance(s, path, seg);
  CompileNominalFlow(s, path, seg);
}

bool Compiler::CompileReachLength(const json& s, const std::string& path, SegmentSpec* seg) {
  double v = seg->reach_length_m;
  const Got g = Positive(s, "reach_length_m", path, Need::kOptional, &v);
  if (g == Got::kBad) return false;
  if (g == Got::kOk && v < SiteLimits::kMinReachLength_m) {
    Add(path + "/reach_length_m", "must be at least " + Num(SiteLimits::kMinReachLength_m) + " m (got " + Num(v) +
                                      " m)");
    return false;
  }
  seg->reach_length_m = v;
  return true;
}

// The reach grid the inventory will build (inventory.cc: ceil(length /
// reach) reaches per section), bounded per segment and per site.
void Compiler::CheckReaches(const std::string& path, const SegmentSpec& seg) {
  const double length = seg.length_m();
  if (!(length <= SiteLimits::kMaxSegmentLength_m)) {
    Add(path + "/sections", "the segment is " + Num(length) + " m long; at most " +
                                Num(SiteLimits::kMaxSegmentLength_m) + " m per segment (split it)");
    return;
  }
  double reaches = 0.0;
  for (const PipeSection& sec : seg.sections) {
    reaches += std::max(1.0, std::ceil(sec.length_m / seg.reach_length_m - 1e-9));
  }
  if (reaches > static_cast<double>(SiteLimits::kMaxReachesPerSegment)) {
    Add(path + "/reach_length_m", "a reach length of " + Num(seg.reach_length_m) + " m gives " + Num(reaches) +
                                      " reaches; at most " + std::to_string(SiteLimits::kMaxReachesPerSegment) +
                                      " per segment (use a reach of at least " +
                                      Num(std::ceil(length / SiteLimits::kMaxReachesPerSegment)) + " m)");
    return;
  }
  const long before = site_reaches_;
  site_reaches_ += static_cast<long>(reaches);
  site_nodes_ += static_cast<long>(reaches) + static_cast<long>(seg.sections.size());
  if (before <= SiteLimits::kMaxReachesPerSite && site_reaches_ > SiteLimits::kMaxReachesPerSite) {
    Add(path + "/reach_length_m", "the site now has " + std::to_string(site_reaches_) + " reaches; at most " +
                                      std::to_string(SiteLimits::kMaxReachesPerSite) +
                                      " over all segments (use longer reaches)");
  } else if (site_reaches_ <= SiteLimits::kMaxReachesPerSite && site_nodes_ > SiteLimits::kMaxNodesPerSite) {
    Add(path + "/sections", "the site now has " + std::to_string(site_nodes_) + " reach end points; at most " +
                                std::to_string(SiteLimits::kMaxNodesPerSite) + " over all segments");
  }
}

// Returns true when every section length is known, so the segment length is.
bool Compiler::CompileSections(const json& s, const std::string& path, SegmentSpec* seg) {
  const json* secs = nullptr;
  if (ArrayAtMost(s, "sections", path, Need::kRequired, SiteLimits::kMaxSectionsPerSegment,
                  "pipe sections per segment", &secs) != Got::kOk) return false;
  const std::string spath = path + "/sections";
  if (secs->empty()) {
    Add(spath, "must list at least one pipe section");
    return false;
  }
  bool all_lengths = true;
  for (std::size_t i = 0; i < secs->size(); ++i) {
    const std::string p = Join(spath, i);
    const json& e = (*secs)[i];
    if (!ElementObject(e, p)) {
      all_lengths = false;
      continue;
    }
    ExactKeys(e, p,
              {"length_m", "outside_diameter_mm", "wall_thickness_mm", "youngs_modulus_gpa",
               "poisson_ratio", "restraint", "roughness_mm", "wall_thermal_expansion_per_k"});
    PipeSection sec;
    if (Positive(e, "length_m", p, Need::kRequired, &sec.length_m) != Got::kOk) {
      all_lengths = false;
    } else if (sec.length_m > SiteLimits::kMaxSegmentLength_m) {
      Add(p + "/length_m", "at most " + Num(SiteLimits::kMaxSegmentLength_m) + " m per segment (got " +
                               Num(sec.length_m) + " m)");
      all_lengths = false;
    }
    double od_mm = 0.0;
    double wt_mm = 0.0;
    const bool od_ok = Positive(e, "outside_diameter_mm", p, Need::kRequired, &od_mm) == Got::kOk;
    const bool wt_ok = Positive(e, "wall_thickness_mm", p, Need::kRequired, &wt_mm) == Got::kOk;
    if (od_ok && wt_ok && wt_mm >= 0.5 * od_mm) {
      Add(p + "/wall_thickness_mm", "wall thickness " + Num(wt_mm) +
                                        " mm must be less than half the outside diameter (" +
                                        Num(od_mm) + " mm)");
    }
    sec.outside_diameter_m = od_mm * 1e-3;
    sec.wall_thickness_m = wt_mm * 1e-3;
    double e_gpa = 207.0;
    if (Positive(e, "youngs_modulus_gpa", p, Need::kOptional, &e_gpa) == Got::kOk) {
      sec.youngs_modulus_pa = e_gpa * 1e9;
    }
    double nu = sec.poisson_ratio;
    if (Number(e, "poisson_ratio", p, Need::kOptional, &nu) == Got::kOk) {
      if (nu < 0.0 || nu >= 0.5) {
        Add(p + "/poisson_ratio", "must be in [0, 0.5) (got " + Num(nu) + ")");
      } else {
        sec.poisson_ratio = nu;
      }
    }
    Enum(e, "restraint", p, Need::kOptional, kRestraints, &sec.restraint);
    double rough_mm = sec.roughness_m * 1e3;
    if (NonNegative(e, "roughness_mm", p, Need::kOptional, &rough_mm) == Got::kOk) {
      if (od_ok && wt_ok && rough_mm >= 0.5 * (od_mm - 2.0 * wt_mm)) {
        Add(p + "/roughness_mm", "roughness " + Num(rough_mm) +
                                     " mm is not small against the bore; check the unit (mm)");
      }
      sec.roughness_m = rough_mm * 1e-3;
    }
    NonNegative(e, "wall_thermal_expansion_per_k", p, Need::kOptional,
                &sec.wall_thermal_expansion_per_k);
    seg->sections.push_back(sec);
  }
  return all_lengths;
}

void Compiler::CompileProfile(const json& s, const std::string& path, bool length_known,
                              SegmentSpec* seg) {
  const json* prof = nullptr;
  if (ArrayAtMost(s, "elevation_profile", path, Need::kRequired, SiteLimits::kMaxProfilePoints,
                  "elevation profile points per segment", &prof) != Got::kOk) return;
  const std::string ppath = path + "/elevation_profile";
  if (prof->empty()) {
    Add(ppath, "must list at least one point {\"chainage_m\", \"elevation_m\"}");
    return;
  }
  const double length = seg->length_m();
  std::string prev_path;
  double prev_x = 0.0;
  bool have_prev = false;
  for (std::size_t i = 0; i < prof->size(); ++i) {
    const std::string p = Join(ppath, i);
    const json& e = (*prof)[i];
    if (!ElementObject(e, p)) continue;
    ExactKeys(e, p, {"chainage_m", "elevation_m"});
    ElevationPoint pt;
    const bool x_ok = Number(e, "chainage_m", p, Need::kRequired, &pt.chainage_m) == Got::kOk;
    const bool z_ok = Number(e, "elevation_m", p, Need::kRequired, &pt.elevation_m) == Got::kOk;
    if (!x_ok) continue;
    const bool in = CheckChainage(p + "/chainage_m", pt.chainage_m, length, length_known);
    if (have_prev && !(pt.chainage_m > prev_x)) {
      Add(p + "/chainage_m", "the elevation profile must be strictly increasing in chainage: " +
                                 Num(pt.chainage_m) + " m follows " + Num(prev_x) + " m at " +
                                 prev_path);
    } else if (in && z_ok) {
      seg->profile.push_back(pt);
    }
    if (!have_prev || pt.chainage_m > prev_x) {
      prev_x = pt.chainage_m;
      prev_path = p + "/chainage_m";
      have_prev = true;
    }
  }
}

void Compiler::CompileMeters(const json& s, const std::string& path, bool length_known,
                             SegmentSpec* seg) {
  const json* meters = nullptr;
  if (ArrayAtMost(s, "meters", path, Need::kRequired, SiteLimits::kMaxMetersPerSegment, "meters per segment",
                  &meters) != Got::kOk) return;
  const std::string mpath = path + "/meters";
  const double length = seg->length_m();
  bool have_in = false;
  bool have_out = false;
  std::map<int, std::string> used;  // flow point -> path of first use
  for (std::size_t i = 0; i < meters->size(); ++i) {
    const std::string p = Join(mpath, i);
    const json& e = (*meters)[i];
    if (!ElementObject(e, p)) continue;
    ExactKeys(e, p, {"point", "role", "type", "chainage_m", "pressure_point", "temperature_point"});
    MeterSpec m;
    const Got gp = PointRef(e, "point", p, Need::kRequired, PointKind::kFlow, "a meter", &m.point);
    const bool role_ok = Enum(e, "role", p, Need::kRequired, kMeterRoles, &m.role) == Got::kOk;
    const bool type_ok = Enum(e, "type", p, Need::kRequired, kMeterKinds, &m.kind) == Got::kOk;
    if (gp == Got::kOk) {
      auto [it, fresh] = used.emplace(m.point, p + "/point");
      if (!fresh) {
        Add(p + "/point", "flow point " + Quote(site_->points[m.point].id) +
                              " is already used by " + it->second +
                              " in this segment; it would be counted twice");
      }
    }
    // Mass meters need a mass-flow unit; volume meters a volume-flow unit.
    if (gp == Got::kOk && type_ok) {
      const std::string& id = site_->points[m.point].id;
      if (points_[id].unit_known) {
        const Quantity q = site_->points[m.point].unit.quantity;
        const bool mass = m.kind == MeterKind::kMass;
        if (mass && q != Quantity::kMassFlow) {
          Add(p + "/type", "a mass meter needs a mass-flow point, but point " + Quote(id) +
                               " is in " + site_->points[m.point].unit_name +
                               " (volume flow); use type line_volume or standard_volume");
        } else if (!mass && q != Quantity::kVolumeFlow) {
          Add(p + "/type", std::string("a ") + MeterKindName(m.kind) +
                               " meter needs a volume-flow point, but point " + Quote(id) +
                               " is in " + site_->points[m.point].unit_name +
                               " (mass flow); use type mass");
        }
      }
    }
    if (role_ok) {
      const bool needs_chainage = m.role == MeterRole::kInjection || m.role == MeterRole::kDelivery;
      m.chainage_m = m.role == MeterRole::kOutlet ? length : 0.0;
      if (Number(e, "chainage_m", p, needs_chainage ? Need::kRequired : Need::kOptional,
                 &m.chainage_m) == Got::kOk) {
        CheckChainage(p + "/chainage_m", m.chainage_m, length, length_known);
      }
      if (MeterRoleIsIn(m.role)) {
        have_in = true;
      } else {
        have_out = true;
      }
    }
    const Need conditions =
        (type_ok && m.kind == MeterKind::kLineVolume) ? Need::kRequired : Need::kOptional;
    PointRef(e, "pressure_point", p, conditions, PointKind::kPressure, "a line_volume meter",
             &m.pressure_point);
    PointRef(e, "temperature_point", p, conditions, PointKind::kTemperature,
             "a line_volume meter", &m.temperature_point);
    seg->meters.push_back(m);
  }
  if (!have_in) {
    Add(mpath, "the segment has no inlet-side meter (role \"inlet\" or \"injection\"); "
               "the balance needs every flow in");
  }
  if (!have_out) {
    Add(mpath, "the segment has no outlet-side meter (role \"outlet\" or \"delivery\"); "
               "the balance needs every flow out");
  }
}

void Compiler::CompileGauges(const json& s, const char* key, PointKind kind,
                             bool elevation_required, const std::string& path, bool length_known,
                             SegmentSpec* seg, std::vector<GaugeSpec>* out) {
  const json* list = nullptr;
  if (ArrayAtMost(s, key, path, Need::kRequired, SiteLimits::kMaxGaugesPerSegment,
                  kind == PointKind::kPressure ? "pressure points per segment" : "temperature points per segment",
                  &list) != Got::kOk) return;
  const std::string gpath = path + "/" + key;
  if (list->empty()) {
    Add(gpath, std::string("must list at least one ") + PointKindName(kind) +
                   " point: the line-pack estimate needs it");
    return;
  }
  const double length = seg->length_m();
  struct Seen {
    std::string path;
    double chainage_m;
    bool chainage_known;
  };
  std::map<int, Seen> seen;
  const std::string user = std::string("a ") + key + " entry";
  for (std::size_t i = 0; i < list->size(); ++i) {
    const std::string p = Join(gpath, i);
    const json& e = (*list)[i];
    if (!ElementObject(e, p)) continue;
    ExactKeys(e, p, {"point", "chainage_m", "elevation_m"});
    GaugeSpec g;
    const Got gp = PointRef(e, "point", p, Need::kRequired, kind, user.c_str(), &g.point);
    const Got gx = Number(e, "chainage_m", p, Need::kRequired, &g.chainage_m);
    bool ok = gp == Got::kOk && gx == Got::kOk;
    if (gx == Got::kOk) ok = CheckChainage(p + "/chainage_m", g.chainage_m, length, length_known) && ok;
    const Got gz = Number(e, "elevation_m", p,
                          elevation_required ? Need::kRequired : Need::kOptional, &g.elevation_m);
    if (gz == Got::kBad || (elevation_required && gz != Got::kOk)) ok = false;
    if (gz == Got::kAbsent && !elevation_required && gx == Got::kOk) {
      g.elevation_m = ElevationAt(seg->profile, g.chainage_m);
    }
    if (gp == Got::kOk) {
      auto [it, fresh] = seen.emplace(g.point, Seen{p, g.chainage_m, gx == Got::kOk});
      if (!fresh) {
        const bool same = gx == Got::kOk && it->second.chainage_known &&
                          it->second.chainage_m == g.chainage_m;
        Add(p + "/point", "point " + Quote(site_->points[g.point].id) + " is listed twice (also " +
                              it->second.path + ")" +
                              (same ? " at the same chainage " + Num(g.chainage_m) + " m"
                                    : "; one transmitter has one chainage"));
        ok = false;
      }
    }
    if (ok) out->push_back(g);
  }
  std::stable_sort(out->begin(), out->end(),
                   [](const GaugeSpec& a, const GaugeSpec& b) { return a.chainage_m < b.chainage_m; });
}

// The "strapping_table" member of `e` (at path p): level -> volume rows,
// strictly increasing, converted to SI. Shared by tanks and reservoirs.
void Compiler::CompileStrapping(const json& e, const std::string& p, std::vector<StrapPoint>* out) {
  const json* table = nullptr;
  if (Object(e, "strapping_table", p, Need::kRequired, &table) == Got::kOk) {
    const std::string sp = p + "/strapping_table";
    ExactKeys(*table, sp, {"level_unit", "volume_unit", "rows"});
    UnitConversion lu;
    UnitConversion vu;
    std::string name;
    bool units_ok = true;
    if (String(*table, "level_unit", sp, Need::kRequired, &name) != Got::kOk ||
        !Unit(name, {Quantity::kLength}, sp + "/level_unit", &lu)) {
      units_ok = false;
    }
    if (String(*table, "volume_unit", sp, Need::kRequired, &name) != Got::kOk ||
        !Unit(name, {Quantity::kVolume}, sp + "/volume_unit", &vu)) {
      units_ok = false;
    }
    const json* rows = nullptr;
    if (ArrayAtMost(*table, "rows", sp, Need::kRequired, SiteLimits::kMaxStrappingRows,
                    "rows per strapping table", &rows) == Got::kOk) {
      const std::string rp = sp + "/rows";
      if (rows->size() < 2) {
        Add(rp, "a strapping table needs at least two rows [level, volume] (got " +
                    std::to_string(rows->size()) + ")");
      }
      bool have_prev = false;
      double prev_level = 0.0;
      double prev_volume = 0.0;
      std::size_t prev_row = 0;
      for (std::size_t r = 0; r < rows->size(); ++r) {
        const json& row = (*rows)[r];
        const std::string rowp = Join(rp, r);
        if (!row.is_array() || row.size() != 2 || !row[0].is_number() || !row[1].is_number()) {
          Add(rowp, "a row must be [level, volume], two numbers (got " + Describe(row) + ")");
          continue;
        }
        const double level = row[0].get<double>();
        const double volume = row[1].get<double>();
        bool ok = true;
        if (volume < 0.0) {
          Add(Join(rowp, std::size_t{1}), "volume must not be negative (got " + Num(volume) + ")");
          ok = false;
        }
        if (have_prev && !(level > prev_level)) {
          Add(Join(rowp, std::size_t{0}),
              "strapping levels must be strictly increasing: " + Num(level) + " follows " +
                  Num(prev_level) + " in row " + std::to_string(prev_row));
          ok = false;
        }
        if (have_prev && !(volume > prev_volume)) {
          Add(Join(rowp, std::size_t{1}),
              "strapping volumes must be strictly increasing: " + Num(volume) + " follows " +
                  Num(prev_volume) + " in row " + std::to_string(prev_row));
          ok = false;
        }
        if (ok) {
          if (units_ok) out->push_back({lu.ToSi(level), vu.ToSi(volume)});
          have_prev = true;
          prev_level = level;
          prev_volume = volume;
          prev_row = r;
        }
      }
    }
  }
}

void Compiler::CompileTanks(const json& s, const std::string& path, SegmentSpec* seg) {
  const json* tanks = nullptr;
  if (ArrayAtMost(s, "tanks", path, Need::kOptional, SiteLimits::kMaxTanksPerSegment, "tanks per segment",
                  &tanks) != Got::kOk) return;
  const std::string tpath = path + "/tanks";
  for (std::size_t i = 0; i < tanks->size(); ++i) {
    const std::string p = Join(tpath, i);
    const json& e = (*tanks)[i];
    if (!ElementObject(e, p)) continue;
    ExactKeys(e, p, {"id", "level_point", "temperature_point", "strapping_table"});
    TankSpec tank;
    if (String(e, "id", p, Need::kRequired, &tank.id) == Got::kOk) {
      auto [it, fresh] = tank_ids_.emplace(tank.id, p + "/id");
      if (!fresh) Add(p + "/id", "duplicate tank id " + Quote(tank.id) + " (also " + it->second + ")");
    }
    PointRef(e, "level_point", p, Need::kRequired, PointKind::kLevel, "a tank's level_point",
             &tank.level_point);
    PointRef(e, "temperature_point", p, Need::kOptional, PointKind::kTemperature,
             "a tank's temperature_point", &tank.temperature_point);
    CompileStrapping(e, p, &tank.strapping);
    seg->tanks.push_back(std::move(tank));
  }
}

void Compiler::CompileLandmarks(const json& s, const std::string& path, bool length_known,
                                SegmentSpec* seg) {
  const json* marks = nullptr;
  if (ArrayAtMost(s, "landmarks", path, Need::kOptional, SiteLimits::kMaxLandmarks, "landmarks per segment",
                  &marks) != Got::kOk) return;
  const std::string lpath = path + "/landmarks";
  const double length = seg->length_m();
  for (std::size_t i = 0; i < marks->size(); ++i) {
    const std::string p = Join(lpath, i);
    const json& e = (*marks)[i];
    if (!ElementObject(e, p)) continue;
    ExactKeys(e, p, {"name", "chainage_m"});
    LandmarkSpec mark;
    const bool name_ok = String(e, "name", p, Need::kRequired, &mark.name) == Got::kOk;
    if (Number(e, "chainage_m", p, Need::kRequired, &mark.chainage_m) == Got::kOk &&
        CheckChainage(p + "/chainage_m", mark.chainage_m, length, length_known) && name_ok) {
      seg->landmarks.push_back(mark);
    }
  }
  std::stable_sort(seg->landmarks.begin(), seg->landmarks.end(),
                   [](const LandmarkSpec& a, const LandmarkSpec& b) { return a.chainage_m < b.chainage_m; });
}

void Compiler::CompileTemperatureModel(const json& s, const std::string& path, SegmentSpec* seg) {
  const json* tm = nullptr;
  if (Object(s, "temperature_model", path, Need::kOptional, &tm) != Got::kOk) return;
  const std::string p = path + "/temperature_model";
  ExactKeys(*tm, p, {"filter_s", "ground_temperature", "thermal_time_constant_s"});
  Positive(*tm, "filter_s", p, Need::kOptional, &seg->temperature_filter_s);
  const bool has_ground = Member(*tm, "ground_temperature") != nullptr;
  const bool has_tau = Member(*tm, "thermal_time_constant_s") != nullptr;
  double tg = kNaN;
  if (Qty(*tm, "ground_temperature", p, Need::kOptional, {Quantity::kTemperature}, &tg) ==
      Got::kOk) {
    if (tg <= 0.0) {
      Add(p + "/ground_temperature/value", "must be above absolute zero (got " + Num(tg) + " K)");
    } else {
      seg->ground_temperature_k = tg;
    }
  }
  Positive(*tm, "thermal_time_constant_s", p, Need::kOptional, &seg->thermal_time_constant_s);
  if (has_ground && !has_tau) {
    Add(p + "/thermal_time_constant_s",
        "missing: ground_temperature is given, so thermal_time_constant_s is required "
        "(give both or neither)");
  } else if (has_tau && !has_ground) {
    Add(p + "/ground_temperature",
        "missing: thermal_time_constant_s is given, so ground_temperature is required "
        "(give both or neither)");
  }
}

void Compiler::CompileBalance(const json& s, const std::string& path, SegmentSpec* seg) {
  const json* b = nullptr;
  if (Object(s, "balance", path, Need::kOptional, &b) != Got::kOk) return;
  const std::string p = path + "/balance";
  ExactKeys(*b, p, {"windows_s", "buckets_per_window", "confidence"});
  const bool buckets_ok =
      Integer(*b, "buckets_per_window", p, Need::kOptional, 4, 1000, &seg->buckets_per_window) !=
      Got::kBad;
  double conf = seg->confidence;
  if (Number(*b, "confidence", p, Need::kOptional, &conf) == Got::kOk) {
    if (!(conf > 0.5 && conf < 1.0)) {
      Add(p + "/confidence", "must be in (0.5, 1), one-sided confidence (got " + Num(conf) + ")");
    } else {
      seg->confidence = conf;
    }
  }
  const json* w = nullptr;
  if (Array(*b, "windows_s", p, Need::kOptional, &w) == Got::kOk) {
    const std::string wp = p + "/windows_s";
    if (w->empty()) {
      Add(wp, "must list at least one window");
      return;
    }
    if (w->size() > static_cast<std::size_t>(kMaxWindows)) {
      Add(wp, "at most " + std::to_string(kMaxWindows) + " windows (got " +
                  std::to_string(w->size()) + ")");
      return;
    }
    std::vector<double> windows;
    std::map<double, std::size_t> seen;
    for (std::size_t i = 0; i < w->size(); ++i) {
      const json& e = (*w)[i];
      const std::string ep = Join(wp, i);
      if (!e.is_number()) {
        Add(ep, "a window must be a number of seconds (got " + Describe(e) + ")");
        continue;
      }
      const double v = e.get<double>();
      if (!(v > 0.0)) {
        Add(ep, "a window must be positive (got " + Num(v) + " s)");
        continue;
      }
      if (v > SiteLimits::kMaxWindow_s) {
        Add(ep, "a window must be at most " + Num(SiteLimits::kMaxWindow_s) + " s (one year; got " + Num(v) + " s)");
        continue;
      }
      auto [it, fresh] = seen.emplace(v, i);
      if (!fresh) {
        Add(ep, "duplicate window " + Num(v) + " s (also " + Join(wp, it->second) + ")");
        continue;
      }
      if (buckets_ok && v / seg->buckets_per_window < site_->tick_s) {
        Add(ep, "a window of " + Num(v) + " s in " + std::to_string(seg->buckets_per_window) +
                    " buckets gives buckets shorter than the tick (" + Num(site_->tick_s) + " s)");
        continue;
      }
      windows.push_back(v);
    }
    std::sort(windows.begin(), windows.end());
    seg->windows_s = windows;
  }
}

void Compiler::CompileNominalFlow(const json& s, const std::string& path, SegmentSpec* seg) {
  double v = 0.0;
  UnitConversion c;
  if (Qty(s, "nominal_flow", path, Need::kOptional, {Quantity::kMassFlow, Quantity::kVolumeFlow},
          &v, &c) != Got::kOk) {
    return;
  }
  if (!(v > 0.0)) {
    Add(path + "/nominal_flow/value", "must be positive (got " + Num(v) + ")");
    return;
  }
  if (c.quantity == Quantity::kMassFlow) {
    seg->nominal_flow_kg_s = v;
    return;
  }
  // Volume flow: standard volume at the site's standard conditions.
  if (seg->fluid < 0) return;  // already reported
  const std::string& id = site_->fluid_ids[seg->fluid];
  if (!fluids_[id].valid) return;  // already reported
  const double rho =
      FluidDensity(site_->fluids[seg->fluid], site_->standard_pressure_pa, site_->standard_temperature_k);
  if (!(rho > 0.0) || !std::isfinite(rho)) {
    Add(path + "/nominal_flow", "cannot convert a volume flow: the density of fluid " + Quote(id) +
                                    " at standard conditions is not positive");
    return;
  }
  seg->nominal_flow_kg_s = v * rho;
}


// --- Districts (water-utility mode) -----------------------------------------

void Compiler::CompileFlowList(const json& d, const char* key, const std::string& path, Need need,
                               std::vector<int>* out) {
  const json* list = nullptr;
  if (Array(d, key, path, need, &list) != Got::kOk) return;
  const std::string lp = Join(path, key);
  if (list->empty() && need == Need::kRequired) Add(lp, "must list at least one flow point");
  for (std::size_t i = 0; i < list->size(); ++i) {
    const json& e = (*list)[i];
    const std::string ep = Join(lp, i);
    if (!e.is_string() || e.get_ref<const std::string&>().empty()) {
      Add(ep, "must be the id of a flow point (got " + Describe(e) + ")");
      continue;
    }
    json holder = json::object();
    holder["point"] = e;
    int index = -1;
    const std::size_t before = problems_->size();
    if (PointRef(holder, "point", lp, Need::kRequired, PointKind::kFlow, "a district meter", &index) == Got::kOk) {
      if (site_->points[index].unit.quantity != Quantity::kVolumeFlow) {
        Add(ep, "point " + Quote(e.get<std::string>()) + " has a mass-flow unit (" + site_->points[index].unit_name +
                    "); district meters need a volume-flow unit such as m3/h or L/s");
      } else if (std::find(out->begin(), out->end(), index) != out->end()) {
        Add(ep, "point " + Quote(e.get<std::string>()) + " is listed twice");
      } else {
        out->push_back(index);
      }
    }
    // PointRef reported at ".../inlets/point"; name the element instead.
    for (std::size_t k = before; k < problems_->size(); ++k) {
      if ((*problems_)[k].path == lp + "/point") (*problems_)[k].path = ep;
    }
  }
}

void Compiler::CompileDistricts(const json& doc) {
  const json* list = nullptr;
  if (Array(doc, "districts", "", Need::kOptional, &list) != Got::kOk) return;
  if (list->empty()) {
    Add("/districts", "must list at least one district (or leave \"districts\" out)");
    return;
  }
  std::map<std::string, std::string> ids;
  for (std::size_t i = 0; i < list->size(); ++i) {
    const std::string path = Join("/districts", i);
    const json& d = (*list)[i];
    if (!ElementObject(d, path)) continue;
    DistrictSpec spec;
    CompileDistrict(d, path, &spec);
    if (!spec.id.empty()) {
      auto [it, fresh] = ids.emplace(spec.id, path + "/id");
      if (!fresh) Add(path + "/id", "duplicate district id " + Quote(spec.id) + " (also " + it->second + ")");
    }
    site_->districts.push_back(std::move(spec));
  }
}

void Compiler::CompileDistrict(const json& d, const std::string& path, DistrictSpec* out) {
  ExactKeys(d, path,
            {"id", "name", "inlets", "outlets", "reservoirs", "pressure_reference", "customer_meters", "properties",
             "service_connections", "mains_length_km", "private_pipe_length_km", "time_zone", "night_flow",
             "burst_detection", "level_smoothing_s"});
  String(d, "id", path, Need::kRequired, &out->id);
  if (String(d, "name", path, Need::kOptional, &out->name) != Got::kOk) out->name = out->id;
  CompileFlowList(d, "inlets", path, Need::kRequired, &out->inlets);
  CompileFlowList(d, "outlets", path, Need::kOptional, &out->outlets);
  for (int o : out->outlets) {
    if (std::find(out->inlets.begin(), out->inlets.end(), o) != out->inlets.end()) {
      Add(path + "/outlets", "point " + Quote(site_->points[o].id) + " is both an inlet and an outlet");
    }
  }
  const json* res = nullptr;
  if (Array(d, "reservoirs", path, Need::kOptional, &res) == Got::kOk) {
    for (std::size_t i = 0; i < res->size(); ++i) {
      const std::string p = Join(path + "/reservoirs", i);
      const json& e = (*res)[i];
      if (!ElementObject(e, p)) continue;
      ExactKeys(e, p, {"id", "level_point", "strapping_table"});
      ReservoirSpec r;
      if (String(e, "id", p, Need::kRequired, &r.id) == Got::kOk) {
        auto [it, fresh] = tank_ids_.emplace(r.id, p + "/id");
        if (!fresh) Add(p + "/id", "duplicate tank or reservoir id " + Quote(r.id) + " (also " + it->second + ")");
      }
      PointRef(e, "level_point", p, Need::kRequired, PointKind::kLevel, "a reservoir's level_point", &r.level_point);
      CompileStrapping(e, p, &r.strapping);
      out->reservoirs.push_back(std::move(r));
    }
  }
  const json* pr = nullptr;
  if (Object(d, "pressure_reference", path, Need::kRequired, &pr) == Got::kOk) {
    const std::string p = path + "/pressure_reference";
    ExactKeys(*pr, p, {"point", "head_offset_m"});
    PointRef(*pr, "point", p, Need::kRequired, PointKind::kPressure, "the average-zone-pressure reference",
             &out->pressure_point);
    Number(*pr, "head_offset_m", p, Need::kOptional, &out->pressure_head_offset_m);
  }
  const json* cm = nullptr;
  if (Object(d, "customer_meters", path, Need::kOptional, &cm) == Got::kOk) {
    const std::string p = path + "/customer_meters";
    ExactKeys(*cm, p, {"point", "coverage", "reading", "interval_s", "volume_unit"});
    std::vector<int> one;
    json holder = json::object();
    if (const json* m = Member(*cm, "point")) holder["inlets"] = json::array({*m});
    else Add(p + "/point", "missing required field \"point\" (the id of a flow point with the aggregated smart meters)");
    if (!holder.empty()) {
      const std::size_t before = problems_->size();
      CompileFlowList(holder, "inlets", p, Need::kRequired, &one);
      for (std::size_t k = before; k < problems_->size(); ++k) (*problems_)[k].path = p + "/point";
      if (one.size() == 1) out->customer_meter_point = one[0];
    }
    double cov = 1.0;
    if (Positive(*cm, "coverage", p, Need::kOptional, &cov) == Got::kOk) {
      if (cov > 1.0) Add(p + "/coverage", "must be a fraction in (0, 1] (got " + Num(cov) + ")");
      else out->customer_meter_coverage = cov;
    }
    static const EnumName<DistrictSpec::MeterReading> kReadings[] = {
        {"spot", DistrictSpec::MeterReading::kSpot},
        {"interval_mean", DistrictSpec::MeterReading::kIntervalMean},
        {"interval_total", DistrictSpec::MeterReading::kIntervalTotal},
        {"cumulative", DistrictSpec::MeterReading::kCumulative}};
    Enum(*cm, "reading", p, Need::kOptional, kReadings, &out->customer_meter_reading);
    double iv = 3600.0;
    if (Positive(*cm, "interval_s", p, Need::kOptional, &iv) == Got::kOk) {
      if (iv < 60.0 || iv > 86400.0) Add(p + "/interval_s", "must be 60..86400 s (got " + Num(iv) + ")");
      else out->customer_meter_interval_s = iv;
    }
    std::string vu;
    if (String(*cm, "volume_unit", p, Need::kOptional, &vu) == Got::kOk) {
      UnitConversion c;
      if (Unit(vu, {Quantity::kVolume}, p + "/volume_unit", &c)) out->customer_meter_volume_m3 = c.factor;
    }
  }
  const json* props = nullptr;
  if (Object(d, "properties", path, Need::kRequired, &props) == Got::kOk) {
    const std::string p = path + "/properties";
    ExactKeys(*props, p, {"households", "non_households", "population"});
    NonNegative(*props, "households", p, Need::kRequired, &out->households);
    NonNegative(*props, "non_households", p, Need::kOptional, &out->non_households);
    NonNegative(*props, "population", p, Need::kOptional, &out->population);
  }
  NonNegative(d, "service_connections", path, Need::kRequired, &out->service_connections);
  Positive(d, "mains_length_km", path, Need::kRequired, &out->mains_length_km);
  NonNegative(d, "private_pipe_length_km", path, Need::kOptional, &out->private_pipe_length_km);
  if (String(d, "time_zone", path, Need::kOptional, &out->time_zone) == Got::kOk && out->time_zone.empty())
    Add(path + "/time_zone", "must name an IANA zone such as \"Europe/London\" or a POSIX TZ rule");
  double smooth = 0.0;
  if (NonNegative(d, "level_smoothing_s", path, Need::kOptional, &smooth) == Got::kOk) {
    if (smooth > 3600.0) Add(path + "/level_smoothing_s", "must be 0..3600 s (got " + Num(smooth) + ")");
    else out->level_smoothing_s = smooth;
  }

  const json* nf = nullptr;
  if (Object(d, "night_flow", path, Need::kOptional, &nf) == Got::kOk) {
    const std::string p = path + "/night_flow";
    ExactKeys(*nf, p,
              {"utc_offset_h", "window_start_h", "window_end_h", "averaging_s", "household_l_per_property_h",
               "person_l_per_h", "per_person", "non_household_l_per_property_h", "exceptional_m3_h", "n1"});
    double off_h = 0.0;
    if (Number(*nf, "utc_offset_h", p, Need::kOptional, &off_h) == Got::kOk) {
      if (std::fabs(off_h) > 14.0) Add(p + "/utc_offset_h", "must be within -14..14 h (got " + Num(off_h) + ")");
      else out->utc_offset_s = off_h * 3600.0;
    }
    const bool gs = NonNegative(*nf, "window_start_h", p, Need::kOptional, &out->night_start_h) != Got::kBad;
    const bool ge = Positive(*nf, "window_end_h", p, Need::kOptional, &out->night_end_h) != Got::kBad;
    if (gs && ge && !(out->night_end_h > out->night_start_h && out->night_end_h <= 24.0)) {
      Add(p + "/window_end_h", "the night window must end after it starts and by 24 h (got " +
                                   Num(out->night_start_h) + " to " + Num(out->night_end_h) + ")");
    }
    if (Positive(*nf, "averaging_s", p, Need::kOptional, &out->night_averaging_s) == Got::kOk && gs && ge &&
        out->night_averaging_s > (out->night_end_h - out->night_start_h) * 3600.0) {
      Add(p + "/averaging_s", "must not be longer than the night window (got " + Num(out->night_averaging_s) + " s)");
    }
    NonNegative(*nf, "household_l_per_property_h", p, Need::kOptional, &out->household_night_use_l_h);
    NonNegative(*nf, "person_l_per_h", p, Need::kOptional, &out->person_night_use_l_h);
    NonNegative(*nf, "non_household_l_per_property_h", p, Need::kOptional, &out->non_household_night_use_l_h);
    NonNegative(*nf, "exceptional_m3_h", p, Need::kOptional, &out->exceptional_night_use_m3_h);
    if (const json* pp = Member(*nf, "per_person")) {
      if (!pp->is_boolean()) Add(p + "/per_person", "must be true or false (got " + Describe(*pp) + ")");
      else out->night_use_per_person = pp->get<bool>();
    }
    if (out->night_use_per_person && !(out->population > 0.0)) {
      Add(p + "/per_person", "per-person night use needs /properties/population");
    }
    double n1 = 1.0;
    if (NonNegative(*nf, "n1", p, Need::kOptional, &n1) == Got::kOk) {
      if (n1 > 3.0) Add(p + "/n1", "FAVAD N1 must be in [0, 3] (typically 0.5 to 1.5; got " + Num(n1) + ")");
      else out->n1 = n1;
    }
  }
  const json* bd = nullptr;
  if (Object(d, "burst_detection", path, Need::kOptional, &bd) == Got::kOk) {
    const std::string p = path + "/burst_detection";
    ExactKeys(*bd, p,
              {"false_alarm_interval_days", "profile_learning_days", "quiet_start_h", "quiet_end_h",
               "night_alarm_sigmas", "min_step_m3_h", "day_step_m3_h"});
    const bool qs = NonNegative(*bd, "quiet_start_h", p, Need::kOptional, &out->quiet_start_h) != Got::kBad;
    const bool qe = Positive(*bd, "quiet_end_h", p, Need::kOptional, &out->quiet_end_h) != Got::kBad;
    if (qs && qe) {
      const double len = out->quiet_end_h > out->quiet_start_h ? out->quiet_end_h - out->quiet_start_h
                                                               : out->quiet_end_h + 24.0 - out->quiet_start_h;
      if (out->quiet_start_h >= 24.0 || out->quiet_end_h > 24.0 || out->quiet_start_h == out->quiet_end_h || len > 12.0)
        Add(p + "/quiet_end_h", "quiet hours must lie in 0..24 h, differ, and last at most 12 h (got " +
                                    Num(out->quiet_start_h) + " to " + Num(out->quiet_end_h) + ")");
    }
    Positive(*bd, "night_alarm_sigmas", p, Need::kOptional, &out->night_alarm_sigmas);
    NonNegative(*bd, "min_step_m3_h", p, Need::kOptional, &out->min_step_m3_h);
    if (Positive(*bd, "day_step_m3_h", p, Need::kOptional, &out->day_step_m3_h) == Got::kOk &&
        out->day_step_m3_h > 1000.0)
      Add(p + "/day_step_m3_h", "must be at most 1000 m3/h (got " + Num(out->day_step_m3_h) + ")");
    if (out->night_alarm_sigmas < 3.0)
      Add(p + "/night_alarm_sigmas", "must be at least 3 (got " + Num(out->night_alarm_sigmas) + ")");
    double days = 3650.0;
    if (Positive(*bd, "false_alarm_interval_days", p, Need::kOptional, &days) == Got::kOk) {
      if (days < 1.0 || days > 1e6)
        Add(p + "/false_alarm_interval_days", "must be 1 to 1e6 days (got " + Num(days) + ")");
      else out->false_alarm_interval_s = days * 86400.0;
    }
    Integer(*bd, "profile_learning_days", p, Need::kOptional, 2, 60, &out->profile_learning_days);
  }
}

}  // namespace

std::string ConfigProblem::ToString() const {
  if (path.empty()) return message;
  return path + ": " + message;
}

const char* SiteFormatVersion() { return kFormat; }

bool CompileSite(const nlohmann::json& doc, Site* site, std::vector<ConfigProblem>* problems) {
  std::vector<ConfigProblem> local;
  std::vector<ConfigProblem>* out = problems != nullptr ? problems : &local;
  const std::size_t before = out->size();
  Site scratch;
  Site* target = site != nullptr ? site : &scratch;
  *target = Site();
  try {
    Compiler compiler(target, out);
    compiler.Run(doc);
  } catch (const std::exception& e) {
    out->push_back(ConfigProblem{"", std::string("internal error while compiling the site: ") + e.what()});
  } catch (...) {
    out->push_back(ConfigProblem{"", "internal error while compiling the site"});
  }
  return out->size() == before;
}

}  // namespace holdfast
