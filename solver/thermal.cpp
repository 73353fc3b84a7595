#include "solver/thermal.hpp"

#include <cmath>
#include <numeric>

#include "solver/errors.hpp"

namespace trapwork {

InitialState InitialState::thermal(double beta) {
  if (!(beta > 0) || !std::isfinite(beta)) throw InputError("beta", std::to_string(beta), "a finite beta > 0");
  InitialState s;
  s.kind_ = Kind::thermal;
  s.value_ = beta;
  return s;
}

InitialState InitialState::phonons(double mean_phonons) {
  if (!(mean_phonons > 0) || !std::isfinite(mean_phonons))
    throw InputError("mean_phonons", std::to_string(mean_phonons), "a finite mean phonon number > 0");
  InitialState s;
  s.kind_ = Kind::phonons;
  s.value_ = mean_phonons;
  return s;
}

InitialState InitialState::eigenstate(int level) {
  if (level < 0) throw InputError("level", std::to_string(level), "a level index >= 0");
  InitialState s;
  s.kind_ = Kind::eigenstate;
  s.level_ = level;
  return s;
}

InitialState InitialState::mixture(std::vector<double> weights) {
  double sum = 0;
  for (double w : weights) {
    if (!(w >= 0) || !std::isfinite(w)) throw InputError("weights", std::to_string(w), "finite weights >= 0");
    sum += w;
  }
  if (!(sum > 0)) throw InputError("weights", "all zero", "at least one positive weight");
  for (double& w : weights) w /= sum;
  InitialState s;
  s.kind_ = Kind::mixture;
  s.weights_ = std::move(weights);
  return s;
}

double InitialState::beta(const Eigen::VectorXd& energies) const {
  TRAPWORK_EXPECT(is_gibbs(), "InitialState::beta: not a Gibbs state");
  if (kind_ == Kind::thermal) return value_;
  TRAPWORK_EXPECT(energies.size() >= 2, "InitialState::beta: phonon number needs two levels");
  return beta_from_phonons(value_, energies[1] - energies[0]);
}

double beta_from_phonons(double mean_phonons, double spacing) {
  if (!(mean_phonons > 0)) throw InputError("mean_phonons", std::to_string(mean_phonons), "a mean phonon number > 0");
  if (!(spacing > 0))
    throw InputError("mean_phonons", "lowest level spacing " + std::to_string(spacing),
                     "a positive lowest spacing E_1 - E_0 to define the temperature");
  return std::log1p(1 / mean_phonons) / spacing;
}

double log_partition(const Eigen::VectorXd& energies, double beta) {
  TRAPWORK_EXPECT(energies.size() > 0, "log_partition: no energies");
  double sum = 0;
  for (Eigen::Index m = energies.size() - 1; m >= 0; --m) sum += std::exp(-beta * (energies[m] - energies[0]));
  return -beta * energies[0] + std::log(sum);
}

std::vector<double> boltzmann_weights(const Eigen::VectorXd& energies, double beta) {
  TRAPWORK_EXPECT(energies.size() > 0, "boltzmann_weights: no energies");
  std::vector<double> p(std::size_t(energies.size()));
  for (Eigen::Index m = 0; m < energies.size(); ++m) p[std::size_t(m)] = std::exp(-beta * (energies[m] - energies[0]));
  // sum the small terms first
  const double z = std::accumulate(p.rbegin(), p.rend(), 0.0);
  for (double& w : p) w /= z;
  return p;
}

double thermal_tail(const Eigen::VectorXd& energies, double beta, int kept) {
  const auto p = boltzmann_weights(energies, beta);
  double tail = 0;
  for (std::size_t m = p.size(); m-- > std::size_t(std::max(kept, 0));) tail += p[m];
  return tail;
}

LevelChoice choose_initial_levels(const Eigen::VectorXd& energies, double beta, double tolerance, int max_levels) {
  const auto p = boltzmann_weights(energies, beta);
  const int available = int(p.size());
  const int limit = std::min(available, std::max(1, max_levels));
  // tails[k] = sum_{m >= k} p_m, summed from the top
  std::vector<double> tails(p.size() + 1, 0.0);
  for (int m = available - 1; m >= 0; --m) tails[std::size_t(m)] = tails[std::size_t(m) + 1] + p[std::size_t(m)];
  LevelChoice c;
  c.last_weight = p.back();
  for (int k = 1; k <= limit; ++k) {
    c.kept = k;
    c.left_out = tails[std::size_t(k)];
    if (c.left_out < tolerance) {
      c.reached = true;
      break;
    }
  }
  // the given spectrum must itself be complete to the tolerance for eps_K to be meaningful
  if (c.reached && c.last_weight >= tolerance) c.reached = false;
  return c;
}

InitialWeights initial_weights(const InitialState& state, const Eigen::VectorXd& energies, double tolerance,
                               int max_levels) {
  InitialWeights w;
  const int available = int(energies.size());
  switch (state.kind()) {
    case InitialState::Kind::thermal:
    case InitialState::Kind::phonons: {
      w.gibbs = true;
      w.beta = state.beta(energies);
      w.choice = choose_initial_levels(energies, w.beta, tolerance, max_levels);
      const auto p = boltzmann_weights(energies.head(w.choice.kept), w.beta);
      w.weights = p;
      return w;
    }
    case InitialState::Kind::eigenstate:
      if (state.level() >= available)
        throw PhysicsError("initial eigenstate " + std::to_string(state.level()) + " asked for, but only " +
                           std::to_string(available) + " levels computed");
      w.weights.assign(std::size_t(state.level()) + 1, 0.0);
      w.weights.back() = 1;
      break;
    case InitialState::Kind::mixture:
      if (int(state.mixture_weights().size()) > available)
        throw PhysicsError("initial mixture over " + std::to_string(state.mixture_weights().size()) +
                           " levels, but only " + std::to_string(available) + " levels computed");
      w.weights = state.mixture_weights();
      break;
  }
  w.choice.kept = int(w.weights.size());
  w.choice.reached = true;
  return w;
}

int levels_for_reverse_tail(const Eigen::MatrixXd& reverse, const std::vector<double>& reverse_weights, double target) {
  TRAPWORK_EXPECT(std::size_t(reverse.rows()) == reverse_weights.size(),
                  "levels_for_reverse_tail: reverse weights do not match the reverse matrix rows");
  for (Eigen::Index k = 1; k <= reverse.cols(); ++k) {
    double tail = 0;
    for (Eigen::Index n = 0; n < reverse.rows(); ++n)
      tail += reverse_weights[std::size_t(n)] * (1.0 - reverse.row(n).head(k).sum());
    if (tail <= target) return int(k);
  }
  return int(reverse.cols()) + 1;
}

TruncationResidual truncation_residual_bound(double thermal_tail_a, int kept_a, const Eigen::MatrixXd& reverse,
                                             const std::vector<double>& reverse_weights, double thermal_tail_b) {
  TRAPWORK_EXPECT(std::size_t(reverse.rows()) == reverse_weights.size(),
                  "truncation_residual_bound: reverse weights do not match the reverse matrix rows");
  TruncationResidual r;
  r.thermal_tail = thermal_tail_a;
  r.reverse_thermal_tail = thermal_tail_b;
  const Eigen::Index k = std::min<Eigen::Index>(kept_a, reverse.cols());
  for (Eigen::Index n = 0; n < reverse.rows(); ++n)
    r.reverse_tail += reverse_weights[std::size_t(n)] * (1.0 - reverse.row(n).head(k).sum());
  r.bound = r.thermal_tail + r.reverse_tail + r.reverse_thermal_tail;
  return r;
}

}  // namespace trapwork
