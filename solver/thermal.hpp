#pragma once
// Initial states of the two-point measurement scheme: weights p_m of the eigenstates of H_A.
//
// Thermal (Gibbs) state at inverse temperature beta (internal units: 1/energy):
//   p_m = exp(-beta (E_m - E_0)) / sum_k exp(-beta (E_k - E_0)),
// shifted by the ground energy so that no exponential overflows (common practice). A mean
// phonon number nbar fixes beta against the lowest level spacing (exact for an oscillator):
//   beta = ln(1 + 1/nbar) / (E_1 - E_0).
// Only the K lowest levels are propagated. K is chosen so that the left-out thermal weight
// eps_K = sum_{m >= K} p_m is below a tolerance. That does NOT bound the Jarzynski residual:
// with K kept levels the residual is (Z_A/Z_A^K)(1 - p_R(>=K)) - 1 ~ eps_K - p_R(>=K), where
// p_R(>=K) is the probability that the reverse run (started thermal in H_B) ends at a level
// >= K of H_A (derived in the TPM scheme; Tasaki 2000, Kurchan 2000, from memory, for the
// equality itself). truncation_residual_bound() reports both terms.
#include <Eigen/Dense>
#include <string>
#include <vector>

namespace trapwork {

class InitialState {
 public:
  enum class Kind { thermal, phonons, eigenstate, mixture };
  static InitialState thermal(double beta);          // beta > 0 (1/energy, internal units)
  static InitialState phonons(double mean_phonons);  // nbar > 0
  static InitialState eigenstate(int level);         // level >= 0
  // weights[m] >= 0 for level m, not all zero; normalised to sum 1.
  static InitialState mixture(std::vector<double> weights);

  Kind kind() const { return kind_; }
  bool is_gibbs() const { return kind_ == Kind::thermal || kind_ == Kind::phonons; }
  // beta for Gibbs states (phonons: from the spectrum's lowest spacing). Throws ContractViolation
  // for the other kinds.
  double beta(const Eigen::VectorXd& energies) const;
  double parameter() const { return value_; }  // beta or nbar
  int level() const { return level_; }
  const std::vector<double>& mixture_weights() const { return weights_; }

 private:
  Kind kind_ = Kind::thermal;
  double value_ = 1;
  int level_ = 0;
  std::vector<double> weights_;
};

// beta = ln(1 + 1/nbar) / spacing. Throws InputError("mean_phonons") for nbar <= 0 or spacing <= 0.
double beta_from_phonons(double mean_phonons, double spacing);

// ln Z = -beta E_0 + ln sum_m exp(-beta (E_m - E_0)) over the given energies (ascending).
double log_partition(const Eigen::VectorXd& energies, double beta);

// Boltzmann weights over all given energies, normalised over them.
std::vector<double> boltzmann_weights(const Eigen::VectorXd& energies, double beta);

// Left-out weight sum_{m >= K} p_m with p_m normalised over all given energies.
double thermal_tail(const Eigen::VectorXd& energies, double beta, int kept);

// The K to keep: smallest K with thermal_tail < tolerance, at most max_levels and the number of
// energies given. `reached` is false when the tolerance could not be met with those levels
// (the caller should compute more levels). left_out is eps_K; last_weight the weight of the
// highest level given (how far the given spectrum itself is from complete).
struct LevelChoice {
  int kept = 0;
  double left_out = 0;
  double last_weight = 0;
  bool reached = false;
};
LevelChoice choose_initial_levels(const Eigen::VectorXd& energies, double beta, double tolerance, int max_levels);

// Initial weights of the kept levels (normalised over them): Gibbs states use the thermal
// tolerance to choose K; an eigenstate keeps levels 0..level (weight 1 on `level`); a
// mixture keeps its levels. Throws PhysicsError when the state needs more levels than given.
struct InitialWeights {
  std::vector<double> weights;  // p_m, m < kept, summing to 1
  double beta = 0;              // Gibbs states only (0 otherwise)
  bool gibbs = false;
  LevelChoice choice;
};
InitialWeights initial_weights(const InitialState& state, const Eigen::VectorXd& energies, double tolerance,
                               int max_levels);

// The two terms that govern the Jarzynski residual with K kept initial levels of H_A:
//   thermal_tail  eps_K = left-out thermal weight of H_A,
//   reverse_tail  p_R(>=K) = sum_n p^B_n (1 - sum_{m<K} P_R(n -> m)), from the reverse run's
//                 transition matrix (rows: levels n of H_B, columns: levels m of H_A) and its
//                 initial weights p^B_n; probability not captured by the columns kept counts as
//                 ending above K (it did),
//   bound         eps_K + p_R(>=K) (plus the reverse run's own truncation eps^B).
struct TruncationResidual {
  double thermal_tail = 0;
  double reverse_tail = 0;
  double reverse_thermal_tail = 0;
  double bound = 0;
};
// Smallest K >= 1 whose reverse tail p_R(>=K) (as above) is at most `target`; reverse.cols() + 1
// when even all the columns leave more (the probability they miss ended higher still).
int levels_for_reverse_tail(const Eigen::MatrixXd& reverse, const std::vector<double>& reverse_weights, double target);
TruncationResidual truncation_residual_bound(double thermal_tail_a, int kept_a, const Eigen::MatrixXd& reverse,
                                             const std::vector<double>& reverse_weights,
                                             double thermal_tail_b);

}  // namespace trapwork
