#include "solver/grid.hpp"

#include <algorithm>
#include <cmath>
#include <string>

#include "solver/errors.hpp"
#include "solver/units.hpp"

namespace trapwork {

Grid::Grid(Boundary b, double left, double right, std::size_t n)
    : boundary_(b), left_(left), right_(right), n_(n) {
  if (n < 4) throw PhysicsError("grid: " + std::to_string(n) + " points is too few (need at least 4)");
  if (!std::isfinite(left) || !std::isfinite(right) || !(right > left))
    throw PhysicsError("grid: extent [" + std::to_string(left) + ", " + std::to_string(right) +
                       "] is empty or not finite");
  const double pi = si::pi;
  kinetic_.resize(n);
  if (b == Boundary::periodic) {
    dx_ = (right - left) / double(n);
    const double dk = 2 * pi / (double(n) * dx_);
    for (std::size_t j = 0; j < n; ++j) {
      const double m = 2 * j < n ? double(j) : double(j) - double(n);  // even n: Nyquist negative
      kinetic_[j] = 0.5 * (m * dk) * (m * dk);
    }
  } else {
    dx_ = (right - left) / double(n + 1);
    for (std::size_t m = 0; m < n; ++m) {
      const double k = double(m + 1) * pi / (right - left);
      kinetic_[m] = 0.5 * k * k;
    }
  }
}

Grid Grid::periodic(double x_min, double x_max, std::size_t n) { return Grid(Boundary::periodic, x_min, x_max, n); }
Grid Grid::box(double left, double right, std::size_t n) { return Grid(Boundary::hard_wall, left, right, n); }

double Grid::x(std::size_t j) const {
  return boundary_ == Boundary::periodic ? left_ + double(j) * dx_ : left_ + double(j + 1) * dx_;
}

std::vector<double> Grid::points() const {
  std::vector<double> p(n_);
  for (std::size_t j = 0; j < n_; ++j) p[j] = x(j);
  return p;
}

double Grid::max_kinetic() const { return *std::max_element(kinetic_.begin(), kinetic_.end()); }

std::size_t fast_fft_size(std::size_t n) {
  for (std::size_t m = std::max<std::size_t>(n, 4);; ++m) {
    if (m % 2) continue;
    std::size_t r = m;
    for (std::size_t f : {2, 3, 5})
      while (r % f == 0) r /= f;
    if (r == 1) return m;
  }
}

}  // namespace trapwork
