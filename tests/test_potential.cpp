// Unit tests of potentials/potential: shapes, parameter addressing, tables, formulas.
#include <catch2/catch.hpp>

#include <cmath>
#include <vector>

#include "potentials/potential.hpp"
#include "solver/errors.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

TEST_CASE("shapes evaluate their defining formulas", "[potential]") {
  const Term poly("trap", Shape::polynomial, {{"frequency", 2.0}, {"centre", 0.5}, {"cubic", 0.1}, {"quartic", 0.01}, {"octic", 1e-4}});
  for (double x : {-1.3, 0.0, 0.5, 2.7}) {
    const double y = x - 0.5;
    CHECK(poly.value(x) == Approx(0.5 * 4 * y * y + 0.1 * y * y * y + 0.01 * std::pow(y, 4) + 1e-4 * std::pow(y, 8)).epsilon(1e-14));
  }
  const Term well("dw", Shape::double_well, {{"barrier", 3.0}, {"separation", 2.0}});
  CHECK(well.value(1.0) == Approx(0.0).margin(1e-15));   // minima at +-separation/2
  CHECK(well.value(-1.0) == Approx(0.0).margin(1e-15));
  CHECK(well.value(0.0) == Approx(3.0));                  // barrier height at the centre
  const Term tilted("dw", Shape::double_well, {{"barrier", 3.0}, {"separation", 2.0}, {"tilt", 0.2}});
  CHECK(tilted.value(1.0) - tilted.value(-1.0) == Approx(0.4));
  const Term tweezer("tw", Shape::gaussian, {{"depth", 5.0}, {"waist", 2.0}});
  CHECK(tweezer.value(0.0) == Approx(-5.0));
  CHECK(tweezer.value(2.0) == Approx(-5.0 * std::exp(-2.0)));  // 1/e^2 at the waist
  const Term morse("m", Shape::morse, {{"depth", 10.0}, {"range", 1.25}});
  CHECK(morse.value(0.0) == Approx(0.0).margin(1e-15));
  CHECK(morse.value(1e3) == Approx(10.0));
  const Term pt("p", Shape::poschl_teller, {{"depth", 4.0}, {"width", 1.5}});
  CHECK(pt.value(0.0) == Approx(-4.0));
  CHECK(pt.value(1.5) == Approx(-4.0 / std::pow(std::cosh(1.0), 2)));
}

TEST_CASE("sampling a potential on many points gives exactly its pointwise values", "[potential]") {
  // Potential::evaluate takes each term's shape once for all points (the hot path of every
  // substep and scan); the numbers must be the same as operator()'s, bit for bit.
  const Potential v({Term("trap", Shape::polynomial,
                          {{"frequency", 2.0}, {"centre", 0.5}, {"linear", -0.3}, {"cubic", 0.1}, {"quartic", 0.01},
                           {"quintic", -2e-3}, {"sextic", 3e-4}, {"septic", -1e-5}, {"octic", 1e-6}}),
                     Term("h", Shape::harmonic, {{"frequency", 0.7}, {"centre", -1.1}}),
                     Term("tw", Shape::gaussian, {{"depth", 5.0}, {"waist", 2.0}}),
                     Term("m", Shape::morse, {{"depth", 10.0}, {"range", 1.25}})});
  std::vector<double> x;
  for (int j = -700; j <= 700; ++j) x.push_back(0.0137 * j + 1e-3 * std::sin(j));
  const std::vector<double> sampled = v.evaluate(x, 0.25);
  REQUIRE(sampled.size() == x.size());
  int differing = 0;
  for (std::size_t j = 0; j < x.size(); ++j) differing += sampled[j] != v(x[j], 0.25);
  CHECK(differing == 0);
}

