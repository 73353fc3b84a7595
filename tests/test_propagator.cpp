// Propagators: the concept, the observer contract, unitarity, time-reversal symmetry,
// convergence order, and agreement between the two models and the two frames.
#include <catch2/catch.hpp>

#include <cmath>
#include <limits>
#include <string>
#include <vector>

#include "solver/propagator.hpp"

using namespace trapwork;

namespace {
Potential harmonic_trap(double omega = 1) {
  return Potential({Term("trap", Shape::harmonic, {{"frequency", omega}, {"centre", 0.0}})});
}
// Ground and first excited oscillator states (omega = 1), centred at c
Eigen::MatrixXcd oscillator_states(const Grid& g, double c = 0) {
  Eigen::MatrixXcd s(g.size(), 2);
  for (std::size_t j = 0; j < g.size(); ++j) {
    const double y = g.x(j) - c, gauss = std::pow(M_PI, -0.25) * std::exp(-y * y / 2);
    s(Eigen::Index(j), 0) = gauss;
    s(Eigen::Index(j), 1) = std::sqrt(2.0) * y * gauss;
  }
  return s;
}
double max_norm_error(const Eigen::MatrixXcd& s, double dx) {
  double e = 0;
  for (Eigen::Index c = 0; c < s.cols(); ++c) e = std::max(e, std::abs(s.col(c).squaredNorm() * dx - 1));
  return e;
}
struct NotAPropagator {  // lacks order(): must not model the concept
  using State = Eigen::MatrixXcd;
  void step(State&, double, double) {}
};
const Grid grid = Grid::periodic(-10, 10, 128);
const Protocol ramp(1, {Schedule::linear("trap.frequency", 1, 1.5)});
}  // namespace

static_assert(Propagator<SplitOperatorPropagator>);
static_assert(Propagator<EigenbasisPropagator>);
static_assert(!Propagator<NotAPropagator>);

TEST_CASE("propagate calls the observer at t_begin + i dt and can be stopped", "[propagator]") {
  SplitOperatorPropagator prop(PotentialPath::lab(grid, harmonic_trap(), ramp), 2, SplitOrder::strang);
  auto psi = oscillator_states(grid);
  std::vector<double> times;
  const int steps = propagate(prop, psi, 0.2, 0.9, 7, [&](const Eigen::MatrixXcd&, double t) { times.push_back(t); });
  CHECK(steps == 7);
  REQUIRE(times.size() == 8);
  for (int i = 0; i < 7; ++i) CHECK(times[std::size_t(i)] == 0.2 + i * ((0.9 - 0.2) / 7));
  CHECK(times.back() == 0.9);
  int calls = 0;
  const int taken = propagate(prop, psi, 0.0, 1.0, 10, [&](const Eigen::MatrixXcd&, double) { return ++calls < 3; });
  CHECK(calls == 3);   // at t = 0, 0.1, 0.2; the third returns false
  CHECK(taken == 2);
  CHECK_THROWS_AS(propagate(prop, psi, 0.0, 1.0, 0), ContractViolation);
}

TEST_CASE("an observe_every observer is called every interval steps and at the end", "[propagator]") {
  SplitOperatorPropagator prop(PotentialPath::lab(grid, harmonic_trap(), ramp), 2, SplitOrder::strang);
  auto psi = oscillator_states(grid);
  std::vector<double> times;
  const int steps = propagate(prop, psi, 0.0, 1.0, 25, observe_every(10, [&](const Eigen::MatrixXcd&, double t) {
                                times.push_back(t);
                              }));
  CHECK(steps == 25);
  REQUIRE(times.size() == 4);  // steps 0, 10, 20 and the last, 25
  CHECK(times[1] == subdivision_time(0.0, 1.0, 25, 10));
  CHECK(times[2] == subdivision_time(0.0, 1.0, 25, 20));
  CHECK(times[3] == 1.0);
  int calls = 0;
  const int taken = propagate(prop, psi, 0.0, 1.0, 25, observe_every(10, [&](const Eigen::MatrixXcd&, double) {
                                return ++calls < 2;
                              }));
  CHECK(taken == 10);  // stopped at the second call, after step 10
}

