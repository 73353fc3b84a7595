// Parameter schedules and protocols.
#include <catch2/catch.hpp>

#include <cmath>

#include "potentials/protocol.hpp"
#include "solver/errors.hpp"

using namespace trapwork;

namespace {
Potential harmonic_trap(double omega = 1, double centre = 0) {
  return Potential({Term("trap", Shape::harmonic, {{"frequency", omega}, {"centre", centre}})});
}
// 4th-order central difference of a schedule's value (error ~ h^4 f^(5), h = 1e-3)
double numeric_rate(const Schedule& s, double t, double tau) {
  const double h = 1e-3;
  auto f = [&](double x) { return s.evaluate(x, tau).value; };
  return (f(t - 2 * h) - 8 * f(t - h) + 8 * f(t + h) - f(t + 2 * h)) / (12 * h);
}
}  // namespace

TEST_CASE("ramp schedules: values, analytic derivatives, end conditions", "[protocol]") {
  const double tau = 2;
  for (auto s : {Schedule::linear("trap.centre", 1, 3), Schedule::smooth_step("trap.centre", 1, 3),
                 Schedule::smoother_step("trap.centre", 1, 3)}) {
    CHECK(s.evaluate(0, tau).value == 1);
    CHECK(s.evaluate(tau, tau).value == 3);
    CHECK(s.evaluate(tau / 2, tau).value == Approx(2).epsilon(1e-15));
    CHECK(s.initial_value(tau) == 1);
    CHECK(s.final_value(tau) == 3);
    for (double t : {0.3, 0.9, 1.7}) {
      // finite-difference error ~ h^4 |f^(5)| ~ 1e-12 for these polynomials
      CHECK(s.evaluate(t, tau).rate == Approx(numeric_rate(s, t, tau)).margin(1e-9));
      const double h = 1e-4;  // second difference: error h^2 f''''/12 + rounding 1e-16/h^2
      const double second = (s.evaluate(t + h, tau).value - 2 * s.evaluate(t, tau).value + s.evaluate(t - h, tau).value) / (h * h);
      CHECK(s.evaluate(t, tau).acceleration == Approx(second).margin(1e-6));
    }
  }
  const auto smooth = Schedule::smooth_step("x.centre", 0, 1);
  CHECK(smooth.evaluate(0, tau).rate == 0);
  CHECK(smooth.evaluate(tau, tau).rate == 0);
  CHECK(smooth.evaluate(0, tau).acceleration != 0);
  const auto smoother = Schedule::smoother_step("x.centre", 0, 1);
  CHECK(smoother.evaluate(0, tau).acceleration == 0);
  CHECK(smoother.evaluate(tau, tau).acceleration == 0);
  CHECK(Schedule::linear("x.centre", 0, 1).evaluate(1, tau).rate == 0.5);
}

TEST_CASE("table schedules interpolate linearly and reject bad rows", "[protocol]") {
  const auto s = Schedule::table("trap.frequency", {0, 1, 3}, {1, 2, 0});
  CHECK(s.evaluate(0.5, 3).value == 1.5);
  CHECK(s.evaluate(0.5, 3).rate == 1);
  CHECK(s.evaluate(2, 3).value == 1);
  CHECK(s.evaluate(2, 3).rate == -1);
  CHECK(s.final_value(3) == 0);
  CHECK_THROWS_AS(Schedule::table("trap.frequency", {0, 1, 1}, {1, 2, 3}), InputError);
  CHECK_THROWS_AS(Schedule::table("trap.frequency", {0}, {1}), InputError);
  try {
    Schedule::table("trap.frequency", {0, 2, 1}, {1, 2, 3});
    FAIL("expected InputError");
  } catch (const InputError& e) {
    CHECK(e.key == "trap.frequency");
    CHECK(e.expected.find("increasing") != std::string::npos);
  }
  // a table not covering [0, tau] is refused when the protocol is built
  CHECK_THROWS_AS(Protocol(4, {s}), InputError);
}

TEST_CASE("formula schedules: value and numerical derivatives", "[protocol]") {
  const auto s = Schedule::formula("trap.centre", "0.5*t^3 + sin(t) + tau");
  const double tau = 2, t = 0.7;
  const auto v = s.evaluate(t, tau);
  CHECK(v.value == Approx(0.5 * t * t * t + std::sin(t) + tau).epsilon(1e-15));
  // 5-point differences with h = 2e-3: error ~ h^4 ~ 1e-11 plus rounding 1e-16/h^2 ~ 1e-10
  CHECK(v.rate == Approx(1.5 * t * t + std::cos(t)).margin(1e-9));
  CHECK(v.acceleration == Approx(3 * t - std::sin(t)).margin(1e-8));
  // copies own their parser
  Schedule copy = s;
  CHECK(copy.evaluate(0.3, tau).value == s.evaluate(0.3, tau).value);
  try {
    Schedule::formula("trap.centre", "2*t + speed");
    FAIL("expected InputError");
  } catch (const InputError& e) {
    CHECK(e.key == "trap.centre");
    CHECK(e.found == "2*t + speed");
  }
  CHECK_THROWS_AS(Schedule::formula("trap.centre", "2*(t"), InputError);
}

