#include "solver/fit.hpp"

#include <Eigen/Eigenvalues>
#include <algorithm>
#include <boost/math/distributions/chi_squared.hpp>
#include <cmath>
#include <limits>
#include <map>
#include <numeric>
#include <set>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/hamiltonian.hpp"
#include "solver/units.hpp"

namespace trapwork {

std::string_view coefficient_name(TrapCoefficient c) {
  switch (c) {
    case TrapCoefficient::frequency:
      return "frequency";
    case TrapCoefficient::cubic:
      return "cubic";
    case TrapCoefficient::quartic:
      return "quartic";
    case TrapCoefficient::quintic:
      return "quintic";
    case TrapCoefficient::sextic:
      return "sextic";
    case TrapCoefficient::septic:
      return "septic";
    case TrapCoefficient::octic:
      return "octic";
  }
  return "?";
}

double PolynomialTrap::get(TrapCoefficient c) const {
  return c == TrapCoefficient::frequency ? omega : k[std::size_t(c)];
}
void PolynomialTrap::set(TrapCoefficient c, double value) {
  if (c == TrapCoefficient::frequency)
    omega = value;
  else
    k[std::size_t(c)] = value;
}

namespace {

constexpr int basis_step = 20;

double binomial(int n, int j) {
  double b = 1;
  for (int i = 1; i <= j; ++i) b = b * (n - j + i) / i;
  return b;
}

// Coefficients of sum_i a_i x^i re-expanded about x0: sum_j b_j (x - x0)^j.
std::vector<double> shift_polynomial(const std::vector<double>& a, double x0) {
  std::vector<double> b(a.size(), 0.0);
  for (std::size_t i = 0; i < a.size(); ++i)
    for (std::size_t j = 0; j <= i; ++j)
      b[j] += a[i] * binomial(int(i), int(j)) * std::pow(x0, double(i - j));
  return b;
}

// V + F x as coefficients a_0..a_8 of x^j.
std::vector<double> polynomial_of(const PolynomialTrap& trap, double force) {
  std::vector<double> a(9, 0.0);
  a[1] = force;
  a[2] = trap.omega * trap.omega / 2;
  for (int p = 3; p <= 8; ++p) a[std::size_t(p)] = trap.k[std::size_t(p)];
  return a;
}

// The Hermite basis about the local minimum of V + F x nearest the trap centre (Newton on
// V' = 0 from the harmonic estimate -F/omega^2), with the local curvature as its frequency.
HermiteBasis local_basis(const std::vector<double>& a, int size, double force) {
  auto derivative = [&](double x, int order) {
    double s = 0;
    for (std::size_t i = std::size_t(order); i < a.size(); ++i) {
      double f = 1;
      for (int d = 0; d < order; ++d) f *= double(i) - d;
      s += a[i] * f * std::pow(x, double(i) - order);
    }
    return s;
  };
  double x = -force / (2 * a[2]);
  bool found = false;
  for (int it = 0; it < 100 && std::isfinite(x); ++it) {
    const double curvature = derivative(x, 2);
    if (!(curvature > 0)) break;
    const double step = derivative(x, 1) / curvature;
    x -= step;
    if (std::abs(step) <= 1e-14 * (1 + std::abs(x))) {
      found = derivative(x, 2) > 0;
      break;
    }
  }
  if (!found) {
    std::ostringstream s;
    s << "trap: V + F x has no local minimum near the trap centre at force F = " << force
      << " (the tilt overcomes the trap): use a smaller force or a confining quartic";
    throw PhysicsError(s.str());
  }
  return HermiteBasis{std::sqrt(derivative(x, 2)), x, size};
}

struct LevelSolution {
  Eigen::VectorXd energies;
  Eigen::MatrixXd states;  // columns: the levels used, in the Hermite basis
  HermiteBasis basis;
};

LevelSolution solve_levels(const PolynomialTrap& trap, double force, int levels, int size) {
  const std::vector<double> a = polynomial_of(trap, force);
  const HermiteBasis basis = local_basis(a, size, force);
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(
      hermite_hamiltonian(basis, shift_polynomial(a, basis.centre)));
  return {eig.eigenvalues().head(levels), eig.eigenvectors().leftCols(levels), basis};
}

// Smallest basis (from `size`, in steps of 20) whose levels change by at most `tolerance` on
// adding 20 states; returns the size and the change.
std::pair<int, double> converged_basis(const PolynomialTrap& trap, double force, int levels, int size,
                                       int max_size, double tolerance) {
  Eigen::VectorXd e = solve_levels(trap, force, levels, size).energies;
  for (;;) {
    if (size + basis_step > max_size) {
      std::ostringstream s;
      s << "trap: levels up to " << levels - 1 << " at force " << force
        << " do not converge in a Hermite basis of " << max_size
        << " states: the trap is too anharmonic (or not confining) for these levels";
      throw PhysicsError(s.str());
    }
    const Eigen::VectorXd bigger = solve_levels(trap, force, levels, size + basis_step).energies;
    const double change = (bigger - e).cwiseAbs().maxCoeff();
    if (change <= tolerance) return {size, change};
    size += basis_step;
    e = bigger;
  }
}

// Matrix of x^p (p >= 1) in the basis: expand x^p = sum_j C(p,j) x0^{p-j} (x - x0)^j.
Eigen::MatrixXd power_matrix(const HermiteBasis& basis, int p, const Eigen::MatrixXd& kinetic) {
  std::vector<double> a(std::size_t(p) + 1, 0.0);
  a[std::size_t(p)] = 1;
  return hermite_hamiltonian(basis, shift_polynomial(a, basis.centre)) - kinetic;
}

// Independent level differences: per force, (levels touched) - (connected components).
int independent_transitions(const std::vector<TransitionDatum>& data) {
  std::map<double, std::vector<std::pair<int, int>>> by_force;
  for (const auto& d : data) by_force[d.force].push_back({d.lower, d.upper});
  int rank = 0;
  for (const auto& [force, edges] : by_force) {
    std::map<int, int> parent;
    auto find = [&](int v) {
      while (parent[v] != v) v = parent[v] = parent[parent[v]];
      return v;
    };
    for (auto [i, j] : edges) {
      parent.try_emplace(i, i);
      parent.try_emplace(j, j);
      const int ri = find(i), rj = find(j);
      if (ri != rj) {
        parent[ri] = rj;
        ++rank;
      }
    }
  }
  return rank;
}

std::string names(const std::vector<TrapCoefficient>& c) {
  std::string s;
  for (std::size_t i = 0; i < c.size(); ++i) {
    if (i > 0) s += (i + 1 == c.size()) ? " and " : ", ";
    s += coefficient_name(c[i]);
  }
  return s;
}

struct Evaluation {
  Eigen::VectorXd residual;  // (model - measured) / sigma, angular
  Eigen::MatrixXd jacobian;  // d residual / d free
  Eigen::VectorXd model;     // model angular frequencies
  Eigen::VectorXd
      scale;  // per parameter: the Jacobian column's norm were every term |.| (rounding reference)
};

class Model {
 public:
  Model(const std::vector<TransitionDatum>& data, std::vector<TrapCoefficient> free)
      : data_(data), free_(std::move(free)) {
    for (const auto& d : data_) {
      levels_[d.force] = std::max(levels_[d.force], d.upper + 1);
    }
  }

