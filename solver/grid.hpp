#pragma once
// Uniform grids for one particle on a line.
//
// periodic (Fourier, pseudo-spectral): n points x_j = x_min + j dx, dx = (x_max - x_min)/n;
//   kinetic energy T = F^-1 diag(k^2/2) F with k in FFT order (k_j = 2 pi j/(n dx) for
//   j < n/2, (j - n) 2 pi/(n dx) above; the Nyquist mode j = n/2 has k = -pi/dx).
// hard wall (sine basis on a box [left, right]): n interior points x_j = left + (j+1) dx,
//   dx = (right-left)/(n+1); T = S diag((m pi/L)^2/2) S, m = 1..n, S the orthonormal DST-I
//   (FFTW's RODFT00). Walls anywhere: the box is where the walls are.
// Wavefunctions on a grid are stored as samples psi(x_j) with sum_j |psi_j|^2 dx = 1.
#include <cstddef>
#include <vector>

namespace trapwork {

enum class Boundary { periodic, hard_wall };

class Grid {
 public:
  // Throws PhysicsError if n < 4, or the extent is empty or not finite.
  static Grid periodic(double x_min, double x_max, std::size_t n);
  static Grid box(double left, double right, std::size_t n);

  Boundary boundary() const { return boundary_; }
  std::size_t size() const { return n_; }
  double spacing() const { return dx_; }
  double left() const { return left_; }    // x_min (periodic) or the left wall
  double right() const { return right_; }   // x_max (periodic, excluded) or the right wall
  double length() const { return right_ - left_; }
  double x(std::size_t j) const;
  std::vector<double> points() const;
  // Kinetic energy of each mode, in the order the transform produces them.
  const std::vector<double>& kinetic_modes() const { return kinetic_; }
  double max_kinetic() const { return max_kinetic_; }  // (pi/dx)^2/2 periodic; (n pi/L)^2/2 box

 private:
  Grid(Boundary b, double left, double right, std::size_t n);
  Boundary boundary_;
  double left_, right_, dx_;
  std::size_t n_;
  std::vector<double> kinetic_;
  double max_kinetic_ = 0;  // kept: the propagators ask for it every step
};

// The band-limited function that real samples on `g` represent (the one its kinetic energy
// acts on), evaluated at `x`: the trigonometric interpolant of a periodic grid (the Nyquist
// mode as a cosine) or the sine series of a box (0 at and beyond the walls). Direct sums,
// O(n (n + x.size())): meant for drawing states of small grids smoothly.
std::vector<double> band_limited_values(const Grid& g, const std::vector<double>& samples, const std::vector<double>& x);

// Smallest n' >= n of the form 2^a 3^b 5^c, even (fast FFT sizes).
std::size_t fast_fft_size(std::size_t n);

}  // namespace trapwork
