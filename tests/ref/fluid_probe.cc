// Reference probe: reads lines "model P_pa T_k" from stdin and prints
// "rho_kg_m3 kappa_per_pa beta_per_k" (%.12g) for each, so that a script can
// compare the fluid models with an independent implementation.
//
// Models: water; crude:<rho60_kg_m3>; gas:<gravity>;
//         liquid:<rho_ref>:<bulk_modulus_pa>:<beta_per_k> (reference 101325 Pa, 288.15 K).
// A line starting with '#' or empty is skipped. Out-of-range states print a
// fourth field "clamped".
#include <cstdio>
#include <cstdlib>
#include <iostream>
#include <sstream>
#include <string>

#include "holdfast/fluid.h"

namespace {

bool ParseModel(const std::string& model, holdfast::FluidSpec* f) {
  using holdfast::FluidKind;
  const auto colon = model.find(':');
  const std::string kind = model.substr(0, colon);
  const std::string rest = colon == std::string::npos ? "" : model.substr(colon + 1);
  f->name = model;
  if (kind == "water") {
    f->kind = FluidKind::kWater;
  } else if (kind == "crude") {
    f->kind = FluidKind::kCrudeOil;
    f->base_density_kg_m3 = std::strtod(rest.c_str(), nullptr);
  } else if (kind == "gas") {
    f->kind = FluidKind::kNaturalGas;
    f->gas_gravity = std::strtod(rest.c_str(), nullptr);
  } else if (kind == "liquid") {
    f->kind = FluidKind::kGenericLiquid;
    char* end = nullptr;
    f->reference_density_kg_m3 = std::strtod(rest.c_str(), &end);
    f->bulk_modulus_pa = std::strtod(end + (*end == ':' ? 1 : 0), &end);
    f->thermal_expansion_per_k = std::strtod(end + (*end == ':' ? 1 : 0), &end);
  } else {
    return false;
  }
  return true;
}

}  // namespace

int main() {
  std::string line;
  int status = 0;
  while (std::getline(std::cin, line)) {
    if (line.empty() || line[0] == '#') continue;
    std::istringstream in(line);
    std::string model;
    double p = 0.0, t = 0.0;
    holdfast::FluidSpec f;
    std::string why;
    if (!(in >> model >> p >> t) || !ParseModel(model, &f) || !f.IsValid(&why)) {
      std::fprintf(stderr, "fluid_probe: cannot read '%s' %s\n", line.c_str(), why.c_str());
      std::printf("nan nan nan error\n");
      status = 2;
      continue;
    }
    bool in_range = true;
    const holdfast::FluidState s = holdfast::EvaluateFluid(f, p, t, &in_range);
    std::printf("%.12g %.12g %.12g%s\n", s.density_kg_m3,
                s.ddensity_dp_kg_m3_pa / s.density_kg_m3,
                -s.ddensity_dt_kg_m3_k / s.density_kg_m3, in_range ? "" : " clamped");
  }
  return status;
}