  const std::map<double, int>& levels() const { return levels_; }

  Evaluation evaluate(const PolynomialTrap& trap, int size) const {
    const Eigen::Index n = Eigen::Index(data_.size()), p = Eigen::Index(free_.size());
    Evaluation ev{Eigen::VectorXd(n), Eigen::MatrixXd(n, p), Eigen::VectorXd(n), Eigen::VectorXd::Zero(p)};
    Eigen::MatrixXd magnitude(n, p);
    for (const auto& [force, count] : levels_) {
      const LevelSolution sol = solve_levels(trap, force, count, size);
      const Eigen::MatrixXd kinetic = hermite_hamiltonian(sol.basis, {});
      // Hellmann-Feynman: dE_n/dtheta = <n| dH/dtheta |n>, one row per level, one column per parameter.
      Eigen::MatrixXd dE(count, p), dE_magnitude(count, p);
      const Eigen::MatrixXd abs_states = sol.states.cwiseAbs();
      for (Eigen::Index q = 0; q < p; ++q) {
        const int order = int(free_[std::size_t(q)]);
        const Eigen::MatrixXd op = power_matrix(sol.basis, order, kinetic);
        const double factor = free_[std::size_t(q)] == TrapCoefficient::frequency ? trap.omega : 1.0;
        dE.col(q) = factor * (sol.states.transpose() * op * sol.states).diagonal();
        dE_magnitude.col(q) = factor * (abs_states.transpose() * op.cwiseAbs() * abs_states).diagonal();
      }
      for (Eigen::Index d = 0; d < n; ++d) {
        const auto& datum = data_[std::size_t(d)];
        if (datum.force != force) continue;
        const double sigma = 2 * si::pi * datum.uncertainty;
        ev.model(d) = sol.energies(datum.upper) - sol.energies(datum.lower);
        ev.residual(d) = (ev.model(d) - 2 * si::pi * datum.frequency) / sigma;
        ev.jacobian.row(d) = (dE.row(datum.upper) - dE.row(datum.lower)) / sigma;
        magnitude.row(d) = (dE_magnitude.row(datum.upper) + dE_magnitude.row(datum.lower)) / sigma;
      }
    }
    ev.scale = magnitude.colwise().norm().transpose();
    return ev;
  }

