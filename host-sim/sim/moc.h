// Method of characteristics (MOC) for elastic liquid pipelines, host side.
//
// Wylie & Streeter, Fluid Transients in Systems (1993), ch. 3; Chaudhry,
// Applied Hydraulic Transients, ch. 3. The state is the
// absolute pressure P and the mass flow m at the nodes of a grid with
// dx = a*dt in every section, so that the characteristics
//     C+ (dx/dt = +a):  dm + B dP = -(gravity + friction) dt + a S dt
//     C- (dx/dt = -a):  dm - B dP = -(gravity + friction) dt - a S dt,   B = A/a,
// run from node to node in one step. Continuity is written for the mass per
// unit length mu(P, T) = rho(P, T) * A(P, T):
//     dmu/dP * dP/dt + dm/dx = S = -dmu/dT * dT/dt,     dmu/dP = A/a^2,
// so a temperature change moves mass (thermal expansion of the line pack).
// Momentum: dm/dt + A dP/dx + rho g A dz/dx + f m|m| / (2 rho D A) = 0.
//
// Discretisation (details in moc.cc):
// - gravity is integrated exactly over each reach: rho_bar g A (z_P - z_A) / a;
// - friction is second order along each characteristic (trapezoid between the
//   foot and the new node), with the new node's term linearised implicitly,
//   f from Colebrook-White (holdfast::DarcyFriction) at the node's Reynolds
//   number, looked up in a fine table built at Init;
// - with that, the discrete steady state has a uniform mass flow in every
//   pipe, and the initial state is that steady state exactly (no start-up
//   transient);
// - the line pack is the trapezoid sum of mu over the nodes, with
//   mu = mu*(T) + (A/a^2)(P - P*): the fluid's density (holdfast::DensityTable
//   built from holdfast::EvaluateFluid) at the node's initial pressure P* and
//   its present temperature, and the grid's own compressibility for pressure
//   changes, so that the line pack and the characteristics agree exactly;
// - boundary, lateral and leak flows are integrated in time by the trapezoid
//   rule, which is the rule the characteristics imply: the node updates then
//   telescope, and the line pack changes by exactly what crosses the
//   boundaries up to round-off and terms that cancel over time (the 24 h
//   test in tests/sim/moc_test.cc closes to about 1e-11 of the throughput);
// - an optional mass fixer (off by default) closes the discrete budget at
//   every property step by a uniform pressure shift of the interior nodes;
//   the mass it moves is reported (MassTotals::fixer_kg).
//
// Temperature: the inlet temperature is carried down the line by Lagrangian
// parcels that relax towards the ground temperature with a time constant.
// Density, friction and temperatures are refreshed every property step
// (about 1 s); between refreshes the thermal mass source is spread evenly.
//
// Not modelled: column separation and vapour cavities (pressures below
// vapour pressure are counted, not corrected), convective terms, unsteady
// friction, pump inertia (trips and starts are speed ramps).
//
// The hot loop (Step) allocates nothing.
#pragma once

#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "holdfast/fluid.h"
#include "holdfast/pipe.h"
#include "holdfast/site.h"

namespace holdfast::sim {

constexpr double kInfinity = std::numeric_limits<double>::infinity();

// A scheduled value: `initial` until the first ramp, then linear ramps towards
// each target. A ramp that starts before the previous one has ended starts
// from the value at that moment. A ramp of zero duration is a step.
struct Ramp {
  double start_s = 0.0;
  double duration_s = 0.0;
  double target = 0.0;
};

class Channel {
 public:
  Channel() = default;
  explicit Channel(double initial) : initial_(initial) {}
  void Set(double initial) { initial_ = initial; }
  // Ramps must be added in nondecreasing start time.
  void AddRamp(double start_s, double duration_s, double target);
  double At(double t_s) const;  // allocation-free
  double initial() const { return initial_; }
  const std::vector<Ramp>& ramps() const { return ramps_; }

