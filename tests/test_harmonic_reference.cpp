// Analytic oscillator references. Reference numbers: forced oscillator from Cahill & Glauber,
// Phys. Rev. 177, 1857 (1969) (from memory) and Talkner, Burada & Hanggi, PRE 78, 011115 (2008)
// (journal ref from memory); parametric oscillator from Husimi, Prog. Theor. Phys. 9, 381 (1953)
// (from memory) and Deffner & Lutz, PRE 77, 021128 (2008) (formula from memory). The numbers
// were computed independently (overlap integrals, mpmath sums) to better than 1e-12.
#include <catch2/catch.hpp>

#include <cmath>

#include "solver/errors.hpp"
#include "solver/harmonic_reference.hpp"

using namespace trapwork;

TEST_CASE("displaced oscillator lines at |alpha|^2 = 1 - cos 1", "[harmonic]") {
  const double a2 = constant_speed_alpha2(1, 1, 1);
  // |alpha|^2 = 1 - cos 1 (Talkner, Burada & Hanggi 2008, from memory); closed forms good to 1e-13
  CHECK(a2 == Approx(0.4596976941318602826).epsilon(1e-14));
  CHECK(constant_speed_mean_work(1, 1, 1) == Approx(0.4596976941318602826).epsilon(1e-14));
  const double tol = 1e-13;  // closed form in double precision (recurrence + lgamma)
  CHECK(std::abs(displaced_probability(0, 0, a2) - 0.63147451510646972937) < tol);
  CHECK(std::abs(displaced_probability(0, 1, a2) - 0.29028737849747870709) < tol);
  CHECK(std::abs(displaced_probability(0, 2, a2) - 0.066722219265436761113) < tol);
  CHECK(std::abs(displaced_probability(1, 1, a2) - 0.18434419664238583742) < tol);
  CHECK(std::abs(displaced_probability(1, 2, a2) - 0.34435793027689203340) < tol);
  CHECK(std::abs(displaced_probability(2, 2, a2) - 0.021908927804839254194) < tol);
  CHECK(std::abs(displaced_probability(3, 1, a2) - 0.14352251404804255382) < tol);
  CHECK(std::abs(displaced_probability(5, 5, a2) - 0.098352877854051428799) < tol);
  // symmetry P(m -> n) = P(n -> m) of |<n|D|m>|^2
  CHECK(displaced_probability(1, 3, a2) == displaced_probability(3, 1, a2));
}

TEST_CASE("displaced oscillator stress set |alpha|^2 = 8", "[harmonic]") {
  // Values near Laguerre zeros (the same source as above; the recurrence must not lose digits)
  const double tol = 1e-12;  // larger lines, relative 1e-13 of up to 0.14, plus lgamma rounding
  CHECK(std::abs(displaced_probability(0, 0, 8) - 3.3546262790251183882e-4) < tol);
  CHECK(std::abs(displaced_probability(0, 8, 8) - 0.13958653195059692615) < tol);
  CHECK(std::abs(displaced_probability(5, 5, 8) - 0.021113272327677645109) < tol);
  CHECK(std::abs(displaced_probability(10, 3, 8) - 0.03308717794384519731) < tol);
  CHECK(std::abs(displaced_probability(20, 20, 8) - 0.014474025613194972096) < tol);
}

TEST_CASE("displaced probabilities are complete", "[harmonic]") {
  // sum_n |<n|D|m>|^2 = 1 (unitarity); 200 final levels leave a tail far below 1e-13 for m < 20
  const auto p = displaced_transition_matrix(20, 200, 8);
  for (int m = 0; m < 20; ++m) CHECK(std::abs(p.row(m).sum() - 1) < 1e-12);
}

