#include "potentials/potential.hpp"

#include <muParser.h>

#include <math.h>  // before pchip.hpp: Boost 1.74's pchip calls isnan unqualified, ::isnan

#include <algorithm>
#include <boost/math/interpolators/pchip.hpp>
#include <cmath>
#include <limits>

#include "solver/errors.hpp"

namespace trapwork {

namespace {

struct ShapeInfo {
  Shape shape;
  std::string_view name;
  std::vector<std::string> parameters;
};

const std::vector<ShapeInfo>& shape_table() {
  static const std::vector<ShapeInfo> table = {
      {Shape::harmonic, "harmonic", {"frequency", "centre"}},
      {Shape::polynomial, "polynomial",
       {"frequency", "centre", "linear", "cubic", "quartic", "quintic", "sextic", "septic", "octic"}},
      {Shape::gaussian, "gaussian", {"depth", "waist", "centre"}},
      {Shape::double_well, "double_well", {"barrier", "separation", "tilt", "centre"}},
      {Shape::morse, "morse", {"depth", "range", "centre"}},
      {Shape::poschl_teller, "poschl_teller", {"depth", "width", "centre"}},
      {Shape::square_well, "square_well", {"depth", "half_width", "softness", "centre"}},
      {Shape::power_walls, "power_walls", {"left", "right", "height", "width", "power"}},
      {Shape::erf_walls, "erf_walls", {"left", "right", "height", "width"}},
      {Shape::table, "table", {"centre", "scale"}},
      {Shape::formula, "formula", {"centre", "scale", "length_factor", "time_factor"}},
  };
  return table;
}

double default_value(std::string_view p) {
  if (p == "power") return 8.0;
  return (p == "scale" || p == "length_factor" || p == "time_factor") ? 1.0 : 0.0;
}

// Parameters that must be strictly positive for the shape to make sense.
bool must_be_positive(Shape s, std::string_view p) {
  if (p == "waist" || p == "separation" || p == "range" || p == "width" || p == "half_width") return true;
  if (p == "frequency") return s == Shape::harmonic;
  if (p == "length_factor" || p == "time_factor") return true;
  return p == "power" || p == "height";
}

}  // namespace

// Monotone cubic Hermite interpolation (Fritsch & Carlson, SIAM J. Numer. Anal. 17, 238
// (1980), from memory) by Boost.Math's pchip: slopes by the weighted harmonic mean of
// neighbouring secants, zero at local extrema, the secant at each end, so the interpolant never
// overshoots the data; constant beyond the ends (pchip itself refuses points outside).
struct Term::TableInterpolant {
  double x_first, x_last, v_first, v_last;
  boost::math::interpolators::pchip<std::vector<double>> pchip;  // at least 4 points
  explicit TableInterpolant(PotentialTable t)
      : x_first(t.x.front()), x_last(t.x.back()), v_first(t.v.front()), v_last(t.v.back()),
        pchip(std::move(t.x), std::move(t.v)) {}
  double operator()(double x) const {
    if (x <= x_first) return v_first;
    if (x >= x_last) return v_last;
    return pchip(x);
  }
};

namespace {

std::string number_text(double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.9g", v);
  return buf;
}

}  // namespace

std::string_view shape_name(Shape s) {
  for (const auto& i : shape_table())
    if (i.shape == s) return i.name;
  return "?";
}

std::optional<Shape> shape_from_name(std::string_view name) {
  for (const auto& i : shape_table())
    if (i.name == name) return i.shape;
  return std::nullopt;
}

const std::vector<std::string>& shape_parameters(Shape s) {
  for (const auto& i : shape_table())
    if (i.shape == s) return i.parameters;
  throw ContractViolation("unknown shape");
}

// The muParser expression of a formula term, with storage for its variables. muParser binds
// variables by address, so a copy re-creates the parser around its own storage.
struct Term::Formula {
  std::string expression;
  std::vector<std::string> user_names;
  mutable double x = 0, t = 0;
  mutable std::vector<double> user_values;
  mu::Parser parser;
  bool uses_t = false;  // the expression reads t (set when compiled)

