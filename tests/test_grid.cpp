// Unit tests of solver/grid.
#include <catch2/catch.hpp>

#include <cmath>

#include "solver/errors.hpp"
#include "solver/grid.hpp"

using namespace trapwork;

TEST_CASE("periodic grids place n points and FFT-ordered modes", "[grid]") {
  const Grid g = Grid::periodic(-2.0, 2.0, 8);
  CHECK(g.spacing() == 0.5);
  CHECK(g.x(0) == -2.0);
  CHECK(g.x(7) == 1.5);
  const double dk = 2 * M_PI / 4.0;
  CHECK(g.kinetic_modes()[1] == Approx(0.5 * dk * dk));
  CHECK(g.kinetic_modes()[4] == Approx(0.5 * std::pow(4 * dk, 2)));  // Nyquist: k = -pi/dx
  CHECK(g.kinetic_modes()[7] == Approx(0.5 * dk * dk));
  CHECK(g.max_kinetic() == Approx(0.5 * std::pow(M_PI / 0.5, 2)));
}

TEST_CASE("box grids hold interior points and sine modes", "[grid]") {
  const Grid b = Grid::box(0.0, 1.0, 9);
  CHECK(b.spacing() == Approx(0.1));
  CHECK(b.x(0) == Approx(0.1));
  CHECK(b.x(8) == Approx(0.9));
  CHECK(b.kinetic_modes()[0] == Approx(M_PI * M_PI / 2));  // E_1 of the unit box
  CHECK(b.kinetic_modes()[2] == Approx(9 * M_PI * M_PI / 2));
  CHECK(b.max_kinetic() == Approx(81 * M_PI * M_PI / 2));  // the top mode m = 9: (n pi/L)^2/2
  const Grid copy = b;                                     // the kept maximum travels with the grid
  CHECK(copy.max_kinetic() == b.kinetic_modes()[8]);
}

TEST_CASE("bad grids are refused", "[grid]") {
  CHECK_THROWS_AS(Grid::periodic(0, 1, 3), PhysicsError);
  CHECK_THROWS_AS(Grid::periodic(1, 1, 16), PhysicsError);
  CHECK_THROWS_AS(Grid::box(0, NAN, 16), PhysicsError);
}

TEST_CASE("fast FFT sizes are even 5-smooth numbers", "[grid]") {
  CHECK(fast_fft_size(1000) == 1000);
  CHECK(fast_fft_size(1001) == 1024);
  CHECK(fast_fft_size(7) == 8);
  CHECK(fast_fft_size(2049) == 2160);
}

TEST_CASE("band-limited values reproduce the functions a grid represents exactly", "[grid]") {
  const double pi = 3.14159265358979323846;
  std::vector<double> probe;
  for (int i = 0; i <= 40; ++i) probe.push_back(-2.3 + 5.6 * i / 40.0);
  {
    const Grid g = Grid::periodic(-2, 3, 16);  // L = 5; modes up to the Nyquist k = 8
    auto f = [&](double x) {
      const double u = 2 * pi * (x + 2) / 5;
      return 0.3 + std::cos(3 * u) - 0.5 * std::sin(5 * u) + 0.2 * std::cos(8 * u);
    };
    std::vector<double> samples;
    for (double x : g.points()) samples.push_back(f(x));
    const auto at_points = band_limited_values(g, samples, g.points());
    for (std::size_t j = 0; j < samples.size(); ++j) CHECK(at_points[j] == Approx(samples[j]).margin(1e-12));
    const auto v = band_limited_values(g, samples, probe);
    for (std::size_t i = 0; i < probe.size(); ++i) CHECK(v[i] == Approx(f(probe[i])).margin(1e-12));
  }
  {
    const Grid g = Grid::box(1, 4, 15);  // sine modes m = 1..15 of the box [1, 4]
    auto f = [&](double x) { return std::sin(2 * pi * (x - 1) / 3) + 0.3 * std::sin(7 * pi * (x - 1) / 3); };
    std::vector<double> samples;
    for (double x : g.points()) samples.push_back(f(x));
    const auto v = band_limited_values(g, samples, probe);
    for (std::size_t i = 0; i < probe.size(); ++i)
      CHECK(v[i] == Approx(probe[i] > 1 && probe[i] < 4 ? f(probe[i]) : 0.0).margin(1e-12));
  }
  CHECK_THROWS_AS(band_limited_values(Grid::box(0, 1, 8), std::vector<double>(7), probe), ContractViolation);
}
