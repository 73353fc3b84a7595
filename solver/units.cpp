// Lab-unit quantities and the internal unit system (see units.hpp), and the text of
// InputError. Constants: CODATA 2018 (si:: in units.hpp); eV = 1.602176634e-19 J (exact SI).
#include "solver/units.hpp"

#include <algorithm>
#include <cctype>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstdlib>

#include "solver/errors.hpp"

namespace trapwork {

// ---- InputError -------------------------------------------------------------------------

InputError::InputError(std::string key_, std::string found_, std::string expected_, std::string suggestion_,
                       std::string file_, int line_, int column_)
    : std::runtime_error(format(file_, line_, column_, key_, found_, expected_, suggestion_)),
      file(std::move(file_)),
      key(std::move(key_)),
      found(std::move(found_)),
      expected(std::move(expected_)),
      suggestion(std::move(suggestion_)),
      line(line_),
      column(column_) {}

// "file:line:column: key = found: expected (did you mean 'x'?)"; empty parts are left out.
std::string InputError::format(const std::string& file, int line, int column, const std::string& key,
                               const std::string& found, const std::string& expected,
                               const std::string& suggestion) {
  std::string where = file;
  if (line > 0) {
    where += (where.empty() ? "line " : ":") + std::to_string(line);
    if (column > 0) where += (file.empty() ? ", column " : ":") + std::to_string(column);
  }
  std::string what = key;
  if (!found.empty()) what += (what.empty() ? "" : " = ") + found;
  std::string text = where;
  if (!what.empty()) text += (text.empty() ? "" : ": ") + what;
  if (!expected.empty()) text += (text.empty() ? "" : ": ") + expected;
  if (!suggestion.empty()) text += " (did you mean '" + suggestion + "'?)";
  return text;
}

// ---- names and suggestions --------------------------------------------------------------

std::size_t edit_distance(std::string_view a, std::string_view b) {
  std::vector<std::size_t> row(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) row[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    std::size_t diagonal = row[0];
    row[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j) {
      const std::size_t above = row[j];
      row[j] = std::min({row[j] + 1, row[j - 1] + 1, diagonal + (a[i - 1] == b[j - 1] ? 0 : 1)});
      diagonal = above;
    }
  }
  return row[b.size()];
}

std::string closest_name(std::string_view word, const std::vector<std::string>& candidates,
                         std::size_t max_distance) {
  std::string best;
  std::size_t best_distance = max_distance + 1;
  for (const auto& c : candidates) {
    const std::size_t d = edit_distance(word, c);
    if (d > 0 && d < best_distance) {
      best = c;
      best_distance = d;
    }
  }
  return best;
}

// ---- dimensions -------------------------------------------------------------------------

namespace {

struct NamedDimension {
  Dimension dimension;
  const char* name;
  const char* expected;
};

const std::vector<NamedDimension>& named_dimensions() {
  static const std::vector<NamedDimension> table = [] {
    std::vector<NamedDimension> t = {
        {Dimension::none(), "dimensionless", "a plain number"},
        {Dimension::mass(), "mass", "a mass (e.g. \"40 u\")"},
        {Dimension::length(), "length", "a length (e.g. \"1.5 um\")"},
        {Dimension::time(), "time", "a time (e.g. \"10 us\")"},
        {Dimension::frequency(), "frequency", "a frequency (e.g. \"1 MHz\")"},
        {Dimension::temperature(), "temperature", "a temperature (e.g. \"2 uK\")"},
        {Dimension::energy(), "energy", "an energy (e.g. \"0.5 h*kHz\" or \"1 kB*uK\")"},
    };
    static const char* per_length[] = {"",
                                       "",
                                       "",
                                       "an energy per length^3 (e.g. \"1e-3 h*kHz/um^3\")",
                                       "an energy per length^4 (e.g. \"3e-4 h*kHz/um^4\")",
                                       "an energy per length^5 (e.g. \"1e-5 h*kHz/um^5\")",
                                       "an energy per length^6 (e.g. \"1e-6 h*kHz/um^6\")",
                                       "an energy per length^7 (e.g. \"1e-7 h*kHz/um^7\")",
                                       "an energy per length^8 (e.g. \"1e-8 h*kHz/um^8\")"};
    static const char* per_length_name[] = {"",
                                            "",
                                            "",
                                            "energy per length^3",
                                            "energy per length^4",
                                            "energy per length^5",
                                            "energy per length^6",
                                            "energy per length^7",
                                            "energy per length^8"};
    t.push_back({Dimension::energy_per_length(1), "energy per length",
                 "an energy per length, a force (e.g. \"0.5 h*kHz/um\")"});
    for (int n = 3; n <= 8; ++n)
      t.push_back({Dimension::energy_per_length(n), per_length_name[n], per_length[n]});
    return t;
  }();
  return table;
}

const NamedDimension* find_named(const Dimension& d) {
  for (const auto& n : named_dimensions())
    if (n.dimension == d) return &n;
  return nullptr;
}

}  // namespace

std::string Dimension::describe() const {
  if (const auto* n = find_named(*this)) return n->name;
  static const char* base[] = {"kg", "m", "s", "K"};
  std::string text;
  for (int i = 0; i < 4; ++i) {
    if (power[i] == 0) continue;
    if (!text.empty()) text += ' ';
    text += std::string(base[i]) + "^" + std::to_string(power[i]);
  }
  return text;
}

std::string with_article(Dimension d) {
  if (d == Dimension::none()) return "a plain number";
  const std::string text = d.describe();
  return (std::string("aeiou").find(text[0]) != std::string::npos ? "an " : "a ") + text;
}

std::string expected_quantity(Dimension d) {
  if (const auto* n = find_named(d)) return n->expected;
  return "a quantity of dimension " + d.describe();
}

// ---- parsing ----------------------------------------------------------------------------

namespace {

constexpr double electron_volt = 1.602176634e-19;  // J, exact (SI 2019)

struct UnitAtom {
  const char* name;
  double si;  // value of one unit in SI
  Dimension dimension;
};

const std::vector<UnitAtom>& unit_atoms() {
  const Dimension M = Dimension::mass(), L = Dimension::length(), T = Dimension::time(),
                  F = Dimension::frequency(), K = Dimension::temperature(), E = Dimension::energy();
  const Dimension action{{1, 2, -1, 0}}, per_kelvin_energy{{1, 2, -2, -1}};
  static const std::vector<UnitAtom> atoms = {
      {"u", si::atomic_mass, M},
      {"Da", si::atomic_mass, M},
      {"kg", 1, M},
      {"g", 1e-3, M},
      {"m", 1, L},
      {"cm", 1e-2, L},
      {"mm", 1e-3, L},
      {"um", 1e-6, L},
      {"nm", 1e-9, L},
      {"pm", 1e-12, L},
      {"s", 1, T},
      {"ms", 1e-3, T},
      {"us", 1e-6, T},
      {"ns", 1e-9, T},
      {"ps", 1e-12, T},
      {"Hz", 1, F},
      {"kHz", 1e3, F},
      {"MHz", 1e6, F},
      {"GHz", 1e9, F},
      {"THz", 1e12, F},
      {"K", 1, K},
      {"mK", 1e-3, K},
      {"uK", 1e-6, K},
      {"nK", 1e-9, K},
      {"J", 1, E},
      {"eV", electron_volt, E},
      {"meV", 1e-3 * electron_volt, E},
      // the newton, for forces and force noise ("1e-21 N", "N^2/Hz"), and the femto- and attonewton
      {"N", 1, Dimension{{1, 1, -2, 0}}},
      {"fN", 1e-15, Dimension{{1, 1, -2, 0}}},
      {"aN", 1e-18, Dimension{{1, 1, -2, 0}}},
      {"h", si::planck_h, action},
      {"hbar", si::hbar, action},
      {"kB", si::boltzmann, per_kelvin_energy},
      // the radian of an angular frequency ("9.42 rad/us"): allowed there only (parse_quantity)
      {"rad", 1, Dimension::none()},
      // micro written with the micro sign (U+00B5) or the Greek mu (U+03BC)
      {"\xC2\xB5m", 1e-6, L},
      {"\xC2\xB5s", 1e-6, T},
      {"\xC2\xB5K", 1e-6, K},
      {"\xCE\xBCm", 1e-6, L},
      {"\xCE\xBCs", 1e-6, T},
      {"\xCE\xBCK", 1e-6, K},
  };
  return atoms;
}

std::vector<std::string> ascii_unit_names() {
  std::vector<std::string> names;
  for (const auto& a : unit_atoms())
    if (static_cast<unsigned char>(a.name[0]) < 0x80) names.emplace_back(a.name);
  return names;
}

std::string known_units_text() {
  std::string text;
  for (const auto& n : ascii_unit_names()) text += (text.empty() ? "" : ", ") + n;
  return text +
         " (um, us, uK may be written with a micro sign), joined by * and / with "
         "integer powers ^n";
}

const char* const number_expected =
    "a number optionally followed by a unit, e.g. \"1.2 MHz\", \"0.5 h*kHz\", "
    "\"3e-4 h*kHz/um^4\"";

bool is_space(char c) {
  return std::isspace(static_cast<unsigned char>(c)) != 0;
}
bool is_unit_char(char c) {
  return std::isalpha(static_cast<unsigned char>(c)) || static_cast<unsigned char>(c) >= 0x80;
}

std::string trim(std::string_view t) {
  std::size_t b = 0, e = t.size();
  while (b < e && is_space(t[b])) ++b;
  while (e > b && is_space(t[e - 1])) --e;
  return std::string(t.substr(b, e - b));
}

// Splits "1.5 mK" into ("1.5", "mK"); the unit part is empty for a plain number.
std::pair<std::string, std::string> split_number(const std::string& s, std::size_t* end_out = nullptr) {
  const char* begin = s.c_str();
  char* end = nullptr;
  std::strtod(begin, &end);
  const auto n = static_cast<std::size_t>(end - begin);
  if (end_out) *end_out = n;
  return {trim(s.substr(0, n)), trim(s.substr(n))};
}

const char* const frequency_advice =
    "write \"1.5 MHz\" (ordinary frequency f) or \"2pi*1.5 MHz\" (angular frequency omega = 2 pi f)";

// Length of a leading "2pi*" ("2*pi*", "2 pi", "2π×", "2π*", "2·π·") in s, or 0.
std::size_t two_pi_prefix(const std::string& s) {
  std::size_t p = 0;
  auto skip = [&] {
    while (p < s.size() && is_space(s[p])) ++p;
  };
  auto times = [&] {  // '*', the multiplication sign U+00D7 or the middle dot U+00B7
    if (p < s.size() && s[p] == '*') return ++p, true;
    if (s.compare(p, 2, "\xC3\x97") == 0 || s.compare(p, 2, "\xC2\xB7") == 0) return p += 2, true;
    return false;
  };
  if (s.empty() || s[0] != '2') return 0;
  p = 1;
  skip();
  times();
  skip();
  if (s.compare(p, 2, "pi") == 0 || s.compare(p, 2, "\xCF\x80") == 0)  // "pi" or the Greek pi
    p += 2;
  else
    return 0;
  if (p < s.size() && is_unit_char(s[p]) && s.compare(p, 2, "\xC3\x97") != 0 && s.compare(p, 2, "\xC2\xB7") != 0)
    return 0;  // a longer word ("2pico")
  skip();
  times();
  skip();
  return p;
}

}  // namespace

std::string unit_text(std::string_view text) {
  const std::string s = trim(text);
  return split_number(s.substr(two_pi_prefix(s))).second;
}

// Grammar: ["2pi*"] number [unit {('*' | '/') unit}], unit = name ['^' integer], left to right
// ("h*kHz/um^4" = h * kHz / um^4); "1/s" or "/s" may start the unit. Units multiply literally:
// "hbar*kHz" is hbar times 10^3 s^-1 (an angular frequency of 10^3 rad/s), i.e. h*kHz / (2 pi).
// A frequency must name Hz ("1.5 MHz", ordinary) or be angular ("2pi*1.5 MHz", "9.42 rad/us");
// "s^-1" alone does not say whether 2 pi is in it and is refused.
Quantity parse_quantity(std::string_view text_in) {
  const std::string s = trim(text_in);
  const std::string shown(text_in);
  if (const std::size_t prefix = two_pi_prefix(s)) {
    Quantity q;
    const std::string expected =
        "a frequency after 2pi*, e.g. \"2pi*1.5 MHz\" (the angular frequency 2 pi x 1.5 MHz, i.e. f = 1.5 MHz)";
    try {
      q = parse_quantity(s.substr(prefix));
    } catch (const InputError& e) {
      throw InputError("", shown, expected + ": " + e.expected, e.suggestion);
    }
    if (q.plain || !(q.dimension == Dimension::frequency()) || q.angular) throw InputError("", shown, expected);
    q.angular = true;
    return q;
  }
  std::size_t pos = 0;
  split_number(s, &pos);
  if (pos == 0) throw InputError("", shown, number_expected);
  Quantity q;
  const double number = std::strtod(s.c_str(), nullptr);
  if (!std::isfinite(number)) throw InputError("", shown, "a finite number");
  while (pos < s.size() && is_space(s[pos])) ++pos;
  if (pos == s.size()) {
    q.value_si = number;
    q.plain = true;
    return q;
  }
  double factor = 1;
  Dimension dim;
  int sign = 1;  // +1 after '*' (or at the start), -1 after '/'
  bool hertz = false;    // a unit of Hz was named
  int radian_power = 0;  // of "rad"
  if (s[pos] == '1') {   // "1/s": the '/' starts the unit
    std::size_t p = pos + 1;
    while (p < s.size() && is_space(s[p])) ++p;
    if (p < s.size() && s[p] == '/') pos = p;
  }
  if (s[pos] == '/') {
    sign = -1;
    ++pos;
    while (pos < s.size() && is_space(s[pos])) ++pos;
  }
  while (true) {
    const std::size_t start = pos;
    while (pos < s.size() && is_unit_char(s[pos])) ++pos;
    const std::string name = s.substr(start, pos - start);
    if (name.empty())
      throw InputError("", shown,
                       start < s.size() ? "a unit name at '" + s.substr(start) + "'; " + number_expected
                                        : std::string("a unit name after the last '*' or '/'"));
    const auto& atoms = unit_atoms();
    const auto atom =
        std::find_if(atoms.begin(), atoms.end(), [&](const UnitAtom& a) { return name == a.name; });
    if (atom == atoms.end())
      throw InputError("", shown, "unit '" + name + "' is not known; known units: " + known_units_text(),
                       closest_name(name, ascii_unit_names()));
    int power = 1;
    while (pos < s.size() && is_space(s[pos])) ++pos;
    if (pos < s.size() && s[pos] == '^') {
      ++pos;
      while (pos < s.size() && is_space(s[pos])) ++pos;
      const std::size_t power_start = pos;
      if (pos < s.size() && (s[pos] == '-' || s[pos] == '+')) ++pos;
      const std::size_t digits = pos;
      while (pos < s.size() && std::isdigit(static_cast<unsigned char>(s[pos]))) ++pos;
      if (pos == digits || pos - digits > 3)
        throw InputError("", shown, "an integer power after '^' in '" + name + "^...'");
      power = std::stoi(s.substr(power_start, pos - power_start));
    }
    if (atom->dimension == Dimension::frequency()) hertz = true;
    if (name == "rad") radian_power += sign * power;
    factor *= std::pow(atom->si, sign * power);
    for (int i = 0; i < 4; ++i) dim.power[i] += sign * power * atom->dimension.power[i];
    while (pos < s.size() && is_space(s[pos])) ++pos;
    if (pos == s.size()) break;
    if (s[pos] != '*' && s[pos] != '/')
      throw InputError("", shown, "'*' or '/' between units, not '" + s.substr(pos, 1) + "'");
    sign = s[pos] == '*' ? 1 : -1;
    ++pos;
    while (pos < s.size() && is_space(s[pos])) ++pos;
  }
  if (radian_power != 0) {
    if (radian_power != 1 || !(dim == Dimension::frequency()))
      throw InputError("", shown, "rad only in an angular frequency such as \"9.42 rad/us\"; " +
                                      std::string(frequency_advice));
    factor /= 2 * si::pi;  // value_si is the ordinary frequency f = omega / (2 pi)
    q.angular = true;
  } else if (dim == Dimension::frequency() && !hertz) {
    throw InputError("", shown,
                     "a frequency with Hz or written as angular: " + std::string(frequency_advice) +
                         " (\"" + split_number(s).second + "\" does not say whether it is f or 2 pi f)");
  }
  q.value_si = number * factor;
  q.dimension = dim;
  if (!std::isfinite(q.value_si)) throw InputError("", shown, "a value that fits a double in SI units");
  return q;
}

// ---- unit system ------------------------------------------------------------------------

UnitSystem UnitSystem::for_trap(double mass_kg, double frequency_Hz) {
  TRAPWORK_EXPECT(mass_kg > 0 && frequency_Hz > 0, "for_trap needs mass > 0 and frequency > 0");
  return {mass_kg, std::sqrt(si::hbar / (mass_kg * 2 * si::pi * frequency_Hz))};
}

UnitSystem UnitSystem::for_length(double mass_kg, double length_m) {
  TRAPWORK_EXPECT(mass_kg > 0 && length_m > 0, "for_length needs mass > 0 and length > 0");
  return {mass_kg, length_m};
}

namespace {
// SI value of one internal unit of dimension d: m^a L0^b T0^c (E0/kB)^d; for a frequency the
// internal value is angular, so one internal unit is 1/(2 pi T0) Hz.
double internal_unit_in_si(const UnitSystem& u, const Dimension& d) {
  double unit = std::pow(u.mass_kg, d.power[0]) * std::pow(u.length_m, d.power[1]) *
                std::pow(u.time_s(), d.power[2]) * std::pow(u.energy_J() / si::boltzmann, d.power[3]);
  if (d == Dimension::frequency()) unit /= 2 * si::pi;
  return unit;
}

// A hint for a common slip: a temperature or a frequency where an energy is meant.
std::string energy_hint(const Quantity& q, std::string_view text) {
  if (text.empty()) return {};
  const auto [number, unit] = split_number(trim(text));
  if (q.dimension == Dimension::temperature()) return number + " kB*" + unit;
  if (q.dimension == Dimension::frequency()) return number + " h*" + unit;
  return {};
}
}  // namespace

double UnitSystem::to_internal(const Quantity& q, Dimension expected, std::string_view key,
                               std::string_view text) const {
  if (q.plain) return q.value_si;
  // kB T is an energy: a temperature may be given as one ("1 kB*uK").
  const bool energy_as_temperature =
      expected == Dimension::temperature() && q.dimension == Dimension::energy();
  if (energy_as_temperature) return q.value_si / energy_J();
  if (!(q.dimension == expected)) {
    const std::string found = text.empty() ? with_article(q.dimension) : std::string(text);
    std::string hint = expected == Dimension::energy() ? energy_hint(q, text) : std::string();
    throw InputError(std::string(key), found,
                     expected_quantity(expected) + ", not " + with_article(q.dimension), hint);
  }
  return q.value_si / internal_unit_in_si(*this, expected);
}

double UnitSystem::to_si(double internal, Dimension d) const {
  return internal * internal_unit_in_si(*this, d);
}

double conversion_rounded(double v) {
  if (!std::isfinite(v) || v == 0) return v + 0.0;
  char buffer[32];
  const auto r = std::to_chars(buffer, buffer + sizeof buffer, v, std::chars_format::scientific, 14);
  double rounded = v;
  std::from_chars(buffer, r.ptr, rounded);
  return rounded;
}

// ---- lab text ---------------------------------------------------------------------------

std::string lab_text(double value_si, Dimension d, int digits) {
  struct Prefixed {
    const char* name;
    double si;
  };
  std::vector<Prefixed> units;
  if (d == Dimension::length())
    units = {{"pm", 1e-12}, {"nm", 1e-9}, {"um", 1e-6}, {"mm", 1e-3}, {"m", 1}};
  else if (d == Dimension::time())
    units = {{"ps", 1e-12}, {"ns", 1e-9}, {"us", 1e-6}, {"ms", 1e-3}, {"s", 1}};
  else if (d == Dimension::frequency())
    units = {{"Hz", 1}, {"kHz", 1e3}, {"MHz", 1e6}, {"GHz", 1e9}};
  else if (d == Dimension::temperature())
    units = {{"nK", 1e-9}, {"uK", 1e-6}, {"mK", 1e-3}, {"K", 1}};
  else if (d == Dimension::energy())
    units = {{"h*Hz", si::planck_h}, {"h*kHz", 1e3 * si::planck_h}, {"h*MHz", 1e6 * si::planck_h},
             {"h*GHz", 1e9 * si::planck_h}};
  else if (d == Dimension::mass())
    units = {{"u", si::atomic_mass}};
  if (d == Dimension::energy_per_length(1)) {
    char buffer[64];
    std::snprintf(buffer, sizeof buffer, "%.*g h*Hz/nm", digits, value_si / (si::planck_h / 1e-9));
    return buffer;
  }
  for (int n = 3; n <= 8; ++n)
    if (d == Dimension::energy_per_length(n)) {
      units = {{"h*Hz/nm^", si::planck_h / std::pow(1e-9, n)}};
      char buffer[64];
      std::snprintf(buffer, sizeof buffer, "%.*g h*Hz/nm^%d", digits, value_si / units[0].si, n);
      return buffer;
    }
  char buffer[64];
  if (units.empty()) {
    std::snprintf(buffer, sizeof buffer, "%.*g", digits, value_si);
    return d == Dimension::none() ? std::string(buffer) : std::string(buffer) + " " + d.describe();
  }
  // The largest unit not above |value|; the smallest for smaller values and NaN; for 0 the
  // middle one of the list, a lab's usual unit ("0 um", "0 us", "0 uK"), not "0 m".
  const Prefixed* chosen = &units.front();
  for (const auto& u : units)
    if (std::abs(value_si) >= u.si * (1 - 1e-12)) chosen = &u;
  if (value_si == 0) chosen = &units[(units.size() - 1) / 2];
  std::snprintf(buffer, sizeof buffer, "%.*g %s", digits, value_si / chosen->si, chosen->name);
  return buffer;
}

std::string MessageUnits::operator()(double internal, Dimension d) const {
  char buffer[64];
  if (units && energy && d == Dimension::energy()) {
    std::snprintf(buffer, sizeof buffer, "%.6g %s", internal / energy->internal_per_unit, energy->name.c_str());
    return buffer;
  }
  if (units && !time_unit.empty() && d == Dimension::time()) {
    const Quantity one = parse_quantity("1 " + time_unit);
    std::snprintf(buffer, sizeof buffer, "%.6g %s", conversion_rounded(units->to_si(internal, d) / one.value_si),
                  time_unit.c_str());
    return buffer;
  }
  if (units) return lab_text(units->to_si(internal, d), d);
  const char* unit = d == Dimension::length()        ? " L0"
                     : d == Dimension::energy()      ? " E0"
                     : d == Dimension::time()        ? " T0"
                     : d == Dimension::temperature() ? " E0/kB"
                     : d == Dimension::frequency()   ? " /T0 (angular)"
                     : d == Dimension::none()        ? ""
                                                     : " (internal units)";
  std::snprintf(buffer, sizeof buffer, "%.6g%s", internal, unit);
  return buffer;
}

// ---- display energy units ---------------------------------------------------------------

EnergyUnit energy_unit(std::string_view name_in, const UnitSystem& units, double omega_ref) {
  const std::string name = trim(name_in);
  static const std::vector<std::string> listed = {"h*kHz", "h*MHz",      "h*Hz",   "kB*uK",
                                                  "kB*nK", "hbar*omega", "natural"};
  const std::string expected =
      "an energy unit: h*kHz, h*MHz, h*Hz, kB*uK, kB*nK, hbar*omega (omega = the reference "
      "frequency), natural (internal units), or another energy such as kB*mK or meV";
  if (name == "natural") return {name, 1.0};
  if (name == "hbar*omega") {
    if (!(omega_ref > 0))
      throw InputError("", name,
                       "a reference frequency for hbar*omega ([units] "
                       "reference_frequency or a harmonic or polynomial term)");
    return {name, omega_ref};  // hbar = 1: the energy hbar omega_ref is omega_ref internally
  }
  Quantity q;
  try {
    q = parse_quantity("1 " + name);
  } catch (const InputError&) {
    throw InputError("", name, expected, closest_name(name, listed));
  }
  if (q.plain || !(q.dimension == Dimension::energy()))
    throw InputError("", name, expected, closest_name(name, listed));
  return {name, q.value_si / units.energy_J()};
}

}  // namespace trapwork
