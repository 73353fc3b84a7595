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
  max_kinetic_ = *std::max_element(kinetic_.begin(), kinetic_.end());
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

std::vector<double> band_limited_values(const Grid& g, const std::vector<double>& samples, const std::vector<double>& x) {
  const std::size_t n = g.size();
  if (samples.size() != n) throw ContractViolation("band_limited_values: one sample per grid point");
  const double pi = 3.14159265358979323846;
  std::vector<double> out(x.size(), 0.0);
  if (g.boundary() == Boundary::hard_wall) {
    // f(x) = sum_m b_m sin(m pi (x - left)/L), m = 1..n; b_m from the DST-I of the samples
    const double nn = double(n + 1);
    for (std::size_t m = 1; m <= n; ++m) {
      double b = 0;
      for (std::size_t j = 0; j < n; ++j) b += samples[j] * std::sin(pi * double(m) * double(j + 1) / nn);
      b *= 2 / nn;
      for (std::size_t i = 0; i < x.size(); ++i)
        if (x[i] > g.left() && x[i] < g.right()) out[i] += b * std::sin(pi * double(m) * (x[i] - g.left()) / g.length());
    }
    return out;
  }
  // f(x) = (1/n) sum_k F_k exp(i k' (x - x_0)), k' = 2 pi k / (n dx), |k| <= n/2 (the Nyquist
  // mode, even n, as F_{n/2} cos(pi (x - x_0)/dx)); real samples: F_{-k} = conj F_k
  for (std::size_t k = 0; k <= n / 2; ++k) {
    double re = 0, im = 0;
    for (std::size_t j = 0; j < n; ++j) {
      const double a = 2 * pi * double(k) * double(j) / double(n);
      re += samples[j] * std::cos(a);
      im -= samples[j] * std::sin(a);
    }
    const bool single = k == 0 || 2 * k == n;  // no partner mode
    const double weight = (single ? 1.0 : 2.0) / double(n), kx = 2 * pi * double(k) / g.length();
    for (std::size_t i = 0; i < x.size(); ++i) {
      const double a = kx * (x[i] - g.left());
      out[i] += weight * (2 * k == n ? re * std::cos(a) : re * std::cos(a) - im * std::sin(a));
    }
  }
  return out;
}

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
