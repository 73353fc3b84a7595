// Scenario reader: TOML (toml++) to library values, with positioned errors. See scenario.hpp.
#include "solver/scenario/scenario.hpp"

#include <toml++/toml.h>

#include <Eigen/Dense>
#include <charconv>
#include <functional>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <map>
#include <regex>
#include <thread>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/keys.hpp"

namespace trapwork {

namespace {

namespace fs = std::filesystem;

// Dimension of a shape parameter, from the key reference (keys.hpp): none for plain numbers.
Dimension parameter_dimension(Shape shape, std::string_view p) {
  const KeySpec* k = shape_parameter(shape, p);
  if (!k) throw ContractViolation("scenario reader: the key reference has no parameter '" + std::string(p) + "'");
  return k->dimension.value_or(Dimension::none());
}

bool parameter_must_be_positive(std::string_view p) {
  return p == "separation" || p == "range" || p == "width" || p == "waist" || p == "half_width";
}

std::string found_text(const toml::node& n) {
  if (const auto* s = n.as_string()) return "\"" + s->get() + "\"";
  if (n.is_table()) return "a table";
  if (n.is_array()) return n.is_array_of_tables() ? "an array of tables" : "an array";
  if (const auto* i = n.as_integer()) return std::to_string(i->get());
  if (const auto* b = n.as_boolean()) return b->get() ? "true" : "false";
  if (const auto* f = n.as_floating_point()) {
    char buffer[32];  // shortest text that reads back (65e-6 -> 6.5e-05)
    const auto r = std::to_chars(buffer, buffer + sizeof buffer, f->get());
    return std::string(buffer, r.ptr);
  }
  return "a date or time";
}

bool is_identifier(const std::string& s) {
  if (s.empty() || !std::isalpha(static_cast<unsigned char>(s[0]))) return false;
  for (char c : s)
    if (!std::isalnum(static_cast<unsigned char>(c)) && c != '_') return false;
  return true;
}

struct Read {
  double value = 0;
  std::string given;
  const toml::node* node = nullptr;
};

// One swept parameter: what it changes, its dimension and the slot that reads its values.
struct SweepTargetInfo {
  SweepAxis axis;
  std::optional<ParameterSlot> slot;  // a potential parameter, box wall or change's end value
};

class Reader {
 public:
  Reader(std::string file, fs::path base) : file_(std::move(file)), base_(std::move(base)) {}
  Scenario read(const toml::table& root);

 private:
  std::string file_;
  fs::path base_;
  UnitSystem units_;
  double omega_ref_ = 0;
  bool natural_ = false;  // [units] natural = true: bare numbers are internal values

  [[noreturn]] void fail(const toml::source_region& where, const std::string& key, const std::string& found,
                         const std::string& expected, const std::string& suggestion = {}) const {
    throw InputError(key, found, expected, suggestion, file_, static_cast<int>(where.begin.line),
                     static_cast<int>(where.begin.column));
  }
  [[noreturn]] void fail(const toml::node& n, const std::string& key, const std::string& expected,
                         const std::string& suggestion = {}) const {
    fail(n.source(), key, found_text(n), expected, suggestion);
  }

  void check_keys(const toml::table& t, const std::string& prefix,
                  const std::vector<std::string>& allowed) const {
    for (const auto& [k, v] : t) {
      const std::string key(k.str());
      if (std::find(allowed.begin(), allowed.end(), key) != allowed.end()) continue;
      std::string list;
      for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
      fail(k.source(), prefix.empty() ? key : prefix + "." + key, "",
           "unknown key; allowed " +
               (prefix.empty() ? std::string("at the top level") : "in [" + prefix + "]") + ": " + list,
           closest_name(key, allowed));
    }
  }

  const toml::table* table(const toml::table& parent, std::string_view key) const {
    const toml::node* n = parent.get(key);
    if (!n) return nullptr;
    if (!n->is_table()) fail(*n, std::string(key), "a table [" + std::string(key) + "]");
    return n->as_table();
  }

  std::optional<std::string> string(const toml::table& t, std::string_view key,
                                    const std::string& dotted) const {
    const toml::node* n = t.get(key);
    if (!n) return std::nullopt;
    if (!n->is_string()) fail(*n, dotted, "a string in quotes");
    return n->as_string()->get();
  }

  std::optional<std::int64_t> integer(const toml::table& t, std::string_view key, const std::string& dotted,
                                      std::int64_t min, std::int64_t max) const {
    const toml::node* n = t.get(key);
    if (!n) return std::nullopt;
    if (!n->is_integer()) fail(*n, dotted, "a whole number without quotes (e.g. 20)");
    const std::int64_t v = n->as_integer()->get();
    if (v < min || v > max)
      fail(*n, dotted, "a whole number from " + std::to_string(min) + " to " + std::to_string(max));
    return v;
  }

  std::optional<bool> boolean(const toml::table& t, std::string_view key, const std::string& dotted) const {
    const toml::node* n = t.get(key);
    if (!n) return std::nullopt;
    if (!n->is_boolean()) fail(*n, dotted, "true or false (without quotes)");
    return n->as_boolean()->get();
  }

  // The quantity at a node: a string with a unit, or a plain number. A plain number for a
  // dimensional quantity is refused unless the scenario says [units] natural = true: it would
  // be read in the scenario's internal units, which differ from file to file.
  Quantity quantity(const toml::node& n, const std::string& dotted, Dimension d) const {
    Quantity q;
    if (n.is_integer()) {
      q = {static_cast<double>(n.as_integer()->get()), {}, true};
    } else if (n.is_floating_point()) {
      q = {n.as_floating_point()->get(), {}, true};
      if (!std::isfinite(q.value_si)) fail(n, dotted, "a finite number");
    } else if (!n.is_string()) {
      fail(n, dotted,
           expected_quantity(d) + " as a string with its unit" +
               (natural_ ? ", or a plain number in natural units" : std::string()));
    } else {
      try {
        q = parse_quantity(n.as_string()->get());
      } catch (const InputError& e) {
        fail(n, dotted, e.expected, e.suggestion);
      }
    }
    // a bare number, with or without quotes
    if (q.plain && !(d == Dimension::none()) && !natural_)
      fail(n, dotted,
           expected_quantity(d) + " with its unit in quotes; a bare number would be read in this "
           "scenario's internal units (hbar = m = 1, here " + found_text(n) + " would mean " +
               lab_text(units_.to_si(q.value_si, d), d, 3) +
               "); to give values in internal units, write [units] natural = true");
    return q;
  }

  // An SI value that must carry a unit (mass, and what sets the unit system).
  std::optional<Read> si(const toml::table& t, std::string_view key, const std::string& dotted, Dimension d,
                         const std::string& why) const {
    const toml::node* n = t.get(key);
    if (!n) return std::nullopt;
    if (!n->is_string() && !n->is_number()) (void)quantity(*n, dotted, d);  // the wrong-type message
    Quantity q;
    if (n->is_string()) try {
        q = parse_quantity(n->as_string()->get());
      } catch (const InputError& e) {
        fail(*n, dotted, e.expected, e.suggestion);
      }
    if (!n->is_string() || q.plain) fail(*n, dotted, expected_quantity(d) + " with its unit: " + why);
    if (!(q.dimension == d)) fail(*n, dotted, expected_quantity(d) + ", not " + with_article(q.dimension));
    return Read{q.value_si, n->as_string()->get(), n};
  }

  // A value converted to internal units.
  std::optional<Read> internal(const toml::table& t, std::string_view key, const std::string& dotted,
                               Dimension d) const {
    const toml::node* n = t.get(key);
    if (!n) return std::nullopt;
    const Quantity q = quantity(*n, dotted, d);
    Read r{0, n->is_string() ? n->as_string()->get() : found_text(*n), n};
    try {
      r.value = units_.to_internal(q, d, dotted, r.given);
    } catch (const InputError& e) {
      fail(*n, dotted, e.expected, e.suggestion);
    }
    return r;
  }

  void require(bool ok, const Read& r, const std::string& dotted, const std::string& expected) const {
    if (!ok) fail(*r.node, dotted, expected);
  }

  EnergyUnit energy_unit_at(const toml::node& n, const std::string& dotted) const {
    if (!n.is_string()) fail(n, dotted, "an energy unit in quotes (e.g. \"h*kHz\")");
    try {
      return energy_unit(n.as_string()->get(), units_, omega_ref_);
    } catch (const InputError& e) {
      fail(n, dotted, e.expected, e.suggestion);
    }
  }

  // Internal value of one `unit` of dimension d (e.g. x_unit = "um").
  double unit_at(const toml::node& n, const std::string& dotted, Dimension d) const {
    if (!n.is_string()) fail(n, dotted, "a unit in quotes");
    Quantity q;
    try {
      q = parse_quantity("1 " + n.as_string()->get());
    } catch (const InputError& e) {
      fail(n, dotted, e.expected, e.suggestion);
    }
    if (q.plain || !(q.dimension == d)) fail(n, dotted, "a unit of " + d.describe());
    return units_.to_internal(q, d);
  }

  // A value of a formula's [potential.parameters]: a plain number (in the units the expression
  // is written in), or a quantity with a unit converted to them: a quantity of dimension
  // kg^a m^b s^c is energy^a length^(b-2a) time^(c+2a), so it is divided by energy_unit^a
  // x_unit^(b-2a) time_unit^(c+2a) (x_per, e_per, t_per: internal values of one of each);
  // a temperature is kB T, an energy; a frequency counts cycles per time_unit, or radians per
  // time_unit when written as angular ("2pi*1.5 MHz"). A mass, or a mass power other than 0
  // and 1, is refused (InputError at the value).
  double formula_parameter(const toml::node& v, const std::string& key, double x_per, double e_per,
                           double t_per) const {
    const std::string expected =
        "a plain number in the units the expression is written in, or a quantity with its unit (\"0.3 um\", "
        "\"2 h*kHz\", \"1.5 MHz\") converted to x_unit, energy_unit and time_unit";
    if (v.is_number()) {
      const double value = v.value<double>().value();
      if (!std::isfinite(value)) fail(v, key, "a finite plain number");
      return value;
    }
    if (!v.is_string()) fail(v, key, expected);
    Quantity q;
    try {
      q = parse_quantity(v.as_string()->get());
    } catch (const InputError& e) {
      fail(v, key, expected + ": " + e.expected, e.suggestion);
    }
    if (q.plain) return q.value_si;
    std::array<int, 4> d = q.dimension.power;
    double value = q.value_si;
    if (d[3] != 0) {  // kB T
      if (!(q.dimension == Dimension::temperature())) fail(v, key, expected + "; a temperature only alone (kB T)");
      value *= si::boltzmann;
      d = Dimension::energy().power;
    }
    const int a = d[0], b = d[1] - 2 * d[0], c = d[2] + 2 * d[0];
    if ((a != 0 && a != 1) || q.dimension == Dimension::mass())
      fail(v, key, expected + "; not " + with_article(q.dimension) + " (the formula's units hold no mass)");
    const double energy_si = e_per * units_.energy_J(), length_si = x_per * units_.length_m,
                 time_si = t_per * units_.time_s();
    value /= std::pow(energy_si, a) * std::pow(length_si, b) * std::pow(time_si, c);
    if (q.angular) value *= 2 * si::pi;  // radians per time_unit
    if (!std::isfinite(value)) fail(v, key, "a value that is finite in the formula's units");
    return value;
  }

  void read_units(const toml::table& root, Scenario& s);
  void read_term(const toml::table& t, int index, Scenario& s);
  void read_soft_walls(const toml::table& box, Scenario& s);
  // Two columns of numbers (x and V, or t and value), the first strictly increasing, times the
  // given unit factors; one header line of names may come first (a line with no number at
  // all, data_files.hpp); '#' starts a comment. `skipped` gets what was not data, for the report.
  PotentialTable read_table_file(const toml::node& file_node, const std::string& dotted, double x_per_unit,
                                 double v_per_unit,
                                 const std::array<std::string, 2>& names = {"x", "V"},
                                 std::string* skipped = nullptr) const;
  void read_box_and_grid(const toml::table& root, Scenario& s);
  void read_spectrum(const toml::table& root, Scenario& s);

