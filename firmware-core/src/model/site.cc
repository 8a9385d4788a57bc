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

}  // namespace holdfast
