#pragma once
// Scenario files: one TOML file describing a particle, its trap and what to compute.
//
// Values carry their units as text ("40 u", "1 MHz", "3e-4 h*kHz/um^4") and are converted to
// internal units (hbar = m = 1, solver/units.hpp) once, here. A plain number for a
// dimensional quantity is an error unless [units] natural = true, where it means internal
// units (stated in the report header); dimensionless values (level, weights, mean_phonons,
// points, steps, tolerances) are plain numbers. Every key, its type, dimension and default:
// the key reference solver/scenario/keys.hpp, from which the reader takes the keys it accepts. Every problem (TOML syntax, unknown or misspelt key, wrong type, wrong dimension,
// value out of range, bad data file) throws InputError with file, line, column and the
// dotted key, e.g. "trap.toml:7:13: potential[1].frequency = \"-1 MHz\": a frequency > 0".
// [[potential]] tables are counted from 1, as a person reads the file.
//
// Layout (all tables but [particle] and [[potential]] optional):
//   title, description             free text
//   [particle]   mass
//   [units]      reference_frequency, length, energy (display unit of the tables), natural
//                (true: bare numbers are internal values)
//   [[potential]] name, shape, the shape's parameters (potentials/potential.hpp); table shape:
//                file, x_unit, energy_unit; formula shape: expression, x_unit, energy_unit,
//                time_unit and a [potential.parameters] table of plain numbers (in the
//                expression's units) or quantities with units, converted to x_unit,
//                energy_unit and time_unit
//   [box]        left, right (hard walls)
//   [spectrum]   levels, method, fd_order, degeneracy
//   [grid]       points, left, right, convergence_check, search_half_width
//   [output]     folder
// What `trapwork work` and `trapwork sweep` add (all optional for `trapwork spectrum`):
//   [protocol]   duration (tau; "0 us" is a sudden switch) and one or more
//                [[protocol.change]] tables: parameter ("term.parameter"), ramp (constant,
//                linear [default], smooth, smoother, table, formula), to, from (default: the
//                value in [[potential]]); table: file, time_unit, value_unit; formula: formula
//                (of t and tau, in time_unit; `pi` is 3.14159...), time_unit, value_unit
//   [initial]    exactly one of temperature, mean_phonons, level, weights
//   [work]       integrator, steps, frame, thermal_tolerance, max_initial_levels, final_margin,
//                resolution, bin_width, reverse, time_step_check, threads
//   [sweep]      parameter and either values = [...] or from, to, points; or [[sweep.axis]]
//                tables (a grid); or parameters = [...] with values = [[...], ...] (a list)
//   [noise]      realisations, seed, and one or more [[noise.source]] tables: parameter
//                ("term.parameter") and exactly one of white (a one-sided PSD with its unit,
//                "1e-22 m^2/Hz"), psd_file (frequency, PSD rows; frequency_unit, psd_unit),
//                heating_rate ("500 quanta/s", centre parameters only) with at_frequency;
//                relative = true: white or psd_file in 1/Hz, relative to the parameter's value
//   [bath]       exactly one of temperature, mean_phonons, and rate ("200 /s"): damping toward
//                a thermal bath (Lindblad route; adds a noise run without sources if no [noise])
//   [uncertainty] the trap's calibration uncertainty: [uncertainty.sd] with one standard
//                deviation per parameter address ("trap.frequency" = "0.4 kHz"), and
//                correlation = [["trap.frequency", "trap.quartic", -0.6], ...] (pairs not listed: 0)
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "potentials/potential.hpp"
#include "potentials/protocol.hpp"
#include "solver/moving_wall.hpp"
#include "solver/noise.hpp"
#include "solver/spectrum.hpp"
#include "solver/work.hpp"
#include "solver/units.hpp"

