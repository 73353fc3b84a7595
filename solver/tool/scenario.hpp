#pragma once
// Scenario files: one TOML file describing a particle, its trap and what to compute.
//
// Values carry their units as text ("40 u", "1 MHz", "3e-4 h*kHz/um^4") and are converted to
// internal units (hbar = m = 1, solver/units.hpp) once, here. A plain number means internal
// units. Every problem (TOML syntax, unknown or misspelt key, wrong type, wrong dimension,
// value out of range, bad data file) throws InputError with file, line, column and the
// dotted key, e.g. "trap.toml:7:13: potential[1].frequency = \"-1 MHz\": a frequency > 0".
// [[potential]] tables are counted from 1, as a person reads the file.
//
// Layout (all tables but [particle] and [[potential]] optional):
//   title, description             free text
//   [particle]   mass
//   [units]      reference_frequency, length, energy (display unit of the tables)
//   [[potential]] name, shape, the shape's parameters (potentials/potential.hpp); table shape:
//                file, x_unit, energy_unit; formula shape: expression, x_unit, energy_unit,
//                time_unit and a [potential.parameters] table of plain numbers
//   [box]        left, right (hard walls)
//   [spectrum]   levels, method, fd_order, degeneracy
//   [grid]       points, left, right, convergence_check, search_half_width
//   [output]     folder
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "potentials/potential.hpp"
#include "solver/spectrum.hpp"
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

struct Scenario {
  std::string file;  // the scenario file as given ("default" for the built-in one)
  std::string title, description;
  UnitSystem units;
  std::optional<double> reference_frequency_Hz;  // ordinary frequency that set the units
  double omega_ref = 0;  // internal angular reference frequency (1 for trap units; 0 if none)
  EnergyUnit energy;     // display unit for energies
  Potential potential;
  std::vector<TermRecord> terms;
  SpectrumRequest spectrum;
  std::string output_folder;
};

// Reads a scenario file. Throws InputError (with file, line, column) on every problem,
// including a file that cannot be opened.
Scenario read_scenario(const std::string& path);
// Reads scenario text; `file_name` is used in messages and to find data files (relative to
// its folder) and for the default output folder "<stem>-output".
Scenario read_scenario_text(std::string_view toml_text, std::string file_name);

// The built-in scenario ("trapwork spectrum default"): an invented lab setting, a 40 u ion in
// a 1 MHz trap with a small quartic correction (about 20 Hz shift of the lowest spacing).
std::string_view default_scenario_text();

// Internal length of one micrometre: lengths in output tables are in um.
inline double internal_per_um(const Scenario& s) {
  return 1e-6 / s.units.length_m;
}

}  // namespace trapwork
