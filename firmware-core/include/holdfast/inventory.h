// Inventory of one control volume: line pack of the pipe plus tank contents.
//
// Each pipe section is split into reaches. Every tick the pressure and the
// temperature of each reach are estimated from the transmitters and the mass
// is summed:
//     M = sum_i rho(P_i, T_i) * A(P_i, T_i) * dx_i                 (line pack)
//       + sum_tanks V(level) * rho(P_atm, T_tank)                   (tanks)
// with A(P, T) = A0 * (1 + c1*D/(E*e) * (P - P_atm)) * (1 + 2*alpha_w*(T - T_w0))
// (thin-wall elasticity, Wylie & Streeter 1993, eq. 2.4.x; thermal growth of
// the steel bore).
//
// Pressure profile: piezometric head H = P/(rho g) + z is interpolated
// between transmitters linearly in the hydraulic-resistance coordinate
// s(x) = integral f/D^5 dx (f fully rough, von Karman), which is exact for a
// steady incompressible flow through sections of different bore
// (Darcy-Weisbach: dH/dx = -f Q|Q| / (2 g D A^2) = -8 f Q|Q| / (pi^2 g D^5)).
//
// Temperature profile: every transmitter is filtered (first order). Without a
// ground model the profile is linear between filtered transmitters. With a
// ground temperature Tg and a thermal time constant tau, product parcels are
// carried down the line with the flow and relax towards Tg as exp(-dt/tau):
// each stretch between lateral meters (deliveries, injections) is a ring of
// equal-volume parcels (about 4 per reach) in the volume coordinate, shifted
// by whole parcels as the stretch's own metered volume passes, with the
// fraction carried over, so a temperature front moves without numerical
// diffusion and slows down past a delivery. The transmitters then only correct the modelled profile by a
// linear interpolation of their residuals.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "holdfast/aligner.h"
#include "holdfast/fluid.h"
#include "holdfast/site.h"

namespace holdfast {

// With temperature transport, a transmitter's residual (reading less the
// transported model) corrects the profile near it and fades over this
// distance. Spreading it linearly to the next transmitter, as the profile
// did first, turned a front arriving a few minutes off the model at the
// outlet into a whole-line temperature error: on the demo line, 0.5 K over
// 48 km, a tonne of line pack for a quarter of an hour and a false leak
// alarm some six hours after every restart (`holdfast evaluate`). A front
// timing error is local; so is the correction.
constexpr double kTemperatureResidualLength_m = 3000.0;

// Why an inventory is not fully trustworthy this tick (bit flags).
enum InventoryFlag : uint32_t {
  kInvPressureMissing = 1u << 0,     // a pressure transmitter never reported
  kInvPressureStale = 1u << 1,       // a pressure transmitter's held value is stale or bad
  kInvTemperatureMissing = 1u << 2,
  kInvTemperatureStale = 1u << 3,
  kInvLevelMissing = 1u << 4,
  kInvLevelStale = 1u << 5,
  kInvLevelOutsideTable = 1u << 6,   // tank level outside its strapping table
  kInvOutsideFluidTable = 1u << 7,   // a reach state was clamped to the density table
  // A tank's own thermometer has not reported: its contents take the line's
  // inlet temperature meanwhile (flagged, never silent).
  kInvTankTemperatureSubstituted = 1u << 8,
};

struct InventoryResult {
  double linepack_kg = 0.0;
  double tank_kg = 0.0;
  double total_kg() const { return linepack_kg + tank_kg; }
  // The step in the computed inventory this tick from a change of source
  // alone (a tank's own thermometer taking over from the substitute): no
  // mass moved, so the balance must not see it.
  double source_step_kg = 0.0;
  uint32_t flags = 0;
  // Random uncertainty (one sigma, kg) of a single inventory state from the
  // transmitters' random accuracy: the part from pressure and level
  // transmitters (independent tick to tick) and the part from temperature
  // transmitters after the first-order filter (correlated tick to tick).
  double sigma_pressure_kg = 0.0;
  double sigma_temperature_kg = 0.0;
  // Mean temperature and pressure over the pipe, for reports.
  double mean_pressure_pa = 0.0;
  double mean_temperature_k = 0.0;
};

class SegmentInventory {
 public:
  // Builds the reach grid. `table` is the density table of the segment's
  // fluid (shared between segments of one fluid; must outlive this object).
  // Returns false with the reason.
  bool Init(const Site& site, int segment, const DensityTable* table, std::string* why);

