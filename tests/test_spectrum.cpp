// Unit tests of solver/spectrum: eigensolvers agree, conventions hold, levels are classified.
#include <catch2/catch.hpp>

#include <cmath>

#include "solver/errors.hpp"
#include "solver/spectrum.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

namespace {
Potential oscillator(double w, double quartic = 0) {
  return Potential({Term("trap", Shape::polynomial, {{"frequency", w}, {"quartic", quartic}})});
}
}  // namespace

TEST_CASE("dense and Lanczos solvers agree on the same Fourier grid", "[spectrum]") {
  const Grid g = Grid::periodic(-9, 9, 256);
  const auto v = oscillator(1.0, 0.02).evaluate(g.points());
  SpectrumOptions o;
  o.levels = 12;
  o.method = EigenMethod::dense;
  const Spectrum dense = solve_spectrum(g, v, o);
  o.method = EigenMethod::lanczos;
  const Spectrum lanczos = solve_spectrum(g, v, o);
  CHECK(lanczos.converged == 12);
  for (int k = 0; k < 12; ++k) {
    // Both are eigenpairs of the same matrix: energies to the residual squared, states to
    // residual / gap (gap ~ 1 here), so 1e-9 for both is an honest bound.
    CHECK(std::abs(dense.energies(k) - lanczos.energies(k)) < 1e-10);
    CHECK((dense.states.col(k) - lanczos.states.col(k)).cwiseAbs().maxCoeff() < 1e-7);
    CHECK(lanczos.residuals[k] < o.residual_tolerance);
  }
  // The raw finite-difference spectrum differs at the stencil's order, much more than that.
  o.method = EigenMethod::finite_difference;
  const Spectrum fd = solve_spectrum(g, v, o);
  CHECK(std::abs(fd.energies(11) - dense.energies(11)) > 1e-9);
}

TEST_CASE("states are normalised on the grid with a fixed sign", "[spectrum]") {
  const Grid g = Grid::periodic(-8, 8, 128);
  SpectrumOptions o;
  o.levels = 5;
  const Spectrum s = solve_spectrum(g, oscillator(1.0).evaluate(g.points()), o);
  for (int k = 0; k < 5; ++k) {
    CHECK(s.states.col(k).squaredNorm() * g.spacing() == Approx(1.0).epsilon(1e-12));
    // phi_n ~ +x^n: positive at x = 3 (beyond the last node for n < 5).
    CHECK(s.states(Eigen::Index((3.0 + 8) / g.spacing()), k) > 0);
  }
  const Grid b = Grid::box(0, 1, 63);
  const Spectrum box = solve_spectrum(b, std::vector<double>(63, 0.0), o);
  for (int k = 0; k < 5; ++k) CHECK(box.states(0, k) > 0);  // sin(n pi x), first lobe positive
}

TEST_CASE("tunnelling doublets of a double well are grouped", "[spectrum]") {
  const Potential v({Term("dw", Shape::double_well, {{"barrier", 40.0}, {"separation", 4.0}})});
  SpectrumRequest r;
  r.options.levels = 4;
  r.options.degeneracy_tolerance = 1e-3;
  r.search_half_width = 20;
  const SpectrumResult res = compute_spectrum(v, r);
  const auto& e = res.spectrum.energies;
  INFO("levels " << e.transpose());
  REQUIRE(e(3) - e(2) < 1e-3);  // a deep barrier: splittings far below the spacing
  CHECK(res.spectrum.group == std::vector<int>{0, 0, 1, 1});
  r.options.degeneracy_tolerance = 1e-12;
  CHECK(compute_spectrum(v, r).spectrum.group == std::vector<int>{0, 1, 2, 3});
}