 private:
  double initial_ = 0.0;
  std::vector<Ramp> ramps_;
};

// Inlet temperature: piecewise linear through (time, K) points (held before
// the first and after the last), plus an optional sinusoidal swing
// amplitude * sin(2 pi (t - phase) / period).
struct TemperatureSchedule {
  std::vector<double> times_s;
  std::vector<double> values_k;
  double swing_amplitude_k = 0.0;
  double swing_period_s = 86400.0;
  double swing_phase_s = 0.0;
  double At(double t_s) const;
};

enum class UpstreamType { kReservoir, kPump, kFlow };
enum class DownstreamType { kReservoir, kTank, kFlow };

struct UpstreamSetup {
  UpstreamType type = UpstreamType::kReservoir;
  // Reservoir: free-surface elevation above datum. Pump: suction head (free
  // surface of the suction tank).
  Channel head_m{0.0};
  // Pump curve H = s^2 * shutoff_head - c * Q|Q| (affinity laws), Q the
  // volume flow at the pump, s the speed as a fraction of rated.
  double shutoff_head_m = 0.0;
  double curve_c_s2_m5 = 0.0;
  Channel speed{1.0};
  bool check_valve = true;  // no reverse flow through the pump
  // Flow: mass flow in kg/s, or volume flow at line conditions in m3/s.
  Channel flow{0.0};
  bool flow_is_volume = false;
};

struct DownstreamSetup {
  DownstreamType type = DownstreamType::kReservoir;
  Channel head_m{0.0};  // reservoir: free-surface elevation above datum
  // Optional valve between the pipe end and the reservoir or tank (orifice
  // equation m = tau * CdA * sqrt(2 rho dP)); 0 means no valve.
  double valve_cda_m2 = 0.0;
  Channel opening{1.0};  // tau, 0..1
  // Tank: level from the strapping table; head = base elevation + level.
  std::vector<StrapPoint> strapping;
  double tank_base_elevation_m = 0.0;
  double tank_initial_level_m = 0.0;
  double tank_initial_temperature_k = kNaN;  // NaN: the arriving temperature
  bool tank_mixed = true;   // contents mix (mass-weighted); false: take the arriving temperature
  Channel tank_outflow{0.0};  // kg/s (or m3/s when flow_is_volume)
  // Proportional level control of the outflow: outflow = tank_outflow +
  // gain * (level - setpoint), never negative. NaN setpoint: no control.
  double tank_level_setpoint_m = kNaN;
  double tank_level_gain_per_m = 0.0;  // kg/s per m (or m3/s per m when flow_is_volume)
  // Flow: controlled delivery, mass flow kg/s or volume at line conditions m3/s.
  Channel flow{0.0};
  bool flow_is_volume = false;
};

// A metered injection or delivery at a chainage, at a scheduled flow.
struct LateralSetup {
  double chainage_m = 0.0;
  bool injection = false;  // false: delivery (flow leaves the line)
  Channel flow{0.0};       // >= 0; kg/s, or m3/s at line conditions
  bool flow_is_volume = false;
};

// A leak: an orifice q = Cd A sqrt(2 rho (P - P_out)) opening linearly from
// onset over ramp. Either cda_m2 is given, or rate_kg_s, in which case the
// orifice is sized at onset so that it passes that rate at the pressure then.
struct LeakSetup {
  double chainage_m = 0.0;
  double onset_s = 0.0;
  double ramp_s = 0.0;
  double cda_m2 = kNaN;
  double rate_kg_s = kNaN;
  double outside_pressure_pa = kNaN;  // NaN: atmospheric
};

struct MocSetup {
  std::vector<PipeSection> sections;
  std::vector<ElevationPoint> profile;
  FluidSpec fluid;
  double atmospheric_pressure_pa = kStandardAtmosphere_pa;

  // Largest time step wanted, s. The step is chosen at or below it so that
  // every section has a whole number of reaches with dx = a*dt, a being the
  // section's Korteweg wave speed adjusted by at most wave_speed_tolerance.
  double time_step_hint_s = 0.1;
  double wave_speed_tolerance = 0.01;  // relative
  // Period of the property refresh (temperature transport, density,
  // friction, thermal source, mass fixer), rounded to whole steps.
  double property_step_s = 1.0;
  bool mass_fixer = false;
  double friction_scale = 1.0;  // 0 gives a frictionless line (tests)

  UpstreamSetup upstream;
  DownstreamSetup downstream;
  std::vector<LateralSetup> laterals;
  std::vector<LeakSetup> leaks;

  TemperatureSchedule inlet_temperature;
  double ground_temperature_k = kNaN;              // NaN: no relaxation
  double thermal_time_constant_s = kInfinity;      // infinity: no relaxation
  double parcel_spacing_m = 100.0;
  // Uniform temperature of the line at t = 0 (NaN: the steady profile that
  // the inlet temperature and the ground relaxation give).
  double initial_line_temperature_k = kNaN;

