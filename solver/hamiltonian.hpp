#pragma once
// Hamiltonians H = p^2/2 + V(x) (hbar = m = 1) on a grid or in a basis.
#include <Eigen/Dense>
#include <Eigen/SparseCore>
#include <memory>
#include <mutex>
#include <vector>

#include "solver/grid.hpp"

namespace trapwork {

// FFTW's planner is not thread-safe (FFTW 3 manual, "Thread safety"); only execution is. Every
// plan in trapwork is created and destroyed while holding this mutex (a function-local static,
// the library's one piece of shared state).
std::mutex& fftw_planner_mutex();

// Applies the grid's own kinetic operator (Fourier or DST-I, exactly the one the split-operator
// propagator uses) to the columns of a real matrix. Plans are made once for `columns` columns.
// Move-only; plan creation is serialised internally (FFTW's planner is not thread-safe).
class KineticOperator {
 public:
  KineticOperator(const Grid& grid, int columns);
  ~KineticOperator();
  KineticOperator(KineticOperator&&) noexcept;
  KineticOperator& operator=(KineticOperator&&) noexcept;
  KineticOperator(const KineticOperator&) = delete;
  KineticOperator& operator=(const KineticOperator&) = delete;
  int columns() const;
  // out = T in; in.cols() must equal columns().
  void apply(const Eigen::MatrixXd& in, Eigen::MatrixXd& out);

 private:
  struct Plans;
  std::unique_ptr<Plans> plans_;
};

// H = T + V applied to columns (T from KineticOperator).
void apply_hamiltonian(KineticOperator& kinetic, const std::vector<double>& v,
                       const Eigen::MatrixXd& in, Eigen::MatrixXd& out);

// The dense pseudo-spectral Hamiltonian on the grid (Fourier or sine): the same operator the
// propagator uses. Memory n^2 doubles.
Eigen::MatrixXd dense_hamiltonian(const Grid& grid, const std::vector<double>& v);

// Central finite-difference Hamiltonian of order 2, 4, 6 or 8 (standard stencils, Fornberg
// 1988 coefficients, common practice): periodic on a periodic grid; on a box grid the
// wavefunction is continued oddly through each wall (psi = 0 there, as for the sine basis).
// Throws PhysicsError for other orders.
Eigen::SparseMatrix<double> finite_difference_hamiltonian(const Grid& grid,
                                                          const std::vector<double>& v, int order);

// Harmonic-oscillator (Hermite-function) basis of `size` states of frequency omega about
// `centre`, for polynomial potentials V = sum_j c_j (x - centre)^j (c_0..c_8).
// Matrix elements of x^j are exact (x = (a + a^dagger)/sqrt(2 omega), powers built in a basis
// `size + 8` large, then truncated), so the only error is the truncation of the basis.
struct HermiteBasis {
  double omega = 1;
  double centre = 0;
  int size = 80;
};
Eigen::MatrixXd hermite_hamiltonian(const HermiteBasis& basis, const std::vector<double>& coefficients);
// Hermite functions phi_k(x) of the basis at the points x, as columns k = 0..count-1
// (phi_k ~ +x^k for large x).
Eigen::MatrixXd hermite_functions(const HermiteBasis& basis, const std::vector<double>& x, int count);

}  // namespace trapwork