TEST_CASE("reversed schedules and protocols", "[protocol]") {
  const double tau = 3;
  for (auto s : {Schedule::linear("a.b", 0, 2), Schedule::smooth_step("a.b", 1, -1), Schedule::table("a.b", {0, 1, 3}, {0, 2, 1}),
                 Schedule::formula("a.b", "t^2")}) {
    const auto r = s.reversed();
    CHECK(r.initial_value(tau) == s.final_value(tau));
    CHECK(r.final_value(tau) == s.initial_value(tau));
    for (double t : {0.2, 1.4, 2.5}) {
      CHECK(r.evaluate(t, tau).value == s.evaluate(tau - t, tau).value);
      CHECK(r.evaluate(t, tau).rate == -s.evaluate(tau - t, tau).rate);
      CHECK(r.evaluate(t, tau).acceleration == s.evaluate(tau - t, tau).acceleration);
      CHECK(r.reversed().evaluate(t, tau).value == s.evaluate(t, tau).value);
    }
  }
  const Protocol p(tau, {Schedule::linear("trap.centre", 0, 1), Schedule::linear("trap.frequency", 1, 2)});
  const auto base = harmonic_trap();
  const Protocol r = p.reversed();
  CHECK(r.initial(base).parameter("trap.frequency") == 2);
  CHECK(r.final(base).parameter("trap.centre") == 0);
  CHECK(r.at(base, 1).parameter("trap.centre") == Approx(2.0 / 3).epsilon(1e-15));
}

TEST_CASE("protocol applies schedules to the potential; sudden switch has distinct ends", "[protocol]") {
  const auto base = harmonic_trap();
  const Protocol p(2, {Schedule::linear("trap.frequency", 1, 3)});
  CHECK(p.at(base, 1).parameter("trap.frequency") == 2);
  CHECK(p.at(base, 1)(1.0) == Approx(0.5 * 4).epsilon(1e-15));
  const Protocol sudden(0, {Schedule::linear("trap.frequency", 1, 2)});
  CHECK(sudden.initial(base).parameter("trap.frequency") == 1);
  CHECK(sudden.final(base).parameter("trap.frequency") == 2);
  CHECK(sudden.duration() == 0);
}

TEST_CASE("protocol input errors name the key", "[protocol]") {
  const auto base = harmonic_trap();
  const Protocol p(1, {Schedule::linear("trap.width", 1, 2)});
  CHECK_THROWS_AS(p.check(base), InputError);
  CHECK_THROWS_AS(Protocol(-1, {}), InputError);
  try {
    Protocol(1, {Schedule::linear("trap.centre", 0, 1), Schedule::constant("trap.centre", 2)});
    FAIL("expected InputError");
  } catch (const InputError& e) {
    CHECK(e.key == "trap.centre");
  }
}

TEST_CASE("rigid translations are recognised, other protocols are not", "[protocol]") {
  const auto base = harmonic_trap();
  const Protocol move(2, {Schedule::smooth_step("trap.centre", 0, 1.5)});
  const auto tr = move.translation(base);
  REQUIRE(tr);
  const auto d = move.displacement(*tr, 1);
  CHECK(d.value == Approx(0.75).epsilon(1e-15));
  CHECK(d.rate == Approx(1.5 * 6 * 0.5 * 0.5 / 2).epsilon(1e-15));
  CHECK_FALSE(Protocol(2, {Schedule::linear("trap.frequency", 1, 2)}).translation(base));
  // two terms moving together (different start positions) are one translation
  Potential two({Term("trap", Shape::harmonic, {{"frequency", 1.0}}),
                 Term("bump", Shape::gaussian, {{"depth", 0.1}, {"waist", 1.0}, {"centre", 0.5}})});
  CHECK(Protocol(1, {Schedule::linear("trap.centre", 0, 1), Schedule::linear("bump.centre", 0.5, 1.5)}).translation(two));
  CHECK_FALSE(Protocol(1, {Schedule::linear("trap.centre", 0, 1), Schedule::linear("bump.centre", 0.5, 1.0)}).translation(two));
  CHECK_FALSE(Protocol(1, {Schedule::linear("trap.centre", 0, 1)}).translation(two));  // bump stays
}