TEST_CASE("multi-step propagation agrees with step-by-step propagation at any thread count", "[propagator]") {
  // 17 columns on 96 points: blocks of 2 columns (block_columns_for: at least 16 blocks), the
  // last block one column; 150 steps: several chunks of steps() and of propagate()'s finite checks
  const Grid g = Grid::periodic(-10, 12, 96);
  const int columns = 17, total = 150;
  const Potential base({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 0.01}})});
  const Protocol move(1.5, {Schedule::linear("trap.centre", 0, 1.0)});
  Eigen::MatrixXcd start(g.size(), columns);  // displaced, boosted Gaussians
  for (int c = 0; c < columns; ++c)
    for (std::size_t j = 0; j < g.size(); ++j) {
      const double y = g.x(j) - 0.2 * c;
      start(Eigen::Index(j), c) = std::polar(std::exp(-y * y / 2), 0.3 * c * g.x(j));
    }
  for (auto path : {PotentialPath::lab(g, base, move), PotentialPath::co_moving(g, base, move)})
    for (auto order : {SplitOrder::strang, SplitOrder::fourth}) {
      SplitOperatorPropagator one(path, columns, order, 1);
      REQUIRE(one.chunk_substeps() < total);
      auto reference = start;
      double reference_phase = 0;
      for (int i = 0; i < total; ++i) {
        const double t = subdivision_time(0, 1.5, total, i), t_next = subdivision_time(0, 1.5, total, i + 1);
        one.step(reference, t, t_next - t);
        reference_phase = std::max(reference_phase, one.max_phase());
      }
      Eigen::MatrixXcd first;
      for (int threads : {1, 2, 3}) {
        INFO("co-moving " << path.is_co_moving() << ", order " << int(order) << ", threads " << threads);
        SplitOperatorPropagator prop(path, columns, order, threads);
        auto psi = start;
        CHECK(propagate(prop, psi, 0.0, 1.5, total) == total);
        // rounding only: the merged kicks and the nominal substep lengths differ from the
        // step-by-step factors in the last bits; amplitudes are at most 1, so at most 450
        // substeps x 2 eps (2.2e-16) = 2e-13 (common practice for a rounding budget growing
        // linearly with the operations). Two units in the last place per substep, not one: the
        // kicks' sines and cosines come from glibc's vector library where the processor has
        // AVX2 (glibc manual: at most 4 ulp, from memory; measured 1.5 ulp against std::polar), and the
        // difference seen rose from 5e-14 to 1.03e-13 with them.
        const double difference = (psi - reference).cwiseAbs().maxCoeff();
        INFO("largest difference from step-by-step: " << difference);
        CHECK(difference < 2e-13);
        // the same steps in two calls of other lengths
        auto split = start;
        prop.steps(split, 0.0, 1.5, total, 0, 37);
        prop.steps(split, 0.0, 1.5, total, 37, total - 37);
        CHECK((split - reference).cwiseAbs().maxCoeff() < 2e-13);
        // the phase diagnostic of the whole range: the largest of the single steps'
        prop.steps(split, 0.0, 1.5, total, 0, total);
        CHECK(prop.max_phase() == Approx(reference_phase).epsilon(1e-12));
        // the block split depends on the sizes only: the same numbers, bit for bit, on any
        // number of threads (within one process FFTW reuses the plans it measured)
        if (threads == 1) first = psi;
        CHECK((psi - first).cwiseAbs().maxCoeff() == 0);
      }
    }
}

TEST_CASE("split-operator steps keep the norm and are time-reversal symmetric", "[propagator]") {
  for (auto order : {SplitOrder::strang, SplitOrder::fourth}) {
    SplitOperatorPropagator prop(PotentialPath::lab(grid, harmonic_trap(), ramp), 2, order);
    const auto start = oscillator_states(grid);
    auto psi = start;
    double worst = 0;
    propagate(prop, psi, 0.0, 1.0, 200, [&](const Eigen::MatrixXcd& s, double) {
      worst = std::max(worst, max_norm_error(s, grid.spacing()));
    });
    // unitary steps: rounding only, ~1e-16 per FFT pass times 200 steps x 3 substeps x 4 passes
    CHECK(worst < 1e-12);
    // S(t + dt, -dt) S(t, dt) = 1: back to the start, up to the same rounding
    propagate(prop, psi, 1.0, 0.0, 200);
    CHECK((psi - start).cwiseAbs().maxCoeff() < 1e-12);
    CHECK(prop.max_phase() > 0);
  }
}

