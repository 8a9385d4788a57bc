// Unit table against its definitions. Every expected factor below is written
// out from the definition in NIST SP 811 (2008), Appendix B.8 (factors in
// alphabetical order) and B.9 (factors by kind of quantity); the entry used is
// named in the comment. Metric prefixes are exact by definition (SI).
#include <string>

#include <gtest/gtest.h>

#include "holdfast/units.h"

namespace holdfast {
namespace {

// Definitions from NIST SP 811 (2008), Appendix B.8, all exact.
constexpr double kLb_kg = 0.45359237;            // "pound (avoirdupois) (lb)"
constexpr double kFt_m = 0.3048;                 // "foot (ft)"
constexpr double kIn_m = 0.0254;                 // "inch (in)"
constexpr double kGal_m3 = 231.0 * kIn_m * kIn_m * kIn_m;  // "gallon [U.S.] (gal)" = 231 in3
constexpr double kBbl_m3 = 42.0 * kGal_m3;       // "barrel [for petroleum, 42 gallons (U.S.)] (bbl)"
constexpr double kGn = 9.80665;                  // standard acceleration of gravity (kgf = 9.80665 N)

UnitConversion Get(const char* name) {
  UnitConversion u;
  std::string why;
  EXPECT_TRUE(LookUpUnit(name, &u, &why)) << name << ": " << why;
  return u;
}

void ExpectFactor(const char* name, Quantity q, double factor) {
  SCOPED_TRACE(name);
  const UnitConversion u = Get(name);
  EXPECT_EQ(u.quantity, q);
  EXPECT_DOUBLE_EQ(u.factor, factor);
  EXPECT_EQ(u.offset, 0.0);
}

TEST(UnitsTest, MassFlow) {
  ExpectFactor("kg/s", Quantity::kMassFlow, 1.0);
  ExpectFactor("kg/min", Quantity::kMassFlow, 1.0 / 60.0);
  ExpectFactor("kg/h", Quantity::kMassFlow, 1.0 / 3600.0);
  ExpectFactor("t/h", Quantity::kMassFlow, 1000.0 / 3600.0);   // B.8 "ton, metric (t)" = 1000 kg
  ExpectFactor("t/d", Quantity::kMassFlow, 1000.0 / 86400.0);  // B.8 "day (d)" = 86400 s
  ExpectFactor("lb/h", Quantity::kMassFlow, kLb_kg / 3600.0);  // B.8 "pound per hour" = 1.259 979 E-04 kg/s
  EXPECT_NEAR(Get("lb/h").factor, 1.259979e-4, 0.5e-10);       // the printed B.8 value, 7 digits
}

TEST(UnitsTest, VolumeFlow) {
  ExpectFactor("m3/s", Quantity::kVolumeFlow, 1.0);
  ExpectFactor("m3/min", Quantity::kVolumeFlow, 1.0 / 60.0);
  ExpectFactor("m3/h", Quantity::kVolumeFlow, 1.0 / 3600.0);
  ExpectFactor("m3/d", Quantity::kVolumeFlow, 1.0 / 86400.0);
  ExpectFactor("L/s", Quantity::kVolumeFlow, 1e-3);            // B.8 "liter (L)" = 1.0 E-03 m3
  ExpectFactor("L/min", Quantity::kVolumeFlow, 1e-3 / 60.0);
  ExpectFactor("bbl/h", Quantity::kVolumeFlow, kBbl_m3 / 3600.0);
  ExpectFactor("bbl/d", Quantity::kVolumeFlow, kBbl_m3 / 86400.0);
  ExpectFactor("gal/min", Quantity::kVolumeFlow, kGal_m3 / 60.0);  // B.8 "gallon [U.S.] per minute"
  EXPECT_NEAR(Get("gal/min").factor, 6.309020e-5, 0.5e-11);       // the printed B.8 value
}

TEST(UnitsTest, Pressure) {
  ExpectFactor("Pa", Quantity::kPressure, 1.0);
  ExpectFactor("kPa", Quantity::kPressure, 1e3);
  ExpectFactor("MPa", Quantity::kPressure, 1e6);
  ExpectFactor("GPa", Quantity::kPressure, 1e9);
  ExpectFactor("bar", Quantity::kPressure, 1e5);   // B.8 "bar" = 1.0 E+05 Pa
  ExpectFactor("mbar", Quantity::kPressure, 1e2);  // B.8 "millibar (mbar)" = 1.0 E+02 Pa
  // B.8 "pound-force per square inch (psi)" = 6.894 757 E+03 Pa; exactly lb * gn / in^2.
  ExpectFactor("psi", Quantity::kPressure, kLb_kg * kGn / (kIn_m * kIn_m));
  EXPECT_NEAR(Get("psi").factor, 6894.757293168, 1e-9);  // the exact product to 13 digits
  // B.8 "kilogram-force per square centimeter (kgf/cm2)" = 9.806 65 E+04 Pa.
  ExpectFactor("kgf/cm2", Quantity::kPressure, kGn / 1e-4);
  // B.8 "meter of water, conventional (mH2O)" = 9.806 65 E+03 Pa and
  // "foot of water, conventional (ftH2O)" = 2.989 067 E+03 Pa.
  ExpectFactor("mH2O", Quantity::kPressure, 1000.0 * kGn);
  EXPECT_NEAR(Get("ftH2O").factor, 2989.067, 1e-3);
}

TEST(UnitsTest, Temperature) {
  // B.9 "degree Celsius": T/K = t/degC + 273.15.
  // B.9 "degree Fahrenheit": T/K = (t/degF + 459.67) / 1.8.
  const UnitConversion k = Get("K");
  EXPECT_EQ(k.quantity, Quantity::kTemperature);
  EXPECT_DOUBLE_EQ(k.ToSi(300.0), 300.0);
  const UnitConversion c = Get("degC");
  EXPECT_EQ(c.quantity, Quantity::kTemperature);
  EXPECT_DOUBLE_EQ(c.ToSi(0.0), 273.15);
  EXPECT_DOUBLE_EQ(c.ToSi(15.0), 288.15);
  EXPECT_DOUBLE_EQ(c.ToSi(-40.0), 233.15);
  const UnitConversion f = Get("degF");
  EXPECT_EQ(f.quantity, Quantity::kTemperature);
  EXPECT_DOUBLE_EQ(f.ToSi(32.0), 273.15);    // ice point
  EXPECT_DOUBLE_EQ(f.ToSi(212.0), 373.15);   // steam point at one atmosphere
  EXPECT_DOUBLE_EQ(f.ToSi(-40.0), 233.15);   // -40 degF = -40 degC
  EXPECT_DOUBLE_EQ(f.ToSi(60.0), (60.0 + 459.67) / 1.8);  // API base temperature, 288.7055... K
  EXPECT_NEAR(f.FromSi(f.ToSi(77.0)), 77.0, 1e-12);
  // A difference of one degree Fahrenheit is 5/9 K (B.9), without the offset.
  EXPECT_DOUBLE_EQ(f.DeltaToSi(1.8), 1.0);
  EXPECT_DOUBLE_EQ(c.DeltaToSi(2.5), 2.5);
}

TEST(UnitsTest, Length) {
  ExpectFactor("m", Quantity::kLength, 1.0);
  ExpectFactor("mm", Quantity::kLength, 1e-3);
  ExpectFactor("cm", Quantity::kLength, 1e-2);
  ExpectFactor("km", Quantity::kLength, 1e3);
  ExpectFactor("ft", Quantity::kLength, kFt_m);  // B.8 "foot (ft)" = 3.048 E-01 m
  ExpectFactor("in", Quantity::kLength, kIn_m);  // B.8 "inch (in)" = 2.54 E-02 m
}

TEST(UnitsTest, Volume) {
  ExpectFactor("m3", Quantity::kVolume, 1.0);
  ExpectFactor("L", Quantity::kVolume, 1e-3);
  ExpectFactor("bbl", Quantity::kVolume, kBbl_m3);
  EXPECT_DOUBLE_EQ(Get("bbl").factor, 0.158987294928);  // B.8 printed 1.589 873 E-01, exact value
  ExpectFactor("ft3", Quantity::kVolume, kFt_m * kFt_m * kFt_m);  // B.8 "cubic foot" = 2.831 685 E-02 m3
  ExpectFactor("gal", Quantity::kVolume, kGal_m3);
  EXPECT_DOUBLE_EQ(Get("gal").factor, 3.785411784e-3);  // B.8 printed 3.785 412 E-03, exact value
}

TEST(UnitsTest, Density) {
  ExpectFactor("kg/m3", Quantity::kDensity, 1.0);
  ExpectFactor("g/cm3", Quantity::kDensity, 1e3);  // B.8 "gram per cubic centimeter" = 1.0 E+03 kg/m3
}

TEST(UnitsTest, GaugePressureOffset) {
  // The config compiler adds the site's atmospheric pressure to the offset of
  // a gauge-referenced pressure point, after the factor: 5 barg at 1009 mbar
  // atmospheric is 600 900 Pa absolute.
  UnitConversion u = Get("bar");
  const UnitConversion atm = Get("mbar");
  u.offset += atm.ToSi(1009.0);
  EXPECT_DOUBLE_EQ(u.ToSi(5.0), 5e5 + 100900.0);
  EXPECT_DOUBLE_EQ(u.ToSi(0.0), 100900.0);
  EXPECT_DOUBLE_EQ(u.FromSi(600900.0), 5.0);
  // A standard deviation or a difference does not see the offset.
  EXPECT_DOUBLE_EQ(u.DeltaToSi(0.05), 5000.0);
}

TEST(UnitsTest, UnknownUnit) {
  UnitConversion u;
  u.factor = 42.0;
  std::string why;
  EXPECT_FALSE(LookUpUnit("furlongs/fortnight", &u, &why));
  EXPECT_NE(why.find("unknown unit \"furlongs/fortnight\""), std::string::npos) << why;
  EXPECT_NE(why.find("m3/h"), std::string::npos) << "lists the accepted names: " << why;
  EXPECT_EQ(u.factor, 42.0) << "output untouched on failure";

  // Names are case-sensitive; a case slip or a typo gets a suggestion.
  EXPECT_FALSE(LookUpUnit("kpa", &u, &why));
  EXPECT_NE(why.find("did you mean \"kPa\""), std::string::npos) << why;
  EXPECT_FALSE(LookUpUnit("m3/hr", &u, &why));
  EXPECT_NE(why.find("did you mean \"m3/h\""), std::string::npos) << why;
  EXPECT_FALSE(LookUpUnit("", &u, &why));
  EXPECT_FALSE(LookUpUnit("BAR", &u, nullptr));  // no reason wanted: no crash
}

TEST(UnitsTest, WrongQuantity) {
  UnitConversion u;
  std::string why;
  EXPECT_FALSE(LookUpUnitOf("bar", Quantity::kMassFlow, &u, &why));
  EXPECT_NE(why.find("pressure"), std::string::npos) << why;
  EXPECT_NE(why.find("mass flow"), std::string::npos) << why;
  EXPECT_NE(why.find("kg/s"), std::string::npos) << "lists the mass-flow units: " << why;
  EXPECT_EQ(why.find("m3/h"), std::string::npos) << "lists only the expected quantity: " << why;

  EXPECT_FALSE(LookUpUnitOf("degc", Quantity::kTemperature, &u, &why));
  EXPECT_NE(why.find("did you mean \"degC\""), std::string::npos) << why;

  ASSERT_TRUE(LookUpUnitOf("psi", Quantity::kPressure, &u, &why)) << why;
  EXPECT_NEAR(u.factor, 6894.757293168, 1e-9);
}

TEST(UnitsTest, EveryListedNameResolvesToItsQuantity) {
  for (Quantity q : {Quantity::kMassFlow, Quantity::kVolumeFlow, Quantity::kPressure,
                     Quantity::kTemperature, Quantity::kLength, Quantity::kVolume,
                     Quantity::kDensity}) {
    const std::string list = KnownUnitNames(q);
    ASSERT_FALSE(list.empty()) << QuantityName(q);
    std::size_t start = 0;
    int count = 0;
    while (start < list.size()) {
      std::size_t end = list.find(", ", start);
      if (end == std::string::npos) end = list.size();
      const std::string name = list.substr(start, end - start);
      UnitConversion u;
      std::string why;
      EXPECT_TRUE(LookUpUnitOf(name, q, &u, &why)) << name << ": " << why;
      EXPECT_GT(u.factor, 0.0) << name;
      ++count;
      start = end + 2;
    }
    EXPECT_GE(count, 2) << QuantityName(q);
  }
  EXPECT_STREQ(QuantityName(Quantity::kVolumeFlow), "volume flow");
  EXPECT_STREQ(QuantityName(Quantity::kDensity), "density");
}

}  // namespace
}  // namespace holdfast
