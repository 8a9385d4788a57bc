// The compiled site: the immutable model the core runs on. Built from the
// JSON site config by CompileSite() (site_config.h); every value is SI and
// every reference is an index, so nothing on the hot path sees a string.
#pragma once

#include <cmath>
#include <limits>
#include <string>
#include <vector>

#include "holdfast/fluid.h"
#include "holdfast/pipe.h"
#include "holdfast/units.h"

namespace holdfast {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr int kMaxWindows = 8;

enum class PointKind { kFlow, kPressure, kTemperature, kLevel };
const char* PointKindName(PointKind k);

// One instrument signal. Values arrive in `unit` and leave the door in SI.
struct PointSpec {
  std::string id;
  PointKind kind = PointKind::kFlow;
  std::string unit_name;
  UnitConversion unit;          // includes gauge-to-absolute offset for pressures
  bool gauge = false;           // pressure only: declared gauge reference
  double staleness_s = 60.0;    // held value is stale after this
  // Accuracy, one standard deviation. Flow meters: fraction of reading.
  // Pressure, temperature, level: SI units of the quantity (Pa, K, m).
  double random_sigma = 0.0;      // independent from sample to sample
  double systematic_sigma = 0.0;  // fixed over any window (calibration offset)
  // Plausible range in SI (NaN = not given).
  double range_min = kNaN;
  double range_max = kNaN;
};

enum class MeterRole { kInlet, kOutlet, kInjection, kDelivery };
enum class MeterKind { kMass, kLineVolume, kStandardVolume };
const char* MeterRoleName(MeterRole r);
const char* MeterKindName(MeterKind k);
inline bool MeterRoleIsIn(MeterRole r) { return r == MeterRole::kInlet || r == MeterRole::kInjection; }

struct MeterSpec {
  int point = -1;                 // flow point
  MeterRole role = MeterRole::kInlet;
  MeterKind kind = MeterKind::kMass;
  double chainage_m = 0.0;
  int pressure_point = -1;        // line-volume meters: conditions at the meter
  int temperature_point = -1;
};

// A pressure or temperature transmitter on the line.
struct GaugeSpec {
  int point = -1;
  double chainage_m = 0.0;
  double elevation_m = 0.0;
};

struct StrapPoint {
  double level_m = 0.0;
  double volume_m3 = 0.0;
};

struct TankSpec {
  std::string id;
  std::vector<StrapPoint> strapping;  // strictly increasing in level and volume
  int level_point = -1;
  int temperature_point = -1;         // -1: use the segment's inlet temperature
};

struct LandmarkSpec {
  std::string name;
  double chainage_m = 0.0;
};

struct SegmentSpec {
  std::string id;
  std::string name;
  int fluid = -1;                        // index into Site::fluids
  std::vector<PipeSection> sections;     // in flow order from the inlet
  std::vector<ElevationPoint> profile;   // elevation by chainage (>= 1 point)
  std::vector<MeterSpec> meters;
  std::vector<GaugeSpec> pressure_gauges;     // sorted by chainage
  std::vector<GaugeSpec> temperature_gauges;  // sorted by chainage
  std::vector<TankSpec> tanks;
  std::vector<LandmarkSpec> landmarks;

  double reach_length_m = 500.0;
  // Temperature: first-order filter on every transmitter; optional transport
  // from the inlet with relaxation towards ground (both given or neither).
  double temperature_filter_s = 300.0;
  double ground_temperature_k = kNaN;
  double thermal_time_constant_s = kNaN;

  std::vector<double> windows_s = {300.0, 3600.0, 86400.0};
  int buckets_per_window = 60;
  double confidence = 0.95;              // one-sided, for the minimum detectable leak
  double nominal_flow_kg_s = kNaN;       // for reporting leaks as a fraction

  double length_m() const;
};

// Water-utility mode: a district metered area (DMA) as a control volume
// (config/FORMAT.md, "districts"). Flow points carry volume-flow units.
struct ReservoirSpec {
  std::string id;
  int level_point = -1;
  std::vector<StrapPoint> strapping;  // level -> volume, strictly increasing
};

struct DistrictSpec {
  std::string id;
  std::string name;
  std::vector<int> inlets;              // flow points into the district
  std::vector<int> outlets;             // flow points to neighbouring districts
  std::vector<ReservoirSpec> reservoirs;  // service reservoirs inside it
  int pressure_point = -1;              // average-zone-pressure (AZP) reference point
  double pressure_head_offset_m = 0.0;  // added to the point's head to represent the AZP
  int customer_meter_point = -1;        // aggregated smart meters (flow), -1 = none
  double customer_meter_coverage = 1.0; // fraction of customer use the aggregate sees, (0, 1]
  // What a customer-meter reading is: a rate at its time stamp (spot), the
  // mean rate or the volume over the interval ending at its time stamp
  // (interval_mean, interval_total), or a register reading (cumulative).
  enum class MeterReading { kSpot, kIntervalMean, kIntervalTotal, kCumulative };
  MeterReading customer_meter_reading = MeterReading::kSpot;
  double customer_meter_interval_s = 3600.0;  // interval_mean and interval_total
  double customer_meter_volume_m3 = 1.0;      // m3 per unit of a volume reading (interval_total, cumulative)
  double households = 0.0;
  double non_households = 0.0;
  double population = 0.0;              // 0 = not given
  double service_connections = 0.0;
  double mains_length_km = 0.0;
  double private_pipe_length_km = 0.0;  // property line to customer meter
  // Local time: an IANA zone ("Europe/London", from the system tz database)
  // or a POSIX TZ rule ("GMT0BST,M3.5.0/1,M10.5.0"), resolved at the
  // boundary; without one, the fixed utc_offset_s.
  std::string time_zone;
  // Night-flow analysis (defaults: common practice, see water.h).
  double utc_offset_s = 0.0;
  double night_start_h = 2.0;
  double night_end_h = 4.0;
  double night_averaging_s = 900.0;
  double household_night_use_l_h = 1.7;
  double person_night_use_l_h = 0.6;
  bool night_use_per_person = false;
  double non_household_night_use_l_h = 8.0;
  double exceptional_night_use_m3_h = 0.0;
  double n1 = 1.0;
  // Burst detection (defaults in water.h, DistrictMonitorOptions).
  double false_alarm_interval_s = 3650.0 * 86400.0; // the day path's false-alarm budget
  int profile_learning_days = 7;                    // days in the time-of-day profile
  double quiet_start_h = 0.0;                       // quiet hours for the night step detector, local
  double quiet_end_h = 4.0;
  double night_alarm_sigmas = 5.0;
  double min_step_m3_h = 0.6;
  double day_step_m3_h = 5.0;                       // the day path's target step
  // Reservoir level smoothing before the balance (first-order time
  // constant, s; 0 = none).
  double level_smoothing_s = 0.0;
};

struct Site {
  std::string name;
  double atmospheric_pressure_pa = kStandardAtmosphere_pa;
  double standard_pressure_pa = kStandardAtmosphere_pa;   // for standard-volume meters
  double standard_temperature_k = 288.15;
  double tick_s = 1.0;
  std::vector<PointSpec> points;
  std::vector<FluidSpec> fluids;
  std::vector<std::string> fluid_ids;
  std::vector<SegmentSpec> segments;
  std::vector<DistrictSpec> districts;  // water-utility mode; may be empty

  int FindPoint(const std::string& id) const;  // -1 if absent
};

}  // namespace holdfast
