// Unit conversion at the boundary. Every point in a site config declares its
// unit; the config compiler resolves it once into a factor and an offset so
// that the core only ever sees SI values:  si = raw * factor + offset.
//
// Factors are exact or as given in NIST SP 811 (2008), Appendix B.
#pragma once

#include <string>
#include <string_view>

namespace holdfast {

enum class Quantity {
  kMassFlow,     // kg/s
  kVolumeFlow,   // m3/s
  kPressure,     // Pa
  kTemperature,  // K
  kLength,       // m
  kVolume,       // m3
  kDensity,      // kg/m3
};

const char* QuantityName(Quantity q);

// A resolved unit: si = raw * factor + offset.
struct UnitConversion {
  Quantity quantity = Quantity::kLength;
  double factor = 1.0;
  double offset = 0.0;

  double ToSi(double raw) const { return raw * factor + offset; }
  double FromSi(double si) const { return (si - offset) / factor; }
  // Converts a difference or a standard deviation (no offset).
  double DeltaToSi(double raw_delta) const { return raw_delta * factor; }
};

// Looks up a unit name such as "kg/s", "t/h", "m3/h", "L/s", "bbl/h", "Pa",
// "kPa", "MPa", "bar", "psi", "degC", "degF", "K", "m", "mm", "ft", "km".
// Returns false, with the reason, when the name is unknown. The list of
// accepted names is KnownUnitNames().
bool LookUpUnit(std::string_view name, UnitConversion* out, std::string* why);

// Like LookUpUnit, but also checks the quantity; `why` names what was expected.
bool LookUpUnitOf(std::string_view name, Quantity expected, UnitConversion* out,
                  std::string* why);

// Comma-separated list of every accepted unit name for a quantity.
std::string KnownUnitNames(Quantity q);

// Physical constants used at the boundary.
constexpr double kStandardGravity_m_s2 = 9.80665;      // NIST SP 811, exact
constexpr double kStandardAtmosphere_pa = 101325.0;     // NIST SP 811, exact
constexpr double kZeroCelsius_k = 273.15;               // exact
constexpr double kGasConstant_j_mol_k = 8.314462618;    // CODATA 2018
constexpr double kAirMolarMass_kg_mol = 0.0289647;      // dry air, common value

}  // namespace holdfast
