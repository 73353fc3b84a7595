#include "solver/harmonic_reference.hpp"

#include <array>
#include <boost/math/special_functions/bessel.hpp>
#include <boost/multiprecision/cpp_bin_float.hpp>
#include <boost/numeric/odeint.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "solver/errors.hpp"

namespace trapwork {

namespace odeint = boost::numeric::odeint;

double associated_laguerre(int m, int k, double x) {
  TRAPWORK_EXPECT(m >= 0 && k >= 0, "associated_laguerre needs m, k >= 0");
  if (m == 0) return 1.0;
  double previous = 1.0, current = 1.0 + k - x;
  for (int j = 1; j < m; ++j) {
    const double next = ((2.0 * j + 1.0 + k - x) * current - (j + k) * previous) / (j + 1.0);
    previous = current;
    current = next;
  }
  return current;
}

double displaced_probability(int m, int n, double alpha2) {
  TRAPWORK_EXPECT(m >= 0 && n >= 0 && alpha2 >= 0, "displaced_probability: bad arguments");
  if (alpha2 == 0) return m == n ? 1.0 : 0.0;
  const int lo = std::min(m, n), hi = std::max(m, n), k = hi - lo;
  const double laguerre = associated_laguerre(lo, k, alpha2);
  if (laguerre == 0) return 0.0;
  // log of (lo!/hi!) alpha2^k e^{-alpha2} L^2
  const double log_p = std::lgamma(lo + 1.0) - std::lgamma(hi + 1.0) + k * std::log(alpha2) - alpha2 +
                       2.0 * std::log(std::abs(laguerre));
  return std::exp(log_p);
}

namespace {
// A row of a unitary's transition probabilities holds at most probability 1: a recurrence that
// lost its digits gives more (or non-finite values).
bool unitary_rows(const Eigen::MatrixXd& p) {
  for (Eigen::Index m = 0; m < p.rows(); ++m)
    if (!(p.row(m).sum() <= 1 + 1e-12)) return false;
  return true;
}
}  // namespace

Eigen::MatrixXd displaced_transition_matrix(int initial_levels, int final_levels, double alpha2) {
  Eigen::MatrixXd p(initial_levels, final_levels);
  for (int m = 0; m < initial_levels; ++m)
    for (int n = 0; n < final_levels; ++n) p(m, n) = displaced_probability(m, n, alpha2);
  if (!unitary_rows(p))
    throw PhysicsError("the displaced oscillator's transition probabilities lose their digits for " +
                       std::to_string(initial_levels) + " initial and " + std::to_string(final_levels) +
                       " final levels at |alpha|^2 = " + std::to_string(alpha2));
  return p;
}

double constant_speed_alpha2(double omega, double speed, double tau) {
  TRAPWORK_EXPECT(omega > 0, "constant_speed_alpha2 needs omega > 0");
  // 1 - cos(w tau) = 2 sin^2(w tau / 2), written so that short ramps lose no digits
  const double s = std::sin(omega * tau / 2);
  return 2 * speed * speed * s * s / omega;
}

double constant_speed_mean_work(double omega, double speed, double tau) {
  const double s = std::sin(omega * tau / 2);
  return 2 * speed * speed * s * s;
}

std::complex<double> translation_alpha(double omega, const std::function<double(double)>& centre,
                                       double tau, double abs_tolerance, double rel_tolerance) {
  TRAPWORK_EXPECT(omega > 0 && tau >= 0, "translation_alpha needs omega > 0, tau >= 0");
  using State = std::array<double, 2>;  // lab position, lab momentum
  State s{centre(0.0), 0.0};
  if (tau > 0) {
    auto rhs = [&](const State& y, State& dy, double t) {
      dy[0] = y[1];
      dy[1] = -omega * omega * (y[0] - centre(t));
    };
    auto stepper = odeint::make_controlled(abs_tolerance, rel_tolerance, odeint::runge_kutta_dopri5<State>());
    odeint::integrate_adaptive(stepper, rhs, s, 0.0, tau, tau / 100);
  }
  const double z = s[0] - centre(tau);
  return std::sqrt(omega / 2) * std::complex<double>(z, s[1] / omega);
}

double displaced_thermal_line(int k, double alpha2, double beta, double omega) {
  TRAPWORK_EXPECT(beta * omega > 0 && alpha2 >= 0, "displaced_thermal_line needs beta omega > 0");
  const double half = beta * omega / 2;
  const double argument = alpha2 / std::sinh(half);
  if (argument == 0) return k == 0 ? 1.0 : 0.0;
  // Product formed in log space; I_k itself overflows only for arguments above ~700.
  const double bessel = boost::math::cyl_bessel_i(std::abs(k), argument);
  return std::exp(-alpha2 / std::tanh(half) + k * half + std::log(bessel));
}

double displaced_thermal_variance(double alpha2, double beta, double omega) {
  return omega * omega * alpha2 / std::tanh(beta * omega / 2);
}

double sudden_q(double omega0, double omega1) {
  TRAPWORK_EXPECT(omega0 > 0 && omega1 > 0, "sudden_q needs positive frequencies");
  return (omega0 * omega0 + omega1 * omega1) / (2 * omega0 * omega1);
}

double parametric_q(const std::function<double(double)>& omega_squared, double tau,
                    double abs_tolerance, double rel_tolerance) {
  const double w0sq = omega_squared(0.0), w1sq = omega_squared(tau);
  TRAPWORK_EXPECT(w0sq > 0 && w1sq > 0 && tau >= 0, "parametric_q needs omega^2 > 0 at the ends");
  using State = std::array<double, 4>;  // X, X', Y, Y'
  State s{0.0, 1.0, 1.0, 0.0};
  if (tau > 0) {
    auto rhs = [&](const State& y, State& dy, double t) {
      const double w2 = omega_squared(t);
      dy = {y[1], -w2 * y[0], y[3], -w2 * y[2]};
    };
    auto stepper = odeint::make_controlled(abs_tolerance, rel_tolerance, odeint::runge_kutta_dopri5<State>());
    odeint::integrate_adaptive(stepper, rhs, s, 0.0, tau, tau / 100);
  }
  const double w0 = std::sqrt(w0sq), w1 = std::sqrt(w1sq);
  return (w0sq * (w1sq * s[0] * s[0] + s[1] * s[1]) + (w1sq * s[2] * s[2] + s[3] * s[3])) / (2 * w0 * w1);
}

double parametric_mean_work(double omega0, double omega1, double q, double beta) {
  return 0.5 * (omega1 * q - omega0) / std::tanh(beta * omega0 / 2);
}

namespace {
// The amplitudes <n|U|m> of husimi_transition_matrix's recurrence in the number type T, squared
// to doubles; NaN where they fail the check below.
template <class T>
Eigen::MatrixXd husimi_probabilities(int rows, int cols, double q) {
  using std::sqrt;
  const T mu = sqrt((T(q) + 1) / 2), nu = sqrt(std::max(T(0), (T(q) - 1) / 2));
  std::vector<T> a(std::size_t(rows) * std::size_t(cols), T(0));  // a(n, m), column-major
  auto at = [&](int n, int m) -> T& { return a[std::size_t(m) * std::size_t(rows) + std::size_t(n)]; };
  at(0, 0) = 1 / sqrt(mu);
  for (int n = 1; n + 1 < rows; n += 2) at(n + 1, 0) = (nu / mu) * sqrt(T(n) / T(n + 1)) * at(n - 1, 0);
  for (int m = 0; m + 1 < cols; ++m)
    for (int n = 0; n < rows; ++n) {
      const T down = n > 0 ? T(sqrt(T(n)) * at(n - 1, m)) : T(0);
      const T back = m > 0 ? T(nu * sqrt(T(m)) * at(n, m - 1)) : T(0);
      at(n, m + 1) = (down - back) / (mu * sqrt(T(m + 1)));
    }
  Eigen::MatrixXd p(cols, rows);
  for (int m = 0; m < cols; ++m)
    for (int n = 0; n < rows; ++n) p(m, n) = static_cast<double>(at(n, m) * at(n, m));
  return p;
}
}  // namespace

Eigen::MatrixXd husimi_transition_matrix(int initial_levels, int final_levels, double q) {
  TRAPWORK_EXPECT(q >= 1 - 1e-12, "husimi_transition_matrix needs Q* >= 1");
  TRAPWORK_EXPECT(initial_levels > 0 && final_levels > 0, "husimi_transition_matrix: empty");
  // The recurrence in m subtracts nearly equal terms where the amplitudes are small, and its
  // errors grow with m: in doubles, 130 initial and 210 final levels at Q* = 4.16 gave
  // "probabilities" of 1.4e10. It runs in doubles, then with 50 and 100 decimal digits
  // (Boost.Multiprecision) until every row of P holds at most probability 1.
  Eigen::MatrixXd p = husimi_probabilities<double>(final_levels, initial_levels, q);
  if (unitary_rows(p)) return p;
  p = husimi_probabilities<boost::multiprecision::cpp_bin_float_50>(final_levels, initial_levels, q);
  if (unitary_rows(p)) return p;
  p = husimi_probabilities<boost::multiprecision::cpp_bin_float_100>(final_levels, initial_levels, q);
  if (unitary_rows(p)) return p;
  throw PhysicsError("Husimi's transition probabilities lose their digits for " +
                     std::to_string(initial_levels) + " initial and " + std::to_string(final_levels) +
                     " final levels at Q* = " + std::to_string(q) + " even with 100 decimal digits");
}

}  // namespace trapwork
