#pragma once
// Analytic work statistics of the harmonic oscillator, the references that trapwork's
// propagated results are checked against. Internal units hbar = m = 1 (solver/units.hpp);
// omega is an angular frequency, energies are in internal energy units.
//
// Transition matrices are indexed P(m, n) = P(m -> n): row m = initial level of H_A,
// column n = final level of H_B, as everywhere in trapwork (solver/work.hpp).
//
// 1. Trap translated, V = omega^2 (x - x0(t))^2 / 2 (forced oscillator). The evolution is a
//    displacement D(alpha) (up to phases), so
//      P(m -> n) = |<n|D(alpha)|m>|^2 = (m!/n!) |alpha|^{2(n-m)} e^{-|alpha|^2} [L_m^{(n-m)}(|alpha|^2)]^2
//    for n >= m (swap m and n otherwise). Cahill & Glauber, Phys. Rev. 177, 1857 (1969)
//    (from memory). Constant speed v over tau: |alpha|^2 = v^2 (1 - cos omega tau)/omega and
//    <W> = 2 v^2 sin^2(omega tau/2) at any temperature (Husimi, Prog. Theor. Phys. 9, 381 (1953),
//    from memory; Talkner, Burada & Hanggi, PRE 78, 011115 (2008), journal ref from memory).
// 2. Frequency change omega(t) (parametric oscillator): Husimi's transition probabilities fixed
//    by the single number Q* >= 1 (Husimi 1953, from memory; Deffner & Lutz, PRE 77, 021128
//    (2008), formula from memory):
//      Q* = [omega0^2 (omega1^2 X^2 + X'^2) + (omega1^2 Y^2 + Y'^2)] / (2 omega0 omega1) at tau,
//    X, Y solving x'' + omega(t)^2 x = 0 with X(0) = 0, X'(0) = 1, Y(0) = 1, Y'(0) = 0.
//    <W> = (omega1 Q* - omega0) coth(beta omega0/2) / 2.
#include <Eigen/Dense>
#include <complex>
#include <functional>

namespace trapwork {

// ---- displaced (forced) oscillator -------------------------------------------------------

// Associated Laguerre polynomial L_m^{(k)}(x), k >= 0, by the three-term recurrence
// (j+1) L_{j+1} = (2j + 1 + k - x) L_j - (j + k) L_{j-1} (Abramowitz & Stegun 22.7.12, from
// memory), run upwards in m; the tests reproduce reference lines at |alpha|^2 = 8 up to
// m = n = 20, where a hypergeometric evaluation near Laguerre zeros loses digits.
double associated_laguerre(int m, int k, double x);

// |<n|D(alpha)|m>|^2 for |alpha|^2 = alpha2 >= 0. The factorial ratio and the powers are
// combined in log space (lgamma), so m, n up to several hundred do not overflow.
double displaced_probability(int m, int n, double alpha2);

// P(m -> n) for m < initial_levels, n < final_levels.
Eigen::MatrixXd displaced_transition_matrix(int initial_levels, int final_levels, double alpha2);

// Constant speed v over duration tau in a trap of angular frequency omega:
// |alpha|^2 = v^2 (1 - cos omega tau) / omega.
double constant_speed_alpha2(double omega, double speed, double tau);
// <W> = 2 v^2 sin^2(omega tau / 2), any temperature.
double constant_speed_mean_work(double omega, double speed, double tau);

// Coherent displacement at tau for a general path x0(t): the classical particle starting at
// rest at x0(0) obeys x'' = -omega^2 (x - x0(t)); then alpha = sqrt(omega/2) (z + i p/omega)
// with z = x(tau) - x0(tau), p = x'(tau) (lab momentum, measured against H_B at rest).
// Integrated with Boost.Odeint's controlled Dormand-Prince 5(4) stepper at the given absolute
// and relative tolerances (errors in alpha of about that size).
std::complex<double> translation_alpha(double omega, const std::function<double(double)>& centre,
                                       double tau, double abs_tolerance = 1e-12,
                                       double rel_tolerance = 1e-12);

// Thermal work distribution of the forced oscillator: W = k omega, k integer, with
// P(k) = exp(-|alpha|^2 coth(beta omega/2)) e^{k beta omega/2} I_k(|alpha|^2 / sinh(beta omega/2))
// (difference of two Poisson variables; Talkner, Burada & Hanggi 2008, from memory).
// Valid for beta omega > 0.
double displaced_thermal_line(int k, double alpha2, double beta, double omega);
// var W = omega^2 |alpha|^2 coth(beta omega / 2).
double displaced_thermal_variance(double alpha2, double beta, double omega);

// ---- parametric oscillator (frequency change) --------------------------------------------

// Sudden switch omega0 -> omega1: Q* = (omega0^2 + omega1^2) / (2 omega0 omega1).
double sudden_q(double omega0, double omega1);

// Q* for omega(t)^2 = omega_squared(t) on [0, tau] from the two classical solutions X, Y
// (formula above), integrated with Odeint's controlled Dormand-Prince 5(4) stepper.
// omega0^2 = omega_squared(0), omega1^2 = omega_squared(tau), both must be > 0.
double parametric_q(const std::function<double(double)>& omega_squared, double tau,
                    double abs_tolerance = 1e-13, double rel_tolerance = 1e-13);

// <W> = (omega1 Q* - omega0) coth(beta omega0 / 2) / 2 (Deffner & Lutz 2008, from memory).
double parametric_mean_work(double omega0, double omega1, double q, double beta);

// Husimi transition probabilities P(m -> n) for a given Q* >= 1.
// Method: the evolution is a Gaussian unitary with U^dagger b U = mu a + nu a^dagger
// (b, a the ladder operators of H_B, H_A), |mu|^2 = (Q*+1)/2, |nu|^2 = (Q*-1)/2; the phases
// of mu and nu are absorbed into the phases of the basis states, which leaves probabilities
// unchanged. Matrix elements A_nm = <n|U|m> then follow from
//   sqrt(n) A_{n-1,m} = mu sqrt(m+1) A_{n,m+1} + nu sqrt(m) A_{n,m-1}   (from <n|b^dagger U|m>),
//   |A_00|^2 = 1/mu,  A_{n+1,0} = (nu/mu) sqrt(n/(n+1)) A_{n-1,0}   (common practice for
// Bogoliubov transformations). The recurrence divides by mu >= 1, so it does not amplify
// rounding errors. Checked against Husimi's generating function in the tests.
Eigen::MatrixXd husimi_transition_matrix(int initial_levels, int final_levels, double q);

}  // namespace trapwork
