// Validation of trapwork's spectra against exact and published eigenvalues.
// Convention: hbar = m = 1, H = p^2/2 + V(x). Every check value names its source beside it;
// "from memory" marks a citation recalled rather than re-read. Tolerances follow from the
// method: spectral (Fourier grid, Hermite basis) ~1e-10 relative; finite differences by order.
#include <catch2/catch.hpp>

#include <boost/math/tools/roots.hpp>

#include <cmath>

#include "solver/spectrum.hpp"

using namespace trapwork;

namespace {

SpectrumResult spectrum_of(const Potential& v, int levels, double search = 500,
                           EigenMethod method = EigenMethod::automatic) {
  SpectrumRequest r;
  r.options.levels = levels;
  r.options.method = method;
  r.search_half_width = search;
  return compute_spectrum(v, r);
}

int bound_count(const SpectrumResult& r) {
  int n = 0;
  for (const auto& l : r.levels) n += l.bound;
  return n;
}

}  // namespace

TEST_CASE("harmonic oscillator: E_n = omega (n + 1/2)", "[validation][spectrum]") {
  // Source: textbook result (common practice).
  const Potential v({Term("trap", Shape::harmonic, {{"frequency", 1.3}, {"centre", 0.4}})});
  for (auto method : {EigenMethod::dense, EigenMethod::lanczos, EigenMethod::hermite}) {
    const auto r = spectrum_of(v, 30, 500, method);
    for (int n = 0; n < 30; ++n) CHECK(r.spectrum.energies(n) == Approx(1.3 * (n + 0.5)).epsilon(1e-10));
  }
}

TEST_CASE("infinite square well: E_n = n^2 pi^2 / (2 L^2)", "[validation][spectrum]") {
  // Source: textbook result (common practice); values as tabulated for L = 1, 2, 0.8.
  const std::vector<std::pair<double, std::vector<double>>> cases = {
      {1.0, {4.9348022005446793, 19.739208802178717, 44.413219804902114}},
      {2.0, {1.2337005501361698, 4.9348022005446793, 11.103304951225528}},
      {0.8, {7.7106284383510614, 30.842513753404246, 69.395655945159553}}};
  for (const auto& [length, energies] : cases) {
    SpectrumRequest r;
    r.options.levels = 3;
    r.box = std::make_pair(-0.3, -0.3 + length);  // walls anywhere
    const auto res = compute_spectrum(Potential({Term::formula("flat", "0")}), r);
    for (int n = 0; n < 3; ++n) CHECK(res.spectrum.energies(n) == Approx(energies[n]).epsilon(1e-12));
  }
}

TEST_CASE("finite square well: transcendental roots and the grid's O(h^2) convergence", "[validation][spectrum]") {
  // Source: the even/odd conditions z tan z = sqrt(z0^2 - z^2), -z cot z = sqrt(z0^2 - z^2),
  // z = a sqrt(2E), z0 = a sqrt(2 V0) (standard, e.g. Griffiths, Introduction to QM, sec. 2.6,
  // from memory). V0 = 10, a = 1: three bound states, E - V0 = -9.180259926233368,
  // -6.779060021410409, -3.054233508773814 (roots recomputed below with Boost's TOMS 748).
  const double z0 = std::sqrt(20.0);
  const std::vector<double> reference = {-9.180259926233368, -6.779060021410409, -3.054233508773814};
  for (int n = 0; n < 3; ++n) {
    auto f = [&](double z) {
      const double q = std::sqrt(z0 * z0 - z * z);
      return n % 2 == 0 ? z * std::sin(z) - q * std::cos(z) : -z * std::cos(z) - q * std::sin(z);
    };
    boost::uintmax_t iterations = 100;
    const auto [a, b] = boost::math::tools::toms748_solve(f, n * M_PI / 2 + 1e-12, std::min((n + 1) * M_PI / 2, z0) - 1e-12,
                                                          boost::math::tools::eps_tolerance<double>(52), iterations);
    const double z = 0.5 * (a + b);
    CHECK(z * z / 2 - 10 == Approx(reference[n]).epsilon(1e-12));
  }
  // On a Fourier grid the jump in V limits convergence to O(h^2) when the edges sit midway
  // between nodes (a property of the discretisation, common practice): check that the error
  // falls by ~4 per halving of h, and that two Richardson steps (h^2, then h^4) over
  // h = 1/32, 1/64, 1/128 reach the roots to 1e-6 relative.
  const Potential well({Term("sq", Shape::square_well, {{"depth", 10.0}, {"half_width", 1.0}})});
  std::vector<Eigen::VectorXd> e;
  for (int m : {32, 64, 128}) {
    const double dx = 1.0 / m;
    const Grid g = Grid::periodic(-5 - dx / 2, 5 + dx / 2, std::size_t(10 * m + 1));
    SpectrumOptions o;
    o.levels = 3;
    e.push_back(solve_spectrum(g, well.evaluate(g.points()), o).energies);
  }
  for (int n = 0; n < 3; ++n) {
    const double r01 = (4 * e[1](n) - e[0](n)) / 3, r12 = (4 * e[2](n) - e[1](n)) / 3;
    const double richardson = (16 * r12 - r01) / 15;
    INFO("level " << n << ": " << e[0](n) << " " << e[1](n) << " " << e[2](n) << " extrapolated " << richardson);
    CHECK(richardson == Approx(reference[n]).epsilon(1e-6));
    const double ratio = (e[0](n) - reference[n]) / (e[1](n) - reference[n]);
    CHECK(ratio == Approx(4.0).margin(0.5));
  }
}