  // internal energy of one formula energy_unit, per formula term (the unit of its scale)
  std::map<std::string, double> formula_energy_;
  void read_parameter_slots(Scenario& s) const;
  double slot_value(const toml::node& n, const std::string& dotted, const ParameterSlot& slot) const;
  void read_protocol(const toml::table& root, Scenario& s) const;
  ChangeSpec read_change(const toml::table& t, const std::string& prefix, const Scenario& s,
                         double tau) const;
  void check_protocol(const Scenario& s, const toml::node& where, const std::string& key) const;
  void check_soft_walls(const Scenario& s, const Protocol& p, const toml::node& where, const std::string& key) const;
  void read_initial(const toml::table& root, Scenario& s) const;
  void read_work(const toml::table& root, Scenario& s) const;
  void read_sweep(const toml::table& root, Scenario& s) const;
  SweepTargetInfo sweep_target(const Scenario& s, const toml::node& parameter_node, const std::string& parameter,
                               const std::string& key) const;
  double sweep_value(const SweepTargetInfo& info, const toml::node& n, const std::string& key) const;
  void sweep_unit(SweepTargetInfo& info, const std::string& first_text) const;
  SweepAxis read_sweep_axis(const toml::table& t, const std::string& prefix, const Scenario& s,
                            std::vector<const toml::node*>& nodes) const;
  void read_noise(const toml::table& root, Scenario& s) const;
  void read_bath(const toml::table& root, Scenario& s) const;
  void read_uncertainty(const toml::table& root, Scenario& s) const;

  // A plain number (integer or floating point) without a unit.
  std::optional<Read> plain(const toml::table& t, std::string_view key, const std::string& dotted,
                            const std::string& what) const {
    const toml::node* n = t.get(key);
    if (!n) return std::nullopt;
    if (!n->is_number()) fail(*n, dotted, what + ", a plain number without quotes or unit");
    const double v = n->value<double>().value();
    if (!std::isfinite(v)) fail(*n, dotted, "a finite number");
    return Read{v, found_text(*n), n};
  }