TEST_CASE("translation_alpha reproduces the constant-speed formula and sees a smooth ramp", "[harmonic]") {
  const double omega = 1.3, v = 0.7, tau = 2.1;
  const auto alpha = translation_alpha(omega, [&](double t) { return v * t; }, tau);
  // ODE tolerance 1e-12 -> |alpha|^2 to about 1e-11
  CHECK(std::norm(alpha) == Approx(constant_speed_alpha2(omega, v, tau)).epsilon(1e-10));
  // A path that ends at rest after a whole number of periods of the smooth step leaves the
  // oscillator nearly at rest: much smaller |alpha|^2 than the abrupt constant speed start
  const double d = v * tau;
  const auto smooth = translation_alpha(omega, [&](double t) { double u = t / 20; return d * u * u * (3 - 2 * u); }, 20);
  CHECK(std::norm(smooth) < 1e-2 * constant_speed_alpha2(omega, v, tau));
}

TEST_CASE("thermal forced-oscillator distribution: Bessel form = sum of Laguerre lines", "[harmonic]") {
  const double a2 = 1 - std::cos(1.0), beta = 1, omega = 1;
  // thermal P(W = k omega), k = -2..3 (Talkner, Burada & Hanggi 2008, from memory; mpmath sums)
  const double expect[6] = {0.014113864742483794044, 0.10887834307732492631, 0.44533656678843156163,
                            0.29596202149982203067, 0.10428813835493214948, 0.02488098496626729967};
  const auto p = displaced_transition_matrix(80, 90, a2);
  for (int k = -2; k <= 3; ++k) {
    CHECK(std::abs(displaced_thermal_line(k, a2, beta, omega) - expect[k + 2]) < 1e-13);
    double sum = 0;  // independent: sum_m p_m P(m -> m + k) over 80 levels (tail e^{-80})
    for (int m = std::max(0, -k); m < 80; ++m) sum += (1 - std::exp(-beta)) * std::exp(-beta * m) * p(m, m + k);
    CHECK(std::abs(sum - expect[k + 2]) < 1e-13);
  }
  CHECK(displaced_thermal_variance(a2, beta, omega) == Approx(0.9947643945044261419).epsilon(1e-14));
}

TEST_CASE("Husimi probabilities for the sudden 1 -> 2 quench", "[harmonic]") {
  const double q = sudden_q(1, 2);
  CHECK(q == 1.25);
  const auto p = husimi_transition_matrix(6, 40, q);
  const double tol = 1e-13;  // closed form 2 sqrt 2 / 3 and its ratios; double rounding
  CHECK(std::abs(p(0, 0) - 0.94280904158206336587) < tol);
  CHECK(std::abs(p(0, 2) - 0.052378280087892409215) < tol);
  CHECK(std::abs(p(0, 4) - 0.0043648566739910341012) < tol);
  CHECK(p(0, 1) == 0);
  CHECK(p(1, 2) == 0);
  // overlap integrals int phi_n^{omega=2} phi_m^{omega=1} dx, squared, recomputed with mpmath
  // quad at 30 digits (P(1->1) = (2 sqrt 2/3)^3 exactly)
  CHECK(std::abs(p(1, 1) - 0.838052481406278547438) < tol);
  CHECK(std::abs(p(1, 3) - 0.139675413567713091240) < tol);
  CHECK(std::abs(p(2, 2) - 0.654728501098655115186) < tol);
  CHECK(std::abs(p(3, 3) - 0.437132312832287267028) < tol);
  CHECK(std::abs(p(4, 4) - 0.234249553467495162936) < tol);
}

TEST_CASE("Husimi matrix matches Husimi's generating function", "[harmonic]") {
  // sum_{m,n} P(m->n) u^m v^n = sqrt 2 / sqrt(Q (1-u^2)(1-v^2) + (1+u^2)(1+v^2) - 4uv)
  // (Husimi 1953, from memory). With |u|, |v| <= 0.5 and 90 levels the truncation is < 1e-25.
  for (double q : {1.25, 1.1149494069249281487, 3.0}) {
    const auto p = husimi_transition_matrix(90, 90, q);
    for (auto [u, v] : {std::pair{0.3, 0.5}, std::pair{-0.4, 0.2}, std::pair{0.5, -0.5}}) {
      double sum = 0;
      for (int m = 89; m >= 0; --m)
        for (int n = 89; n >= 0; --n) sum += p(m, n) * std::pow(u, m) * std::pow(v, n);
      const double f = q * (1 - u * u) * (1 - v * v) + (1 + u * u) * (1 + v * v) - 4 * u * v;
      CHECK(sum == Approx(std::sqrt(2.0 / f)).epsilon(1e-13));
    }
    // unitarity; for Q* = 3 the lines fall off as ((Q*-1)/(Q*+1))^{k} = 2^{-k}: 400 levels
    const auto wide = husimi_transition_matrix(20, 400, q);
    for (int m = 0; m < 20; ++m) CHECK(std::abs(wide.row(m).sum() - 1) < 1e-12);
  }
}