namespace trapwork {

// A parameter as the scenario gave it, kept for the summary and the printed header.
struct ParameterRecord {
  std::string name;
  std::string given;    // the text in the file ("1 MHz"), or the number for plain values
  double internal = 0;  // the value the Term received (internal units)
  Dimension dimension;  // of the physical quantity (frequency: ordinary in the file, angular inside)
};

struct TermRecord {
  std::string name, shape;
  std::vector<ParameterRecord> parameters;
  std::vector<std::pair<std::string, std::string>> settings;  // file, x_unit, expression, ...
};

// A parameter that a protocol or a sweep may change, with the dimension of its values in the
// file. A plain number (no unit) is an internal value times plain_factor: 1, except for the
// scale of a formula term, whose plain numbers are in the formula's energy_unit.
struct ParameterSlot {
  std::string address;  // "trap.centre"
  Dimension dimension;  // none: a plain number
  double plain_factor = 1;
};

// One [[protocol.change]]: a Schedule for one parameter, kept as given so that a sweep can
// rebuild it with another duration or end value.
struct ChangeSpec {
  std::string parameter;              // "trap.centre"
  Dimension dimension;
  ScheduleForm form = ScheduleForm::linear;
  std::string ramp;                   // as written: "linear", "smooth", ...
  std::optional<double> from;         // internal; empty: the potential's value at build time
  double to = 0;                      // internal (constant: the value held throughout)
  std::string from_given, to_given;   // text in the file
  std::vector<double> times, values;  // table (internal)
  std::string file;                   // table file as given
  std::string file_skipped;           // what the table file held besides data ("header line 1 (t, x)")
  std::string formula;                // formula as written
  std::string internal_formula;       // what Schedule::formula receives (unit factors applied)
  std::string time_unit, value_unit;  // table and formula
};

struct ProtocolSpec {
  double duration = 0;  // internal
  std::string duration_given;
  std::vector<ChangeSpec> changes;
};

// The work calculation's settings ([initial] and [work]); request.spectrum is filled from the
// scenario's [grid]/[spectrum] when the request is built (work_request below).
struct WorkSettings {
  WorkRequest request;
  std::string initial_given;  // as written: temperature = "20 uK", level = 0, ...
  std::string frame = "auto";
  std::optional<double> resolution;  // internal energy; default: 1/20 of the lowest spacing
  std::optional<double> bin_width;   // internal energy; default: the lowest spacing
  bool threads_given = false;
};

enum class SweepTarget { duration, temperature, mean_phonons, parameter, change_to };

// One swept parameter.
struct SweepAxis {
  std::string parameter;  // as written: "protocol.duration", "trap.quartic", "change[1].to"
  SweepTarget target = SweepTarget::duration;
  std::size_t change = 0;  // change_to: index into protocol.changes (0-based)
  std::string address;     // parameter: "term.parameter"
  Dimension dimension;
  // internal: the axis's values in the order given (a grid axis, the one-parameter form), or
  // for a list of points the value of each point
  std::vector<double> values;
  std::vector<std::string> given;  // text of each value
  std::string unit;                // display unit of the values (that of the first one; "" plain)
  double internal_per_unit = 1;    // internal value of one display unit
};

// [sweep]: one parameter (parameter with values or from, to, points), a full grid over several
// ([[sweep.axis]] tables, each like the one-parameter form), or a list of points (parameters =
// [...], values = [[...], ...]). Points are numbered 0, 1, ... in a fixed order, whoever runs
// them: a grid in the order of nested loops over the axes as written (the first axis slowest,
// the last fastest), a list in the order written.
struct SweepSpec {
  std::vector<SweepAxis> axes;  // one per swept parameter, in the order written
  bool grid = true;             // false: a list of points, axes[k].values[i] belongs to point i
  std::size_t points() const;
  // Index into axes[axis].values (and given) of point `point`'s value on that axis.
  std::size_t value_index(std::size_t point, std::size_t axis) const;
  double value(std::size_t point, std::size_t axis) const { return axes[axis].values[value_index(point, axis)]; }
  std::vector<double> point_values(std::size_t point) const;  // one per axis, internal
  // "protocol.duration = 1 us, initial.temperature = 2 uK" (the values as written)
  std::string point_text(std::size_t point) const;
};

// [noise] (solver/noise.hpp): the sources with their PSDs in internal units, and how each was
// given, for the summary and the report.
struct NoiseSettings {
  NoiseRequest request;
  std::vector<std::string> given;  // one per source: "trap.centre: heating_rate = 500 quanta/s at 1 MHz"
  // one per source: a heating_rate's quanta per internal time unit and the angular frequency it
  // was measured at (internal); none for the other kinds
  std::vector<std::optional<std::pair<double, double>>> heating_rate;
  std::string bath_given;          // [bath] as written ("" without): "temperature = 0.5 mK, rate = 200 /s"
  // The table a refusal names: "bath" for a [bath] without noise sources, else "noise".
  std::string table() const { return request.sources.empty() && !bath_given.empty() ? "bath" : "noise"; }
};
// [uncertainty]: the calibration's standard deviations and correlations written in the scenario
// (carried into work and sweep as a fit's covariance is: uncertainty_task.hpp, calibration_of).
// Checked when read: known parameters the protocol holds fixed, sd > 0 with its unit, a
// correlation matrix with |r| <= 1 that is positive semi-definite.
struct UncertaintySpec {
  std::vector<std::string> addresses;  // "trap.frequency", in the order of the file's keys
  std::vector<std::string> given;      // as written: "0.4 kHz"
  std::vector<std::string> units;      // the unit as written ("kHz"; "" for a plain parameter)
  std::vector<double> lab_sd;          // the number as written (0.4)
  std::vector<double> sd;              // internal
  std::vector<std::vector<double>> correlation;  // addresses x addresses, unit diagonal
  int line = 0;                        // of the [uncertainty] table, for messages
};

struct Scenario {
  std::string file;  // the scenario file as given ("default" for the built-in one)
  // How this run was asked for, recorded in every summary (provenance_json, output.hpp): the
  // front end's command ("trapwork work ion.toml --set ...", or the Python call) and the
  // values changed on top of the file ("protocol.duration=1 us", the --set assignments).
  std::string invocation;
  std::vector<std::string> changed_values;
  std::string title, description;
  UnitSystem units;
  bool natural_units = false;  // [units] natural = true: bare numbers were read as internal values
  std::optional<double> reference_frequency_Hz;  // ordinary frequency that set the units
  double omega_ref = 0;  // internal angular reference frequency (1 for trap units; 0 if none)
  EnergyUnit energy;     // display unit for energies
  Potential potential;
  std::vector<TermRecord> terms;
  SpectrumRequest spectrum;
  std::string output_folder;
  std::vector<ParameterSlot> parameters;  // every parameter a protocol may change
  std::optional<ProtocolSpec> protocol;
  std::optional<WorkSettings> work;       // present when [initial] is
  std::optional<SweepSpec> sweep;
  std::optional<NoiseSettings> noise;     // [noise]: `trapwork work` adds the noisy run
  std::optional<UncertaintySpec> uncertainty;  // [uncertainty]: work and sweep add the calibration's spread
  // [box.soft_walls]: compare the hard-wall run with soft power-law walls of these widths
  // (compare_soft_walls, solver/moving_wall.hpp); only with moving walls.
  std::optional<SoftWallRequest> soft_walls;
  std::vector<std::string> soft_widths_given;  // as written, for the report
};

// Reads a scenario file. Throws InputError (with file, line, column) on every problem,
// including a file that cannot be opened.
Scenario read_scenario(const std::string& path);
// Reads scenario text; `file_name` is used in messages and to find data files (relative to
// its folder) and for the default output folder "<stem>-output".
Scenario read_scenario_text(std::string_view toml_text, std::string file_name);

// The built-in scenario ("trapwork spectrum default", "trapwork demo"): an invented lab
// setting, a 40 u ion in a 1 MHz trap with a quartic correction that raises the lowest
// spacing by about 3 kHz, at a mean phonon number of 2, moved by ten oscillator lengths at
// constant speed in 2.5 trap periods.
std::string_view default_scenario_text();

// The protocol of a scenario: one Schedule per change, `from` defaulting to the potential's
// current value. Throws InputError (file and key, no position) when the scenario has no
// [protocol] or the schedules are unusable.
Protocol build_protocol(const Scenario& s);
// A parameter's value in the scenario: a potential parameter, or box.left / box.right.
double parameter_value(const Scenario& s, const std::string& address);
// Moving hard walls: a [protocol] that changes box.left or box.right. build_protocol then holds
// the potential's schedules only, and build_wall_protocol the walls (a wall not changed stands
// still) with the potential inside and its schedules; wall_work_request maps [initial] and
// [work] onto run_wall_work (solver/moving_wall.hpp): [grid] points are the sine modes of the
// dilated box; integrator eigenbasis and frame co_moving are refused (InputError).
bool moves_walls(const Scenario& s);
WallProtocol build_wall_protocol(const Scenario& s);
WallWorkRequest wall_work_request(const Scenario& s);
// The same from a work request (work_request(s), possibly adjusted: steps, [grid] points,
// threads, progress, as the --tolerance search passes them).
WallWorkRequest wall_work_request(const Scenario& s, const WorkRequest& request);
// The WorkRequest of a scenario: its [initial] and [work] settings and its grid/spectrum
// request. Throws InputError naming the file when the scenario has no [initial].
WorkRequest work_request(const Scenario& s);
// The scenario with sweep point `index` applied (on each axis: duration, temperature, mean
// phonon number, a potential parameter or a change's end value). Requires s.sweep.
Scenario at_sweep_point(const Scenario& s, std::size_t index);

// The time unit protocol.duration was written in ("ms" for "4 ms"); "" without a protocol or
// for a bare (natural) duration. Reports and messages give times in it.
std::string duration_unit(const Scenario& s);

// Internal length of one micrometre: lengths in output tables are in um.
inline double internal_per_um(const Scenario& s) {
  return 1e-6 / s.units.length_m;
}

}  // namespace trapwork