TEST_CASE("the automatic grid converges an oscillator to rounding", "[spectrum]") {
  SpectrumRequest r;
  r.options.levels = 20;
  const SpectrumResult res = compute_spectrum(oscillator(1.0), r);
  for (int k = 0; k < 20; ++k) CHECK(res.spectrum.energies(k) == Approx(k + 0.5).epsilon(1e-11));
  CHECK(res.convergence.done);
  CHECK(res.convergence.max_energy_change < 1e-9);
  CHECK(res.harmonic.omega == Approx(1.0).epsilon(1e-6));
  CHECK(std::abs(res.levels[3].harmonic_shift) < 1e-9);
  CHECK(std::isinf(res.threshold));
  CHECK(res.warnings.empty());
  for (const auto& l : res.levels) CHECK(l.bound);
}

TEST_CASE("level properties: spacing and moments", "[spectrum]") {
  SpectrumRequest r;
  r.options.levels = 4;
  const Potential shifted({Term("trap", Shape::harmonic, {{"frequency", 2.0}, {"centre", 1.5}})});
  const SpectrumResult res = compute_spectrum(shifted, r);
  for (int k = 0; k < 4; ++k) {
    CHECK(res.levels[k].mean_x == Approx(1.5).epsilon(1e-10));
    // <(x - c)^2> = (n + 1/2) / omega
    CHECK(res.levels[k].mean_x2 - 1.5 * 1.5 == Approx((k + 0.5) / 2.0).epsilon(1e-9));
  }
  CHECK(res.levels[0].spacing == Approx(2.0).epsilon(1e-10));
  CHECK(std::isnan(res.levels[3].spacing));
}

TEST_CASE("finite wells: bound states are told from the continuum", "[spectrum]") {
  const Potential tweezer({Term("tw", Shape::gaussian, {{"depth", 6.0}, {"waist", 2.0}})});
  SpectrumRequest r;
  r.options.levels = 8;
  r.search_half_width = 60;
  const SpectrumResult res = compute_spectrum(tweezer, r);
  CHECK(res.finite_depth);
  CHECK(res.threshold == Approx(0.0).margin(1e-12));
  int bound = 0;
  for (const auto& l : res.levels) bound += l.bound;
  CHECK(bound < 8);
  CHECK(bound >= 3);
  for (const auto& l : res.levels) CHECK(l.bound == (l.energy < 0 && l.edge_amplitude < 1e-6));
  REQUIRE_FALSE(res.warnings.empty());
  CHECK_THAT(res.warnings.front(), Contains("not bound"));
}

TEST_CASE("WKB level energies: exact for an oscillator, capped at a finite well's threshold", "[spectrum]") {
  // The WKB quantisation sum p dx = pi (n + 1/2) gives the oscillator's levels omega (n + 1/2)
  // exactly (textbook result, from memory); what is left is the scan's Riemann sum over
  // 200001 samples, a few 1e-7 of E here.
  const double w = 1.3;
  const std::vector<double> e = wkb_level_energies(oscillator(w), 30, -12, 12);
  REQUIRE(e.size() == 30);
  for (int n = 0; n < 30; ++n) CHECK(e[std::size_t(n)] == Approx(w * (n + 0.5)).epsilon(2e-6));
  // a Gaussian well of depth 6 (threshold 0): the bound levels ascend below 0, the rest sit at 0
  const Potential tweezer({Term("tw", Shape::gaussian, {{"depth", 6.0}, {"waist", 2.0}})});
  const std::vector<double> g = wkb_level_energies(tweezer, 40, -60, 60);
  REQUIRE(g.size() == 40);
  // V = -6 exp(-2 x^2 / waist^2): curvature omega = sqrt(6), the lowest level near -6 + omega / 2
  CHECK(g.front() > -6);
  CHECK(g.front() < -6 + std::sqrt(6.0) / 2);
  int bound = 0;
  for (std::size_t n = 0; n < g.size(); ++n) {
    if (g[n] < 0) {
      ++bound;
      if (n > 0) CHECK(g[n] > g[n - 1]);
    } else {
      CHECK(g[n] == 0.0);
    }
  }
  CHECK(bound >= 3);
  CHECK(bound < 40);
  // a window so wide that the action at its edge holds more levels than an int counts (V at the
  // edge near 8e13): the levels are still solved, not left at the threshold
  const std::vector<double> wide = wkb_level_energies(oscillator(1, 1), 5, -3000, 3000);
  REQUIRE(wide.size() == 5);
  CHECK(wide.front() > 0);
  for (std::size_t n = 1; n < wide.size(); ++n) CHECK(wide[n] > wide[n - 1]);
  CHECK(wide.back() < 100);
}

