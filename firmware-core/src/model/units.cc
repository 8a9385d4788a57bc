// Unit table. Every factor is an exact definition or an exact product of
// exact definitions from NIST SP 811 (2008), Appendix B (B.8 and B.9):
//   1 lb   = 0.45359237 kg                (exact)
//   1 ft   = 0.3048 m, 1 in = 0.0254 m     (exact)
//   1 gal  = 231 in3 = 3.785411784e-3 m3   (U.S. liquid gallon, exact)
//   1 bbl  = 42 gal = 0.158987294928 m3    (U.S. oil barrel, exact)
//   1 bar  = 1e5 Pa                         (exact)
//   1 kgf  = 9.80665 N                      (exact, standard gravity)
//   1 psi  = 1 lbf/in2 = 0.45359237 * 9.80665 / 0.0254^2 Pa = 6894.757293168361 Pa
//   t/degC = T/K - 273.15, t/degF = 1.8 * T/K - 459.67 (exact)
#include <algorithm>
#include <cctype>
#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

#include "holdfast/json_check.h"
#include "holdfast/units.h"

namespace holdfast {
namespace {

constexpr double kPound_kg = 0.45359237;
constexpr double kFoot_m = 0.3048;
constexpr double kInch_m = 0.0254;
constexpr double kGallon_m3 = 3.785411784e-3;
constexpr double kBarrel_m3 = 0.158987294928;
constexpr double kPsi_pa = kPound_kg * kStandardGravity_m_s2 / (kInch_m * kInch_m);  // 6894.757293168...
constexpr double kKgfPerCm2_pa = 98066.5;  // 9.80665 N / 1e-4 m2
constexpr double kMinute_s = 60.0;
constexpr double kHour_s = 3600.0;
constexpr double kDay_s = 86400.0;

struct UnitEntry {
  const char* name;
  Quantity quantity;
  double factor;
  double offset;
};

// Order within a quantity is the order KnownUnitNames() lists them.
const UnitEntry kUnits[] = {
    // Mass flow -> kg/s
    {"kg/s", Quantity::kMassFlow, 1.0, 0.0},
    {"kg/min", Quantity::kMassFlow, 1.0 / kMinute_s, 0.0},
    {"kg/h", Quantity::kMassFlow, 1.0 / kHour_s, 0.0},
    {"t/h", Quantity::kMassFlow, 1000.0 / kHour_s, 0.0},
    {"t/d", Quantity::kMassFlow, 1000.0 / kDay_s, 0.0},
    {"lb/h", Quantity::kMassFlow, kPound_kg / kHour_s, 0.0},
    // Volume flow -> m3/s
    {"m3/s", Quantity::kVolumeFlow, 1.0, 0.0},
    {"m3/min", Quantity::kVolumeFlow, 1.0 / kMinute_s, 0.0},
    {"m3/h", Quantity::kVolumeFlow, 1.0 / kHour_s, 0.0},
    {"m3/d", Quantity::kVolumeFlow, 1.0 / kDay_s, 0.0},
    {"L/s", Quantity::kVolumeFlow, 1e-3, 0.0},
    {"L/min", Quantity::kVolumeFlow, 1e-3 / kMinute_s, 0.0},
    {"bbl/h", Quantity::kVolumeFlow, kBarrel_m3 / kHour_s, 0.0},
    {"bbl/d", Quantity::kVolumeFlow, kBarrel_m3 / kDay_s, 0.0},
    {"gal/min", Quantity::kVolumeFlow, kGallon_m3 / kMinute_s, 0.0},
    // Pressure -> Pa
    {"Pa", Quantity::kPressure, 1.0, 0.0},
    {"kPa", Quantity::kPressure, 1e3, 0.0},
    {"MPa", Quantity::kPressure, 1e6, 0.0},
    {"GPa", Quantity::kPressure, 1e9, 0.0},
    {"bar", Quantity::kPressure, 1e5, 0.0},
    {"mbar", Quantity::kPressure, 1e2, 0.0},
    {"psi", Quantity::kPressure, kPsi_pa, 0.0},
    {"kgf/cm2", Quantity::kPressure, kKgfPerCm2_pa, 0.0},
    // Head of water, conventional: 1000 kg/m3 x standard gravity 9.80665 m/s2
    // (the conventional metre and foot of water, NIST SP 811, appendix B.8).
    {"mH2O", Quantity::kPressure, 9806.65, 0.0},
    {"ftH2O", Quantity::kPressure, kFoot_m * 9806.65, 0.0},
    // Temperature -> K
    {"K", Quantity::kTemperature, 1.0, 0.0},
    {"degC", Quantity::kTemperature, 1.0, kZeroCelsius_k},
    {"degF", Quantity::kTemperature, 1.0 / 1.8, 459.67 / 1.8},
    // Length -> m
    {"m", Quantity::kLength, 1.0, 0.0},
    {"mm", Quantity::kLength, 1e-3, 0.0},
    {"cm", Quantity::kLength, 1e-2, 0.0},
    {"km", Quantity::kLength, 1e3, 0.0},
    {"ft", Quantity::kLength, kFoot_m, 0.0},
    {"in", Quantity::kLength, kInch_m, 0.0},
    // Volume -> m3
    {"m3", Quantity::kVolume, 1.0, 0.0},
    {"L", Quantity::kVolume, 1e-3, 0.0},
    {"bbl", Quantity::kVolume, kBarrel_m3, 0.0},
    {"ft3", Quantity::kVolume, kFoot_m * kFoot_m * kFoot_m, 0.0},
    {"gal", Quantity::kVolume, kGallon_m3, 0.0},
    // Density -> kg/m3
    {"kg/m3", Quantity::kDensity, 1.0, 0.0},
    {"g/cm3", Quantity::kDensity, 1e3, 0.0},
};

const UnitEntry* Find(std::string_view name) {
  for (const UnitEntry& u : kUnits) {
    if (name == u.name) return &u;
  }
  return nullptr;
}

bool EqualIgnoringCase(std::string_view a, std::string_view b) {
  if (a.size() != b.size()) return false;
  for (std::size_t i = 0; i < a.size(); ++i) {
    if (std::tolower(static_cast<unsigned char>(a[i])) !=
        std::tolower(static_cast<unsigned char>(b[i]))) {
      return false;
    }
  }
  return true;
}

// The closest known name, preferring one of `wanted` quantity (if given);
// empty when nothing is close.
std::string Suggest(std::string_view name, const Quantity* wanted) {
  const UnitEntry* best = nullptr;
  std::size_t best_d = 0;
  for (const UnitEntry& u : kUnits) {
    if (wanted != nullptr && u.quantity != *wanted) continue;
    if (EqualIgnoringCase(name, u.name)) return u.name;
    const std::size_t d = json_text::EditDistance(name, u.name);
    if (best == nullptr || d < best_d) {
      best = &u;
      best_d = d;
    }
  }
  // Close enough to be a typo: one edit for short names, two for longer ones.
  const std::size_t limit = name.size() <= 3 ? 1 : 2;
  if (best != nullptr && best_d <= limit) return best->name;
  return {};
}

std::string AllUnitNames() {
  std::string out;
  for (Quantity q : {Quantity::kMassFlow, Quantity::kVolumeFlow, Quantity::kPressure,
                     Quantity::kTemperature, Quantity::kLength, Quantity::kVolume,
                     Quantity::kDensity}) {
    if (!out.empty()) out += "; ";
    out += QuantityName(q);
    out += ": ";
    out += KnownUnitNames(q);
  }
  return out;
}

}  // namespace

const char* QuantityName(Quantity q) {
  switch (q) {
    case Quantity::kMassFlow: return "mass flow";
    case Quantity::kVolumeFlow: return "volume flow";
    case Quantity::kPressure: return "pressure";
    case Quantity::kTemperature: return "temperature";
    case Quantity::kLength: return "length";
    case Quantity::kVolume: return "volume";
    case Quantity::kDensity: return "density";
  }
  return "unknown quantity";
}

std::string KnownUnitNames(Quantity q) {
  std::string out;
  for (const UnitEntry& u : kUnits) {
    if (u.quantity != q) continue;
    if (!out.empty()) out += ", ";
    out += u.name;
  }
  return out;
}

bool LookUpUnit(std::string_view name, UnitConversion* out, std::string* why) {
  const UnitEntry* u = Find(name);
  if (u == nullptr) {
    if (why != nullptr) {
      *why = "unknown unit \"" + std::string(name) + "\"";
      const std::string hint = Suggest(name, nullptr);
      if (!hint.empty()) *why += " (did you mean \"" + hint + "\"?)";
      *why += "; unit names are case-sensitive; accepted: " + AllUnitNames();
    }
    return false;
  }
  if (out != nullptr) {
    out->quantity = u->quantity;
    out->factor = u->factor;
    out->offset = u->offset;
  }
  return true;
}

bool LookUpUnitOf(std::string_view name, Quantity expected, UnitConversion* out,
                  std::string* why) {
  const UnitEntry* u = Find(name);
  if (u == nullptr) {
    if (why != nullptr) {
      *why = "unknown " + std::string(QuantityName(expected)) + " unit \"" + std::string(name) +
             "\"";
      const std::string hint = Suggest(name, &expected);
      if (!hint.empty()) *why += " (did you mean \"" + hint + "\"?)";
      *why += "; unit names are case-sensitive; accepted: " + KnownUnitNames(expected);
    }
    return false;
  }
  if (u->quantity != expected) {
    if (why != nullptr) {
      *why = "unit \"" + std::string(name) + "\" is a " + QuantityName(u->quantity) +
             " unit, expected a " + QuantityName(expected) +
             " unit (one of: " + KnownUnitNames(expected) + ")";
    }
    return false;
  }
  if (out != nullptr) {
    out->quantity = u->quantity;
    out->factor = u->factor;
    out->offset = u->offset;
  }
  return true;
}

}  // namespace holdfast