  bool IsValid(std::string* why) const;
};

struct GridSection {
  double length_m = 0.0;
  double wave_speed_model_m_s = 0.0;  // Korteweg at the reference state
  double wave_speed_grid_m_s = 0.0;   // L / (reaches * dt)
  double dx_m = 0.0;
  int reaches = 0;
  double adjustment() const { return wave_speed_grid_m_s / wave_speed_model_m_s - 1.0; }
};

// Running mass totals since t = 0, kg (trapezoid in time, the same rule the
// characteristics imply).
struct MassTotals {
  double inlet_kg = 0.0;         // through the upstream boundary
  double pipe_outlet_kg = 0.0;   // through the downstream end of the pipe
  double delivery_kg = 0.0;      // all deliveries
  double injection_kg = 0.0;     // all injections
  double leak_kg = 0.0;          // all leaks
  double tank_outflow_kg = 0.0;  // out of the receiving tank
  double fixer_kg = 0.0;         // mass added by the mass fixer (scheme error)
  double max_fixer_shift_pa = 0.0;
};

class MocModel {
 public:
  // Position on the grid for reading the state at a chainage.
  struct Probe {
    int i0 = 0, i1 = 0;
    double w = 0.0;  // value = (1-w)*v[i0] + w*v[i1]
    double chainage_m = 0.0;
  };

  MocModel() = default;
  // Builds the grid and the initial steady state. Returns false with the reason.
  bool Init(const MocSetup& setup, std::string* why);

  // Advances one time step. Allocation-free.
  void Step();

  double time_s() const { return static_cast<double>(step_) * dt_; }
  double dt_s() const { return dt_; }
  uint64_t steps() const { return step_; }
  int node_count() const { return n_; }
  int property_every_steps() const { return n_prop_; }
  const std::vector<GridSection>& grid() const { return grid_; }
  double reference_pressure_pa() const { return p_ref_; }
  double reference_temperature_k() const { return t_ref_; }

  // --- State. `previous` reads the state one step back (t - dt). ---
  Probe MakeProbe(double chainage_m) const;
  double Pressure(const Probe& p, bool previous = false) const;  // absolute, Pa
  double Temperature(const Probe& p, bool previous = false) const;
  double Elevation(const Probe& p) const;
  double MassFlow(const Probe& p, bool previous = false) const;
  // Density from the fluid table at (P, T).
  double Density(double pressure_pa, double temperature_k) const;

  double inlet_flow_kg_s(bool previous = false) const;
  double pipe_outlet_flow_kg_s(bool previous = false) const;
  double lateral_flow_kg_s(int k, bool previous = false) const { return lat_q_[previous ? 1 : 0][k]; }
  double leak_flow_kg_s(int k, bool previous = false) const { return leak_q_[previous ? 1 : 0][k]; }
  double lateral_node_chainage_m(int k) const { return x_[lat_node_[k]]; }
  double leak_node_chainage_m(int k) const { return x_[leak_node_[k]]; }
  double leak_cda_m2(int k) const { return leak_cda_[k]; }
  bool has_tank() const { return setup_.downstream.type == DownstreamType::kTank; }
  double tank_mass_kg() const { return tank_mass_; }
  double tank_level_m(bool previous = false) const { return previous ? tank_level_prev_ : tank_level_; }
  double tank_temperature_k() const { return tank_t_; }
  double tank_outflow_kg_s(bool previous = false) const { return tank_out_[previous ? 1 : 0]; }
  double pump_speed() const { return pump_speed_; }

  // Line pack: trapezoid sum of mu over the nodes, kg.
  double Linepack() const;
  // Line pack plus the receiving tank, kg.
  double Inventory() const { return Linepack() + (has_tank() ? tank_mass_ : 0.0); }
  double initial_inventory_kg() const { return inventory0_; }
  const MassTotals& totals() const { return totals_; }

  // Pressure below about vapour pressure (0.2 bar absolute) anywhere on the
  // line, counted per property step: column separation is not modelled.
  uint64_t low_pressure_steps() const { return low_pressure_steps_; }
  double min_pressure_pa() const { return min_pressure_; }
  uint64_t density_table_clamps() const { return clamps_; }
  uint64_t parcel_overflows() const { return parcel_overflows_; }

  // Node arrays (current time), for tests.
  const double* node_pressure() const { return p_[cur_].data(); }
  const double* node_flow() const { return m_[cur_].data(); }
  const std::vector<double>& node_chainage() const { return x_; }
  const std::vector<double>& node_elevation() const { return z_; }
  double node_temperature(int i) const;
  double node_density(int i) const { return rho_[i]; }