TEST_CASE("a soft square well tends to the sharp one", "[potential]") {
  const Term sharp("sq", Shape::square_well, {{"depth", 10.0}, {"half_width", 1.0}});
  CHECK(sharp.value(0.99) == -10.0);
  CHECK(sharp.value(1.01) == 0.0);
  const Term soft("sq", Shape::square_well, {{"depth", 10.0}, {"half_width", 1.0}, {"softness", 1e-3}});
  CHECK(soft.value(1.0) == Approx(-5.0).epsilon(1e-6));  // half depth at the edge
  CHECK(soft.value(0.95) == Approx(-10.0).epsilon(1e-12));
  CHECK(soft.value(1.05) == Approx(0.0).margin(1e-12));
}

TEST_CASE("parameters are addressed as term.parameter", "[potential]") {
  Potential v({Term("trap", Shape::harmonic, {{"frequency", 1.0}}), Term("bump", Shape::gaussian, {{"depth", -0.5}, {"waist", 0.3}})});
  CHECK(v.parameter("trap.frequency") == 1.0);
  v.set_parameter("trap.centre", 2.0);
  CHECK(v(2.0) == Approx(-0.5 * std::exp(-2 * 4.0 / 0.09)).margin(1e-15));
  const Potential moved = v.with("bump.centre", 2.0);
  CHECK(moved(2.0) == Approx(0.5));
  CHECK(v.parameter("bump.centre") == 0.0);  // `with` leaves the original alone
  CHECK_THROWS_WITH(v.parameter("trap.frequncy"), Contains("frequency") && Contains("centre"));
  CHECK_THROWS_WITH(v.parameter("trp.centre"), Contains("trap") && Contains("bump"));
  CHECK_THROWS_AS(v.add(Term("trap", Shape::harmonic, {{"frequency", 2.0}})), InputError);
  CHECK_THROWS_WITH(Term("t", Shape::gaussian, {{"depth", 1.0}, {"waist", -1.0}}), Contains("t.waist") && Contains("> 0"));
  CHECK_THROWS_AS(Term("t", Shape::harmonic, {{"frequency", 0.0}}), InputError);
  CHECK_THROWS_AS(Term("t", Shape::harmonic, {{"frequency", 1.0}, {"depth", 1.0}}), InputError);
  const auto h = v.harmonic_part();
  REQUIRE(h);
  CHECK(h->first == 1.0);
  CHECK(h->second == 2.0);
}

TEST_CASE("tabulated potentials interpolate monotonically", "[potential]") {
  // A step: a monotone interpolant never leaves [0, 1] (an unconstrained cubic spline would).
  PotentialTable step{{0, 1, 2, 3, 4, 5}, {0, 0, 0, 1, 1, 1}};
  const Term t = Term::tabulated("tab", step);
  for (double x = 0; x <= 5; x += 0.01) {
    CHECK(t.value(x) >= -1e-15);
    CHECK(t.value(x) <= 1 + 1e-15);
  }
  CHECK(t.value(2.0) == 0.0);
  CHECK(t.value(3.0) == 1.0);
  CHECK(t.value(-7.0) == 0.0);  // constant beyond the ends
  CHECK(t.value(9.0) == 1.0);
  // Linear data are reproduced exactly.
  const Term lin = Term::tabulated("lin", PotentialTable{{0, 0.5, 2, 3}, {1, 2, 5, 7}});
  CHECK(lin.value(1.25) == Approx(3.5).epsilon(1e-14));
  // Fritsch-Carlson slopes by hand (the weighted harmonic mean of the secants; the secant at the
  // ends): for V = x^2 at 0, 1, 2, 3 the slopes at 0 and 1 are 1 and 6 / (3/1 + 3/3) = 1.5, so
  // V(0.5) = h10 * 1 + h01 * 1 + h11 * 1.5 = 0.125 + 0.5 - 0.1875.
  const Term square = Term::tabulated("square", PotentialTable{{0, 1, 2, 3}, {0, 1, 4, 9}});
  CHECK(square.value(0.5) == Approx(0.4375).epsilon(1e-14));
  CHECK_THROWS_WITH(Term::tabulated("bad", PotentialTable{{0, 2, 1, 3}, {0, 1, 2, 3}}), Contains("increasing") && Contains("row 3"));
  CHECK_THROWS_WITH(Term::tabulated("bad", PotentialTable{{0, 1, 2, 3}, {0, NAN, 0, 0}}), Contains("finite"));
  // Boost.Math's pchip needs 4 points (issue 16: the library replaced the hand-written one)
  CHECK_THROWS_WITH(Term::tabulated("bad", PotentialTable{{0, 1, 2}, {0, 1, 2}}), Contains("at least 4 rows"));
  CHECK_THROWS_AS(Term::tabulated("bad", PotentialTable{{0}, {0}}), InputError);
}