TEST_CASE("convergence order 2 (Strang) and 4 (triple jump) from three step sizes", "[propagator]") {
  // observed order p = log2(|u_N - u_2N| / |u_2N - u_4N|): self-convergence, no reference needed
  for (auto [order, n0, expect] : {std::tuple{SplitOrder::strang, 40, 2.0}, std::tuple{SplitOrder::fourth, 10, 4.0}}) {
    std::vector<Eigen::MatrixXcd> result;
    for (int n : {n0, 2 * n0, 4 * n0}) {
      SplitOperatorPropagator prop(PotentialPath::lab(grid, harmonic_trap(), ramp), 2, order);
      auto psi = oscillator_states(grid);
      propagate(prop, psi, 0.0, 1.0, n);
      result.push_back(psi);
    }
    const double e1 = (result[0] - result[1]).cwiseAbs().maxCoeff(), e2 = (result[1] - result[2]).cwiseAbs().maxCoeff();
    const double p = std::log2(e1 / e2);
    INFO("order " << int(order) << ": differences " << e1 << ", " << e2 << ", observed p = " << p);
    CHECK(std::abs(p - expect) < 0.25);  // asymptotic-regime allowance for the leading-term estimate
    CHECK(e2 < 1e-4);
  }
}

TEST_CASE("eigenbasis ODE and split-operator agree on a frequency ramp", "[propagator]") {
  const auto base = harmonic_trap();
  SpectrumOptions options;
  options.levels = 30;
  options.method = EigenMethod::dense;
  const auto va = base.evaluate(grid.points());
  const Spectrum sa = solve_spectrum(grid, va, options);
  const Spectrum sb = solve_spectrum(grid, ramp.final(base).evaluate(grid.points()), options);
  const auto path = PotentialPath::lab(grid, base, ramp);
  Eigen::MatrixXcd psi = sa.states.leftCols(3).cast<std::complex<double>>();

  SplitOperatorPropagator split(path, 3, SplitOrder::fourth);
  auto a = psi;
  propagate(split, a, 0.0, 1.0, 400);
  EigenbasisPropagator ode(path, sa, va, {1e-12, 1e-12});
  auto c = ode.coefficients(psi);
  propagate(ode, c, 0.0, 1.0, 10);
  const Eigen::MatrixXd pa = project(sb, a).cwiseAbs2(), pb = project(sb, ode.grid_states(c)).cwiseAbs2();
  // CF4 at dt = 1/400 (error ~1e-10 by the order test) vs ODE tolerance 1e-12; basis of 30
  // levels leaves ~e^{-30} of the low states out
  CHECK((pa - pb).cwiseAbs().maxCoeff() < 1e-8);
  CHECK(ode.evaluations() > 0);
  // the two are not trivially equal: the ramp does excite level 2 from level 0
  CHECK(pa(2, 0) > 1e-4);
}

// Split-operator and eigenbasis ODE final states of the lowest `columns` states of H(0)
// (projected on the ODE basis), and the ODE itself for its counters.
namespace {
struct OdeAgainstSplit {
  double difference = 0;  // max |coefficient difference|
  long evaluations = 0, direct = 0;
  int shapes = 0;
};
OdeAgainstSplit ode_against_split(const PotentialPath& path, const std::vector<double>& va, int levels, int columns,
                                  int split_steps) {
  SpectrumOptions options;
  options.levels = levels;
  options.method = EigenMethod::dense;
  const Spectrum sa = solve_spectrum(path.grid(), va, options);
  const double tau = path.protocol().duration();
  Eigen::MatrixXcd psi = sa.states.leftCols(columns).cast<std::complex<double>>();
  SplitOperatorPropagator split(path, columns, SplitOrder::fourth);
  auto a = psi;
  propagate(split, a, 0.0, tau, split_steps);
  EigenbasisPropagator ode(path, sa, va, {1e-11, 1e-11});
  auto c = ode.coefficients(psi);
  propagate(ode, c, 0.0, tau, 8);
  return {(ode.coefficients(a) - c).cwiseAbs().maxCoeff(), ode.evaluations(), ode.direct_evaluations(), ode.shapes()};
}
}  // namespace

