#pragma once
// Potentials V(x; parameters) as sums of named shapes with named parameters.
//
// Every value is in internal units (hbar = m = 1, scenario length unit; see solver/units.hpp).
// Each term has a name chosen by the user ("trap", "tweezer", "bump") and each shape a fixed
// set of parameter names, so that a protocol can schedule "trap.centre" or "tweezer.depth".
//
// Shapes (c = centre, all shapes shift with it):
//   harmonic       (1/2) omega^2 (x-c)^2                          frequency (angular), centre
//   polynomial     (1/2) omega^2 (x-c)^2 + linear (x-c) + sum_{n=3..8} k_n (x-c)^n
//                  frequency, centre, linear (a static force -linear), cubic, quartic, quintic,
//                  sextic, septic, octic
//   gaussian       -depth exp(-2 (x-c)^2 / waist^2)   (1/e^2 intensity radius: optical tweezer)
//   double_well    barrier ((x-c)^2/a^2 - 1)^2 + tilt (x-c)/a,  a = separation/2
//                  barrier, separation (distance between the minima), tilt, centre
//   morse          depth (1 - exp(-(x-c)/range))^2                 depth, range, centre
//   poschl_teller  -depth / cosh^2((x-c)/width)                    depth, width, centre
//   square_well    -depth inside |x-c| < half_width, 0 outside; with softness s > 0
//                  -depth (tanh((x-c+a)/s) - tanh((x-c-a)/s)) / 2   depth, half_width, softness, centre
//   power_walls    height ((x - right)/width)^power for x > right, height ((left - x)/width)^power
//                  for x < left, 0 between: steep soft walls (power > 0, default 8)
//                                                   left, right, height, width, power
//   erf_walls      (height/2) [erfc((right - x)/width) + erfc((x - left)/width)]: walls of finite
//                  height, half of it at left and right, rising over ~width
//                                                   left, right, height, width
//   table          monotone cubic (Fritsch-Carlson) interpolation of (x, V) samples (Boost.Math
//                  pchip, at least 4 rows); constant beyond the ends  centre, scale (multiplies V)
//   formula        scale * f((x-c) * length_factor, t * time_factor), f a muParser expression
//                  of x, t and the user's named parameters (the factors convert internal units
//                  to the units the formula is written in). t is the protocol time: a
//                  Potential carries the time its formulas are read at (time(); 0 unless
//                  set, Protocol::at/initial/final set it), so H_B of a formula using t is
//                  V(x, tau).
//                                      centre, scale, length_factor, time_factor, + user names
// A hard-walled box is not a term: it is a boundary condition of the grid (solver/grid.hpp).
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

namespace trapwork {

enum class Shape { harmonic, polynomial, gaussian, double_well, morse, poschl_teller, square_well,
                   power_walls, erf_walls, table, formula };

std::string_view shape_name(Shape s);
std::optional<Shape> shape_from_name(std::string_view name);
// The parameter names of a shape, in a fixed order (formula: the fixed ones only).
const std::vector<std::string>& shape_parameters(Shape s);

// Samples of a tabulated potential, x strictly increasing, all finite, at least 4 rows.
struct PotentialTable {
  std::vector<double> x, v;
};

class Term {
 public:
  // Parameters not given take their defaults (centre 0, coefficients 0, softness 0, scale 1).
  // Throws InputError (key = "<name>.<parameter>") for unknown parameters or invalid values.
  Term(std::string name, Shape shape, const std::vector<std::pair<std::string, double>>& parameters);
  static Term tabulated(std::string name, PotentialTable table,
                        const std::vector<std::pair<std::string, double>>& parameters = {});
  // `expression` in x (length, internal units unless the expression scales it), t (time) and
  // the names in `parameters`. Throws InputError naming the unknown variable or syntax error.
  static Term formula(std::string name, std::string expression,
                      const std::vector<std::pair<std::string, double>>& parameters = {});

  Term(const Term&);
  Term& operator=(const Term&);
  Term(Term&&) noexcept;
  Term& operator=(Term&&) noexcept;
  ~Term();

  const std::string& name() const { return name_; }
  Shape shape() const { return shape_; }
  const std::vector<std::pair<std::string, double>>& parameters() const { return parameters_; }
  bool has_parameter(std::string_view p) const;
  double parameter(std::string_view p) const;    // throws InputError if unknown
  void set_parameter(std::string_view p, double value);  // throws InputError if unknown/invalid

  double value(double x, double t = 0) const;
  // v[j] += value(x[j], t) for j < n (the same numbers; the shape is chosen once, not per point).
  void add_values(const double* x, double* v, std::size_t n, double t) const;
  // True for a formula whose expression uses t (explicitly time-dependent).
  bool depends_on_time() const;
  // Harmonic part (1/2) omega^2 (x - c)^2 of harmonic and polynomial terms, if any; c is the
  // minimum of the quadratic and linear parts (centre - linear/omega^2).
  std::optional<std::pair<double, double>> harmonic_part() const;  // (omega, centre)

 private:
  struct Formula;
  struct TableInterpolant;  // Boost.Math's pchip of the table (potential.cpp)
  void validate() const;
  std::string name_;
  Shape shape_;
  std::vector<std::pair<std::string, double>> parameters_;
  std::shared_ptr<const TableInterpolant> table_;
  std::unique_ptr<Formula> formula_;  // owns a muParser parser; cloned on copy
};

// A sum of terms. Parameters are addressed as "term.parameter".
class Potential {
 public:
  Potential() = default;
  explicit Potential(std::vector<Term> terms);
  const std::vector<Term>& terms() const { return terms_; }
  void add(Term t);  // throws InputError if the name is taken

  // V(x) at the potential's own time(); the overloads with t read formulas at t instead.
  double operator()(double x) const { return (*this)(x, time_); }
  double operator()(double x, double t) const;
  // V at each x (the hot path for grids and time steps).
  void evaluate(const double* x, double* v, std::size_t n) const { evaluate(x, v, n, time_); }
  void evaluate(const double* x, double* v, std::size_t n, double t) const;
  std::vector<double> evaluate(const std::vector<double>& x) const { return evaluate(x, time_); }
  std::vector<double> evaluate(const std::vector<double>& x, double t) const;

  // The time (internal units) at which formula terms using t are read by the overloads
  // without t: the instant of the protocol this potential is a snapshot of.
  double time() const { return time_; }
  void set_time(double t) { time_ = t; }
  // True when a formula term uses t (V depends on time beyond its scheduled parameters).
  bool depends_on_time() const;

  double parameter(std::string_view address) const;  // "trap.centre"
  void set_parameter(std::string_view address, double value);
  Potential with(std::string_view address, double value) const;
  std::vector<std::string> parameter_addresses() const;

  // Sum of the harmonic parts, when every term with a harmonic part shares one centre:
  // (omega_total, centre). Used for harmonic reference predictions.
  std::optional<std::pair<double, double>> harmonic_part() const;

 private:
  std::pair<std::size_t, std::string_view> locate(std::string_view address) const;
  std::vector<Term> terms_;
  double time_ = 0;
};

}  // namespace trapwork