  Formula(std::string expr, std::vector<std::string> names, std::vector<double> values)
      : expression(std::move(expr)), user_names(std::move(names)), user_values(std::move(values)) {
    parser.DefineVar("x", &x);
    parser.DefineVar("t", &t);
    for (std::size_t i = 0; i < user_names.size(); ++i) parser.DefineVar(user_names[i], &user_values[i]);
    parser.SetExpr(expression);
  }
  double operator()(double xv, double tv) const {
    x = xv;
    t = tv;
    return parser.Eval();
  }
};

Term::Term(std::string name, Shape shape, const std::vector<std::pair<std::string, double>>& parameters)
    : name_(std::move(name)), shape_(shape) {
  for (const auto& p : shape_parameters(shape)) parameters_.emplace_back(p, default_value(p));
  for (const auto& [key, value] : parameters) set_parameter(key, value);
  if (shape == Shape::harmonic && parameter("frequency") <= 0)
    throw InputError(name_ + ".frequency", number_text(parameter("frequency")), "a harmonic term needs frequency > 0");
  if (shape == Shape::power_walls || shape == Shape::erf_walls) {
    if (!(parameter("width") > 0)) throw InputError(name_ + ".width", number_text(parameter("width")), "a wall width > 0");
    if (!(parameter("height") > 0))
      throw InputError(name_ + ".height", number_text(parameter("height")), "a wall height > 0 (height has no default)");
    if (!(parameter("right") > parameter("left")))
      throw InputError(name_ + ".right", number_text(parameter("right")),
                       "a right wall beyond the left one (left = " + number_text(parameter("left")) + ")");
  }
}

Term Term::tabulated(std::string name, PotentialTable table,
                     const std::vector<std::pair<std::string, double>>& parameters) {
  if (table.x.size() < 4 || table.x.size() != table.v.size())
    throw InputError(name + ".file", std::to_string(table.x.size()) + " rows",
                     "at least 4 rows of (x, V) (monotone cubic interpolation)");
  for (std::size_t i = 0; i < table.x.size(); ++i) {
    if (!std::isfinite(table.x[i]) || !std::isfinite(table.v[i]))
      throw InputError(name + ".file", "row " + std::to_string(i + 1) + " not finite", "finite x and V");
    if (i > 0 && !(table.x[i] > table.x[i - 1]))
      throw InputError(name + ".file", "row " + std::to_string(i + 1) + ": x = " + number_text(table.x[i]),
                       "x strictly increasing");
  }
  Term term(std::move(name), Shape::table, parameters);
  term.table_ = std::make_shared<const TableInterpolant>(std::move(table));
  return term;
}

Term Term::formula(std::string name, std::string expression,
                   const std::vector<std::pair<std::string, double>>& parameters) {
  std::vector<std::pair<std::string, double>> fixed;
  std::vector<std::string> user_names;
  std::vector<double> user_values;
  const auto& fixed_names = shape_parameters(Shape::formula);
  for (const auto& [k, v] : parameters) {
    if (std::find(fixed_names.begin(), fixed_names.end(), k) != fixed_names.end()) {
      fixed.emplace_back(k, v);
    } else {
      if (k == "x" || k == "t") throw InputError(name + "." + k, k, "a parameter name other than x and t");
      user_names.push_back(k);
      user_values.push_back(v);
    }
  }
  Term term(name, Shape::formula, fixed);
  for (std::size_t i = 0; i < user_names.size(); ++i) term.parameters_.emplace_back(user_names[i], user_values[i]);
  double value = 0;
  try {
    term.formula_ = std::make_unique<Formula>(expression, user_names, user_values);
    value = (*term.formula_)(0.0, 0.0);  // compiles the expression: unknown names and syntax errors show here
    term.formula_->uses_t = term.formula_->parser.GetUsedVar().count("t") > 0;
  } catch (const mu::Parser::exception_type& e) {
    throw InputError(name + ".expression", expression, "a formula of x, t and the named parameters: " + e.GetMsg());
  }
  // muParser returns inf or nan for a division by zero; the term's centre is where the grid
  // and the spectrum look first, so a formula undefined there is refused at once.
  if (!std::isfinite(value))
    throw InputError(name + ".expression", expression,
                     "a formula finite at the term's centre: not finite (" + number_text(value) +
                         ") at x = 0, t = 0, a division by zero or a function outside its domain");
  return term;
}

Term::Term(const Term& o)
    : name_(o.name_), shape_(o.shape_), parameters_(o.parameters_), table_(o.table_) {
  if (o.formula_) {
    formula_ = std::make_unique<Formula>(o.formula_->expression, o.formula_->user_names, o.formula_->user_values);
    formula_->uses_t = o.formula_->uses_t;
  }
}
Term& Term::operator=(const Term& o) {
  if (this != &o) *this = Term(o);
  return *this;
}
Term::Term(Term&&) noexcept = default;
Term& Term::operator=(Term&&) noexcept = default;
Term::~Term() = default;

bool Term::has_parameter(std::string_view p) const {
  return std::any_of(parameters_.begin(), parameters_.end(), [&](const auto& kv) { return kv.first == p; });
}

double Term::parameter(std::string_view p) const {
  for (const auto& [k, v] : parameters_)
    if (k == p) return v;
  std::string known;
  for (const auto& [k, v] : parameters_) known += (known.empty() ? "" : ", ") + k;
  throw InputError(name_ + "." + std::string(p), std::string(p),
                   "a parameter of the " + std::string(shape_name(shape_)) + " shape: " + known);
}

void Term::set_parameter(std::string_view p, double value) {
  const std::string key = name_ + "." + std::string(p);
  if (!std::isfinite(value)) throw InputError(key, number_text(value), "a finite number");
  if (must_be_positive(shape_, p) && !(value > 0)) throw InputError(key, number_text(value), "a value > 0");
  for (std::size_t i = 0; i < parameters_.size(); ++i) {
    if (parameters_[i].first != p) continue;
    parameters_[i].second = value;
    if (formula_) {
      const auto& names = formula_->user_names;
      const auto it = std::find(names.begin(), names.end(), p);
      if (it != names.end()) formula_->user_values[it - names.begin()] = value;
    }
    return;
  }
  (void)parameter(p);  // throws the "unknown parameter" error with the list of known ones
}

double Term::value(double x, double t) const {
  const auto& p = parameters_;  // fixed order: see shape_table()
  switch (shape_) {
    case Shape::harmonic: {
      const double y = x - p[1].second, w = p[0].second;
      return 0.5 * w * w * y * y;
    }
    case Shape::polynomial: {
      const double y = x - p[1].second, w = p[0].second;
      double sum = 0;  // Horner from the octic down to the cubic term
      for (int k = 8; k >= 3; --k) sum = (sum + p[k].second) * y;
      return 0.5 * w * w * y * y + p[2].second * y + sum * y * y;
    }
    case Shape::gaussian: {
      const double y = x - p[2].second, w = p[1].second;
      return -p[0].second * std::exp(-2 * y * y / (w * w));
    }
    case Shape::double_well: {
      const double a = 0.5 * p[1].second, y = (x - p[3].second) / a;
      const double q = y * y - 1;
      return p[0].second * q * q + p[2].second * y;
    }
    case Shape::morse: {
      const double e = 1 - std::exp(-(x - p[2].second) / p[1].second);
      return p[0].second * e * e;
    }
    case Shape::poschl_teller: {
      const double c = std::cosh((x - p[2].second) / p[1].second);
      return -p[0].second / (c * c);
    }
    case Shape::square_well: {
      const double y = x - p[3].second, a = p[1].second, s = p[2].second;
      if (s <= 0) return std::abs(y) < a ? -p[0].second : (std::abs(y) == a ? -0.5 * p[0].second : 0.0);
      return -0.5 * p[0].second * (std::tanh((y + a) / s) - std::tanh((y - a) / s));
    }
    case Shape::power_walls: {
      const double d = x > p[1].second ? x - p[1].second : (x < p[0].second ? p[0].second - x : 0.0);
      return d > 0 ? p[2].second * std::pow(d / p[3].second, p[4].second) : 0.0;
    }
    case Shape::erf_walls:
      return 0.5 * p[2].second *
             (std::erfc((p[1].second - x) / p[3].second) + std::erfc((x - p[0].second) / p[3].second));
    case Shape::table:
      return p[1].second * (*table_)(x - p[0].second);
    case Shape::formula:
      return p[1].second * (*formula_)((x - p[0].second) * p[2].second, t * p[3].second);
  }
  return 0;
}

void Term::add_values(const double* x, double* v, std::size_t n, double t) const {
  const auto& p = parameters_;
  switch (shape_) {  // the common trap shapes in loops the compiler vectorises; value()'s arithmetic
    case Shape::harmonic: {
      const double c = p[1].second, w = p[0].second;
      for (std::size_t j = 0; j < n; ++j) {
        const double y = x[j] - c;
        v[j] += 0.5 * w * w * y * y;
      }
      return;
    }
    case Shape::polynomial: {
      const double c = p[1].second, w = p[0].second, linear = p[2].second;
      const double c3 = p[3].second, c4 = p[4].second, c5 = p[5].second, c6 = p[6].second, c7 = p[7].second,
                   c8 = p[8].second;
      for (std::size_t j = 0; j < n; ++j) {
        const double y = x[j] - c;
        double sum = 0;
        sum = (sum + c8) * y;
        sum = (sum + c7) * y;
        sum = (sum + c6) * y;
        sum = (sum + c5) * y;
        sum = (sum + c4) * y;
        sum = (sum + c3) * y;
        v[j] += 0.5 * w * w * y * y + linear * y + sum * y * y;
      }
      return;
    }
    default:
      for (std::size_t j = 0; j < n; ++j) v[j] += value(x[j], t);
  }
}

bool Term::depends_on_time() const { return formula_ && formula_->uses_t; }

std::optional<std::pair<double, double>> Term::harmonic_part() const {
  if (shape_ != Shape::harmonic && shape_ != Shape::polynomial) return std::nullopt;
  const double w = parameter("frequency");
  if (w == 0) return std::nullopt;
  // A linear term c1 y moves the minimum of (1/2) w^2 y^2 + c1 y to y = -c1/w^2 (completing
  // the square; the constant -c1^2/(2 w^2) does not change the shape).
  const double c1 = shape_ == Shape::polynomial ? parameter("linear") : 0.0;
  return std::make_pair(w, parameter("centre") - c1 / (w * w));
}

Potential::Potential(std::vector<Term> terms) {
  for (auto& t : terms) add(std::move(t));
}

void Potential::add(Term t) {
  for (const auto& existing : terms_)
    if (existing.name() == t.name())
      throw InputError(t.name() + ".name", t.name(), "a term name not used before");
  terms_.push_back(std::move(t));
}

double Potential::operator()(double x, double t) const {
  double v = 0;
  for (const auto& term : terms_) v += term.value(x, t);
  return v;
}

void Potential::evaluate(const double* x, double* v, std::size_t n, double t) const {
  std::fill(v, v + n, 0.0);  // summed term by term in operator()'s order: the same numbers
  for (const auto& term : terms_) term.add_values(x, v, n, t);
}

std::vector<double> Potential::evaluate(const std::vector<double>& x, double t) const {
  std::vector<double> v(x.size());
  evaluate(x.data(), v.data(), x.size(), t);
  return v;
}

bool Potential::depends_on_time() const {
  return std::any_of(terms_.begin(), terms_.end(), [](const Term& t) { return t.depends_on_time(); });
}

std::pair<std::size_t, std::string_view> Potential::locate(std::string_view address) const {
  const auto dot = address.find('.');
  std::string known;
  for (std::size_t i = 0; i < terms_.size(); ++i) {
    if (dot != std::string_view::npos && terms_[i].name() == address.substr(0, dot))
      return {i, address.substr(dot + 1)};
    known += (known.empty() ? "" : ", ") + terms_[i].name();
  }
  throw InputError(std::string(address), std::string(address), "term.parameter with a term among: " + known);
}

double Potential::parameter(std::string_view address) const {
  const auto [i, p] = locate(address);
  return terms_[i].parameter(p);
}

void Potential::set_parameter(std::string_view address, double value) {
  const auto [i, p] = locate(address);
  terms_[i].set_parameter(p, value);
}

Potential Potential::with(std::string_view address, double value) const {
  Potential copy = *this;
  copy.set_parameter(address, value);
  return copy;
}

std::vector<std::string> Potential::parameter_addresses() const {
  std::vector<std::string> out;
  for (const auto& t : terms_)
    for (const auto& [k, v] : t.parameters()) out.push_back(t.name() + "." + k);
  return out;
}

std::optional<std::pair<double, double>> Potential::harmonic_part() const {
  double w2 = 0, centre = 0;
  bool any = false;
  for (const auto& t : terms_) {
    const auto h = t.harmonic_part();
    if (!h) continue;
    if (any && h->second != centre) return std::nullopt;
    w2 += h->first * h->first;
    centre = h->second;
    any = true;
  }
  if (!any) return std::nullopt;
  return std::make_pair(std::sqrt(w2), centre);
}

}  // namespace trapwork
