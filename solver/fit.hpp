#pragma once
// Fitting the coefficients of a polynomial trap to measured transition frequencies
// (motional sideband spectroscopy). Internal units hbar = m = 1 (solver/units.hpp).
//
// Model for a datum taken with a known linear term F (a tilt, e.g. a static field on an ion):
//   H(F) = p^2/2 + (1/2) omega^2 x^2 + sum_{p=3..8} k_p x^p + F x,
//   model frequency  2 pi nu_ij = E_j(F) - E_i(F)  (hbar = 1, so angular frequency = energy).
// The trap centre c drops out of every transition frequency (a translation changes H only by
// the constant F c), so it is not a parameter: the coefficients are those of (x - c)^p.
// Energies: dense diagonalisation of hermite_hamiltonian (solver/hamiltonian.hpp) in a Hermite
// basis about the local minimum of V + F x with its local curvature; the basis is enlarged in
// steps of 20 states until the levels used change by less than `basis_tolerance` times the
// smallest uncertainty (checked at the start and at the solution).
// Least squares: chi^2 = sum_d ((E_j - E_i - 2 pi nu_d) / (2 pi sigma_d))^2, minimised by
// Levenberg-Marquardt with Marquardt's diagonal scaling (Levenberg 1944; Marquardt 1963; from
// memory). Jacobian analytic by Hellmann-Feynman: dE_n/dk_p = <n| x^p |n>,
// dE_n/domega = omega <n| x^2 |n>, with the same Hermite-basis matrices.
#include <Eigen/Dense>
#include <array>
#include <string>
#include <string_view>
#include <vector>

namespace trapwork {

// Fit parameters: the harmonic frequency and the anharmonic coefficients k_3..k_8.
enum class TrapCoefficient {
  frequency = 2,
  cubic = 3,
  quartic = 4,
  quintic = 5,
  sextic = 6,
  septic = 7,
  octic = 8
};
std::string_view coefficient_name(TrapCoefficient c);  // "frequency", "cubic", ...

// V(x) = (1/2) omega^2 x^2 + sum_{p=3..8} k[p] x^p (x measured from the trap centre).
struct PolynomialTrap {
  double omega = 1;           // angular trap frequency (1/time unit), > 0
  std::array<double, 9> k{};  // k[p]: coefficient of x^p (energy / length^p) for p = 3..8; k[0..2] unused
  double get(TrapCoefficient c) const;
  void set(TrapCoefficient c, double value);
};

// One measured transition.
struct TransitionDatum {
  int lower = 0, upper = 1;  // level indices, 0 <= lower < upper
  double frequency = 0;      // measured ordinary frequency nu (cycles per internal time unit,
                             // i.e. nu_Hz * UnitSystem::time_s()); the model compares 2 pi nu
  double uncertainty = 0;    // standard uncertainty of nu (same unit), > 0
  double force = 0;          // known linear term F of V + F x (energy / length)
};

struct FitOptions {
  int max_iterations = 100;
  double step_tolerance = 1e-7;  // converged when every step is below this many standard uncertainties
  int basis_size = 0;  // Hermite states; 0: automatic (max(60, highest level + 40), enlarged as needed)
  int max_basis_size = 400;
  double basis_tolerance =
      1e-3;  // allowed level change on enlarging the basis, in units of the smallest 2 pi sigma
  double singular_tolerance =
      1e-12;  // refuse when the smallest eigenvalue of J^T W J in correlation form
              // (unit diagonal) is below this: the combination is fixed to worse than
              // ~1e-6 of the single-parameter precision, near the double-precision floor
};

struct TrapFit {
  PolynomialTrap trap;                // best fit; fixed coefficients as given
  std::vector<TrapCoefficient> free;  // order of the vectors and matrices below
  Eigen::VectorXd value;              // best-fit values of the free coefficients
  // Covariance (J^T W J)^-1, W = diag(1/(2 pi sigma)^2): trusts the stated uncertainties.
  Eigen::MatrixXd covariance;
  Eigen::VectorXd uncertainty;  // sqrt(diag(covariance))
  // The same scaled by the reduced chi-square chi^2/dof (lets the scatter set the scale; NaN if dof = 0).
  Eigen::MatrixXd scaled_covariance;
  Eigen::VectorXd scaled_uncertainty;
  Eigen::MatrixXd correlation;          // covariance / (uncertainty_i uncertainty_j), same for both
  std::vector<double> model_frequency;  // ordinary model frequency per datum
  std::vector<double> residual;         // (nu_measured - nu_model) / sigma per datum
  double chi_square = 0;
  int degrees_of_freedom = 0;  // data - free coefficients
  double p_value = 0;          // P(chi^2_dof >= chi_square); NaN if dof = 0
  int independent_data = 0;    // independent level differences in the data
  int iterations = 0;
  std::string status;       // how convergence was reached
  int basis_size = 0;       // Hermite states used
  double basis_change = 0;  // max level change (energy) on adding 20 states, at the solution
};

// Levels E_0..E_{levels-1} of V + F x in a Hermite basis of `basis_size` states about the local
// minimum (0: automatic, enlarged until converged to 1e-12 energy units). Throws PhysicsError when
// V + F x has no local minimum near the centre or the basis does not converge.
Eigen::VectorXd trap_levels(const PolynomialTrap& trap, double force, int levels, int basis_size = 0);

// Least-squares fit of the `free` coefficients, starting from `start`. Throws InputError for
// malformed data (key "data[i].field") and PhysicsError when the data cannot determine the fit:
// fewer independent transitions than free coefficients, cubic together with an even coefficient
// from data at a single force, a (near-)singular J^T W J (naming the combination), a basis that
// does not converge, or no convergence within max_iterations.
TrapFit fit_trap(const std::vector<TransitionDatum>& data, const PolynomialTrap& start,
                 const std::vector<TrapCoefficient>& free, const FitOptions& options = {});

// Closed-form quartic from the anharmonic shift delta of the spacings (angular, hbar = m = 1):
// first order k1 = omega^2 delta / 3 (from <n|x^4|n> = 3 (2n^2 + 2n + 1)/(4 omega^2)), and with
// the second-order term of Rayleigh-Schroedinger theory, delta = 3k/omega^2 - 38.25 k^2/omega^5,
// inverted: k2 = k1 + 12.75 k1^2 / omega^3. delta = E_{n+1} - 2 E_n + E_{n-1}, e.g. nu_12 - nu_01.
struct QuarticEstimate {
  double first_order = 0, second_order = 0;
};
QuarticEstimate quartic_from_shift(double omega, double shift);
// First order in SI: k = m^2 omega^2 delta / (3 hbar) in J/m^4 (mass kg, omega and delta in rad/s).
double quartic_from_shift_si(double mass_kg, double omega_rad_s, double shift_rad_s);

}  // namespace trapwork