 private:
  struct Pipe {
    int begin = 0, end = 0;  // node indices, inclusive; end - begin reaches
    int section = 0;
    double area_m2 = 0.0, diameter_m = 0.0, a_m_s = 0.0, dx_m = 0.0;
    double b = 0.0, inv2b = 0.0;  // B = A/a and 1/(2B)
    double compliance_per_pa = 0.0, wall_alpha2 = 0.0;
    int friction_table = 0;
  };
  // A junction joins the last node of pipe k (u) to the first node of pipe
  // k+1 (d): same pressure; flows differ by what leaves through laterals and leaks.
  struct Junction {
    int u = 0, d = 0;
    int pipe_u = 0, pipe_d = 0;
    int lat_begin = 0, lat_end = 0;    // into junction_lats_
    int leak_begin = 0, leak_end = 0;  // into junction_leaks_
  };
  struct FrictionTable {
    double re_min = 1000.0, log_ratio = 0.0, ratio = 1.0;
    std::vector<double> re, f;
  };

  bool BuildGrid(double p_ref, double t_ref, std::string* why);
  bool SteadyState(double t_s, std::string* why);
  double March(double p0, double m0, double t_s);
  void SetTemperaturesFromParcels(double t_s, double* out);
  void InitParcels(double t_s);
  void AdvanceParcels(double t_from_s, double dt_s);
  void PropertyUpdate();
  double Friction(int i, double m, double rho);  // R_i for node i (half-step scaled)
  double FrictionFactor(int table, double re, int* hint) const;
  double ExternalFlow(int lat, double t_s, double rho) const;
  double LeakCoefficient(int k, double t_s, double rho) const;
  double TankBackPressure(double rho) const;
  double TankLevelFromMass(double mass, double temperature_k) const;
  double ReservoirPressure(double head_m, double rho, double z) const;
  double UpstreamPressureSteady(double m0, double t_s, double t0_k);
  double DownstreamResidual(double t_s);
  void UpdateMuTargets(const double* temps, bool initial);

  MocSetup setup_;
  DensityTable table_;
  std::vector<GridSection> grid_;
  std::vector<Pipe> pipes_;
  std::vector<Junction> junctions_;
  std::vector<int> junction_lats_, junction_leaks_;
  std::vector<FrictionTable> ftables_;
  std::vector<int> lat_node_, leak_node_;
  std::vector<int> node_pipe_;  // pipe of each node

  int n_ = 0;
  double dt_ = 0.0, length_m_ = 0.0, p_ref_ = 0.0, t_ref_ = 0.0;
  int n_prop_ = 1;
  uint64_t step_ = 0;
  int cur_ = 0;

  // Node arrays.
  std::vector<double> x_, z_, wdx_, kp_, half_dx_;
  std::vector<double> p_[2], m_[2];
  std::vector<double> r_;       // friction coefficient, half step: dt/2 * f/(2 rho D A)
  std::vector<double> g_;       // gravity term of the reach to the right of node i
  std::vector<double> gz_;      // g A (z_{i+1} - z_i) / a, per reach
  std::vector<double> src_;     // thermal source, premultiplied by dx/2, kg/s
  std::vector<double> rho_;     // density at the last property step
  std::vector<double> re_last_, f_node_;
  std::vector<int> f_hint_;
  std::vector<double> pstar_, mu_start_, mu_target_, t_start_, t_target_, area_star_;
  std::vector<double> scratch_;  // node temperatures (initialisation, property step)

  // Parcels (ring buffer, oldest first; positions decrease along the ring).
  std::vector<double> parcel_x_, parcel_t_;
  int parcel_first_ = 0, parcel_count_ = 0;
  double ground_k_ = kNaN;

  // Boundaries, laterals, leaks.
  std::vector<double> lat_q_[2], leak_q_[2], leak_cda_, leak_cda_sized_;
  std::vector<char> leak_sized_;
  double tank_mass_ = 0.0, tank_level_ = 0.0, tank_level_prev_ = 0.0, tank_t_ = 0.0;
  double tank_rho_ = 0.0, tank_in_mass_ = 0.0, tank_in_heat_ = 0.0;
  double tank_out_[2] = {0.0, 0.0};
  double pump_speed_ = 1.0;

  MassTotals totals_;
  double line_budget_ = 0.0;  // linepack(0) + in - out - leaks
  double inventory0_ = 0.0;
  uint64_t low_pressure_steps_ = 0, clamps_ = 0, parcel_overflows_ = 0;
  double min_pressure_ = kInfinity;
  uint64_t prop_step_index_ = 0;  // step_ at the last property update
};

}  // namespace holdfast::sim