  // Computes the inventory at tick time t (dt since the previous tick, 0 on
  // the first) from the aligner's held values. `meter_flow_kg_s` holds the
  // signed mass flow of each of the segment's meters (+ into the control
  // volume), in SegmentSpec::meters order, for temperature transport.
  // Allocates nothing.
  const InventoryResult& Update(const Aligner& aligner, double t, double dt, const double* meter_flow_kg_s);

  const InventoryResult& result() const { return result_; }
  // Sensitivities from the last update: kg per Pa of each pressure gauge,
  // kg per K of each temperature gauge, kg per m of each tank level.
  const std::vector<double>& dm_dp() const { return dm_dp_; }
  const std::vector<double>& dm_dt() const { return dm_dt_; }
  const std::vector<double>& dm_dlevel() const { return dm_dlevel_; }
  // Random sigma of each temperature gauge after the filter (K), and the
  // filter's decay per tick (for the variance of a difference over a window).
  double temperature_filter_decay() const { return filter_decay_; }

  int reach_count() const { return static_cast<int>(dx_.size()); }
  double reach_chainage_m(int i) const { return x_[i]; }
  double reach_pressure_pa(int i) const { return p_[i]; }
  double reach_temperature_k(int i) const { return temp_[i]; }
  const DensityTable& density_table() const { return *table_; }
  // Filtered temperature of temperature gauge j (K).
  double gauge_temperature_k(int j) const { return gauge_t_filtered_[j]; }

  // Strapping-table interpolation: volume at a level; false if outside.
  static bool StrapVolume(const std::vector<StrapPoint>& table, double level_m,
                          double* volume_m3, double* dv_dl_m2);

 private:
  void UpdatePressures(const Aligner& aligner, double t);
  void UpdateTemperatures(const Aligner& aligner, double t, double dt, const double* meter_flow_kg_s);

  const Site* site_ = nullptr;
  const SegmentSpec* seg_ = nullptr;
  const DensityTable* table_ = nullptr;
  double p_atm_ = 0.0;
  bool transport_ = false;
  double filter_decay_ = 0.0;

  // Reach grid (structure of arrays).
  std::vector<double> x_, dx_, z_, a0_, compliance_, wall_alpha2_, s_;
  std::vector<int> area_sec_;
  // Pressure interpolation: gauge indices and weight of the upper gauge.
  std::vector<int> p_lo_, p_hi_;
  std::vector<double> p_w_;
  // Temperature interpolation (linear in chainage).
  std::vector<int> t_lo_, t_hi_;
  std::vector<double> t_w_;
  // Weights of the lo and hi transmitters' model residuals at each reach
  // (transport only): linear between them, fading with the distance from
  // each over kTemperatureResidualLength_m.
  std::vector<double> e_w_lo_, e_w_hi_;
  // Per-reach state.
  std::vector<double> p_, temp_, temp_model_, rho_;
  uint64_t update_count_ = 0;
  // Parcel rings for temperature transport (values are T - Tg), one per
  // stretch between lateral meters.
  struct Stretch {
    int first_cell = 0, cells = 0, head = 0;
    double cell_m3 = 0.0, acc_m3 = 0.0;
    int entry_reach = 0, exit_reach = 0;
    std::vector<int> feeding_meters;  // meters whose flow passes through this stretch
  };
  std::vector<Stretch> stretches_;
  std::vector<double> parcel_dt_;
  std::vector<int> reach_stretch_;
  std::vector<double> reach_parcel_pos_;  // reach centre in its stretch's parcel units, minus 0.5
  double relax_ = 1.0, last_relax_dt_ = -1.0;
  bool parcels_init_ = false;
  // Per-gauge state.
  std::vector<double> gauge_s_;         // resistance coordinate of pressure gauges
  std::vector<double> gauge_p_, gauge_head_rho_;
  std::vector<int> p_gauge_reach_;  // nearest reach of each pressure gauge
  std::vector<double> g_dz_, vol0_;  // per reach: g (z - z_gauges), A0 dx
  std::vector<int> p_span_begin_;     // first reach of each gauge-pair span, then n
  std::vector<double> gauge_t_filtered_;
  std::vector<uint8_t> gauge_t_init_;
  std::vector<double> gauge_t_resid_;
  std::vector<int> t_gauge_reach_lo_;
  std::vector<double> t_gauge_reach_w_;
  std::vector<double> t_gauge_x_;
  std::vector<double> sigma_p_, sigma_t_, sigma_level_;
  std::vector<double> tank_t_filtered_, tank_sigma_t_;
  std::vector<uint8_t> tank_t_init_;
  std::vector<uint8_t> p_usable_, t_usable_;
  double last_dt_ = -1.0;
  std::vector<double> dm_dp_, dm_dt_, dm_dlevel_;
  InventoryResult result_;
};

}  // namespace holdfast
