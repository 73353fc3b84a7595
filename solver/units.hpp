#pragma once
// Internal units and lab-unit quantities.
//
// Internal units: hbar = m = 1 with a scenario length unit `length_m` (for a trap the
// oscillator length sqrt(hbar/(m omega_ref)), for a box its initial width). Then
//   energy unit  E0 = hbar^2 / (m L0^2)   (= hbar omega_ref for a trap)
//   time unit    T0 = m L0^2 / hbar       (= 1/omega_ref for a trap)
// Frequencies in scenario files are ordinary frequencies f (cycles per second, "1 MHz");
// internally every frequency is angular, omega = 2 pi f, in units of 1/T0.
// Constants: CODATA 2018 (exact SI values for h, kB; u from CODATA 2018).
#include <array>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace trapwork {

namespace si {
inline constexpr double pi = 3.14159265358979323846;
inline constexpr double planck_h = 6.62607015e-34;           // J s (exact)
inline constexpr double hbar = planck_h / (2 * pi);          // J s
inline constexpr double boltzmann = 1.380649e-23;            // J/K (exact)
inline constexpr double atomic_mass = 1.66053906660e-27;     // kg (CODATA 2018)
}  // namespace si

// Physical dimension as exponents of (kg, m, s, K).
struct Dimension {
  std::array<int, 4> power{0, 0, 0, 0};
  bool operator==(const Dimension&) const = default;
  static Dimension none() { return {}; }
  static Dimension mass() { return {{1, 0, 0, 0}}; }
  static Dimension length() { return {{0, 1, 0, 0}}; }
  static Dimension time() { return {{0, 0, 1, 0}}; }
  static Dimension frequency() { return {{0, 0, -1, 0}}; }
  static Dimension temperature() { return {{0, 0, 0, 1}}; }
  static Dimension energy() { return {{1, 2, -2, 0}}; }
  // energy per length^n, e.g. a polynomial coefficient of order n
  static Dimension energy_per_length(int n) { return {{1, 2 - n, -2, 0}}; }
  std::string describe() const;  // "energy", "length", or "kg^1 m^-2 s^-2"
};

// What a value of dimension d looks like, for error messages: "an energy (e.g. \"0.5 h*kHz\")".
std::string expected_quantity(Dimension d);
// describe() with its article, for "not a length" / "not an energy".
std::string with_article(Dimension d);

// A parsed quantity: SI value and dimension, or a plain number meaning internal units.
struct Quantity {
  double value_si = 0;   // value in SI (kg, m, s, K); for plain numbers the number itself
  Dimension dimension;   // meaningless when `plain`
  bool plain = false;    // no unit given: natural (internal) units
  // A frequency written as an angular one ("2pi*1.5 MHz", "9.42 rad/us"); value_si is still
  // the ordinary frequency f (1.5e6 Hz for both).
  bool angular = false;
};

// Parses "40 u", "1.2 MHz", "15 nm", "3 us", "2 uK", "0.5 h*kHz", "2e-3 h*kHz/um^4",
// "1 kB*uK", "7 hbar*kHz" or a plain number. Frequencies are ordinary ("1.5 MHz") or angular
// ("2pi*1.5 MHz", "2*pi*1.5 MHz", "2π×1.5 MHz", "9.42 rad/us": all mean f = 1.5 MHz); a
// frequency naming neither Hz nor rad ("9.42e6 1/s", "s^-1") is refused as ambiguous. Throws
// InputError (key empty) on bad text.
Quantity parse_quantity(std::string_view text);
// The unit part of a quantity's text: "MHz" for "1.5 MHz" and for "2pi*1.5 MHz", "" for "3".
std::string unit_text(std::string_view text);

// The internal unit system of one scenario.
struct UnitSystem {
  double mass_kg = si::atomic_mass;  // particle mass m
  double length_m = 1e-6;            // L0

  double energy_J() const { return si::hbar * si::hbar / (mass_kg * length_m * length_m); }
  double time_s() const { return mass_kg * length_m * length_m / si::hbar; }
  // Trap units: L0 = sqrt(hbar / (m omega)) for the angular frequency omega = 2 pi f.
  static UnitSystem for_trap(double mass_kg, double frequency_Hz);
  // Box units: L0 = the given width.
  static UnitSystem for_length(double mass_kg, double length_m);

  // Converts a quantity of the expected dimension to internal units. Frequencies become
  // angular (times 2 pi); temperatures become kB T in energy units. A plain number is taken
  // as already internal. Throws InputError(key, text, expected dimension) on a mismatch.
  double to_internal(const Quantity& q, Dimension expected, std::string_view key = {},
                     std::string_view text = {}) const;
  // Internal value of dimension d expressed in SI.
  double to_si(double internal, Dimension d) const;
};

// v rounded to 15 significant digits: a value converted between units (internal <-> lab)
// carries a relative rounding error of a few 1e-16, so its 16th and 17th digits are noise;
// rounded, 1.5 um read in and written out is 1.5 again, not 1.5000000000000002. The tool
// rounds every converted value it writes; exact values (probabilities, internal energies)
// are written unrounded.
double conversion_rounded(double v);

// A value of dimension d given in SI as text in a lab unit, the prefix chosen so that the
// number reads between 1 and 1000 where the prefixes reach: "48 uK", "15.9 nm", "2.16 ms",
// "1 MHz" (ordinary frequency), "40 u", energies in h*Hz..h*GHz, polynomial coefficients in
// h*Hz/nm^n. `digits` significant digits
// (printf %g). Dimensions without a lab unit here are written in SI ("3e-30 kg^1 m^-1 s^-2").
std::string lab_text(double value_si, Dimension d, int digits = 6);

// A display unit for energies in output tables: "h*kHz", "h*MHz", "kB*uK", "hbar*omega".
struct EnergyUnit {
  std::string name;
  double internal_per_unit;  // how many internal energy units one display unit is
};
EnergyUnit energy_unit(std::string_view name, const UnitSystem& units, double omega_ref);

// How library messages (warnings, PhysicsError text) write a dimensional value. Without a
// unit system (the default) the internal value with its internal unit: "-500 L0",
// "0.000409 E0", "2.16 T0" (E0 = hbar^2/(m L0^2), T0 = m L0^2/hbar, as above); with one (the
// tool sets it from the scenario) lab units by lab_text, energies in the display unit when
// one is given, times in time_unit when one is given: "-7.97 um", "0.0409 h*kHz", "2.97 ms".
struct MessageUnits {
  std::optional<UnitSystem> units;
  std::optional<EnergyUnit> energy;
  std::string time_unit;  // with units: times in this unit ("ms", the protocol's), if set
  std::string operator()(double internal, Dimension d) const;
};

// Levenshtein edit distance (insertions, deletions, substitutions; Levenshtein 1966).
std::size_t edit_distance(std::string_view a, std::string_view b);
// The candidate closest to `word` by edit distance if within `max_distance`, else "".
// Used for "did you mean" suggestions on misspelt units and keys.
std::string closest_name(std::string_view word, const std::vector<std::string>& candidates,
                         std::size_t max_distance = 2);

}  // namespace trapwork