TEST_CASE("WKB level energies through a memo: the same numbers, and never another potential's", "[spectrum]") {
  // A --tolerance search asks for the same WKB energies in every run; the memo must give exactly
  // what a fresh solve gives, and a different potential (or window) must not be served from it.
  const auto memo = std::make_shared<SpectrumMemo>();
  const Potential a = oscillator(1.3), b = oscillator(1.3 * (1 + 1e-9));
  for (int round = 0; round < 2; ++round) {  // the second round is served from the memo
    CHECK(wkb_level_energies(a, 30, -12, 12, memo) == wkb_level_energies(a, 30, -12, 12));
    CHECK(wkb_level_energies(a, 12, -12, 12, memo) == wkb_level_energies(a, 12, -12, 12));
    CHECK(wkb_level_energies(b, 30, -12, 12, memo) == wkb_level_energies(b, 30, -12, 12));
    CHECK(wkb_level_energies(a, 30, -11, 12, memo) == wkb_level_energies(a, 30, -11, 12));
  }
  CHECK(wkb_level_energies(a, 30, -12, 12, memo) != wkb_level_energies(b, 30, -12, 12, memo));
  // more scans than it keeps: the oldest are dropped, answers stay right
  for (int k = 0; k < 12; ++k) {
    const Potential c = oscillator(1 + 0.01 * k);
    CHECK(wkb_level_energies(c, 5, -12, 12, memo) == wkb_level_energies(c, 5, -12, 12));
  }
}

TEST_CASE("bad requests fail with a reason", "[spectrum]") {
  const Grid g = Grid::periodic(-5, 5, 16);
  SpectrumOptions o;
  o.levels = 9;
  CHECK_THROWS_WITH(solve_spectrum(g, std::vector<double>(16, 0.0), o), Contains("use more points"));
  // a formula that is not finite at its centre is refused when the term is made ...
  CHECK_THROWS_WITH(Term::formula("f", "1/x", {}), Contains("not finite"));
  // ... and one that is not finite elsewhere (here x < -1) when the grid samples it
  const Potential broken({Term::formula("f", "sqrt(x+1)", {})});
  SpectrumRequest r;
  r.search_half_width = 5;
  CHECK_THROWS_WITH(compute_spectrum(broken, r), Contains("not finite"));
  const Potential hill({Term::formula("f", "-x^2", {})});
  CHECK_THROWS_AS(compute_spectrum(hill, r), PhysicsError);
  r.options.method = EigenMethod::hermite;
  const Potential tweezer({Term("tw", Shape::gaussian, {{"depth", 6.0}, {"waist", 2.0}})});
  CHECK_THROWS_WITH(compute_spectrum(tweezer, r), Contains("polynomial"));
}

