#include "holdfast/site.h"

namespace holdfast {

// The names are the ones the site config uses (config/FORMAT.md).
const char* PointKindName(PointKind k) {
  switch (k) {
    case PointKind::kFlow: return "flow";
    case PointKind::kPressure: return "pressure";
    case PointKind::kTemperature: return "temperature";
    case PointKind::kLevel: return "level";
  }
  return "unknown";
}

const char* MeterRoleName(MeterRole r) {
  switch (r) {
    case MeterRole::kInlet: return "inlet";
    case MeterRole::kOutlet: return "outlet";
    case MeterRole::kInjection: return "injection";
    case MeterRole::kDelivery: return "delivery";
  }
  return "unknown";
}

const char* MeterKindName(MeterKind k) {
  switch (k) {
    case MeterKind::kMass: return "mass";
    case MeterKind::kLineVolume: return "line_volume";
    case MeterKind::kStandardVolume: return "standard_volume";
  }
  return "unknown";
}

double SegmentSpec::length_m() const {
  double total = 0.0;
  for (const PipeSection& s : sections) total += s.length_m;
  return total;
}

int Site::FindPoint(const std::string& id) const {
  for (std::size_t i = 0; i < points.size(); ++i) {
    if (points[i].id == id) return static_cast<int>(i);
  }
  return -1;
}

double DefaultViscosity(FluidKind kind, ApiCommodity commodity) {
  switch (kind) {
    case FluidKind::kWater: return 1.1e-3;
    case FluidKind::kGenericLiquid: return 1.0e-3;
    case FluidKind::kNaturalGas: return 1.1e-5;
    case FluidKind::kCrudeOil:
    case FluidKind::kRefinedProduct:
      switch (commodity) {
        case ApiCommodity::kCrudeOil: return 1.0e-2;
        case ApiCommodity::kGasoline: return 5.0e-4;
        case ApiCommodity::kTransitionZone: return 1.0e-3;
        case ApiCommodity::kJetFuel: return 1.5e-3;
        case ApiCommodity::kFuelOil: return 3.5e-3;
        case ApiCommodity::kLubeOil: return 1.0e-1;
      }
  }
  return 1.0e-3;
}

}  // namespace holdfast
