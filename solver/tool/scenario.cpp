// Scenario reader: TOML (toml++) to library values, with positioned errors. See scenario.hpp.
#include "solver/tool/scenario.hpp"

#include <toml++/toml.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "solver/errors.hpp"

namespace trapwork {

namespace {

namespace fs = std::filesystem;

const std::vector<std::string> top_level_keys = {"title", "description", "particle", "units", "potential",
                                                 "box",   "spectrum",    "grid",     "output"};

// Dimension of each named shape parameter (potentials/potential.hpp).
Dimension parameter_dimension(std::string_view p) {
  if (p == "frequency") return Dimension::frequency();
  if (p == "centre" || p == "separation" || p == "range" || p == "width" || p == "waist" ||
      p == "half_width" || p == "softness")
    return Dimension::length();
  if (p == "depth" || p == "barrier" || p == "tilt") return Dimension::energy();
  static const char* orders[] = {"cubic", "quartic", "quintic", "sextic", "septic", "octic"};
  for (int n = 3; n <= 8; ++n)
    if (p == orders[n - 3]) return Dimension::energy_per_length(n);
  if (p == "scale") return Dimension::none();
  throw ContractViolation("scenario reader: no dimension known for parameter '" + std::string(p) + "'");
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
  std::ostringstream os;
  if (const auto* f = n.as_floating_point())
    os << *f;
  else
    os << "a date or time";
  return os.str();
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

class Reader {
 public:
  Reader(std::string file, fs::path base) : file_(std::move(file)), base_(std::move(base)) {}
  Scenario read(const toml::table& root);

 private:
  std::string file_;
  fs::path base_;
  UnitSystem units_;
  double omega_ref_ = 0;

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

  // The quantity at a node: a string with a unit, or a plain number (internal units).
  Quantity quantity(const toml::node& n, const std::string& dotted, Dimension d) const {
    if (n.is_integer()) return {static_cast<double>(n.as_integer()->get()), {}, true};
    if (n.is_floating_point()) {
      const double v = n.as_floating_point()->get();
      if (!std::isfinite(v)) fail(n, dotted, "a finite number");
      return {v, {}, true};
    }
    if (!n.is_string())
      fail(n, dotted,
           expected_quantity(d) + " as a string with its unit, or a plain number in internal units");
    try {
      return parse_quantity(n.as_string()->get());
    } catch (const InputError& e) {
      fail(n, dotted, e.expected, e.suggestion);
    }
  }

  // An SI value that must carry a unit (mass, and what sets the unit system).
  std::optional<Read> si(const toml::table& t, std::string_view key, const std::string& dotted, Dimension d,
                         const std::string& why) const {
    const toml::node* n = t.get(key);
    if (!n) return std::nullopt;
    const Quantity q = quantity(*n, dotted, d);
    if (q.plain) fail(*n, dotted, expected_quantity(d) + " with its unit: " + why);
    if (!(q.dimension == d)) fail(*n, dotted, expected_quantity(d) + ", not " + with_article(q.dimension));
    return Read{q.si_value, n->as_string()->get(), n};
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

  void read_units(const toml::table& root, Scenario& s);
  void read_term(const toml::table& t, int index, Scenario& s);
  // Two columns of numbers (x and V, or t and value), the first strictly increasing, times the
  // given unit factors; one header line of names may come first; '#' starts a comment.
  PotentialTable read_table_file(const toml::node& file_node, const std::string& dotted, double x_per_unit,
                                 double v_per_unit,
                                 const std::array<std::string, 2>& names = {"x", "V"}) const;
  void read_box_and_grid(const toml::table& root, Scenario& s);
  void read_spectrum(const toml::table& root, Scenario& s);
};

void Reader::read_units(const toml::table& root, Scenario& s) {
  const toml::table* particle = table(root, "particle");
  if (!particle)
    throw InputError("particle.mass", "", "a [particle] table with the mass, e.g. mass = \"40 u\"", "",
                     file_);
  check_keys(*particle, "particle", {"mass"});
  const auto mass = si(*particle, "mass", "particle.mass", Dimension::mass(), "internal units have m = 1");
  if (!mass) fail(particle->source(), "particle.mass", "", "a mass, e.g. mass = \"40 u\"");
  require(mass->value > 0, *mass, "particle.mass", "a mass > 0");

  const toml::table* units = table(root, "units");
  static const toml::table empty;
  if (!units) units = &empty;
  check_keys(*units, "units", {"reference_frequency", "length", "energy"});
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
                                       const std::array<std::string, 2>& names) const {
  const fs::path path = (base_ / fs::path(file_node.as_string()->get())).lexically_normal();
  std::ifstream in(path);
  if (!in) fail(file_node, dotted, "a readable data file (looked for " + path.string() + ")");
  const std::string data_file = path.string();
  const std::string pair = names[0] + " and " + names[1];
  PotentialTable table;
  std::string line;
  bool header_allowed = true;
  for (int line_number = 1; std::getline(in, line); ++line_number) {
    const std::string text = line.substr(0, line.find('#'));
    if (text.find_first_not_of(" \t\r") == std::string::npos) continue;
    // Fields separated by commas, or else by whitespace; remember where each starts.
    std::vector<std::pair<std::string, int>> fields;
    const bool commas = text.find(',') != std::string::npos;
    std::size_t pos = 0;
    while (pos <= text.size()) {
      std::size_t end = commas ? text.find(',', pos) : text.find_first_of(" \t\r", pos);
      if (end == std::string::npos) end = text.size();
      std::string field = text.substr(pos, end - pos);
      const std::size_t b = field.find_first_not_of(" \t\r");
      const std::size_t e = field.find_last_not_of(" \t\r");
      if (b != std::string::npos)
        fields.emplace_back(field.substr(b, e - b + 1), int(pos + b + 1));
      else if (commas)
        fields.emplace_back("", int(pos + 1));
      pos = end + 1;
    }
    const std::string row = text.substr(0, text.find_last_not_of(" \t\r") + 1);
    auto bad = [&](int column, const std::string& expected) {
      throw InputError(dotted, row, expected, "", data_file, line_number, column);
    };
    double values[2];
    bool numeric = fields.size() == 2;
    for (std::size_t i = 0; numeric && i < 2; ++i) {
      char* end = nullptr;
      values[i] = std::strtod(fields[i].first.c_str(), &end);
      numeric = !fields[i].first.empty() && *end == '\0';
    }
    if (!numeric && header_allowed && fields.size() == 2) {
      header_allowed = false;  // one line of column names may come first
      continue;
    }
    header_allowed = false;
    if (fields.size() != 2)
      bad(1, "two numbers per row, " + pair + " (separated by a comma or spaces), not " +
                 std::to_string(fields.size()) + " fields");
    if (!numeric) bad(fields[0].second, "two numbers per row, " + pair);
    for (int i = 0; i < 2; ++i)
      if (!std::isfinite(values[i])) bad(fields[i].second, "finite numbers");
    if (!table.x.empty() && !(values[0] * x_per_unit > table.x.back()))
      bad(fields[0].second, names[0] + " larger than on the row before (" + names[0] + " must increase strictly)");
    table.x.push_back(values[0] * x_per_unit);
    table.v.push_back(values[1] * v_per_unit);
  }
  if (table.x.size() < 2)
    throw InputError(dotted, std::to_string(table.x.size()) + " rows", "at least 2 rows of " + pair, "",
                     data_file, 0, 0);
  return table;
}

void Reader::read_term(const toml::table& t, int index, Scenario& s) {
  const std::string prefix = "potential[" + std::to_string(index) + "]";
  TermRecord record;
  record.name = string(t, "name", prefix + ".name").value_or("term" + std::to_string(index));
  if (!is_identifier(record.name))
    fail(*t.get("name"), prefix + ".name",
         "a name of letters, digits and '_', starting with a letter (it is used as name.parameter)");
  const toml::node* shape_node = t.get("shape");
  if (!shape_node)
    fail(t.source(), prefix + ".shape", "",
         "a shape: harmonic, polynomial, gaussian, "
         "double_well, morse, poschl_teller, square_well, table or formula");
  std::vector<std::string> shape_names;
  for (Shape sh : {Shape::harmonic, Shape::polynomial, Shape::gaussian, Shape::double_well, Shape::morse,
                   Shape::poschl_teller, Shape::square_well, Shape::table, Shape::formula})
    shape_names.emplace_back(shape_name(sh));
  const std::string shape_text = string(t, "shape", prefix + ".shape").value();
  const auto shape = shape_from_name(shape_text);
  if (!shape) {
    std::string list;
    for (const auto& n : shape_names) list += (list.empty() ? "" : ", ") + n;
    fail(*shape_node, prefix + ".shape", "one of " + list, closest_name(shape_text, shape_names));
  }
  record.shape = shape_text;

  // Allowed keys: name, shape, the shape's parameters (formula: not the unit factors, which
  // follow from x_unit and time_unit), and the table/formula settings.
  std::vector<std::string> parameter_names;
  for (const auto& p : shape_parameters(*shape))
    if (p != "length_factor" && p != "time_factor") parameter_names.push_back(p);
  std::vector<std::string> allowed = {"name", "shape"};
  allowed.insert(allowed.end(), parameter_names.begin(), parameter_names.end());
  if (*shape == Shape::table) allowed.insert(allowed.end(), {"file", "x_unit", "energy_unit"});
  if (*shape == Shape::formula)
    allowed.insert(allowed.end(), {"expression", "x_unit", "energy_unit", "time_unit", "parameters"});
  check_keys(t, prefix, allowed);

  std::vector<std::pair<std::string, double>> parameters;
  for (const auto& p : parameter_names) {
    const std::string key = prefix + "." + p;
    const auto r = internal(t, p, key, parameter_dimension(p));
    if (!r) continue;
    if (p == "frequency")
      require(*shape == Shape::polynomial ? r->value >= 0 : r->value > 0, *r, key,
              *shape == Shape::polynomial ? "a frequency >= 0" : "a frequency > 0");
    if (parameter_must_be_positive(p)) require(r->value > 0, *r, key, "a length > 0");
    if (p == "softness") require(r->value >= 0, *r, key, "a length >= 0");
    parameters.emplace_back(p, r->value);
    record.parameters.push_back({p, r->given, r->value, parameter_dimension(p)});
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
      PotentialTable data = read_table_file(*file, prefix + ".file", x_per, v_per);
      record.settings.emplace_back("rows", std::to_string(data.x.size()));
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
          if (!v.is_number()) fail(v, key, "a plain number, in the units the expression is written in");
          const double value = v.value<double>().value();
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

void Reader::read_box_and_grid(const toml::table& root, Scenario& s) {
  if (const toml::table* box = table(root, "box")) {
    check_keys(*box, "box", {"left", "right"});
    const auto left = internal(*box, "left", "box.left", Dimension::length());
    const auto right = internal(*box, "right", "box.right", Dimension::length());
    if (!left || !right)
      fail(box->source(), left ? "box.right" : "box.left", "", "both walls: left and right");
    require(right->value > left->value, *right, "box.right",
            "a wall to the right of box.left = " + left->given);
    s.spectrum.box = std::make_pair(left->value, right->value);
  }
  // Open-grid searches start at the first term's centre.
  if (!s.potential.terms().empty())
    s.spectrum.search_centre = s.potential.terms().front().parameter("centre");
  const toml::table* grid = table(root, "grid");
  if (!grid) return;
  check_keys(*grid, "grid", {"points", "left", "right", "convergence_check", "search_half_width"});
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
  check_keys(*spectrum, "spectrum", {"levels", "method", "fd_order", "degeneracy"});
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

Scenario Reader::read(const toml::table& root) {
  Scenario s;
  s.file = file_;
  check_keys(root, "", top_level_keys);
  s.title = string(root, "title", "title").value_or("");
  s.description = string(root, "description", "description").value_or("");
  read_units(root, s);

  const toml::node* potential = root.get("potential");
  if (!potential)
    throw InputError("potential", "", "one or more [[potential]] tables (with a shape)", "", file_);
  if (!potential->is_array_of_tables() || potential->as_array()->empty())
    fail(*potential, "potential", "one or more [[potential]] tables (double brackets)");
  int index = 0;
  for (const auto& term : *potential->as_array()) read_term(*term.as_table(), ++index, s);

  read_box_and_grid(root, s);
  read_spectrum(root, s);

  s.output_folder = fs::path(file_).stem().string() + "-output";
  if (const toml::table* output = table(root, "output")) {
    check_keys(*output, "output", {"folder"});
    if (const auto folder = string(*output, "folder", "output.folder")) {
      if (folder->empty()) fail(*output->get("folder"), "output.folder", "a folder name");
      s.output_folder = *folder;
    }
  }
  return s;
}

}  // namespace

Scenario read_scenario_text(std::string_view toml_text, std::string file_name) {
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
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError("", "", "cannot open the scenario file", "", path);
  std::ostringstream text;
  text << in.rdbuf();
  return read_scenario_text(text.str(), path);
}

std::string_view default_scenario_text() {
  // Invented setting. The quartic k4 shifts the lowest spacing by 3 k4 L^4 to first order
  // (L = sqrt(hbar/(m omega)) = 15.9 nm for 40 u at 1 MHz): 3 * 2e-4 h*Hz/nm^4 * (15.9 nm)^4
  // = 38 h*Hz.
  return R"(title = "default: 40 u ion in a 1 MHz trap with a small quartic term"
description = "Built-in scenario (invented lab setting): the quartic term shifts the lowest spacing by about 38 Hz, growing with n."

[particle]
mass = "40 u"

[[potential]]
name = "trap"
shape = "polynomial"
frequency = "1 MHz"
quartic = "2e-4 h*Hz/nm^4"

[spectrum]
levels = 20
)";
}

}  // namespace trapwork