TEST_CASE("a spectrum memo returns what solving again gives, and only for equal inputs", "[spectrum]") {
  const Grid g = Grid::periodic(-9, 9, 128);
  const auto v = oscillator(1.0, 0.02).evaluate(g.points());
  SpectrumOptions o;
  o.levels = 8;
  const Spectrum plain = solve_spectrum(g, v, o);
  o.memo = std::make_shared<SpectrumMemo>();
  const Spectrum first = solve_spectrum(g, v, o);
  CHECK(o.memo->reused() == 0);
  const Spectrum again = solve_spectrum(g, v, o);
  CHECK(o.memo->reused() == 1);
  CHECK(again.energies == plain.energies);
  CHECK(again.states == plain.states);
  CHECK(first.states == plain.states);
  // other samples, other options, another grid: solved, not reused
  auto w = v;
  w[64] += 1e-3;  // at the trap centre
  const Spectrum other = solve_spectrum(g, w, o);
  SpectrumOptions more = o;
  more.levels = 9;
  CHECK(solve_spectrum(g, v, more).energies.size() == 9);
  CHECK(solve_spectrum(Grid::periodic(-9, 9.5, 128), v, o).energies.size() == 8);
  CHECK(o.memo->reused() == 1);
  CHECK(other.energies(0) != plain.energies(0));
  // a memo smaller than two spectra keeps only the newest: the first one is solved again
  o.memo = std::make_shared<SpectrumMemo>(sizeof(double) * (128 * 8 + 8) * 3 / 2);
  solve_spectrum(g, v, o);
  solve_spectrum(g, w, o);
  solve_spectrum(g, w, o);
  CHECK(o.memo->reused() == 1);
  solve_spectrum(g, v, o);
  CHECK(o.memo->reused() == 1);
}

TEST_CASE("a memo serves fewer levels from a spectrum of more, and solves memo_levels at once", "[spectrum]") {
  const Grid g = Grid::periodic(-9, 9, 256);
  const auto v = oscillator(1.0, 0.02).evaluate(g.points());
  for (const EigenMethod method : {EigenMethod::dense, EigenMethod::lanczos}) {
    SpectrumOptions o;
    o.method = method;
    o.levels = 12;
    const Spectrum alone = solve_spectrum(g, v, o);  // no memo: 12 levels solved as asked
    o.memo = std::make_shared<SpectrumMemo>();
    o.memo_levels = 30;
    const Spectrum first = solve_spectrum(g, v, o);  // solves 30, returns the lowest 12
    CHECK(o.memo->reused() == 0);
    REQUIRE(first.energies.size() == 12);
    REQUIRE(first.states.cols() == 12);
    CHECK(first.residuals.size() == 12);
    CHECK(first.group.size() == 12);
    CHECK(first.converged == 12);
    SpectrumOptions more = o;
    more.levels = 30;
    more.memo_levels = 0;
    const Spectrum all = solve_spectrum(g, v, more);  // found: the 30 solved before
    CHECK(o.memo->reused() == 1);
    REQUIRE(all.energies.size() == 30);
    CHECK(all.converged == 30);
    more.levels = 31;  // more than held: solved
    CHECK(solve_spectrum(g, v, more).energies.size() == 31);
    CHECK(o.memo->reused() == 1);
    for (int k = 0; k < 12; ++k) {
      if (method == EigenMethod::dense) {
        // the dense solver finds every pair at once and keeps the lowest: the same numbers
        CHECK(first.energies(k) == alone.energies(k));
        CHECK(first.states.col(k) == alone.states.col(k));
      } else {
        // Lanczos in a wider subspace: both are refined eigenpairs to the residual tolerance
        // (1e-9), so energies agree to its square and states to it over the gap (~1 here); the
        // bounds are the ones "dense and Lanczos solvers agree" uses
        CHECK(std::abs(first.energies(k) - alone.energies(k)) < 1e-10);
        CHECK((first.states.col(k) - alone.states.col(k)).cwiseAbs().maxCoeff() < 1e-7);
      }
      CHECK(first.residuals[std::size_t(k)] < o.residual_tolerance);
      CHECK(first.group[std::size_t(k)] == alone.group[std::size_t(k)]);
    }
  }
  // memo_levels above half the points: capped there (what the grid resolves), not refused
  SpectrumOptions o;
  o.levels = 4;
  o.memo = std::make_shared<SpectrumMemo>();
  o.memo_levels = 1000;
  CHECK(solve_spectrum(Grid::periodic(-9, 9, 64), oscillator(1.0).evaluate(Grid::periodic(-9, 9, 64).points()), o)
            .energies.size() == 4);
}