TEST_CASE("Morse potential: exact levels and six bound states", "[validation][spectrum]") {
  // Source: Morse, Phys. Rev. 34, 57 (1929) (from memory): E_n = D - (a^2/2)(lam - n - 1/2)^2,
  // lam = sqrt(2D)/a. D = 10, a = 0.8 (range 1/a = 1.25): six bound states. Level 5 lies
  // 2.6e-3 below D, so the search window reaches x ~ 300 (its tail needs x >~ 200).
  const Potential v({Term("m", Shape::morse, {{"depth", 10.0}, {"range", 1.25}})});
  const auto r = spectrum_of(v, 8, 300);
  const std::vector<double> exact = {1.7088543819998318475, 4.6465631459994954894, 6.9442719099991590601,
                                     8.6019806739988225598, 9.6196894379984859884, 9.9973982019981493460};
  for (int n = 0; n < 6; ++n) CHECK(std::abs(r.spectrum.energies(n) - exact[n]) < 1e-9);
  CHECK(bound_count(r) == 6);
  CHECK(r.finite_depth);
}

TEST_CASE("modified Poschl-Teller well: exact levels, threshold state not counted", "[validation][spectrum]") {
  // Source: Poschl & Teller, Z. Phys. 83, 143 (1933) (from memory); Landau & Lifshitz, QM,
  // sec. 23 problem 4 (from memory): E_n = -(1/(2 w^2)) (s - n)^2, s = (-1 + sqrt(1 + 8 V0 w^2))/2.
  const Potential deep({Term("p", Shape::poschl_teller, {{"depth", 10.0}, {"width", 1.0}})});
  const auto r1 = spectrum_of(deep, 6, 100);
  const std::vector<double> exact1 = {-8, -4.5, -2, -0.5};
  for (int n = 0; n < 4; ++n) CHECK(std::abs(r1.spectrum.energies(n) - exact1[n]) < 1e-9);
  CHECK(bound_count(r1) == 4);  // s = 4 exactly: the zero-energy threshold state is not bound
  const Potential wide({Term("p", Shape::poschl_teller, {{"depth", 4.0}, {"width", 1.5}})});
  const auto r2 = spectrum_of(wide, 6, 150);
  const std::vector<double> exact2 = {-3.1617773616313854258, -1.7075543071163784996, -0.69777569704581601785,
                                      -0.13244153141969798054};
  for (int n = 0; n < 4; ++n) CHECK(std::abs(r2.spectrum.energies(n) - exact2[n]) < 1e-9);
  CHECK(bound_count(r2) == 4);
}