TEST_CASE("formula terms evaluate muParser expressions with their own parameters", "[potential]") {
  Term f = Term::formula("user", "0.5*k*x^2 + b*sin(t)", {{"k", 4.0}, {"b", 0.25}});
  CHECK(f.value(1.5, 0.0) == Approx(4.5));
  CHECK(f.value(0.0, 1.0) == Approx(0.25 * std::sin(1.0)));
  Term copy = f;
  copy.set_parameter("k", 1.0);
  CHECK(copy.value(2.0) == Approx(2.0));
  CHECK(f.value(2.0) == Approx(8.0));  // the copy owns its own parser and variables
  // Unit factors: the expression in its own units, scaled to internal ones.
  Term scaled = Term::formula("s", "x^2", {{"length_factor", 2.0}, {"scale", 3.0}, {"centre", 1.0}});
  CHECK(scaled.value(2.0) == Approx(3.0 * 4.0));
  CHECK_THROWS_WITH(Term::formula("u", "0.5*kk*x^2", {{"k", 1.0}}), Contains("u.expression") && Contains("kk"));
  CHECK_THROWS_AS(Term::formula("u", "0.5*x^", {}), InputError);
  CHECK_THROWS_AS(Term::formula("u", "x", {{"x", 1.0}}), InputError);
}

TEST_CASE("power-law and error-function walls", "[potential]") {
  const Term walls("w", Shape::power_walls, {{"left", -1.0}, {"right", 2.0}, {"height", 50.0}, {"width", 0.5}});
  CHECK(walls.parameter("power") == 8);  // the default
  CHECK(walls.value(0.3) == 0);
  CHECK(walls.value(2.0) == 0);
  CHECK(walls.value(2.5) == Approx(50.0).epsilon(1e-14));        // one width beyond: the height
  CHECK(walls.value(3.0) == Approx(50.0 * 256).epsilon(1e-14));  // (2)^8
  CHECK(walls.value(-1.5) == Approx(50.0).epsilon(1e-14));       // mirrored at the left wall
  const Term quartic("w", Shape::power_walls,
                     {{"left", 0.0}, {"right", 1.0}, {"height", 2.0}, {"width", 0.1}, {"power", 4.0}});
  CHECK(quartic.value(1.2) == Approx(2.0 * 16).epsilon(1e-14));

  const Term erf("e", Shape::erf_walls, {{"left", 0.0}, {"right", 4.0}, {"height", 10.0}, {"width", 0.2}});
  CHECK(erf.value(4.0) == Approx(5.0 + 5.0 * std::erfc(4.0 / 0.2)).epsilon(1e-14));  // half height at the wall
  CHECK(erf.value(0.0) == Approx(5.0).epsilon(1e-12));
  CHECK(erf.value(2.0) == Approx(0.0).margin(1e-12));
  CHECK(erf.value(6.0) == Approx(10.0).epsilon(1e-12));

  CHECK_THROWS_WITH(Term("w", Shape::power_walls, {{"left", 1.0}, {"right", 0.5}, {"height", 1.0}, {"width", 0.1}}),
                    Contains("w.right") && Contains("beyond the left"));
  CHECK_THROWS_WITH(Term("w", Shape::erf_walls, {{"left", 0.0}, {"right", 1.0}, {"width", 0.1}}), Contains("w.height"));
  CHECK_THROWS_WITH(Term("w", Shape::power_walls, {{"left", 0.0}, {"right", 1.0}, {"height", 1.0}, {"width", 0.1},
                                                   {"power", -2.0}}),
                    Contains("w.power"));
}