TEST_CASE("eigenbasis ODE: potential shapes, steps set by the coupling, arithmetic budget", "[propagator]") {
  SECTION("rigid translation in the co-moving frame: dV = d''(t) y, one shape") {
    const Grid g = Grid::periodic(-12, 12, 128);
    const Protocol move(12, {Schedule::smooth_step("trap.centre", 0, 2)});
    const auto path = PotentialPath::co_moving(g, harmonic_trap(), move);
    const auto r = ode_against_split(path, harmonic_trap().evaluate(g.points()), 40, 6, 3000);
    INFO("difference " << r.difference << ", evaluations " << r.evaluations << ", shapes " << r.shapes);
    // CF4 at dt = 0.004 over E <= ~40 (order-4 error ~1e-9) against the ODE at 1e-11; the
    // basis of 40 levels holds the lowest 6 states' dynamics to far better than that
    CHECK(r.difference < 1e-7);
    CHECK(r.shapes <= 2);
    CHECK(r.direct == 0);
    // Without the interaction picture Dormand-Prince stability alone (|E_K dt| < ~3.3) asks
    // for tau E_K / 3.3 = 145 steps of 6 evaluations, and accuracy at 1e-11 for ~10 times more;
    // the coupling y (neighbouring levels, frequency 1) needs far fewer.
    CHECK(r.evaluations < 6 * 145);
  }
  SECTION("a narrow well moved in the lab frame: many shapes, then M formed directly") {
    const Grid g = Grid::periodic(-8, 8, 192);
    const Potential well({Term("well", Shape::gaussian, {{"depth", 30.0}, {"waist", 0.7}, {"centre", 0.0}})});
    const Protocol move(2, {Schedule::smooth_step("well.centre", -2, 2)});
    const auto path = PotentialPath::lab(g, well, move);
    // the states moved by many waists need much of the grid: the basis truncation leaves
    // 5e-2 with 60 levels, 1e-4 with 90, 2.5e-5 with 96 (measured; the split-operator run
    // is converged to 1e-9 there, unchanged at twice the steps)
    const auto r = ode_against_split(path, move.initial(well).evaluate(g.points()), 96, 2, 4000);
    INFO("difference " << r.difference << ", evaluations " << r.evaluations << ", direct " << r.direct);
    CHECK(r.difference < 5e-5);
    CHECK(r.shapes == 64);
    CHECK(r.direct > 0);
  }
  SECTION("a budget stops the run") {
    const auto path = PotentialPath::lab(grid, harmonic_trap(), ramp);
    SpectrumOptions options;
    options.levels = 20;
    options.method = EigenMethod::dense;
    const auto va = harmonic_trap().evaluate(grid.points());
    const Spectrum sa = solve_spectrum(grid, va, options);
    const auto start = sa.states.leftCols(2).cast<std::complex<double>>();
    EigenbasisPropagator free_run(path, sa, va, {1e-10, 1e-10});
    auto c = free_run.coefficients(start);
    propagate(free_run, c, 0.0, 1.0, 4);
    const double whole = free_run.arithmetic();
    // a limit of 0.6 of the whole: the projection (about the whole) stays below twice the limit,
    // so the run stops at the first evaluation past the limit
    EigenbasisPropagator late(path, sa, va, {1e-10, 1e-10}, 0.6 * whole);
    c = late.coefficients(start);
    CHECK_THROWS_AS(propagate(late, c, 0.0, 1.0, 4), ArithmeticLimitReached);
    CHECK(late.arithmetic() > 0.6 * whole);
    CHECK(late.arithmetic() < 0.7 * whole);
    // a limit of a fifth: projected past twice the limit at a tenth of the duration, the run
    // stops there, before spending the limit
    EigenbasisPropagator early(path, sa, va, {1e-10, 1e-10}, 0.2 * whole);
    c = early.coefficients(start);
    CHECK_THROWS_WITH(propagate(early, c, 0.0, 1.0, 4), Catch::Matchers::Contains("projected to pass twice"));
    CHECK(early.arithmetic() < 0.2 * whole);
    CHECK(early.arithmetic() > 0.05 * whole);
    // a limit of 1.5 times the whole: the run finishes, with the same arithmetic
    EigenbasisPropagator enough(path, sa, va, {1e-10, 1e-10}, 1.5 * whole);
    c = enough.coefficients(start);
    CHECK_NOTHROW(propagate(enough, c, 0.0, 1.0, 4));
    CHECK(enough.arithmetic() == whole);
  }
}