 private:
  const std::vector<TransitionDatum>& data_;
  std::vector<TrapCoefficient> free_;
  std::map<double, int> levels_;
};

// Refuses a (near-)singular normal matrix, naming the undetermined combination.
void check_determined(const Evaluation& ev, const std::vector<TrapCoefficient>& free, bool single_force,
                      double tolerance) {
  const Eigen::MatrixXd& jacobian = ev.jacobian;
  const Eigen::MatrixXd a = jacobian.transpose() * jacobian;
  const Eigen::Index p = a.rows();
  const std::string hint =
      single_force ? ": spacings of one ladder at a single trap position (one force) do not separate them; "
                     "add data at "
                     "several displacements/forces (tilts), or fix one of them"
                   : ": add transitions between other levels or at other forces, or fix one of them";
  // A column at the rounding level of its own terms (1e-10 of their magnitude; rounding is
  // ~1e-16 of it) is a zero derivative, e.g. <n|x^3|n> of a parity-symmetric trap.
  for (Eigen::Index q = 0; q < p; ++q)
    if (!(jacobian.col(q).norm() > 1e-10 * ev.scale(q))) {
      std::string s = "fit: " + std::string(coefficient_name(free[std::size_t(q)])) +
                      " is not determined by the data (the model frequencies do not depend on it here";
      if (single_force && int(free[std::size_t(q)]) % 2 == 1)
        s += "; at a single force with no odd terms the levels are even in the odd coefficients, "
             "as V(x) and V(-x) have the same spectrum";
      throw PhysicsError(s + ")" + hint);
    }
  const Eigen::VectorXd d = a.diagonal().cwiseSqrt().cwiseInverse();
  const Eigen::MatrixXd c = d.asDiagonal() * a * d.asDiagonal();
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(c);
  if (eig.eigenvalues()(0) >= tolerance * eig.eigenvalues()(p - 1)) return;
  const Eigen::VectorXd v = eig.eigenvectors().col(0);
  std::vector<TrapCoefficient> involved;
  for (Eigen::Index q = 0; q < p; ++q)
    if (std::abs(v(q)) > 0.2) involved.push_back(free[std::size_t(q)]);
  std::ostringstream s;
  s << "fit: " << names(involved) << " are not separately determined by the data (J^T W J near-singular, "
    << "smallest eigenvalue of its correlation form " << eig.eigenvalues()(0) << ")" << hint;
  throw PhysicsError(s.str());
}

void validate(const std::vector<TransitionDatum>& data, const PolynomialTrap& start,
              const std::vector<TrapCoefficient>& free) {
  for (std::size_t i = 0; i < data.size(); ++i) {
    const auto& d = data[i];
    const std::string key = "data[" + std::to_string(i) + "]";
    if (d.lower < 0 || d.upper <= d.lower)
      throw InputError(key + ".levels", std::to_string(d.lower) + " -> " + std::to_string(d.upper),
                       "0 <= lower < upper");
    if (!std::isfinite(d.frequency) || d.frequency <= 0)
      throw InputError(key + ".frequency", std::to_string(d.frequency), "a finite frequency > 0");
    if (!std::isfinite(d.uncertainty) || d.uncertainty <= 0)
      throw InputError(key + ".uncertainty", std::to_string(d.uncertainty), "a finite uncertainty > 0");
    if (!std::isfinite(d.force)) throw InputError(key + ".force", std::to_string(d.force), "a finite force");
  }
  if (!(start.omega > 0) || !std::isfinite(start.omega))
    throw InputError("start.frequency", std::to_string(start.omega), "an angular frequency > 0");
  std::set<TrapCoefficient> seen;
  for (auto c : free)
    if (!seen.insert(c).second)
      throw InputError("free", std::string(coefficient_name(c)), "each coefficient once");
  if (free.empty()) throw InputError("free", "(none)", "at least one free coefficient");
}

}  // namespace

Eigen::VectorXd trap_levels(const PolynomialTrap& trap, double force, int levels, int basis_size) {
  TRAPWORK_EXPECT(levels > 0, "trap_levels needs levels > 0");
  int size = basis_size;
  if (size <= 0) size = converged_basis(trap, force, levels, std::max(60, levels + 40), 1000, 1e-12).first;
  return solve_levels(trap, force, levels, size).energies;
}

TrapFit fit_trap(const std::vector<TransitionDatum>& data, const PolynomialTrap& start,
                 const std::vector<TrapCoefficient>& free, const FitOptions& options) {
  validate(data, start, free);
  const int p = int(free.size()), n = int(data.size());
  const int independent = independent_transitions(data);
  if (independent < p) {
    std::ostringstream s;
    s << "fit: " << p << " free coefficients (" << names(free) << ") but the data hold only " << independent
      << " independent transition frequenc" << (independent == 1 ? "y" : "ies")
      << " (repeats of one transition at one force count once, and nu_02 = nu_01 + nu_12): measure more "
         "transitions or fix coefficients";
    throw PhysicsError(s.str());
  }
  std::set<double> forces;
  for (const auto& d : data) forces.insert(d.force);
  const bool single_force = forces.size() == 1;
  const bool cubic_free = std::count(free.begin(), free.end(), TrapCoefficient::cubic) > 0;
  const bool even_free = std::any_of(free.begin(), free.end(), [](TrapCoefficient c) {
    return c != TrapCoefficient::frequency && int(c) % 2 == 0;
  });
  if (single_force && cubic_free && even_free)
    throw PhysicsError(
        "fit: cubic and quartic (even) coefficients are not separately determined by spacings of one ladder "
        "at a "
        "single trap position (one force): to leading order both enter through one combination, the shift "
        "3 k4/omega^2 - (15/2) k3^2/omega^4 per step, and the sign of k3 not at all; add data at several "
        "displacements/forces (tilts), or fix one of them");

  double min_sigma = std::numeric_limits<double>::infinity();
  int max_level = 0;
  for (const auto& d : data) {
    min_sigma = std::min(min_sigma, 2 * si::pi * d.uncertainty);
    max_level = std::max(max_level, d.upper);
  }
  const Model model(data, free);
  PolynomialTrap trap = start;
  auto basis_for = [&](const PolynomialTrap& t, int size) {
    std::pair<int, double> worst{size, 0.0};
    for (const auto& [force, count] : model.levels()) {
      // The energy floor: rounding of a dense eigensolver, ~64 eps |E|.
      const double tol = std::max(options.basis_tolerance * min_sigma, 64 * 2.2e-16 * t.omega * (count + 1));
      std::pair<int, double> r;
      if (options.basis_size > 0) {
        // Fixed basis: report its change on adding 20 states.
        const auto e = solve_levels(t, force, count, options.basis_size).energies;
        r = {options.basis_size, (solve_levels(t, force, count, options.basis_size + basis_step).energies - e)
                                     .cwiseAbs()
                                     .maxCoeff()};
      } else {
        r = converged_basis(t, force, count, size, options.max_basis_size, tol);
      }
      worst = {std::max(worst.first, r.first), std::max(worst.second, r.second)};
    }
    return worst;
  };
  int size =
      basis_for(trap, options.basis_size > 0 ? options.basis_size : std::max(60, max_level + 40)).first;

  auto to_vector = [&](const PolynomialTrap& t) {
    Eigen::VectorXd v(p);
    for (int q = 0; q < p; ++q) v(q) = t.get(free[std::size_t(q)]);
    return v;
  };
  auto to_trap = [&](const Eigen::VectorXd& v) {
    PolynomialTrap t = trap;
    for (int q = 0; q < p; ++q) t.set(free[std::size_t(q)], v(q));
    return t;
  };

  Evaluation ev = model.evaluate(trap, size);
  check_determined(ev, free, single_force, options.singular_tolerance);
  double chi2 = ev.residual.squaredNorm();
  // Hand-written on purpose (issue 16 tried Eigen's unsupported LevenbergMarquardt, MINPACK's
  // lmder, one minimizeOneStep per iteration with the step test below): on the example fit it
  // agreed to 2e-7 of the stated uncertainties, but on exact data (validate_fit: sigma = 1e-12,
  // chi^2 at its rounding floor ~1e-7) it stopped with FtolTooSmall, its predicted reduction at
  // rounding, while the Gauss-Newton step was still 2e-4 and 4e-4 standard uncertainties, above
  // the 1e-4 below which a stop counts as converged. MINPACK accepts a step only when the actual
  // reduction is at least 1e-4 of the predicted one, which rounding noise in chi^2 denies; this
  // loop accepts any step that does not raise chi^2 and so reaches the step test.
  double lambda = 1e-3;
  int iterations = 0;
  std::string status;
  for (;;) {
    if (iterations >= options.max_iterations) {
      std::ostringstream s;
      s << "fit: Levenberg-Marquardt did not converge in " << options.max_iterations
        << " iterations (chi^2 = " << chi2
        << "): start closer to the solution, raise the iteration limit or fix coefficients";
      throw PhysicsError(s.str());
    }
    ++iterations;
    const Eigen::MatrixXd a = ev.jacobian.transpose() * ev.jacobian;
    const Eigen::VectorXd g = ev.jacobian.transpose() * ev.residual;
    const Eigen::VectorXd sigma_p = a.ldlt().solve(Eigen::MatrixXd::Identity(p, p)).diagonal().cwiseSqrt();
    Eigen::MatrixXd damped = a;
    damped.diagonal() *= 1 + lambda;
    const Eigen::VectorXd step = -damped.ldlt().solve(g);
    const Eigen::VectorXd theta = to_vector(trap) + step;
    bool accepted = false;
    Evaluation trial;
    const auto frequency_at = std::find(free.begin(), free.end(), TrapCoefficient::frequency);
    const bool positive = frequency_at == free.end() || theta(frequency_at - free.begin()) > 0;
    if (theta.allFinite() && positive) {
      try {
        trial = model.evaluate(to_trap(theta), size);
        accepted = trial.residual.squaredNorm() <= chi2;
      } catch (const PhysicsError&) {
        accepted = false;  // a step into a trap without a minimum: shorten it
      }
    }
    const double relative = (step.array().abs() / sigma_p.array()).maxCoeff();
    if (accepted) {
      trap = to_trap(theta);
      ev = trial;
      chi2 = ev.residual.squaredNorm();
      lambda = std::max(lambda / 10, 1e-12);
      if (relative < options.step_tolerance) {
        status = "converged: last step below " + std::to_string(options.step_tolerance) +
                 " standard uncertainties";
        break;
      }
    } else {
      // No decrease: at the minimum within rounding if even the Gauss-Newton step is tiny.
      const Eigen::VectorXd gauss_newton = -a.ldlt().solve(g);
      if ((gauss_newton.array().abs() / sigma_p.array()).maxCoeff() < 1e3 * options.step_tolerance) {
        status = "converged: chi^2 cannot decrease further, Gauss-Newton step below " +
                 std::to_string(1e3 * options.step_tolerance) + " standard uncertainties";
        break;
      }
      lambda *= 10;
      if (lambda > 1e16) {
        std::ostringstream s;
        s << "fit: Levenberg-Marquardt stalled after " << iterations << " iterations (chi^2 = " << chi2
          << ", Gauss-Newton step " << (gauss_newton.array().abs() / sigma_p.array()).maxCoeff()
          << " standard uncertainties): start closer to the solution or fix coefficients";
        throw PhysicsError(s.str());
      }
    }
  }

  // Basis check at the solution; refit in a larger basis if the levels moved.
  const auto [final_size, change] = basis_for(trap, size);
  if (final_size > size && options.basis_size <= 0) {
    FitOptions bigger = options;
    bigger.basis_size = final_size;
    TrapFit r = fit_trap(data, trap, free, bigger);
    r.iterations += iterations;
    return r;
  }
  check_determined(ev, free, single_force, options.singular_tolerance);

  TrapFit r;
  r.trap = trap;
  r.free = free;
  r.value = to_vector(trap);
  const Eigen::MatrixXd a = ev.jacobian.transpose() * ev.jacobian;
  // Inverse through the correlation form (unit diagonal) to keep the scales of omega and k_p apart.
  const Eigen::VectorXd d = a.diagonal().cwiseSqrt().cwiseInverse();
  const Eigen::MatrixXd c = d.asDiagonal() * a * d.asDiagonal();
  r.covariance = d.asDiagonal() * c.ldlt().solve(Eigen::MatrixXd::Identity(p, p)) * d.asDiagonal();
  r.uncertainty = r.covariance.diagonal().cwiseSqrt();
  r.correlation =
      r.uncertainty.cwiseInverse().asDiagonal() * r.covariance * r.uncertainty.cwiseInverse().asDiagonal();
  r.chi_square = chi2;
  r.degrees_of_freedom = n - p;
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double reduced = r.degrees_of_freedom > 0 ? chi2 / r.degrees_of_freedom : nan;
  r.scaled_covariance = r.covariance * reduced;
  r.scaled_uncertainty = r.scaled_covariance.diagonal().cwiseSqrt();
  r.p_value =
      r.degrees_of_freedom > 0
          ? boost::math::cdf(boost::math::complement(boost::math::chi_squared(r.degrees_of_freedom), chi2))
          : nan;
  for (int i = 0; i < n; ++i) {
    r.model_frequency.push_back(ev.model(i) / (2 * si::pi));
    r.residual.push_back(-ev.residual(i));
  }
  r.independent_data = independent;
  r.iterations = iterations;
  r.status = status + " after " + std::to_string(iterations) + " iterations";
  r.basis_size = size;
  r.basis_change = change;
  return r;
}

QuarticEstimate quartic_from_shift(double omega, double shift) {
  TRAPWORK_EXPECT(omega > 0, "quartic_from_shift needs omega > 0");
  const double k1 = omega * omega * shift / 3;
  return {k1, k1 + 12.75 * k1 * k1 / (omega * omega * omega)};
}

double quartic_from_shift_si(double mass_kg, double omega_rad_s, double shift_rad_s) {
  return mass_kg * mass_kg * omega_rad_s * omega_rad_s * shift_rad_s / (3 * si::hbar);
}

}  // namespace trapwork