  // A string naming one of `choices`; error lists them with the closest as suggestion.
  template <class T>
  std::optional<T> choice(const toml::table& t, std::string_view key, const std::string& dotted,
                          const std::vector<std::pair<std::string, T>>& choices) const {
    const auto text = string(t, key, dotted);
    if (!text) return std::nullopt;
    std::vector<std::string> names;
    std::string list;
    for (const auto& [name, value] : choices) {
      if (name == *text) return value;
      names.push_back(name);
      list += (list.empty() ? "" : ", ") + name;
    }
    fail(*t.get(key), dotted, "one of " + list, closest_name(*text, names));
  }
};

void Reader::read_units(const toml::table& root, Scenario& s) {
  const toml::table* particle = table(root, "particle");
  if (!particle)
    throw InputError("particle.mass", "", "a [particle] table with the mass, e.g. mass = \"40 u\"", "",
                     file_);
  check_keys(*particle, "particle", table_keys("particle"));
  const auto mass = si(*particle, "mass", "particle.mass", Dimension::mass(), "internal units have m = 1");
  if (!mass) fail(particle->source(), "particle.mass", "", "a mass, e.g. mass = \"40 u\"");
  require(mass->value > 0, *mass, "particle.mass", "a mass > 0");

  const toml::table* units = table(root, "units");
  static const toml::table empty;
  if (!units) units = &empty;
  check_keys(*units, "units", table_keys("units"));
  natural_ = boolean(*units, "natural", "units.natural").value_or(false);
  s.natural_units = natural_;
  std::optional<Read> frequency = si(*units, "reference_frequency", "units.reference_frequency",
                                     Dimension::frequency(), "it sets the unit system");
  std::string frequency_key = "units.reference_frequency";
  if (!frequency) {
    // The first harmonic or polynomial term with a frequency sets the units.
    if (const toml::array* terms = root["potential"].as_array()) {
      int index = 0;
      for (const auto& node : *terms) {
        ++index;
        const toml::table* t = node.as_table();
        if (!t) continue;
        const auto shape = (*t)["shape"].value<std::string>();
        if (!shape || (*shape != "harmonic" && *shape != "polynomial") || !t->get("frequency")) continue;
        const std::string key = "potential[" + std::to_string(index) + "].frequency";
        frequency = si(*t, "frequency", key, Dimension::frequency(),
                       "this first harmonic/polynomial frequency sets the units when [units] has "
                       "no reference_frequency");
        frequency_key = key;
        if (frequency->value == 0 && *shape == "polynomial") {
          frequency.reset();  // a purely anharmonic polynomial sets no frequency scale
          continue;
        }
        break;
      }
    }
  }
  const toml::node* length = units->get("length");
  if (frequency) {
    require(frequency->value > 0, *frequency, frequency_key, "a frequency > 0");
    if (length)
      fail(*length, "units.length",
           "no length: the reference frequency (" + frequency->given + ") sets the length unit");
    s.reference_frequency_Hz = frequency->value;
    s.units = UnitSystem::for_trap(mass->value, frequency->value);
    s.omega_ref = 2 * si::pi * frequency->value * s.units.time_s();
  } else {
    double length_m = 1e-6;
    if (length) {
      const auto l = si(*units, "length", "units.length", Dimension::length(), "it sets the unit system");
      require(l->value > 0, *l, "units.length", "a length > 0");
      length_m = l->value;
    }
    s.units = UnitSystem::for_length(mass->value, length_m);
  }
  units_ = s.units;
  omega_ref_ = s.omega_ref;
  if (const toml::node* e = units->get("energy"))
    s.energy = energy_unit_at(*e, "units.energy");
  else
    s.energy = energy_unit(frequency ? "h*kHz" : "kB*uK", units_, omega_ref_);
}

PotentialTable Reader::read_table_file(const toml::node& file_node, const std::string& dotted,
                                       double x_per_unit, double v_per_unit,
                                       const std::array<std::string, 2>& names, std::string* skipped) const {
  const fs::path path = (base_ / fs::path(file_node.as_string()->get())).lexically_normal();
  std::ifstream in(path, std::ios::binary);
  if (!in || fs::is_directory(path)) fail(file_node, dotted, "a readable data file (looked for " + path.string() + ")");
  std::ostringstream text;
  text << in.rdbuf();
  const std::string data_file = path.string();
  const std::string pair = names[0] + " and " + names[1];
  // The shared table reader (data_files.hpp): a UTF-8 byte-order mark is dropped, and the first
  // line is a header only when it holds no number at all; a data row with a typo is an error.
  TextTable rows;
  try {
    rows = split_table(text.str(), data_file, 2);
  } catch (const InputError& e) {
    throw InputError(dotted, e.found,
                     e.expected + " (a table file holds two numbers per row, " + pair +
                         ", separated by a comma or spaces)",
                     "", e.file, e.line, e.column);
  }
  if (skipped) *skipped = rows.skipped();
  PotentialTable table;
  for (const TableRow& r : rows.rows) {
    auto bad = [&](int column, const std::string& expected) {
      std::string row;
      for (const auto& f : r.fields) row += (row.empty() ? "" : ", ") + f.text;
      throw InputError(dotted, row, expected, "", data_file, r.line, column);
    };
    // exactly two columns: a one-column file with a header once crashed here, a third column was ignored
    if (r.fields.size() != 2)
      bad(r.fields.size() > 2 ? r.fields[2].column : r.fields.front().column,
          "two numbers per row, " + pair + " (found " + std::to_string(r.fields.size()) + " columns)");
    double values[2];
    for (std::size_t i = 0; i < 2; ++i) {
      const std::string& f = r.fields[i].text;
      char* end = nullptr;
      values[i] = std::strtod(f.c_str(), &end);
      if (f.empty() || *end != '\0') bad(r.fields[i].column, "two numbers per row, " + pair);
      if (!std::isfinite(values[i])) bad(r.fields[i].column, "finite numbers");
    }
    if (!table.x.empty() && !(values[0] * x_per_unit > table.x.back()))
      bad(r.fields[0].column, names[0] + " larger than on the row before (" + names[0] + " must increase strictly)");
    table.x.push_back(values[0] * x_per_unit);
    table.v.push_back(values[1] * v_per_unit);
  }
  if (table.x.size() < 2)
    fail(file_node, dotted, "at least 2 rows of " + pair + " in " + data_file + " (found " +
                                std::to_string(table.x.size()) + ")");
  return table;
}

void Reader::read_term(const toml::table& t, int index, Scenario& s) {
  const std::string prefix = "potential[" + std::to_string(index) + "]";
  TermRecord record;
  record.name = string(t, "name", prefix + ".name").value_or("term" + std::to_string(index));
  if (!is_identifier(record.name))
    fail(*t.get("name"), prefix + ".name",
         "a name of letters, digits and '_', starting with a letter (it is used as name.parameter)");
  if (record.name == "box")
    fail(*t.get("name"), prefix + ".name", "a name other than \"box\" (box.left and box.right are the walls)");
  const toml::node* shape_node = t.get("shape");
  const std::vector<std::string> shape_names = table_spec("potential").keys[1].choices;  // the reference's shapes
  std::string shape_list;
  for (const auto& n : shape_names) shape_list += (shape_list.empty() ? "" : ", ") + n;
  if (!shape_node) fail(t.source(), prefix + ".shape", "", "a shape: one of " + shape_list);
  const std::string shape_text = string(t, "shape", prefix + ".shape").value();
  const auto shape = shape_from_name(shape_text);
  if (!shape) fail(*shape_node, prefix + ".shape", "one of " + shape_list, closest_name(shape_text, shape_names));
  record.shape = shape_text;

  // Allowed keys (the key reference): name, shape, the shape's parameters (formula: not the
  // unit factors, which follow from x_unit and time_unit), and the table/formula settings.
  const std::vector<std::string> allowed = term_keys(*shape);
  check_keys(t, prefix, allowed);

  std::vector<std::pair<std::string, double>> parameters;
  for (const KeySpec& spec : shape_spec(*shape).parameters) {
    const std::string& p = spec.name;
    const std::string key = prefix + "." + p;
    const auto r = internal(t, p, key, parameter_dimension(*shape, p));
    if (!r && spec.required())
      fail(t.source(), key, "",
           "required for shape = \"" + shape_text + "\" (no default): the " + spec.meaning + ", e.g. " + p + " = " + spec.example);
    if (!r) continue;
    if (p == "frequency")
      require(*shape == Shape::polynomial ? r->value >= 0 : r->value > 0, *r, key,
              *shape == Shape::polynomial ? "a frequency >= 0" : "a frequency > 0");
    if (parameter_must_be_positive(p)) require(r->value > 0, *r, key, "a length > 0");
    if (p == "softness") require(r->value >= 0, *r, key, "a length >= 0");
    if (p == "height") require(r->value > 0, *r, key, "an energy > 0");
    if (p == "power") require(r->value > 0, *r, key, "a number > 0");
    parameters.emplace_back(p, r->value);
    record.parameters.push_back({p, r->given, r->value, parameter_dimension(*shape, p)});
  }

  // Settings of tabulated and formula terms.
  auto setting = [&](std::string_view key, bool required) -> const toml::node* {
    const toml::node* n = t.get(key);
    if (!n && required)
      fail(t.source(), prefix + "." + std::string(key), "", "required for shape = \"" + shape_text + "\"");
    if (n) record.settings.emplace_back(std::string(key), found_text(*n));
    return n;
  };
  auto rethrow_at = [&](const InputError& e) {
    // The library names "<term>.<parameter>"; point at that key in this [[potential]] table.
    const std::string p = e.key.substr(e.key.find('.') + 1);
    if (const toml::node* n = t.get(p)) fail(*n, prefix + "." + p, e.expected, e.suggestion);
    fail(t.source(), prefix + "." + p, e.found, e.expected, e.suggestion);
  };
  try {
    if (*shape == Shape::table) {
      const toml::node* file = setting("file", true);
      if (!file->is_string()) fail(*file, prefix + ".file", "a file name in quotes");
      const double x_per = unit_at(*setting("x_unit", true), prefix + ".x_unit", Dimension::length());
      const double v_per =
          energy_unit_at(*setting("energy_unit", true), prefix + ".energy_unit").internal_per_unit;
      std::string skipped;
      PotentialTable data = read_table_file(*file, prefix + ".file", x_per, v_per, {"x", "V"}, &skipped);
      if (data.x.size() < 4)  // Term::tabulated's monotone cubic (Boost.Math pchip) needs 4
        fail(*file, prefix + ".file", "at least 4 rows of x and V (monotone cubic interpolation; found " +
                                          std::to_string(data.x.size()) + ")");
      record.settings.emplace_back("rows", std::to_string(data.x.size()));
      if (!skipped.empty()) record.settings.emplace_back("skipped", skipped);
      s.potential.add(Term::tabulated(record.name, std::move(data), parameters));
    } else if (*shape == Shape::formula) {
      const toml::node* expression = setting("expression", true);
      if (!expression->is_string()) fail(*expression, prefix + ".expression", "a formula in quotes");
      const double x_per = unit_at(*setting("x_unit", true), prefix + ".x_unit", Dimension::length());
      const double e_per =
          energy_unit_at(*setting("energy_unit", true), prefix + ".energy_unit").internal_per_unit;
      double t_per = 1e-6 / units_.time_s();  // time_unit default: "us"
      if (const toml::node* tu = setting("time_unit", false))
        t_per = unit_at(*tu, prefix + ".time_unit", Dimension::time());
      // value = scale * f((x - centre) * length_factor, t * time_factor) with f in the
      // formula's own units: x_formula = x_internal / x_per, V_internal = e_per * f.
      double scale = 1;
      for (auto& [k, v] : parameters)
        if (k == "scale") scale = v;
      std::erase_if(parameters, [](const auto& kv) { return kv.first == "scale"; });
      parameters.emplace_back("scale", scale * e_per);
      formula_energy_[record.name] = e_per;
      parameters.emplace_back("length_factor", 1 / x_per);
      parameters.emplace_back("time_factor", 1 / t_per);
      if (const toml::node* user = t.get("parameters")) {
        if (!user->is_table())
          fail(*user, prefix + ".parameters", "a table [potential.parameters] of numbers");
        for (const auto& [k, v] : *user->as_table()) {
          const std::string name(k.str()), key = prefix + ".parameters." + name;
          if (std::find(allowed.begin(), allowed.end(), name) != allowed.end() || name == "length_factor" ||
              name == "time_factor" || name == "x" || name == "t")
            fail(k.source(), key, "", "a name other than x, t and the term's own keys");
          if (!is_identifier(name)) fail(k.source(), key, "", "a name of letters, digits and '_'");
          const double value = formula_parameter(v, key, x_per, e_per, t_per);
          parameters.emplace_back(name, value);
          record.parameters.push_back({name, found_text(v), value, Dimension::none()});
        }
      }
      s.potential.add(Term::formula(record.name, expression->as_string()->get(), parameters));
    } else {
      s.potential.add(Term(record.name, *shape, parameters));
    }
  } catch (const InputError& e) {
    if (!e.file.empty()) throw;  // already positioned (data file rows, scenario nodes)
    rethrow_at(e);
  }
  s.terms.push_back(std::move(record));
}

// [box.soft_walls]: widths (lengths, each > 0, narrowing), height (an energy > 0), power
// (> 0, default 8), points (soft-run grid points; default: spacing <= width/6).
void Reader::read_soft_walls(const toml::table& box, Scenario& s) {
  const toml::node* node = box.get("soft_walls");
  if (!node->is_table()) fail(*node, "box.soft_walls", "a table [box.soft_walls]");
  const toml::table* t = node->as_table();
  check_keys(*t, "box.soft_walls", table_keys("box.soft_walls"));
  SoftWallRequest r;
  const toml::node* widths = t->get("widths");
  const toml::array* a = widths ? widths->as_array() : nullptr;
  if (!a || a->empty())
    fail(widths ? widths->source() : t->source(), "box.soft_walls.widths", widths ? found_text(*widths) : "",
         "an array of wall widths, widest first, e.g. [\"0.4 um\", \"0.2 um\", \"0.1 um\"]");
  for (std::size_t i = 0; i < a->size(); ++i) {
    const std::string key = "box.soft_walls.widths[" + std::to_string(i + 1) + "]";
    const toml::node& n = *a->get(i);
    const Quantity q = quantity(n, key, Dimension::length());
    double w = 0;
    try {
      w = units_.to_internal(q, Dimension::length(), key, found_text(n));
    } catch (const InputError& e) {
      fail(n, key, e.expected, e.suggestion);
    }
    if (!(w > 0)) fail(n, key, "a width > 0");
    if (!r.widths.empty() && !(w < r.widths.back())) fail(n, key, "a width below the one before it (widest first)");
    r.widths.push_back(w);
    s.soft_widths_given.push_back(n.is_string() ? n.as_string()->get() : found_text(n));
  }
  const auto height = internal(*t, "height", "box.soft_walls.height", Dimension::energy());
  if (!height) fail(t->source(), "box.soft_walls.height", "", "the wall height, an energy (e.g. \"20 kB*uK\")");
  require(height->value > 0, *height, "box.soft_walls.height", "an energy > 0");
  r.shape.height = height->value;
  if (const auto power = internal(*t, "power", "box.soft_walls.power", Dimension::none())) {
    require(power->value > 0, *power, "box.soft_walls.power", "a number > 0");
    r.shape.power = power->value;
  }
  if (const auto n = integer(*t, "points", "box.soft_walls.points", 16, 1 << 20)) r.points = std::size_t(*n);
  s.soft_walls = r;
}

// Where a term sits: its centre, or midway between the walls of a walls shape.
double term_centre(const Term& t) {
  if (t.has_parameter("centre")) return t.parameter("centre");
  return 0.5 * (t.parameter("left") + t.parameter("right"));
}

void Reader::read_box_and_grid(const toml::table& root, Scenario& s) {
  if (const toml::table* box = table(root, "box")) {
    check_keys(*box, "box", table_keys("box"));
    const auto left = internal(*box, "left", "box.left", Dimension::length());
    const auto right = internal(*box, "right", "box.right", Dimension::length());
    if (!left || !right)
      fail(box->source(), left ? "box.right" : "box.left", "", "both walls: left and right");
    require(right->value > left->value, *right, "box.right",
            "a wall to the right of box.left = " + left->given);
    s.spectrum.box = std::make_pair(left->value, right->value);
    if (box->get("soft_walls")) read_soft_walls(*box, s);
  }
  // Open-grid searches start at the first term's centre.
  if (!s.potential.terms().empty())
    s.spectrum.search_centre = term_centre(s.potential.terms().front());
  const toml::table* grid = table(root, "grid");
  if (!grid) return;
  check_keys(*grid, "grid", table_keys("grid"));
  if (const auto n = integer(*grid, "points", "grid.points", 4, 1 << 24)) s.spectrum.points = std::size_t(*n);
  const auto left = internal(*grid, "left", "grid.left", Dimension::length());
  const auto right = internal(*grid, "right", "grid.right", Dimension::length());
  if (left || right) {
    const Read& given = left ? *left : *right;
    if (s.spectrum.box)
      fail(*given.node, left ? "grid.left" : "grid.right",
           "no grid extent with [box]: the walls are the grid's ends");
    if (!left || !right)
      fail(*given.node, left ? "grid.right" : "grid.left", "both grid.left and grid.right");
    require(right->value > left->value, *right, "grid.right",
            "a value larger than grid.left = " + left->given);
    s.spectrum.extent = std::make_pair(left->value, right->value);
  }
  if (const auto c = boolean(*grid, "convergence_check", "grid.convergence_check"))
    s.spectrum.convergence_check = *c;
  if (const auto w = internal(*grid, "search_half_width", "grid.search_half_width", Dimension::length())) {
    require(w->value > 0, *w, "grid.search_half_width", "a length > 0");
    s.spectrum.search_half_width = w->value;
  }
}

void Reader::read_spectrum(const toml::table& root, Scenario& s) {
  const toml::table* spectrum = table(root, "spectrum");
  if (!spectrum) return;
  auto& o = s.spectrum.options;
  check_keys(*spectrum, "spectrum", table_keys("spectrum"));
  if (const auto n = integer(*spectrum, "levels", "spectrum.levels", 1, 100000)) o.levels = int(*n);
  if (const auto m = string(*spectrum, "method", "spectrum.method")) {
    static const std::vector<std::pair<std::string, EigenMethod>> methods = {
        {"auto", EigenMethod::automatic},
        {"dense", EigenMethod::dense},
        {"lanczos", EigenMethod::lanczos},
        {"finite_difference", EigenMethod::finite_difference},
        {"hermite", EigenMethod::hermite}};
    std::vector<std::string> names;
    for (const auto& [name, method] : methods) names.push_back(name);
    const auto it =
        std::find_if(methods.begin(), methods.end(), [&](const auto& kv) { return kv.first == *m; });
    if (it == methods.end())
      fail(*spectrum->get("method"), "spectrum.method",
           "one of auto, dense, lanczos, finite_difference, hermite", closest_name(*m, names));
    o.method = it->second;
  }
  if (const auto order = integer(*spectrum, "fd_order", "spectrum.fd_order", 2, 8)) {
    if (*order % 2 != 0) fail(*spectrum->get("fd_order"), "spectrum.fd_order", "2, 4, 6 or 8");
    o.fd_order = int(*order);
  }
  if (const auto d = internal(*spectrum, "degeneracy", "spectrum.degeneracy", Dimension::energy())) {
    require(d->value > 0, *d, "spectrum.degeneracy", "an energy > 0");
    o.degeneracy_tolerance = d->value;
  }
}

// ---- protocol, initial state, work settings, sweep ----------------------------------------

std::string exact_text(double v) {
  char buffer[32];
  const auto r = std::to_chars(buffer, buffer + sizeof buffer, v);  // shortest round trip
  return std::string(buffer, r.ptr);
}

// A schedule formula written in lab units -> the expression Schedule::formula evaluates in
// internal units: t and tau (internal) become (t*c) and (tau*c) with c = time_unit per internal
// time unit, the value is multiplied by the internal value of one value_unit, and `pi` is
// muParser's _pi. Tokens are rewritten whole (number literals such as 2e-3 are skipped as
// one token), so names like "sqrt" or "tan" are left alone.
std::string internal_formula(const std::string& formula, double time_scale, double value_scale) {
  std::string out;
  const std::size_t n = formula.size();
  auto digit = [&](std::size_t i) { return i < n && std::isdigit(static_cast<unsigned char>(formula[i])); };
  auto word_char = [&](std::size_t i) {
    return i < n && (std::isalnum(static_cast<unsigned char>(formula[i])) || formula[i] == '_');
  };
  for (std::size_t i = 0; i < n;) {
    std::size_t j = i;
    if (digit(i) || (formula[i] == '.' && digit(i + 1))) {
      while (digit(j) || (j < n && formula[j] == '.')) ++j;
      if (j < n && (formula[j] == 'e' || formula[j] == 'E')) {
        std::size_t k = j + 1;
        if (k < n && (formula[k] == '+' || formula[k] == '-')) ++k;
        if (digit(k)) {
          j = k;
          while (digit(j)) ++j;
        }
      }
      out += formula.substr(i, j - i);
    } else if (word_char(i)) {
      while (word_char(j)) ++j;
      const std::string word = formula.substr(i, j - i);
      if (word == "t" || word == "tau")
        out += "(" + word + "*" + exact_text(time_scale) + ")";
      else if (word == "pi")
        out += "_pi";
      else
        out += word;
    } else {
      out += formula[j++];
    }
    i = j;
  }
  std::string wrapped = "(";  // built by appending: GCC 12 warns falsely on "(" + string
  wrapped.append(exact_text(value_scale)).append(")*(").append(out).append(")");
  return wrapped;
}

// muParser messages quote positions in the rewritten expression; drop them.
std::string without_position(const std::string& message) {
  return std::regex_replace(message, std::regex(" at position [0-9]+"), "");
}

void Reader::read_parameter_slots(Scenario& s) const {
  if (s.spectrum.box)
    for (const char* wall : {"box.left", "box.right"}) s.parameters.push_back({wall, Dimension::length(), 1});
  for (const Term& term : s.potential.terms()) {
    const auto& fixed = shape_parameters(term.shape());
    for (const auto& [name, value] : term.parameters()) {
      if (name == "length_factor" || name == "time_factor") continue;  // unit conversions
      const bool user = std::find(fixed.begin(), fixed.end(), name) == fixed.end();
      ParameterSlot slot{term.name() + "." + name, user ? Dimension::none() : parameter_dimension(term.shape(), name), 1};
      if (name == "scale" && term.shape() == Shape::formula) slot.plain_factor = formula_energy_.at(term.name());
      s.parameters.push_back(slot);
    }
  }
}

double Reader::slot_value(const toml::node& n, const std::string& dotted, const ParameterSlot& slot) const {
  const Quantity q = quantity(n, dotted, slot.dimension);
  if (slot.dimension == Dimension::none()) {
    if (!q.plain) fail(n, dotted, "a plain number (" + slot.address + " has no unit)");
    return q.value_si * slot.plain_factor;
  }
  try {
    return units_.to_internal(q, slot.dimension, dotted, found_text(n));
  } catch (const InputError& e) {
    fail(n, dotted, e.expected + " (the dimension of " + slot.address + ")", e.suggestion);
  }
}

ChangeSpec Reader::read_change(const toml::table& t, const std::string& prefix, const Scenario& s,
                               double tau) const {
  check_keys(t, prefix, table_keys("protocol.change"));
  ChangeSpec c;
  const auto parameter = string(t, "parameter", prefix + ".parameter");
  if (!parameter) fail(t.source(), prefix + ".parameter", "", "the parameter to change, e.g. \"trap.centre\"");
  std::vector<std::string> known;
  std::string list;
  const ParameterSlot* slot = nullptr;
  for (const auto& p : s.parameters) {
    known.push_back(p.address);
    list += (list.empty() ? "" : ", ") + p.address;
    if (p.address == *parameter) slot = &p;
  }
  if (!slot)
    fail(*t.get("parameter"), prefix + ".parameter", "a parameter of the potential: " + list,
         closest_name(*parameter, known, 3));
  c.parameter = *parameter;
  c.dimension = slot->dimension;
  const auto form = choice<ScheduleForm>(t, "ramp", prefix + ".ramp",
                                         {{"constant", ScheduleForm::constant},
                                          {"linear", ScheduleForm::linear},
                                          {"smooth", ScheduleForm::smooth_step},
                                          {"smoother", ScheduleForm::smoother_step},
                                          {"table", ScheduleForm::table},
                                          {"formula", ScheduleForm::formula}});
  c.form = form.value_or(ScheduleForm::linear);
  c.ramp = string(t, "ramp", prefix + ".ramp").value_or("linear");
  // Which keys each ramp takes.
  const bool ramp = c.form != ScheduleForm::table && c.form != ScheduleForm::formula;
  auto key_for = [&](const std::string& key, bool wanted, bool required) {
    const toml::node* n = t.get(key);
    if (n && !wanted)
      fail(*n, prefix + "." + key, "no " + key + " with ramp = \"" + c.ramp + "\"");
    if (!n && required)
      fail(t.source(), prefix + "." + key, "", "required with ramp = \"" + c.ramp + "\"");
    return n;
  };
  const bool plain_parameter = c.dimension == Dimension::none();
  key_for("file", c.form == ScheduleForm::table, c.form == ScheduleForm::table);
  key_for("formula", c.form == ScheduleForm::formula, c.form == ScheduleForm::formula);
  key_for("time_unit", !ramp, !ramp);
  if (plain_parameter && t.get("value_unit"))
    fail(*t.get("value_unit"), prefix + ".value_unit",
         "no value_unit: " + c.parameter + " is a plain number");
  key_for("value_unit", !ramp, !ramp && !plain_parameter);
  key_for("from", ramp && c.form != ScheduleForm::constant, false);
  if (const toml::node* to = key_for("to", ramp, ramp)) {
    c.to = slot_value(*to, prefix + ".to", *slot);
    c.to_given = found_text(*to);
  }
  if (const toml::node* from = t.get("from")) {
    c.from = slot_value(*from, prefix + ".from", *slot);
    c.from_given = found_text(*from);
  }
  if (ramp) return c;

  const toml::node& time_unit = *t.get("time_unit");
  const double t_per = unit_at(time_unit, prefix + ".time_unit", Dimension::time());
  c.time_unit = time_unit.as_string()->get();
  double v_per = slot->plain_factor;
  if (!plain_parameter) {
    const toml::node& value_unit = *t.get("value_unit");
    v_per = unit_at(value_unit, prefix + ".value_unit", c.dimension);
    c.value_unit = value_unit.as_string()->get();
  }
  if (c.form == ScheduleForm::table) {
    const toml::node& file = *t.get("file");
    if (!file.is_string()) fail(file, prefix + ".file", "a file name in quotes");
    c.file = file.as_string()->get();
    PotentialTable data = read_table_file(file, prefix + ".file", t_per, v_per, {"t", "value"}, &c.file_skipped);
    if (data.x.front() > 0 || data.x.back() < tau)
      fail(file, prefix + ".file",
           "a table covering the protocol from t = 0 to the duration (" + exact_text(conversion_rounded(tau / t_per)) + " " +
               c.time_unit + "); it runs from " + exact_text(conversion_rounded(data.x.front() / t_per)) + " to " +
               exact_text(conversion_rounded(data.x.back() / t_per)) + " " + c.time_unit);
    c.times = std::move(data.x);
    c.values = std::move(data.v);
    return c;
  }
  const toml::node& formula = *t.get("formula");
  if (!formula.is_string()) fail(formula, prefix + ".formula", "a formula of t in quotes");
  c.formula = formula.as_string()->get();
  c.internal_formula = internal_formula(c.formula, 1 / t_per, v_per);
  try {
    (void)Schedule::formula(c.parameter, c.internal_formula);
  } catch (const InputError& e) {
    fail(formula, prefix + ".formula",
         "a formula of t and tau (in " + c.time_unit + "), pi and muParser's functions: " +
             without_position(e.expected));
  }
  return c;
}

// Builds the protocol and sets it at 65 times over [0, tau] (every parameter value a shape
// accepts, tables covering the duration); an error is reported at `where`.
// Soft walls (power_walls, erf_walls terms) with a scheduled left or right must stay apart, as
// [box] walls must: checked at 1025 times (as WallProtocol checks the box), reported in lab
// units at the first time where right <= left.
void Reader::check_soft_walls(const Scenario& s, const Protocol& p, const toml::node& where,
                              const std::string& key) const {
  const double tau = p.duration();
  auto scheduled = [&](const std::string& a) {
    return std::any_of(p.schedules().begin(), p.schedules().end(), [&](const Schedule& x) { return x.address() == a; });
  };
  auto length_text = [&](double x) { return exact_text(s.units.to_si(x, Dimension::length()) * 1e6) + " um"; };
  auto time_text = [&](double t) {
    const double sec = s.units.to_si(t, Dimension::time()), full = s.units.to_si(tau, Dimension::time());
    if (full < 1e-6) return exact_text(sec * 1e9) + " ns";
    if (full < 1e-3) return exact_text(sec * 1e6) + " us";
    if (full < 1) return exact_text(sec * 1e3) + " ms";
    return exact_text(sec) + " s";
  };
  for (const auto& term : s.potential.terms()) {
    if (term.shape() != Shape::power_walls && term.shape() != Shape::erf_walls) continue;
    const std::string left = term.name() + ".left", right = term.name() + ".right";
    if (!scheduled(left) && !scheduled(right)) continue;
    constexpr int samples = 1024;
    for (int i = 0; i <= samples; ++i) {
      const double t = tau * i / samples;
      Potential v = s.potential;
      for (const auto& x : p.schedules())
        v.set_parameter(x.address(), tau > 0 ? x.evaluate(t, tau).value : (i == 0 ? x.initial_value(0) : x.final_value(0)));
      const double a = v.parameter(left), b = v.parameter(right);
      if (b > a) continue;
      fail(where.source(), key,
           left + " = " + length_text(a) + ", " + right + " = " + length_text(b) + " at t = " + time_text(t) +
               (tau > 0 ? " of " + time_text(tau) : std::string(" (after the sudden switch)")),
           "soft walls that stay apart (right > left) over the whole protocol, as [box] walls must: they " +
               std::string(b == a ? "meet" : "cross") + " there");
    }
  }
}

void Reader::check_protocol(const Scenario& s, const toml::node& where, const std::string& key) const {
  try {
    const Protocol p = build_protocol(s);
    p.check(s.potential);  // addresses, and a formula using t with a sudden switch
    check_soft_walls(s, p, where, key);
    for (int i = 0; i <= 64; ++i) (void)p.at(s.potential, p.duration() * i / 64);
    if (moves_walls(s)) {
      const WallProtocol walls = build_wall_protocol(s);
      const WallState a = walls.initial_walls(), b = walls.final_walls();
      if (walls.duration() == 0 && (b.left.value > a.left.value || b.right.value < a.right.value)) {
        // The same refusal as sudden_wall_amplitudes, here with the file's line and lab units.
        MessageUnits units{s.units, s.energy, duration_unit(s)};
        auto box = [&](const WallState& w) {
          return "[" + units(w.left.value, Dimension::length()) + ", " + units(w.right.value, Dimension::length()) + "]";
        };
        fail(where, key,
             "a sudden change that only widens the box, or a duration > 0: the box " + box(a) + " -> " + box(b) +
                 " is a sudden compression, which cuts the state (a post-selected position measurement, not a "
                 "unitary work protocol, and an infinite energy at the new wall); move the wall at a finite speed");
      }
    }
  } catch (const InputError& e) {
    if (!e.file.empty()) throw;  // located already (check_soft_walls)
    fail(where, key, "a protocol the potential accepts: " + e.key + " = " + e.found + ": " + e.expected);
  } catch (const WallsMeetError& e) {
    MessageUnits units{s.units, s.energy, duration_unit(s)};
    fail(where, key,
         "walls that stay apart: the box width b - a = " + units(e.width, Dimension::length()) + " at t = " +
             units(e.time, Dimension::time()) + " is not positive; the walls must not meet or cross");
  } catch (const PhysicsError& e) {
    fail(where, key, std::string("walls that stay apart: ") + e.what());
  }
}

void Reader::read_protocol(const toml::table& root, Scenario& s) const {
  const toml::table* p = table(root, "protocol");
  if (!p) return;
  check_keys(*p, "protocol", table_keys("protocol"));
  const auto duration = internal(*p, "duration", "protocol.duration", Dimension::time());
  if (!duration)
    fail(p->source(), "protocol.duration", "", "the duration of the protocol, e.g. duration = \"2.5 us\"");
  require(duration->value >= 0, *duration, "protocol.duration", "a duration >= 0 (0: a sudden switch)");
  ProtocolSpec spec{duration->value, duration->given, {}};
  const toml::node* changes = p->get("change");
  if (!changes)
    fail(p->source(), "protocol.change", "",
         "one or more [[protocol.change]] tables (parameter, to, ramp)");
  if (!changes->is_array_of_tables() || changes->as_array()->empty())
    fail(*changes, "protocol.change", "one or more [[protocol.change]] tables (double brackets)");
  int index = 0;
  for (const auto& node : *changes->as_array()) {
    const std::string prefix = "protocol.change[" + std::to_string(++index) + "]";
    ChangeSpec c = read_change(*node.as_table(), prefix, s, spec.duration);
    for (const auto& earlier : spec.changes)
      if (earlier.parameter == c.parameter)
        fail(*node.as_table()->get("parameter"), prefix + ".parameter",
             "a parameter not changed by an earlier [[protocol.change]] (one change per parameter)");
    spec.changes.push_back(std::move(c));
  }
  s.protocol = std::move(spec);
  check_protocol(s, *changes, "protocol.change");
}

void Reader::read_initial(const toml::table& root, Scenario& s) const {
  const toml::table* t = table(root, "initial");
  if (!t) return;
  const std::vector<std::string> kinds = table_keys("initial");
  check_keys(*t, "initial", kinds);
  // Exactly one kind; the second one in the file is the one reported.
  const toml::node* first = nullptr;
  std::string first_key;
  for (const auto& k : kinds) {
    const toml::node* n = t->get(k);
    if (!n) continue;
    if (!first || n->source().begin < first->source().begin) {
      first = n;
      first_key = k;
    }
  }
  if (!first)
    fail(t->source(), "initial", "", "one of temperature, mean_phonons, level or weights");
  for (const auto& [k, n] : *t)
    if (&n != first)
      fail(k.source(), "initial." + std::string(k.str()), found_text(n),
           "only one initial state ([initial] already has " + first_key + ")");
  if (!s.work) s.work.emplace();
  WorkSettings& w = *s.work;
  w.initial_given = first_key + " = " + found_text(*first);
  if (first_key == "temperature") {
    const auto r = internal(*t, "temperature", "initial.temperature", Dimension::temperature());
    require(r->value > 0, *r, "initial.temperature", "a temperature > 0");
    w.request.initial = InitialState::thermal(1 / r->value);
  } else if (first_key == "mean_phonons") {
    const auto r = plain(*t, "mean_phonons", "initial.mean_phonons", "a mean phonon number");
    require(r->value > 0, *r, "initial.mean_phonons", "a mean phonon number > 0");
    w.request.initial = InitialState::phonons(r->value);
  } else if (first_key == "level") {
    w.request.initial = InitialState::eigenstate(int(*integer(*t, "level", "initial.level", 0, 100000)));
  } else {
    const toml::array* a = first->as_array();
    if (!a || a->empty()) fail(*first, "initial.weights", "an array of weights of levels 0, 1, ...");
    std::vector<double> weights;
    for (const auto& v : *a) {
      if (!v.is_number() || !(v.value<double>().value() >= 0) || !std::isfinite(v.value<double>().value()))
        fail(v, "initial.weights[" + std::to_string(weights.size() + 1) + "]", "a finite plain number >= 0");
      weights.push_back(v.value<double>().value());
    }
    if (std::none_of(weights.begin(), weights.end(), [](double x) { return x > 0; }))
      fail(*first, "initial.weights", "weights that are not all zero");
    w.request.initial = InitialState::mixture(weights);
  }
}

void Reader::read_work(const toml::table& root, Scenario& s) const {
  if (!s.work) s.work.emplace();
  WorkSettings& w = *s.work;
  WorkRequest& r = w.request;
  r.threads = int(std::max(1u, std::thread::hardware_concurrency()));
  const toml::table* t = table(root, "work");
  if (!t) return;
  check_keys(*t, "work", table_keys("work"));
  if (const auto i = choice<Integrator>(*t, "integrator", "work.integrator",
                                        {{"fourth_order", Integrator::fourth_order},
                                         {"strang", Integrator::strang},
                                         {"eigenbasis", Integrator::eigenbasis}}))
    r.integrator = *i;
  if (const auto n = integer(*t, "steps", "work.steps", 0, 1000000000)) r.steps = int(*n);
  if (const auto f = choice<std::optional<bool>>(
          *t, "frame", "work.frame",
          {{"auto", std::nullopt}, {"lab", false}, {"co_moving", true}})) {
    r.co_moving = *f;
    w.frame = *string(*t, "frame", "work.frame");
  }
  if (const auto e = plain(*t, "thermal_tolerance", "work.thermal_tolerance", "a left-out thermal weight")) {
    require(e->value > 0 && e->value < 1, *e, "work.thermal_tolerance", "a number between 0 and 1 (e.g. 1e-10)");
    r.thermal_tolerance = e->value;
  }
  if (const auto n = integer(*t, "max_initial_levels", "work.max_initial_levels", 1, 100000))
    r.max_initial_levels = int(*n);
  if (const auto n = integer(*t, "final_margin", "work.final_margin", 0, 100000)) r.final_margin = int(*n);
  for (const std::string key : {"resolution", "bin_width"})
    if (const auto e = internal(*t, key, "work." + key, Dimension::energy())) {
      require(e->value > 0, *e, "work." + key, "an energy > 0");
      (key == "resolution" ? w.resolution : w.bin_width) = e->value;
    }
  if (const auto b = boolean(*t, "reverse", "work.reverse")) r.reverse_run = *b;
  if (const auto b = boolean(*t, "time_step_check", "work.time_step_check")) r.time_step_check = *b;
  if (const auto n = integer(*t, "threads", "work.threads", 1, 4096)) {
    r.threads = int(*n);
    w.threads_given = true;
  }
}

SweepTargetInfo Reader::sweep_target(const Scenario& s, const toml::node& parameter_node, const std::string& parameter,
                                     const std::string& key) const {
  SweepTargetInfo info;
  SweepAxis& w = info.axis;
  w.parameter = parameter;
  std::vector<std::string> known = {"protocol.duration", "initial.temperature", "initial.mean_phonons"};
  if (s.protocol)
    for (std::size_t k = 0; k < s.protocol->changes.size(); ++k) {
      const ChangeSpec& c = s.protocol->changes[k];
      const std::string name = "change[" + std::to_string(k + 1) + "].to";
      if (c.form == ScheduleForm::table || c.form == ScheduleForm::formula) continue;
      known.push_back(name);
      if (name == w.parameter) {
        w.target = SweepTarget::change_to;
        w.change = k;
        info.slot = ParameterSlot{};
        for (const auto& p : s.parameters)
          if (p.address == c.parameter) info.slot = p;
      }
    }
  for (const auto& p : s.parameters) {
    known.push_back(p.address);
    if (p.address == w.parameter) {
      w.target = SweepTarget::parameter;
      w.address = p.address;
      info.slot = p;
    }
  }
  if (w.parameter == "protocol.duration") {
    w.target = SweepTarget::duration;
    w.dimension = Dimension::time();
  } else if (w.parameter == "initial.temperature") {
    w.target = SweepTarget::temperature;
    w.dimension = Dimension::temperature();
  } else if (w.parameter == "initial.mean_phonons") {
    w.target = SweepTarget::mean_phonons;
    w.dimension = Dimension::none();
  } else if (info.slot) {
    w.dimension = info.slot->dimension;
  } else {
    std::string list;
    for (const auto& k : known) list += (list.empty() ? "" : ", ") + k;
    fail(parameter_node, key, "one of " + list, closest_name(w.parameter, known, 3));
  }
  if (w.target == SweepTarget::duration && !s.protocol) fail(parameter_node, key, "a [protocol] to take the duration from");
  if ((w.target == SweepTarget::temperature || w.target == SweepTarget::mean_phonons) &&
      (!s.work || s.work->initial_given.empty()))
    fail(parameter_node, key, "an [initial] table (the other settings of the initial state)");
  return info;
}

// One value of a swept parameter: converted, range-checked.
double Reader::sweep_value(const SweepTargetInfo& info, const toml::node& n, const std::string& key) const {
  const SweepAxis& w = info.axis;
  double v = 0;
  if (info.slot) {
    v = slot_value(n, key, *info.slot);
  } else if (w.target == SweepTarget::mean_phonons) {
    if (!n.is_number()) fail(n, key, "a mean phonon number, a plain number without quotes or unit");
    v = n.value<double>().value();
    if (!(v > 0)) fail(n, key, "a mean phonon number > 0");
  } else {
    const Quantity q = quantity(n, key, w.dimension);
    try {
      v = units_.to_internal(q, w.dimension, key, found_text(n));
    } catch (const InputError& e) {
      fail(n, key, e.expected + " (the dimension of " + w.parameter + ")", e.suggestion);
    }
    if (w.target == SweepTarget::duration && !(v >= 0)) fail(n, key, "a duration >= 0");
    if (w.target == SweepTarget::temperature && !(v > 0)) fail(n, key, "a temperature > 0");
  }
  return v;
}

// Display unit of an axis: the unit of its first value as written ("1 us" -> us); plain
// numbers stay plain (internal values times the slot's plain factor).
void Reader::sweep_unit(SweepTargetInfo& info, const std::string& first_text) const {
  SweepAxis& w = info.axis;
  if (first_text.size() > 2 && first_text.front() == '"') {
    w.unit = unit_text(first_text.substr(1, first_text.size() - 2));  // "MHz" for "2pi*1.5 MHz" too
    w.internal_per_unit = units_.to_internal(parse_quantity("1 " + w.unit), w.dimension);
  } else {
    w.internal_per_unit = info.slot ? info.slot->plain_factor : 1;
  }
}

// One axis in the one-parameter form: parameter, and values = [...] or from, to, points.
// `nodes` receives where each value came from (for errors).
SweepAxis Reader::read_sweep_axis(const toml::table& t, const std::string& prefix, const Scenario& s,
                                  std::vector<const toml::node*>& nodes) const {
  const auto parameter = string(t, "parameter", prefix + ".parameter");
  if (!parameter) fail(t.source(), prefix + ".parameter", "", "the parameter to sweep, e.g. \"protocol.duration\"");
  SweepTargetInfo info = sweep_target(s, *t.get("parameter"), *parameter, prefix + ".parameter");
  SweepAxis& w = info.axis;
  const toml::node* values = t.get("values");
  const toml::node* from = t.get("from");
  if (values && (from || t.get("to") || t.get("points")))
    fail(*values, prefix + ".values", "either values = [...] or from, to and points, not both");
  if (values) {
    const toml::array* a = values->as_array();
    if (!a || a->empty()) fail(*values, prefix + ".values", "an array of values, e.g. [\"1 us\", \"2 us\"]");
    for (const auto& v : *a) {
      const std::string key = prefix + ".values[" + std::to_string(w.values.size() + 1) + "]";
      w.values.push_back(sweep_value(info, v, key));
      w.given.push_back(found_text(v));
      nodes.push_back(&v);
    }
  } else {
    const toml::node* to = t.get("to");
    const auto points = integer(t, "points", prefix + ".points", 2, 100000);
    if (!from || !to || !points)
      fail(t.source(), !from ? prefix + ".from" : !to ? prefix + ".to" : prefix + ".points", "",
           "values = [...], or from, to and points (evenly spaced)");
    const double a = sweep_value(info, *from, prefix + ".from"), b = sweep_value(info, *to, prefix + ".to");
    for (std::int64_t i = 0; i < *points; ++i) {
      w.values.push_back(a + (b - a) * double(i) / double(*points - 1));
      w.given.push_back(exact_text(w.values.back()) + " (internal)");
      nodes.push_back(i == 0 ? from : to);
    }
    values = from;
  }
  sweep_unit(info, values->is_array() ? w.given.front() : found_text(*values));
  if (!values->is_array() && !w.unit.empty())
    for (std::size_t i = 0; i < w.values.size(); ++i)
      w.given[i] = exact_text(conversion_rounded(w.values[i] / w.internal_per_unit)) + " " + w.unit;
  return w;
}

void Reader::read_sweep(const toml::table& root, Scenario& s) const {
  const toml::table* t = table(root, "sweep");
  if (!t) return;
  check_keys(*t, "sweep", table_keys("sweep"));
  const int forms = bool(t->get("parameter")) + bool(t->get("axis")) + bool(t->get("parameters"));
  if (forms != 1)
    fail(t->source(), "sweep", "",
         forms == 0 ? "parameter (one swept parameter), [[sweep.axis]] tables (a grid over several) or parameters "
                      "with values = [[...], ...] (a list of points)"
                    : "only one of parameter, [[sweep.axis]] and parameters");
  SweepSpec spec;
  // Where each point's values came from, and the key to name (for the check of every point).
  std::vector<const toml::node*> point_nodes;
  std::vector<std::string> point_keys;
  if (t->get("parameter")) {
    std::vector<const toml::node*> nodes;
    spec.axes.push_back(read_sweep_axis(*t, "sweep", s, nodes));
    const bool listed = t->get("values") != nullptr;
    for (std::size_t i = 0; i < nodes.size(); ++i) {
      point_nodes.push_back(nodes[i]);
      point_keys.push_back(listed ? "sweep.values[" + std::to_string(i + 1) + "]" : "sweep");
    }
  } else if (const toml::node* axes = t->get("axis")) {
    if (!axes->is_array_of_tables() || axes->as_array()->empty())
      fail(*axes, "sweep.axis", "one or more [[sweep.axis]] tables, each with parameter and values or from, to, points");
    const std::vector<std::string> axis_keys = table_keys("sweep.axis");
    std::vector<std::vector<const toml::node*>> nodes;
    for (const auto& node : *axes->as_array()) {
      const std::string prefix = "sweep.axis[" + std::to_string(spec.axes.size() + 1) + "]";
      check_keys(*node.as_table(), prefix, axis_keys);
      nodes.emplace_back();
      spec.axes.push_back(read_sweep_axis(*node.as_table(), prefix, s, nodes.back()));
      for (std::size_t k = 0; k + 1 < spec.axes.size(); ++k)
        if (spec.axes[k].parameter == spec.axes.back().parameter)
          fail(*node.as_table()->get("parameter"), prefix + ".parameter",
               "a parameter not swept by another axis (axis " + std::to_string(k + 1) + " sweeps it)");
    }
    double total = 1;
    for (const auto& a : spec.axes) total *= double(a.values.size());
    if (total > 1e6) fail(*axes, "sweep.axis", "at most 1000000 grid points (the axes give " + exact_text(total) + ")");
    spec.grid = true;
    for (std::size_t i = 0; i < spec.points(); ++i) {
      // a point is named by its value on the fastest axis whose value is not its first
      std::size_t k = spec.axes.size() - 1;
      while (k > 0 && spec.value_index(i, k) == 0) --k;
      point_nodes.push_back(nodes[k][spec.value_index(i, k)]);
      point_keys.push_back("sweep.axis[" + std::to_string(k + 1) + "]");
    }
  } else {
    const toml::node* names = t->get("parameters");
    const toml::array* list = names->as_array();
    if (!list || list->empty()) fail(*names, "sweep.parameters", "an array of parameter names, e.g. [\"protocol.duration\", \"trap.quartic\"]");
    std::vector<SweepTargetInfo> infos;
    for (const auto& n : *list) {
      const std::string key = "sweep.parameters[" + std::to_string(infos.size() + 1) + "]";
      if (!n.is_string()) fail(n, key, "a parameter name in quotes");
      infos.push_back(sweep_target(s, n, n.as_string()->get(), key));
      for (std::size_t k = 0; k + 1 < infos.size(); ++k)
        if (infos[k].axis.parameter == infos.back().axis.parameter) fail(n, key, "a parameter named once");
    }
    const toml::node* values = t->get("values");
    if (!values || !values->is_array() || values->as_array()->empty())
      fail(values ? *values : *names, "sweep.values",
           "with parameters: values = [[...], ...], one array per point with one value per parameter");
    if (t->get("from") || t->get("to") || t->get("points"))
      fail(*names, "sweep.parameters", "values = [[...], ...] with parameters (from, to and points are for one parameter)");
    if (values->as_array()->size() > 1000000) fail(*values, "sweep.values", "at most 1000000 points");
    std::size_t index = 0;
    for (const auto& row : *values->as_array()) {
      const std::string key = "sweep.values[" + std::to_string(++index) + "]";
      const toml::array* a = row.as_array();
      if (!a || a->size() != infos.size())
        fail(row, key, "an array of " + std::to_string(infos.size()) + " values, one per parameter in the order of "
                       "sweep.parameters");
      for (std::size_t k = 0; k < infos.size(); ++k) {
        const toml::node& v = *a->get(k);
        infos[k].axis.values.push_back(sweep_value(infos[k], v, key + "[" + std::to_string(k + 1) + "]"));
        infos[k].axis.given.push_back(found_text(v));
      }
      point_nodes.push_back(&row);
      point_keys.push_back(key);
    }
    for (auto& info : infos) {
      sweep_unit(info, info.axis.given.front());
      spec.axes.push_back(std::move(info.axis));
    }
    spec.grid = false;
  }
  s.sweep = std::move(spec);
  // Every point must give a usable protocol and potential.
  for (std::size_t i = 0; i < s.sweep->points(); ++i) {
    try {
      const Scenario point = at_sweep_point(s, i);
      if (point.protocol) check_protocol(point, *point_nodes[i], point_keys[i]);
    } catch (const InputError& e) {
      if (!e.file.empty()) throw;
      fail(*point_nodes[i], point_keys[i], e.key + ": " + e.expected);
    }
  }
}

// ---- [noise] (solver/noise.hpp) ----------------------------------------------------------
void Reader::read_noise(const toml::table& root, Scenario& s) const {
  const toml::table* t = table(root, "noise");
  if (!t) return;
  check_keys(*t, "noise", table_keys("noise"));
  const std::vector<std::string> source_keys = table_keys("noise.source");
  NoiseSettings settings;
  settings.request.realisations = int(integer(*t, "realisations", "noise.realisations", 2, 1000000).value_or(100));
  settings.request.seed = std::uint64_t(integer(*t, "seed", "noise.seed", 0, std::numeric_limits<std::int64_t>::max()).value_or(1));
  settings.request.route = choice<NoiseRoute>(*t, "route", "noise.route",
                                              {{"auto", NoiseRoute::automatic},
                                               {"realisations", NoiseRoute::realisations},
                                               {"lindblad", NoiseRoute::lindblad}})
                               .value_or(NoiseRoute::automatic);
  if (const auto e = internal(*t, "standard_error", "noise.standard_error", Dimension::energy())) {
    require(e->value > 0, *e, "noise.standard_error", "an energy > 0 (the standard error asked for on <W>)");
    settings.request.mean_error_target = e->value;
  }
  settings.request.max_realisations =
      int(integer(*t, "max_realisations", "noise.max_realisations", 2, 1000000).value_or(10000));
  if (settings.request.mean_error_target > 0 && settings.request.max_realisations < settings.request.realisations)
    fail(*t->get(t->get("max_realisations") ? "max_realisations" : "realisations"), "noise.max_realisations",
         "max_realisations >= realisations (" + std::to_string(settings.request.realisations) + ")");
  const toml::node* sources = t->get("source");
  if (!sources || !sources->is_array_of_tables() || sources->as_array()->empty())
    fail(sources ? *sources : *root.get("noise"), "noise.source",
         "one or more [[noise.source]] tables, each with a parameter and one of white, psd_file, heating_rate");
  const double t0 = units_.time_s();
  int index = 0;
  for (const auto& node : *sources->as_array()) {
    const toml::table& src = *node.as_table();
    const std::string prefix = "noise.source[" + std::to_string(++index) + "]";
    check_keys(src, prefix, source_keys);
    const auto address = string(src, "parameter", prefix + ".parameter");
    if (!address) fail(node, prefix + ".parameter", "the parameter the noise acts on (\"trap.centre\")");
    const auto slot = std::find_if(s.parameters.begin(), s.parameters.end(),
                                   [&](const ParameterSlot& p) { return p.address == *address; });
    if (slot == s.parameters.end() || address->rfind("box.", 0) == 0) {
      std::vector<std::string> names;
      for (const auto& p : s.parameters)
        if (p.address.rfind("box.", 0) != 0) names.push_back(p.address);
      fail(*src.get("parameter"), prefix + ".parameter", "a parameter of a [[potential]] term (\"term.parameter\")",
           closest_name(*address, names));
    }
    // A PSD of this parameter: dimension (parameter)^2 per Hz; internal (parameter unit)^2 T0
    // with the frequency ordinary (cycles per T0).
    Dimension psd_dimension;
    for (int i = 0; i < 4; ++i) psd_dimension.power[std::size_t(i)] = 2 * slot->dimension.power[std::size_t(i)];
    psd_dimension.power[2] += 1;
    const double unit = slot->dimension == Dimension::none() ? 1.0 : units_.to_si(1, slot->dimension);
    // relative = true: the PSD of eps/p (RIN), per Hz only (NoiseSource::relative)
    const bool relative = boolean(src, "relative", prefix + ".relative").value_or(false);
    if (relative) psd_dimension = Dimension::time();
    auto psd_internal = [&](const toml::node& n, const std::string& dotted, const std::string& text) {
      Quantity q;
      try {
        q = parse_quantity(text);
      } catch (const InputError& e) {
        fail(n, dotted, e.expected, e.suggestion);
      }
      if (q.plain) {
        if (!natural_)
          fail(n, dotted, relative ? "a one-sided relative PSD with its unit, 1/Hz (e.g. \"1e-12 /Hz\")"
                                   : "a one-sided PSD with its unit, (unit of " + *address + ")^2/Hz (e.g. \"1e-22 m^2/Hz\")");
        return relative ? q.value_si : q.value_si * slot->plain_factor * slot->plain_factor;
      }
      if (!(q.dimension == psd_dimension))
        fail(n, dotted, relative ? "a one-sided relative PSD of " + *address + " (relative = true), per Hz (1/Hz), not " +
                                       with_article(q.dimension)
                                 : "a one-sided PSD of " + *address + ", its unit squared per Hz (" +
                                       psd_dimension.describe() + "), not " + with_article(q.dimension));
      return relative ? q.value_si / t0 : q.value_si / (unit * unit * t0);
    };
    const bool white = src.get("white"), file = src.get("psd_file"), heating = src.get("heating_rate");
    std::optional<std::pair<double, double>> heating_rate;
    if (int(white) + int(file) + int(heating) != 1)
      fail(node, prefix, "exactly one of white, psd_file, heating_rate");
    if (relative && heating)
      fail(*src.get("relative"), prefix + ".relative", "relative = true only with white or psd_file (a heating rate is "
                                                       "absolute)");
    NoiseSource source{*address, NoiseSpectrum::white(0), relative};
    std::string given = *address + (relative ? " (relative, times its value at each time): " : ": ");
    if (white) {
      const toml::node& n = *src.get("white");
      const std::string text = n.is_string() ? n.as_string()->get() : found_text(n);
      if (!n.is_string() && !n.is_number()) fail(n, prefix + ".white", "a one-sided PSD in quotes with its unit");
      const double level = psd_internal(n, prefix + ".white", text);
      if (!(level >= 0)) fail(n, prefix + ".white", "a PSD >= 0");
      source.spectrum = NoiseSpectrum::white(level);
      given += "white " + text;
    } else if (file) {
      const toml::node& n = *src.get("psd_file");
      if (!n.is_string()) fail(n, prefix + ".psd_file", "a file name in quotes");
      const auto f_unit = string(src, "frequency_unit", prefix + ".frequency_unit").value_or("Hz");
      const auto p_unit = string(src, "psd_unit", prefix + ".psd_unit");
      if (!p_unit) fail(n, prefix + ".psd_unit", "the unit of the PSD column (e.g. psd_unit = \"m^2/Hz\")");
      Quantity fq;
      try {
        fq = parse_quantity("1 " + f_unit);
      } catch (const InputError& e) {
        fail(*src.get("frequency_unit"), prefix + ".frequency_unit", e.expected, e.suggestion);
      }
      if (!(fq.dimension == Dimension::frequency()))
        fail(*src.get("frequency_unit"), prefix + ".frequency_unit", "a frequency unit (Hz, kHz, MHz)");
      const double per_psd = psd_internal(*src.get("psd_unit"), prefix + ".psd_unit", "1 " + *p_unit);
      PotentialTable data = read_table_file(n, prefix + ".psd_file", fq.value_si * t0, per_psd, {"frequency", "psd"});
      try {
        source.spectrum = NoiseSpectrum::table(std::move(data.x), std::move(data.v));
      } catch (const InputError& e) {
        fail(n, prefix + ".psd_file", e.expected + " (" + e.found + ")");
      }
      given += "PSD table " + n.as_string()->get() + " (" + f_unit + ", " + *p_unit + ")";
    } else {
      const toml::node& n = *src.get("heating_rate");
      const std::string where = prefix + ".heating_rate";
      if (!(slot->dimension == Dimension::length()) || address->size() < 7 ||
          address->compare(address->size() - 7, 7, ".centre") != 0)
        fail(n, where, "a heating rate only on a centre (position noise): parameter = \"term.centre\"");
      if (!n.is_string()) fail(n, where, "a heating rate in quotes, e.g. \"500 quanta/s\"");
      std::string text = n.as_string()->get();
      const std::size_t q = text.find("quanta/");
      if (q == std::string::npos) fail(n, where, "a heating rate in quanta per time, e.g. \"500 quanta/s\"");
      // "N quanta/s" = N per second: parse "N s" and invert the unit
      Quantity per;
      try {
        per = parse_quantity("1 " + text.substr(q + 7));
      } catch (const InputError& e) {
        fail(n, where, "a heating rate in quanta per time, e.g. \"500 quanta/s\" (" + e.expected + ")");
      }
      char* end = nullptr;
      const std::string number = text.substr(0, q);
      const double count = std::strtod(number.c_str(), &end);
      if (end == number.c_str() || !(per.dimension == Dimension::time()) || !(count >= 0) || !std::isfinite(count))
        fail(n, where, "a heating rate >= 0 in quanta per time, e.g. \"500 quanta/s\"");
      const auto at = si(src, "at_frequency", prefix + ".at_frequency", Dimension::frequency(),
                         "the trap frequency the heating rate was measured at");
      if (!at) fail(n, prefix + ".at_frequency", "the trap frequency of the heating rate (at_frequency = \"1 MHz\")");
      if (!(at->value > 0)) fail(*at->node, prefix + ".at_frequency", "a frequency > 0");
      const double quanta_per_t0 = count / per.value_si * t0, omega = 2 * si::pi * at->value * t0;
      heating_rate = std::make_pair(quanta_per_t0, omega);
      source.spectrum = NoiseSpectrum::white(position_psd_from_heating_rate(quanta_per_t0, omega));
      char psd[32];
      std::snprintf(psd, sizeof psd, "%.4g", source.spectrum.white_level() * unit * unit * t0);
      given += "heating rate " + text + " at " + at->given +
               " (white position noise S_x = 4 hbar (dn/dt) / (m omega^3) = " + psd + " m^2/Hz)";
    }
    if (!heating && src.get("at_frequency"))
      fail(*src.get("at_frequency"), prefix + ".at_frequency", "at_frequency only with heating_rate");
    if (!file && (src.get("frequency_unit") || src.get("psd_unit")))
      fail(src.get("frequency_unit") ? *src.get("frequency_unit") : *src.get("psd_unit"), prefix,
           "frequency_unit and psd_unit only with psd_file");
    if (file && settings.request.route == NoiseRoute::lindblad)
      fail(*t->get("route"), "noise.route",
           "\"auto\" or \"realisations\": " + prefix + " has a PSD table (coloured noise), and the Lindblad "
           "route holds for white noise only");
    settings.request.sources.push_back(std::move(source));
    settings.given.push_back(given);
    settings.heating_rate.push_back(heating_rate);
  }
  s.noise = std::move(settings);
}

// ---- [uncertainty]: the calibration's standard deviations and correlations --------------------
void Reader::read_uncertainty(const toml::table& root, Scenario& s) const {
  const toml::table* t = table(root, "uncertainty");
  if (!t) return;
  check_keys(*t, "uncertainty", table_keys("uncertainty"));
  const toml::node* sd_node = t->get("sd");
  if (!sd_node)
    fail(t->source(), "uncertainty.sd", "",
         "[uncertainty.sd] with one standard deviation per parameter, e.g. \"trap.frequency\" = \"0.4 kHz\"");
  if (!sd_node->is_table()) fail(*sd_node, "uncertainty.sd", "a table of parameter = standard deviation");
  UncertaintySpec u;
  u.line = int(t->source().begin.line);
  std::vector<std::string> known;
  for (const auto& p : s.parameters) known.push_back(p.address);
  // The entries: "trap.frequency" = ... (a quoted key) or trap.frequency = ... (a nested table),
  // in file order.
  std::vector<std::pair<std::string, const toml::node*>> entries;
  std::function<void(const toml::table&, const std::string&)> collect = [&](const toml::table& table,
                                                                             const std::string& prefix) {
    for (const auto& [k, v] : table) {
      const std::string address = prefix.empty() ? std::string(k.str()) : prefix + "." + std::string(k.str());
      if (v.is_table())
        collect(*v.as_table(), address);
      else
        entries.emplace_back(address, &v);
    }
  };
  collect(*sd_node->as_table(), "");
  std::stable_sort(entries.begin(), entries.end(), [](const auto& a, const auto& b) {
    return std::pair(a.second->source().begin.line, a.second->source().begin.column) <
           std::pair(b.second->source().begin.line, b.second->source().begin.column);
  });
  if (entries.empty())
    fail(*sd_node, "uncertainty.sd", "at least one parameter with its standard deviation (\"trap.frequency\" = \"0.4 kHz\")");
  for (const auto& entry : entries) {
    // named copies, not a structured binding: clang 14 refuses a lambda capturing one
    const std::string address = entry.first;
    const toml::node* node = entry.second;
    const std::string key = "uncertainty.sd.\"" + address + "\"";
    const auto slot = std::find_if(s.parameters.begin(), s.parameters.end(),
                                   [&](const ParameterSlot& p) { return p.address == address; });
    if (slot == s.parameters.end()) {
      std::string list;
      for (const auto& a : known) list += (list.empty() ? "" : ", ") + a;
      fail(*node, key, "a parameter of the potential: " + list, closest_name(address, known, 3));
    }
    if (s.protocol)
      for (const auto& change : s.protocol->changes)
        if (change.parameter == address)
          fail(*node, key,
               "a parameter the protocol holds fixed ([[protocol.change]] changes " + address +
                   "; a schedule's uncertainty is not propagated)");
    const double sd = slot_value(*node, key, *slot);
    if (node->is_string() && parse_quantity(node->as_string()->get()).angular)
      fail(*node, key, "an ordinary frequency (\"0.4 kHz\", not an angular one)");
    if (!(sd > 0)) fail(*node, key, "a standard deviation > 0 (leave a known parameter out)");
    // the number and the unit as written (for the report and the summary)
    const std::string given = node->is_string() ? node->as_string()->get() : found_text(*node);
    const char* begin = given.c_str();
    char* end = nullptr;
    const double number = std::strtod(begin, &end);
    std::string unit(end);
    unit.erase(0, unit.find_first_not_of(" \t"));
    u.addresses.push_back(address);
    u.given.push_back(given);
    u.lab_sd.push_back(end != begin && number > 0 ? number : sd);
    u.units.push_back(end != begin && number > 0 ? unit : std::string());
    u.sd.push_back(sd);
  }
  const std::size_t n = u.addresses.size();
  u.correlation.assign(n, std::vector<double>(n, 0.0));
  for (std::size_t i = 0; i < n; ++i) u.correlation[i][i] = 1;
  if (const toml::node* c = t->get("correlation")) {
    const std::string expected =
        "a list of [\"parameter\", \"parameter\", r] with two parameters of [uncertainty.sd] and -1 <= r <= 1, e.g. "
        "[[\"trap.frequency\", \"trap.quartic\", -0.6]]";
    if (!c->is_array()) fail(*c, "uncertainty.correlation", expected);
    std::size_t index = 0;
    for (const auto& pair : *c->as_array()) {
      const std::string key = "uncertainty.correlation[" + std::to_string(++index) + "]";
      const toml::array* a = pair.as_array();
      if (!a || a->size() != 3 || !(*a)[0].is_string() || !(*a)[1].is_string() || !(*a)[2].is_number())
        fail(pair, key, expected);
      std::size_t ij[2] = {n, n};
      for (int k = 0; k < 2; ++k) {
        const std::string name = (*a)[std::size_t(k)].as_string()->get();
        ij[k] = std::size_t(std::find(u.addresses.begin(), u.addresses.end(), name) - u.addresses.begin());
        if (ij[k] == n) fail((*a)[std::size_t(k)], key, "a parameter of [uncertainty.sd]", closest_name(name, u.addresses, 3));
      }
      const double r = (*a)[2].is_integer() ? double((*a)[2].as_integer()->get()) : (*a)[2].as_floating_point()->get();
      if (ij[0] == ij[1]) fail(pair, key, "two different parameters (a parameter's correlation with itself is 1)");
      if (!(std::abs(r) <= 1)) fail((*a)[2], key, "a correlation r with -1 <= r <= 1");
      if (u.correlation[ij[0]][ij[1]] != 0)
        fail(pair, key, "each pair once (" + u.addresses[ij[0]] + " and " + u.addresses[ij[1]] + " are given before)");
      u.correlation[ij[0]][ij[1]] = u.correlation[ij[1]][ij[0]] = r;
    }
    const auto size = Eigen::Index(n);
    Eigen::MatrixXd m(size, size);
    for (std::size_t i = 0; i < n; ++i)
      for (std::size_t j = 0; j < n; ++j) m(Eigen::Index(i), Eigen::Index(j)) = u.correlation[i][j];
    const double lowest = Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd>(m).eigenvalues().minCoeff();
    if (lowest < -1e-9) {
      char text[32];
      std::snprintf(text, sizeof text, "%.3g", lowest);
      fail(*c, "uncertainty.correlation",
           std::string("correlations that a covariance can have (a positive semi-definite matrix; these give an "
                       "eigenvalue ") + text + ")");
    }
  }
  s.uncertainty = std::move(u);
}

// ---- [bath] (solver/noise.hpp, BathRequest): the noise run's master equation with damping ----
void Reader::read_bath(const toml::table& root, Scenario& s) const {
  const toml::table* t = table(root, "bath");
  if (!t) return;
  check_keys(*t, "bath", table_keys("bath"));
  BathRequest bath;
  // the rate as events per time, "200 /s" or "0.2 /ms" (as heating_rate's "quanta/s": a time
  // unit inverted, never Hz, which would leave open whether 2 pi is in it); a bare number in
  // natural units
  const toml::node* rate = t->get("rate");
  if (!rate) fail(*t, "bath.rate", "the damping rate (rate = \"200 /s\")");
  const std::string expected = "a damping rate > 0 per time, e.g. \"200 /s\"";
  if (rate->is_number() && natural_) {
    bath.rate = rate->value<double>().value();
  } else {
    if (!rate->is_string()) fail(*rate, "bath.rate", expected + " (in quotes)");
    const std::string text = rate->as_string()->get();
    const std::size_t slash = text.find('/');
    if (slash == std::string::npos) fail(*rate, "bath.rate", expected + " (a time unit after '/')");
    std::string number = text.substr(0, slash);
    while (!number.empty() && std::isspace(static_cast<unsigned char>(number.back()))) number.pop_back();
    if (number.size() >= 2 && number.back() == '1' && std::isspace(static_cast<unsigned char>(number[number.size() - 2])))
      number.pop_back();  // "200 1/s"
    Quantity per;
    try {
      per = parse_quantity("1 " + text.substr(slash + 1));
    } catch (const InputError& e) {
      fail(*rate, "bath.rate", expected + " (" + e.expected + ")");
    }
    char* end = nullptr;
    const double count = std::strtod(number.c_str(), &end);
    if (end == number.c_str() || (*end != '\0' && !std::isspace(static_cast<unsigned char>(*end))) ||
        !(per.dimension == Dimension::time()))
      fail(*rate, "bath.rate", expected);
    bath.rate = count / per.value_si * units_.time_s();  // per second (not angular) -> per T0
  }
  if (!(bath.rate > 0) || !std::isfinite(bath.rate)) fail(*rate, "bath.rate", expected);
  const std::string rate_given = ", rate = " + found_text(*rate);
  const toml::node* temperature = t->get("temperature");
  const toml::node* phonons = t->get("mean_phonons");
  if (bool(temperature) == bool(phonons))
    fail(temperature ? *temperature : static_cast<const toml::node&>(*t), "bath",
         "exactly one of temperature, mean_phonons");
  std::string given;
  if (temperature) {
    const auto r = internal(*t, "temperature", "bath.temperature", Dimension::temperature());
    require(r->value >= 0, *r, "bath.temperature", "a temperature >= 0");
    bath.temperature = r->value;
    given = "temperature = " + found_text(*temperature);
  } else {
    const auto r = plain(*t, "mean_phonons", "bath.mean_phonons", "a mean phonon number");
    require(r->value >= 0, *r, "bath.mean_phonons", "a mean phonon number >= 0");
    bath.mean_phonons = r->value;
    given = "mean_phonons = " + found_text(*phonons);
  }
  given += rate_given;
  if (!s.noise) {  // a bath alone: the noise run with no sources
    s.noise.emplace();
    s.noise->request.route = NoiseRoute::automatic;
  }
  if (s.noise->request.route == NoiseRoute::realisations)
    fail(*root.get_as<toml::table>("noise")->get("route"), "noise.route",
         "\"lindblad\" or \"auto\": a [bath] is a master equation (Lindblad route only)");
  for (std::size_t i = 0; i < s.noise->request.sources.size(); ++i)
    if (!s.noise->request.sources[i].spectrum.is_white())
      fail(*t, "bath", "white noise beside a bath: noise.source[" + std::to_string(i + 1) +
                           "] has a PSD table (coloured), which needs the realisations route, and a bath the Lindblad route");
  s.noise->request.bath = bath;
  s.noise->bath_given = given;
}

Scenario Reader::read(const toml::table& root) {
  Scenario s;
  s.file = file_;
  check_keys(root, "", table_keys("top"));
  s.title = string(root, "title", "title").value_or("");
  s.description = string(root, "description", "description").value_or("");
  read_units(root, s);

  // A hard-walled [box] may be empty (a flat box); every other trap needs a potential.
  const toml::node* potential = root.get("potential");
  if (!potential && !root.get("box"))
    throw InputError("potential", "", "one or more [[potential]] tables (with a shape), or a [box]", "", file_);
  if (potential && (!potential->is_array_of_tables() || potential->as_array()->empty()))
    fail(*potential, "potential", "one or more [[potential]] tables (double brackets)");
  int index = 0;
  if (potential)
    for (const auto& term : *potential->as_array()) read_term(*term.as_table(), ++index, s);

  read_box_and_grid(root, s);
  read_spectrum(root, s);
  s.spectrum.message_units = {s.units, s.energy, {}};  // library messages in lab units
  read_parameter_slots(s);
  read_protocol(root, s);
  s.spectrum.message_units.time_unit = duration_unit(s);
  read_initial(root, s);
  read_work(root, s);
  read_sweep(root, s);
  read_noise(root, s);
  read_bath(root, s);
  read_uncertainty(root, s);
  if (s.soft_walls && !moves_walls(s))
    fail(*root["box"]["soft_walls"].node(), "box.soft_walls",
         "a [protocol] that moves box.left or box.right (the comparison is of moving walls)");

  s.output_folder = fs::path(file_).stem().string() + "-output";
  if (const toml::table* output = table(root, "output")) {
    check_keys(*output, "output", table_keys("output"));
    if (const auto folder = string(*output, "folder", "output.folder")) {
      if (folder->empty()) fail(*output->get("folder"), "output.folder", "a folder name");
      s.output_folder = *folder;
    }
  }
  return s;
}

}  // namespace

Scenario read_scenario_text(std::string_view toml_text, std::string file_name) {
  toml_text = without_byte_order_mark(toml_text);
  toml::table root;
  try {
    root = toml::parse(toml_text, file_name);
  } catch (const toml::parse_error& e) {
    throw InputError("", "", "TOML syntax: " + std::string(e.description()), "", file_name,
                     static_cast<int>(e.source().begin.line), static_cast<int>(e.source().begin.column));
  }
  const fs::path base = fs::path(file_name).parent_path();
  return Reader(file_name, base).read(root);
}

Scenario read_scenario(const std::string& path) {
  return read_scenario_text(read_text_file(path, "the scenario file"), path);
}

std::string duration_unit(const Scenario& s) {
  if (!s.protocol) return {};
  const std::string& given = s.protocol->duration_given;
  char* end = nullptr;
  std::strtod(given.c_str(), &end);
  std::string unit = end ? std::string(end) : std::string();
  unit.erase(0, std::min(unit.size(), unit.find_first_not_of(" \t")));
  try {
    if (!unit.empty() && parse_quantity("1 " + unit).dimension == Dimension::time()) return unit;
  } catch (const InputError&) {
  }
  return {};
}

namespace {

bool is_wall(const std::string& address) { return address == "box.left" || address == "box.right"; }

const ProtocolSpec& protocol_of(const Scenario& s) {
  if (!s.protocol)
    throw InputError("protocol", "missing",
                     "work statistics need a [protocol] table with duration and [[protocol.change]] tables "
                     "(as in examples/ion_translation.toml); the spectrum of this trap alone needs none",
                     "", s.file);
  return *s.protocol;
}

Schedule schedule_of(const Scenario& s, const ChangeSpec& c) {
  const double from = c.from.value_or(parameter_value(s, c.parameter));
  switch (c.form) {
    case ScheduleForm::constant: return Schedule::constant(c.parameter, c.to);
    case ScheduleForm::linear: return Schedule::linear(c.parameter, from, c.to);
    case ScheduleForm::smooth_step: return Schedule::smooth_step(c.parameter, from, c.to);
    case ScheduleForm::smoother_step: return Schedule::smoother_step(c.parameter, from, c.to);
    case ScheduleForm::table: return Schedule::table(c.parameter, c.times, c.values);
    case ScheduleForm::formula: return Schedule::formula(c.parameter, c.internal_formula);
  }
  throw ContractViolation("schedule_of: unknown ramp");
}

}  // namespace

double parameter_value(const Scenario& s, const std::string& address) {
  if (is_wall(address) && s.spectrum.box) return address == "box.left" ? s.spectrum.box->first : s.spectrum.box->second;
  return s.potential.parameter(address);
}

Protocol build_protocol(const Scenario& s) {
  std::vector<Schedule> schedules;
  for (const ChangeSpec& c : protocol_of(s).changes)
    if (!is_wall(c.parameter)) schedules.push_back(schedule_of(s, c));
  return Protocol(s.protocol->duration, std::move(schedules));
}

bool moves_walls(const Scenario& s) {
  return s.protocol && std::any_of(s.protocol->changes.begin(), s.protocol->changes.end(),
                                   [](const ChangeSpec& c) { return is_wall(c.parameter); });
}

WallProtocol build_wall_protocol(const Scenario& s) {
  const ProtocolSpec& spec = protocol_of(s);
  TRAPWORK_EXPECT(s.spectrum.box.has_value(), "build_wall_protocol needs a [box]");
  std::optional<Schedule> left, right;
  for (const ChangeSpec& c : spec.changes)
    if (is_wall(c.parameter)) (c.parameter == "box.left" ? left : right) = schedule_of(s, c);
  if (!left) left = Schedule::constant("box.left", s.spectrum.box->first);
  if (!right) right = Schedule::constant("box.right", s.spectrum.box->second);
  return WallProtocol(spec.duration, *left, *right, s.potential, build_protocol(s).schedules());
}

WallWorkRequest wall_work_request(const Scenario& s) { return wall_work_request(s, work_request(s)); }

WallWorkRequest wall_work_request(const Scenario& s, const WorkRequest& r) {
  WallWorkRequest w;
  w.initial = r.initial;
  w.thermal_tolerance = r.thermal_tolerance;
  w.max_initial_levels = r.max_initial_levels;
  w.final_margin = r.final_margin;
  // DST-I of n points runs as an FFT of 2 (n + 1): n + 1 with small prime factors only
  w.points = fast_fft_size(r.spectrum.points.value_or(w.points) + 1) - 1;
  w.steps = r.steps;
  w.phase_per_step = r.phase_per_step;
  if (r.integrator == Integrator::eigenbasis)
    throw InputError("work.integrator", "\"eigenbasis\"",
                     "fourth_order or strang for moving walls (the dilated-box split-operator)", "", s.file);
  w.order = r.integrator == Integrator::strang ? SplitOrder::strang : SplitOrder::fourth;
  if (r.co_moving.value_or(false))
    throw InputError("work.frame", "\"co_moving\"", "auto or lab for moving walls (the box is dilated instead)", "",
                     s.file);
  w.threads = r.threads;
  w.reverse_run = r.reverse_run;
  w.time_step_check = r.time_step_check;
  w.grid_check = r.grid_check;
  w.merge_tolerance = r.merge_tolerance;
  w.unresolved_tolerance = r.unresolved_tolerance;
  w.spectrum = r.spectrum.options;
  w.progress = r.progress;
  return w;
}

WorkRequest work_request(const Scenario& s) {
  if (!s.work || s.work->initial_given.empty())
    throw InputError("initial", "", "an [initial] table: temperature, mean_phonons, level or weights", "",
                     s.file);
  WorkRequest r = s.work->request;
  r.spectrum = s.spectrum;
  return r;
}

std::size_t SweepSpec::points() const {
  if (axes.empty()) return 0;
  if (!grid) return axes.front().values.size();
  std::size_t n = 1;
  for (const auto& a : axes) n *= a.values.size();
  return n;
}

std::size_t SweepSpec::value_index(std::size_t point, std::size_t axis) const {
  if (!grid) return point;
  std::size_t stride = 1;  // the last axis varies fastest
  for (std::size_t k = axis + 1; k < axes.size(); ++k) stride *= axes[k].values.size();
  return (point / stride) % axes[axis].values.size();
}

std::vector<double> SweepSpec::point_values(std::size_t point) const {
  std::vector<double> v;
  for (std::size_t k = 0; k < axes.size(); ++k) v.push_back(value(point, k));
  return v;
}

std::string SweepSpec::point_text(std::size_t point) const {
  std::string text;
  for (std::size_t k = 0; k < axes.size(); ++k)
    text += (k ? ", " : "") + axes[k].parameter + " = " + axes[k].given[value_index(point, k)];
  return text;
}

Scenario at_sweep_point(const Scenario& s, std::size_t index) {
  TRAPWORK_EXPECT(s.sweep && index < s.sweep->points(), "at_sweep_point: no such sweep point");
  Scenario r = s;
  for (std::size_t k = 0; k < s.sweep->axes.size(); ++k) {
    const SweepAxis& w = s.sweep->axes[k];
    const std::size_t j = s.sweep->value_index(index, k);
    const double v = w.values[j];
    switch (w.target) {
      case SweepTarget::duration: r.protocol->duration = v; break;
      case SweepTarget::temperature:
        r.work->request.initial = InitialState::thermal(1 / v);
        r.work->initial_given = "temperature = " + w.given[j];
        break;
      case SweepTarget::mean_phonons:
        r.work->request.initial = InitialState::phonons(v);
        r.work->initial_given = "mean_phonons = " + w.given[j];
        break;
      case SweepTarget::parameter:
        if (is_wall(w.address))
          (w.address == "box.left" ? r.spectrum.box->first : r.spectrum.box->second) = v;
        else
          r.potential.set_parameter(w.address, v);
        break;
      case SweepTarget::change_to: r.protocol->changes[w.change].to = v; break;
    }
  }
  return r;
}

std::string_view default_scenario_text() {
  // Invented setting. L = sqrt(hbar/(m omega)) = 15.9 nm for 40 u at 1 MHz. To first order the
  // quartic k4 raises the spacing E(n+1) - E(n) by 3 k4 L^4 (n + 1); k4 = m^2 omega^2 delta /
  // (3 hbar) with delta = 2 pi 3 kHz gives 0.0157 h*Hz/nm^4 (1e-3 hbar omega / L^4), a 3 kHz
  // shift of the lowest spacing. The trap moves by 160 nm (10 L) at constant speed in 2.5 us
  // (2.5 periods), where the harmonic <W> = 2 m v^2 sin^2(omega tau / 2) is largest.
  return R"(title = "default: 40 u ion in a 1 MHz trap with a quartic term, moved by 160 nm in 2.5 us"
description = "Built-in scenario (invented lab setting): the quartic term raises the lowest spacing by about 3 kHz, growing with n; the ion starts thermal with 2 phonons and the trap moves 10 oscillator lengths at constant speed."

[particle]
mass = "40 u"

[[potential]]
name = "trap"
shape = "polynomial"
frequency = "1 MHz"
quartic = "0.0157 h*Hz/nm^4"

[spectrum]
levels = 20

[protocol]
duration = "2.5 us"

[[protocol.change]]
parameter = "trap.centre"
ramp = "linear"
to = "160 nm"

[initial]
mean_phonons = 2
)";
}

}  // namespace trapwork