TEST_CASE("co-moving frame reproduces the lab frame, including the Galilean phases", "[propagator]") {
  const auto base = harmonic_trap();
  const Grid lab = Grid::periodic(-10, 12, 160);
  const Grid frame = Grid::periodic(-10, 12, 160);
  SpectrumOptions options;
  options.levels = 12;
  options.method = EigenMethod::dense;
  // constant speed: the trap still moves at both ends (phase factors needed); smooth step: not
  for (auto schedule : {Schedule::linear("trap.centre", 0, 1.5), Schedule::smooth_step("trap.centre", 0, 1.5)}) {
    const Protocol move(2, {schedule});
    const Potential vb = move.final(base);
    const Spectrum sa = solve_spectrum(lab, base.evaluate(lab.points()), options);
    const Spectrum sb_lab = solve_spectrum(lab, vb.evaluate(lab.points()), options);
    auto shifted = frame.points();
    for (double& y : shifted) y += 1.5;  // frame grid at tau sits at x = y + d(tau)
    const Spectrum sb_frame = solve_spectrum(frame, vb.evaluate(shifted), options);

    Eigen::MatrixXcd a = sa.states.leftCols(4).cast<std::complex<double>>(), b = a;
    SplitOperatorPropagator in_lab(PotentialPath::lab(lab, base, move), 4);
    propagate(in_lab, a, 0.0, 2.0, 400);
    const auto path = PotentialPath::co_moving(frame, base, move);
    SplitOperatorPropagator in_frame(path, 4);
    path.from_lab(b, 0);
    propagate(in_frame, b, 0.0, 2.0, 400);
    path.to_lab(b, 2.0);
    const Eigen::MatrixXcd amp_lab = project(sb_lab, a), amp_frame = project(sb_frame, b);
    // both CF4 at dt = 1/200 (time-step error ~1e-10); same grid spacing and eigen-solver
    CHECK((amp_lab - amp_frame).cwiseAbs().maxCoeff() < 1e-8);
    // the phase factors matter: without them the constant-speed amplitudes differ
    if (schedule.form() == ScheduleForm::linear) {
      Eigen::MatrixXcd c = sa.states.leftCols(4).cast<std::complex<double>>();
      SplitOperatorPropagator plain(path, 4);
      propagate(plain, c, 0.0, 2.0, 400);
      CHECK((project(sb_frame, c).cwiseAbs2() - amp_lab.cwiseAbs2()).cwiseAbs().maxCoeff() > 1e-3);
    }
  }
  CHECK_THROWS_AS(PotentialPath::co_moving(frame, base, ramp), PhysicsError);
}

TEST_CASE("sudden amplitudes are the eigenstate overlaps", "[propagator]") {
  SpectrumOptions options;
  options.levels = 6;
  options.method = EigenMethod::dense;
  const Spectrum sa = solve_spectrum(grid, harmonic_trap(1).evaluate(grid.points()), options);
  const Spectrum sb = solve_spectrum(grid, harmonic_trap(2).evaluate(grid.points()), options);
  const Eigen::MatrixXcd a = sudden_amplitudes(sa, sb);
  // <0_B|0_A>^2 = 2 sqrt(w0 w1)/(w0 + w1) = 2 sqrt 2 / 3 (Gaussian overlap, common practice);
  // the grid [-10, 10] at 128 points resolves both ground states to rounding
  CHECK(std::norm(a(0, 0)) == Approx(2 * std::sqrt(2.0) / 3).epsilon(1e-12));
  CHECK(std::abs(a(1, 0)) < 1e-12);  // parity
}