TEST_CASE("Husimi matrix keeps its digits for many levels at a strong squeeze", "[harmonic]") {
  // In doubles the recurrence gave row sums of 1.4e10 for 130 initial and 210 final levels at
  // Q* = 4.16 (a run's harmonic reference printed max |P - P_harm| = 1.39e+10). Checks: every row
  // a probability distribution (sum <= 1, and 1 where the final levels hold the row), and the symmetry
  // P(m->n) = P(n->m) of Husimi's probabilities (Husimi 1953, from memory), which the recurrence in m does
  // not impose.
  const double q = 4.1634368813908536;
  const auto p = husimi_transition_matrix(130, 400, q);
  for (Eigen::Index m = 0; m < p.rows(); ++m) {
    INFO("row " << m << " sum " << p.row(m).sum());
    CHECK(p.row(m).minCoeff() >= 0);
    CHECK(p.row(m).sum() <= 1 + 1e-12);
  }
  CHECK(std::abs(p.row(0).sum() - 1) < 1e-12);
  CHECK(std::abs(p.row(20).sum() - 1) < 1e-12);  // (row 40 spreads past 400 levels: 1 - 7.7e-5)
  double asymmetry = 0;
  for (int m = 0; m < 130; ++m)
    for (int n = 0; n < 130; ++n) asymmetry = std::max(asymmetry, std::abs(p(m, n) - p(n, m)));
  CHECK(asymmetry < 1e-14);
}

TEST_CASE("parametric Q* from the classical equation of motion", "[harmonic]") {
  // omega^2 linear from 1 to 4 over tau (Airy-function solutions; mpmath, CHECK to 1e-10)
  for (auto [tau, expect] : {std::pair{1.0, 1.1149494069249281487}, std::pair{5.0, 1.0111003637936734767}}) {
    const double duration = tau;  // a structured binding cannot be captured in C++17/clang 14
    const double q = parametric_q([duration](double t) { return 1 + 3 * t / duration; }, duration);
    CHECK(std::abs(q - expect) < 1e-10);
  }
  // no time and no change: Q* = 1 exactly
  CHECK(parametric_q([](double) { return 2.0; }, 0) == Approx(1.0).epsilon(1e-15));
  // mean work (Deffner & Lutz 2008): sudden 0.75 coth 0.5, ramp tau = 1
  CHECK(parametric_mean_work(1, 2, 1.25, 1) == Approx(1.622965060303989636577503).epsilon(1e-14));
  CHECK(parametric_mean_work(1, 2, 1.1149494069249281487, 1) == Approx(1.3307218683917582334).epsilon(1e-13));
  // the lines reproduce the mean: sum_m p_m sum_n P(m->n) (E_n^B - E_m^A) over 60 levels
  const auto p = husimi_transition_matrix(60, 200, 1.1149494069249281487);
  double mean = 0;
  for (int m = 0; m < 60; ++m)
    for (int n = 0; n < 200; ++n)
      mean += (1 - std::exp(-1.0)) * std::exp(-double(m)) * p(m, n) * (2 * (n + 0.5) - (m + 0.5));
  CHECK(mean == Approx(1.3307218683917582334).epsilon(1e-11));
}

TEST_CASE("reference functions reject invalid arguments", "[harmonic]") {
  CHECK_THROWS_AS(husimi_transition_matrix(3, 3, 0.5), ContractViolation);
  CHECK_THROWS_AS(sudden_q(0, 1), ContractViolation);
  CHECK_THROWS_AS(displaced_probability(-1, 0, 1), ContractViolation);
}
