#include "solver/hamiltonian.hpp"

#include <fftw3.h>

#include <cmath>
#include <complex>
#include <mutex>

#include "solver/errors.hpp"
#include "solver/units.hpp"

namespace trapwork {

std::mutex& fftw_planner_mutex() {
  static std::mutex m;
  return m;
}

// Periodic: r2c, multiply by k^2/2 (with 1/n folded in), c2r. Box: RODFT00 twice, whose
// product is 2 (n + 1) times the identity (FFTW manual, "1d Real-odd DFTs (DSTs)").
struct KineticOperator::Plans {
  Boundary boundary;
  int n, columns, half;
  std::vector<double> factor;  // per transformed mode
  double* real_in = nullptr;
  double* real_out = nullptr;
  fftw_complex* spectrum = nullptr;
  fftw_plan forward = nullptr, backward = nullptr;

  Plans(const Grid& g, int cols) : boundary(g.boundary()), n(int(g.size())), columns(cols) {
    std::lock_guard lock(fftw_planner_mutex());
    real_in = fftw_alloc_real(std::size_t(n) * cols);
    real_out = fftw_alloc_real(std::size_t(n) * cols);
    if (boundary == Boundary::periodic) {
      half = n / 2 + 1;
      spectrum = fftw_alloc_complex(std::size_t(half) * cols);
      forward = fftw_plan_many_dft_r2c(1, &n, cols, real_in, nullptr, 1, n, spectrum, nullptr, 1, half,
                                       FFTW_ESTIMATE);
      backward = fftw_plan_many_dft_c2r(1, &n, cols, spectrum, nullptr, 1, half, real_out, nullptr, 1, n,
                                        FFTW_ESTIMATE);
      factor.resize(half);
      for (int j = 0; j < half; ++j) factor[j] = g.kinetic_modes()[j] / n;
    } else {
      half = n;
      const fftw_r2r_kind kind = FFTW_RODFT00;
      forward = fftw_plan_many_r2r(1, &n, cols, real_in, nullptr, 1, n, real_out, nullptr, 1, n, &kind,
                                   FFTW_ESTIMATE);
      backward = fftw_plan_many_r2r(1, &n, cols, real_out, nullptr, 1, n, real_in, nullptr, 1, n, &kind,
                                    FFTW_ESTIMATE);
      factor.resize(n);
      for (int j = 0; j < n; ++j) factor[j] = g.kinetic_modes()[j] / (2.0 * (n + 1));
    }
  }
  ~Plans() {
    std::lock_guard lock(fftw_planner_mutex());
    fftw_destroy_plan(forward);
    fftw_destroy_plan(backward);
    fftw_free(real_in);
    fftw_free(real_out);
    if (spectrum) fftw_free(spectrum);
  }
};

KineticOperator::KineticOperator(const Grid& grid, int columns) : plans_(std::make_unique<Plans>(grid, columns)) {}
KineticOperator::~KineticOperator() = default;
KineticOperator::KineticOperator(KineticOperator&&) noexcept = default;
KineticOperator& KineticOperator::operator=(KineticOperator&&) noexcept = default;
int KineticOperator::columns() const { return plans_->columns; }

void KineticOperator::apply(const Eigen::MatrixXd& in, Eigen::MatrixXd& out) {
  Plans& p = *plans_;
  TRAPWORK_EXPECT(in.rows() == p.n && in.cols() == p.columns, "KineticOperator::apply: wrong shape");
  out.resize(p.n, p.columns);
  std::copy(in.data(), in.data() + in.size(), p.real_in);
  fftw_execute(p.forward);
  if (p.boundary == Boundary::periodic) {
    for (int c = 0; c < p.columns; ++c)
      for (int j = 0; j < p.half; ++j) {
        p.spectrum[c * p.half + j][0] *= p.factor[j];
        p.spectrum[c * p.half + j][1] *= p.factor[j];
      }
    fftw_execute(p.backward);
    std::copy(p.real_out, p.real_out + in.size(), out.data());
  } else {
    for (int c = 0; c < p.columns; ++c)
      for (int j = 0; j < p.n; ++j) p.real_out[c * p.n + j] *= p.factor[j];
    fftw_execute(p.backward);
    std::copy(p.real_in, p.real_in + in.size(), out.data());
  }
}

void apply_hamiltonian(KineticOperator& kinetic, const std::vector<double>& v, const Eigen::MatrixXd& in,
                       Eigen::MatrixXd& out) {
  kinetic.apply(in, out);
  const Eigen::Map<const Eigen::VectorXd> vv(v.data(), Eigen::Index(v.size()));
  out += vv.asDiagonal() * in;
}

Eigen::MatrixXd dense_hamiltonian(const Grid& grid, const std::vector<double>& v) {
  const auto n = Eigen::Index(grid.size());
  TRAPWORK_EXPECT(Eigen::Index(v.size()) == n, "dense_hamiltonian: potential size differs from grid");
  Eigen::MatrixXd h(n, n);
  const auto& modes = grid.kinetic_modes();
  if (grid.boundary() == Boundary::periodic) {
    // T_jl = c(j - l) with c(d) = (1/n) sum_k (k^2/2) cos(2 pi k d / n): a real circulant.
    Eigen::VectorXd c(n);
    for (Eigen::Index d = 0; d < n; ++d) {
      double sum = 0;
      for (Eigen::Index k = 0; k < n; ++k) sum += modes[k] * std::cos(2 * si::pi * double((k * d) % n) / double(n));
      c(d) = sum / double(n);
    }
    for (Eigen::Index j = 0; j < n; ++j)
      for (Eigen::Index l = 0; l < n; ++l) h(j, l) = c((j - l + n) % n);
  } else {
    // T = S diag(kappa^2/2) S with the orthonormal DST-I S_jm = sqrt(2/(n+1)) sin(pi (j+1)(m+1)/(n+1)).
    Eigen::MatrixXd s(n, n);
    for (Eigen::Index j = 0; j < n; ++j)
      for (Eigen::Index m = 0; m < n; ++m)
        s(j, m) = std::sqrt(2.0 / double(n + 1)) * std::sin(si::pi * double((j + 1) * (m + 1)) / double(n + 1));
    const Eigen::Map<const Eigen::VectorXd> kin(modes.data(), n);
    h.noalias() = s * kin.asDiagonal() * s;
  }
  for (Eigen::Index j = 0; j < n; ++j) h(j, j) += v[j];
  return h;
}

Eigen::SparseMatrix<double> finite_difference_hamiltonian(const Grid& grid, const std::vector<double>& v, int order) {
  // Central second-derivative stencils (Fornberg, Math. Comp. 51, 699 (1988); common practice).
  static const std::vector<std::vector<double>> stencils = {
      {-2.0, 1.0},
      {-5.0 / 2, 4.0 / 3, -1.0 / 12},
      {-49.0 / 18, 3.0 / 2, -3.0 / 20, 1.0 / 90},
      {-205.0 / 72, 8.0 / 5, -1.0 / 5, 8.0 / 315, -1.0 / 560}};
  if (order != 2 && order != 4 && order != 6 && order != 8)
    throw PhysicsError("finite-difference order " + std::to_string(order) + " is not one of 2, 4, 6, 8");
  const auto& w = stencils[order / 2 - 1];
  const int n = int(grid.size()), r = order / 2;
  const double scale = -0.5 / (grid.spacing() * grid.spacing());
  const bool odd_walls = grid.boundary() == Boundary::hard_wall;  // psi(-x) = -psi(x) about a wall
  std::vector<Eigen::Triplet<double>> entries;
  entries.reserve(std::size_t(n) * (2 * r + 1) + 2 * r * r);
  for (int j = 0; j < n; ++j) {
    entries.emplace_back(j, j, scale * w[0] + v[j]);
    for (int d = 1; d <= r; ++d) {
      for (int target : {j - d, j + d}) {
        if (target >= 0 && target < n) {
          entries.emplace_back(j, target, scale * w[d]);
        } else if (!odd_walls) {
          // Periodic grid: the stencil wraps around, like the Fourier operator it stands in for
          // (so states that reach the grid's ends are treated alike by both).
          entries.emplace_back(j, (target + n) % n, scale * w[d]);
        } else {
          // Interior index j sits at distance j+1 from the left wall (index -1) and n-j from
          // the right one (index n); a ghost point mirrors to an interior one with a sign flip.
          const int mirrored = target < 0 ? -2 - target : 2 * n - target;
          if (mirrored >= 0 && mirrored < n) entries.emplace_back(j, mirrored, -scale * w[d]);
        }
      }
    }
  }
  Eigen::SparseMatrix<double> h(n, n);
  h.setFromTriplets(entries.begin(), entries.end());
  return h;
}

Eigen::MatrixXd hermite_hamiltonian(const HermiteBasis& basis, const std::vector<double>& coefficients) {
  TRAPWORK_EXPECT(coefficients.size() <= 9, "hermite_hamiltonian: polynomial degree above 8");
  const int m = basis.size, big = basis.size + 8;
  const double w = basis.omega;
  Eigen::MatrixXd x = Eigen::MatrixXd::Zero(big, big);
  for (int k = 0; k + 1 < big; ++k) x(k, k + 1) = x(k + 1, k) = std::sqrt((k + 1) / (2 * w));
  Eigen::MatrixXd h = Eigen::MatrixXd::Zero(m, m);
  // Kinetic p^2/2 with p = i sqrt(w/2) (a^dagger - a).
  for (int k = 0; k < m; ++k) {
    h(k, k) += w * (2 * k + 1) / 4;
    if (k + 2 < m) h(k, k + 2) = h(k + 2, k) = -w / 4 * std::sqrt(double(k + 1) * (k + 2));
  }
  Eigen::MatrixXd power = Eigen::MatrixXd::Identity(big, big);
  for (std::size_t j = 0; j < coefficients.size(); ++j) {
    if (j > 0) power = (power * x).eval();
    if (coefficients[j] != 0) h += coefficients[j] * power.topLeftCorner(m, m);
  }
  return h;
}

Eigen::MatrixXd hermite_functions(const HermiteBasis& basis, const std::vector<double>& xs, int count) {
  const double w = basis.omega;
  Eigen::MatrixXd f(Eigen::Index(xs.size()), count);
  for (std::size_t i = 0; i < xs.size(); ++i) {
    const double y = xs[i] - basis.centre;
    double prev = 0, cur = std::pow(w / si::pi, 0.25) * std::exp(-0.5 * w * y * y);
    for (int k = 0; k < count; ++k) {
      f(Eigen::Index(i), k) = cur;
      const double next = std::sqrt(2.0 * w / (k + 1)) * y * cur - std::sqrt(double(k) / (k + 1)) * prev;
      prev = cur;
      cur = next;
    }
  }
  return f;
}

}  // namespace trapwork