TEST_CASE("quartic and anharmonic oscillators: literature eigenvalues", "[validation][spectrum]") {
  // Sources: Hioe & Montroll, J. Math. Phys. 16, 1945 (1975) (from memory); Banerjee et al.,
  // Proc. R. Soc. A 360, 575 (1978) (from memory); values recomputed by 130-digit series
  // shooting and a sinc DVR. p^2/2 + x^4: E_n = 2^(-2/3) e_n with e_n of -d^2/dx^2 + x^4.
  const Potential quartic({Term("q", Shape::polynomial, {{"quartic", 1.0}})});
  const std::vector<double> e = {0.66798625915577710827, 2.3936440164823031160, 4.6967953868636461962,
                                 7.3357299952270927988, 10.244308455438771076, 13.379336552601333386};
  for (auto method : {EigenMethod::dense, EigenMethod::lanczos, EigenMethod::hermite}) {
    const auto r = spectrum_of(quartic, 6, 500, method);
    for (int n = 0; n < 6; ++n) CHECK(r.spectrum.energies(n) == Approx(e[n]).epsilon(1e-10));
  }
  // p^2/2 + x^2/2 + (lam/2) x^4 = (1/2)(-d^2 + x^2 + lam x^4): lam = 1 and 0.1.
  const std::vector<std::tuple<double, double, double>> anharmonic = {
      {0.5, 0.69617582076514592783, 2.3244063521060387682}, {0.05, 0.53264275477185884443, 1.6534360065764567536}};
  for (const auto& [k, e0, e1] : anharmonic) {
    const Potential v({Term("a", Shape::polynomial, {{"frequency", 1.0}, {"quartic", k}})});
    for (auto method : {EigenMethod::dense, EigenMethod::hermite}) {
      const auto r = spectrum_of(v, 2, 500, method);
      CHECK(r.spectrum.energies(0) == Approx(e0).epsilon(1e-10));
      CHECK(r.spectrum.energies(1) == Approx(e1).epsilon(1e-10));
    }
  }
}

TEST_CASE("finite-difference orders 2 to 8 converge at their order", "[validation][spectrum]") {
  // p^2/2 + x^4/2 = (1/2)(-d^2 + x^4) on [-7, 7): E_0 = e_0 / 2 with e_0 = 1.0603620904841829
  // (Hioe & Montroll 1975, from memory; recomputed as above). The stencils' orders are
  // standard (common practice); the measured order must lie within p +- 0.2 before rounding.
  const Potential v({Term("q", Shape::polynomial, {{"quartic", 0.5}})});
  const double exact = 1.0603620904841828996 / 2;
  for (int order : {2, 4, 6, 8}) {
    // Order 8 meets rounding below h = 0.05, so it is measured on coarser grids.
    const std::vector<std::size_t> points = order == 8 ? std::vector<std::size_t>{70, 140} : std::vector<std::size_t>{140, 280};
    std::vector<double> error;
    for (std::size_t n : points) {
      const Grid g = Grid::periodic(-7, 7, n);
      SpectrumOptions o;
      o.levels = 1;
      o.method = EigenMethod::finite_difference;
      o.fd_order = order;
      error.push_back(std::abs(solve_spectrum(g, v.evaluate(g.points()), o).energies(0) - exact));
    }
    const double measured = std::log2(error[0] / error[1]);
    INFO("order " << order << ": errors " << error[0] << ", " << error[1]);
    CHECK(measured == Approx(order).margin(0.2));
  }
}

TEST_CASE("weak quartic term: first-order perturbative shift", "[validation][spectrum]") {
  // Rayleigh-Schroedinger theory for w^2 x^2/2 + k x^4 (standard; Bender & Wu, Phys. Rev. 184,
  // 1231 (1969), from memory): E_n = w(n + 1/2) + (3k/(4w^2))(2n^2 + 2n + 1)
  //   - (k^2/(8 w^5))(34 n^3 + 51 n^2 + 59 n + 21) + ...
  // Asymptotic and alternating, so |E - E_PT1| <= 1.2 |second-order term| for k <= 1e-3.
  // Exact values for w = 1, k = 1e-3 (series shooting at 130 digits) are checked too.
  const double k = 1e-3;
  const Potential v({Term("a", Shape::polynomial, {{"frequency", 1.0}, {"quartic", k}})});
  const auto r = spectrum_of(v, 4);
  const std::vector<double> exact = {0.500747395574729234, 1.50372961570250365, 2.50967435272579013, 3.51855718679064699};
  for (int n = 0; n < 4; ++n) {
    const double pt1 = n + 0.5 + 0.75 * k * (2 * n * n + 2 * n + 1);
    const double second = k * k / 8 * (34 * n * n * n + 51 * n * n + 59 * n + 21);
    CHECK(std::abs(r.spectrum.energies(n) - pt1) <= 1.2 * second);
    CHECK(r.spectrum.energies(n) == Approx(exact[n]).epsilon(1e-10));
  }
}
