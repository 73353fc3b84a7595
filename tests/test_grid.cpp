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