TEST_CASE("a NaN or infinite potential or state stops the propagation, naming step and quantity", "[propagator]") {
  using Catch::Matchers::Contains;
  // sqrt(g) with g scheduled linearly from 1 to -1 over tau = 1: g < 0, so V = NaN, from t > 1/2;
  // with 10 steps the first NaN sample is at t = 0.6, the end of step 6 (g(0.5) = 0 is finite).
  const Potential root({Term::formula("trap", "0.5*x^2 + sqrt(g)*x", {{"g", 1.0}})});
  const Protocol through_zero(1, {Schedule::linear("trap.g", 1, -1)});
  {
    SplitOperatorPropagator prop(PotentialPath::lab(grid, root, through_zero), 2, SplitOrder::strang);
    auto psi = oscillator_states(grid);
    CHECK_THROWS_WITH(propagate(prop, psi, 0.0, 1.0, 10),
                      Contains("step 6 of 10 (t = 0.6 T0)") && Contains("potential at x = -10 L0 is NaN at t = 0.6 T0:"));
  }
  {
    // the triple jump's first substep overshoots to t + g1 dt, g1 = 1/(2 - 2^{1/3}) = 1.3512:
    // step 5 (t = 0.4 -> 0.5) already samples t = 0.53512
    SplitOperatorPropagator prop(PotentialPath::lab(grid, root, through_zero), 2, SplitOrder::fourth);
    auto psi = oscillator_states(grid);
    CHECK_THROWS_WITH(propagate(prop, psi, 0.0, 1.0, 10),
                      Contains("step 5 of 10 (t = 0.5 T0)") && Contains("potential at x = -10 L0 is NaN at t = 0.535121 T0"));
  }
  // In a later chunk (128 points: chunks of 64 Strang substeps; 200 steps, the first NaN sample
  // at step 101, in the chunk of steps 64 .. 127, whose kicks are computed while steps 0 .. 63
  // run): the error names its step, and the state is left at the start of that chunk, equal to
  // a run of the first 64 steps alone, at one and at two threads.
  for (const int threads : {1, 2}) {
    SplitOperatorPropagator prop(PotentialPath::lab(grid, root, through_zero), 2, SplitOrder::strang, threads);
    REQUIRE(prop.chunk_substeps() == 64);
    auto psi = oscillator_states(grid);
    CHECK_THROWS_WITH(prop.steps(psi, 0.0, 1.0, 200, 0, 200), Contains("step 101 of 200"));
    SplitOperatorPropagator alone(PotentialPath::lab(grid, root, through_zero), 2, SplitOrder::strang, threads);
    auto reference = oscillator_states(grid);
    alone.steps(reference, 0.0, 1.0, 200, 0, 64);
    CHECK((psi - reference).cwiseAbs().maxCoeff() == 0.0);
    CHECK((psi - oscillator_states(grid)).cwiseAbs().maxCoeff() > 0.1);  // it did run
  }
  // log(g) with g from 1 to 0: -infinity at t = tau exactly (the schedule's end value), step 4 of 4
  const Potential logarithm({Term::formula("trap", "0.5*x^2 + log(g)", {{"g", 1.0}})});
  const Protocol to_zero(1, {Schedule::linear("trap.g", 1, 0)});
  SplitOperatorPropagator log_prop(PotentialPath::lab(grid, logarithm, to_zero), 2, SplitOrder::strang);
  auto psi = oscillator_states(grid);
  CHECK_THROWS_WITH(propagate(log_prop, psi, 0.0, 1.0, 4),
                    Contains("step 4 of 4 (t = 1 T0)") && Contains("potential at x = -10 L0 is infinite at t = 1 T0"));
  // a finite potential, for contrast, propagates without complaint
  SplitOperatorPropagator fine(PotentialPath::lab(grid, harmonic_trap(), ramp), 2, SplitOrder::strang);
  auto good = oscillator_states(grid);
  CHECK_NOTHROW(propagate(fine, good, 0.0, 1.0, 4));
  // a state column that is already NaN: found before the first step, named by its column
  auto bad = oscillator_states(grid);
  bad(5, 1) = std::numeric_limits<double>::quiet_NaN();
  CHECK_THROWS_WITH(propagate(fine, bad, 0.0, 1.0, 10), Contains("initial state column 1 holds NaN or infinity"));
  // a column that overflows during the run (1e308 is finite, its Fourier sums are not): found at
  // the first check after it, every finite_check_interval steps
  auto bad_early = oscillator_states(grid);
  bad_early(5, 0) = 1e308;
  const int steps = 3 * finite_check_interval;
  CHECK_THROWS_WITH(propagate(fine, bad_early, 0.0, 1.0, steps),
                    Contains("step " + std::to_string(finite_check_interval) + " of " + std::to_string(steps)) &&
                        Contains("state column 0 (initial state 0 of the batch)") && Contains("finite at step 0)"));
}
