#include "solver/propagator.hpp"

#include <fftw3.h>

#include <algorithm>
#include <boost/numeric/odeint.hpp>
#include <cmath>

namespace trapwork {


// ---- PotentialPath -------------------------------------------------------------------------

PotentialPath::PotentialPath(Grid grid, Potential base, Protocol protocol, std::optional<Translation> translation)
    : grid_(std::move(grid)), base_(std::move(base)), protocol_(std::move(protocol)),
      translation_(std::move(translation)), points_(grid_.points()) {}

PotentialPath PotentialPath::lab(Grid grid, Potential base, Protocol protocol) {
  protocol.check(base);
  return PotentialPath(std::move(grid), std::move(base), std::move(protocol), std::nullopt);
}

PotentialPath PotentialPath::co_moving(Grid grid, Potential base, Protocol protocol) {
  protocol.check(base);
  auto translation = protocol.translation(base);
  if (!translation)
    throw PhysicsError("co-moving frame: the protocol is not a rigid translation of every term "
                       "(schedule the centre of each term, identically, and nothing else)");
  Potential initial = protocol.initial(base);
  return PotentialPath(std::move(grid), std::move(initial), std::move(protocol), std::move(translation));
}

void PotentialPath::sample(double t, std::vector<double>& v) const {
  v.resize(points_.size());
  if (!translation_) {
    protocol_.at(base_, t).evaluate(points_.data(), v.data(), points_.size(), t);
    return;
  }
  base_.evaluate(points_.data(), v.data(), points_.size(), 0.0);
  const double acceleration = protocol_.displacement(*translation_, t).acceleration;
  for (std::size_t j = 0; j < v.size(); ++j) v[j] += acceleration * points_[j];
}

std::vector<double> PotentialPath::sample(double t) const {
  std::vector<double> v;
  sample(t, v);
  return v;
}

double PotentialPath::displacement(double t) const {
  return translation_ ? protocol_.displacement(*translation_, t).value : 0.0;
}

void PotentialPath::frame_phase(Eigen::MatrixXcd& states, double t, double sign) const {
  if (!translation_) return;
  TRAPWORK_EXPECT(std::size_t(states.rows()) == points_.size(), "PotentialPath: state size != grid size");
  const ScheduleValue d = protocol_.displacement(*translation_, t);
  // global phase (1/2) int_0^t d'^2, composite Simpson
  double global = 0;
  if (t != 0) {
    const int intervals = 4096;
    const double h = t / intervals;
    for (int i = 0; i <= intervals; ++i) {
      const double rate = protocol_.displacement(*translation_, i * h).rate;
      const double w = (i == 0 || i == intervals) ? 1 : (i % 2 ? 4 : 2);
      global += w * rate * rate;
    }
    global *= h / 3 / 2;
  }
  for (std::size_t j = 0; j < points_.size(); ++j) {
    const std::complex<double> phase = std::polar(1.0, sign * (d.rate * points_[j] + global));
    states.row(Eigen::Index(j)) *= phase;
  }
}

void PotentialPath::to_lab(Eigen::MatrixXcd& states, double t) const { frame_phase(states, t, +1); }
void PotentialPath::from_lab(Eigen::MatrixXcd& states, double t) const { frame_phase(states, t, -1); }

// ---- SplitOperatorPropagator -----------------------------------------------------------------

struct SplitOperatorPropagator::Plans {
  std::size_t n = 0;
  int columns = 0;
  bool box = false;
  fftw_complex* buffer = nullptr;
  fftw_plan forward = nullptr, backward = nullptr;  // box: one RODFT00 plan, its own inverse
  std::vector<double> kinetic;                      // T of each transform mode
  double normalisation = 1;                         // 1/n (FFT) or 1/(2(n+1)) (RODFT00 twice)
  struct KineticPhase {
    double dt;
    std::vector<std::complex<double>> phase;
  };
  std::vector<KineticPhase> kinetic_phases;  // the few dt values in use (Strang: 1, triple jump: 2)

  Plans(const Grid& grid, int columns_, int threads) : n(grid.size()), columns(columns_) {
    box = grid.boundary() == Boundary::hard_wall;
    kinetic = grid.kinetic_modes();
    TRAPWORK_EXPECT(kinetic.size() == n, "grid kinetic modes size != grid size");
    normalisation = box ? 1.0 / (2.0 * (n + 1)) : 1.0 / n;
    buffer = fftw_alloc_complex(n * columns);
    if (!buffer) throw PhysicsError("split-operator propagator: cannot allocate the FFT buffer");
    std::lock_guard<std::mutex> lock(fftw_planner_mutex());
    static bool threads_ready = false;  // guarded by the planner mutex
    if (!threads_ready) threads_ready = fftw_init_threads() != 0;
    if (threads_ready) fftw_plan_with_nthreads(std::max(1, threads));
    // FFTW_MEASURE overwrites the buffer: plans are made before any data is written.
    if (!box) {
      const int size = int(n);
      forward = fftw_plan_many_dft(1, &size, columns, buffer, nullptr, 1, size, buffer, nullptr, 1, size,
                                   FFTW_FORWARD, FFTW_MEASURE);
      backward = fftw_plan_many_dft(1, &size, columns, buffer, nullptr, 1, size, buffer, nullptr, 1, size,
                                    FFTW_BACKWARD, FFTW_MEASURE);
    } else {
      // real and imaginary parts of every column, each a RODFT00 of length n with stride 2
      fftw_iodim dim{int(n), 2, 2};
      fftw_iodim many[2] = {{columns, 2 * int(n), 2 * int(n)}, {2, 1, 1}};
      fftw_r2r_kind kind = FFTW_RODFT00;
      double* data = reinterpret_cast<double*>(buffer);
      forward = fftw_plan_guru_r2r(1, &dim, 2, many, data, data, &kind, FFTW_MEASURE);
    }
    if (threads_ready) fftw_plan_with_nthreads(1);
    if (!forward || (!box && !backward)) {
      if (forward) fftw_destroy_plan(forward);
      if (backward) fftw_destroy_plan(backward);
      fftw_free(buffer);
      throw PhysicsError("split-operator propagator: FFTW could not create a plan");
    }
  }
  ~Plans() {
    std::lock_guard<std::mutex> lock(fftw_planner_mutex());
    fftw_destroy_plan(forward);
    if (backward) fftw_destroy_plan(backward);
    fftw_free(buffer);
  }
  const std::vector<std::complex<double>>& kinetic_phase(double dt) {
    for (const auto& k : kinetic_phases)
      if (k.dt == dt) return k.phase;
    if (kinetic_phases.size() >= 4) kinetic_phases.erase(kinetic_phases.begin());
    KineticPhase k{dt, std::vector<std::complex<double>>(n)};
    for (std::size_t j = 0; j < n; ++j) k.phase[j] = std::polar(normalisation, -kinetic[j] * dt);
    kinetic_phases.push_back(std::move(k));
    return kinetic_phases.back().phase;
  }
  std::complex<double>* data() { return reinterpret_cast<std::complex<double>*>(buffer); }
  void to_modes() { box ? fftw_execute(forward) : fftw_execute(forward); }
  void to_grid() { box ? fftw_execute(forward) : fftw_execute(backward); }
};

SplitOperatorPropagator::SplitOperatorPropagator(PotentialPath path, int columns, SplitOrder order, int threads)
    : path_(std::move(path)), columns_(columns), order_(order) {
  TRAPWORK_EXPECT(columns >= 1, "SplitOperatorPropagator needs at least one column");
  plans_ = std::make_unique<Plans>(path_.grid(), columns, threads);
}

SplitOperatorPropagator::~SplitOperatorPropagator() = default;
SplitOperatorPropagator::SplitOperatorPropagator(SplitOperatorPropagator&&) noexcept = default;
SplitOperatorPropagator& SplitOperatorPropagator::operator=(SplitOperatorPropagator&&) noexcept = default;

const std::vector<double>& SplitOperatorPropagator::potential_at(double t) {
  return samples_.at(t, [&](double time, std::vector<double>& v) { path_.sample(time, v); });
}

double potential_kick(const std::vector<double>& v, double dt, std::vector<std::complex<double>>& kick) {
  kick.resize(v.size());
  double lo = v[0], hi = v[0];
  for (std::size_t j = 0; j < v.size(); ++j) {
    kick[j] = std::polar(1.0, -v[j] * dt / 2);
    lo = std::min(lo, v[j]);
    hi = std::max(hi, v[j]);
  }
  return (hi - lo) * std::abs(dt) / 2;
}

void SplitOperatorPropagator::strang(State& state, double t, double dt) {
  Plans& p = *plans_;
  const std::size_t n = p.n;
  std::vector<std::complex<double>>& kick = kick_;
  auto make_kick = [&](const std::vector<double>& v) {
    max_phase_ = std::max(max_phase_, potential_kick(v, dt, kick));
  };
  std::complex<double>* buffer = p.data();
  make_kick(potential_at(t));
  for (int c = 0; c < columns_; ++c) {
    const std::complex<double>* column = state.col(c).data();
    std::complex<double>* out = buffer + std::size_t(c) * n;
    for (std::size_t j = 0; j < n; ++j) out[j] = column[j] * kick[j];
  }
  p.to_modes();
  const auto& kinetic = p.kinetic_phase(dt);
  for (int c = 0; c < columns_; ++c) {
    std::complex<double>* out = buffer + std::size_t(c) * n;
    for (std::size_t j = 0; j < n; ++j) out[j] *= kinetic[j];
  }
  p.to_grid();
  make_kick(potential_at(t + dt));
  for (int c = 0; c < columns_; ++c) {
    std::complex<double>* column = state.col(c).data();
    const std::complex<double>* in = buffer + std::size_t(c) * n;
    for (std::size_t j = 0; j < n; ++j) column[j] = in[j] * kick[j];
  }
}

void SplitOperatorPropagator::step(State& state, double t, double dt) {
  TRAPWORK_EXPECT(state.rows() == Eigen::Index(plans_->n) && state.cols() == columns_,
                  "SplitOperatorPropagator::step: state is not grid points x columns");
  max_phase_ = path_.grid().max_kinetic() * std::abs(dt);
  if (order_ == SplitOrder::strang) {
    strang(state, t, dt);
    return;
  }
  triple_jump([&](double from, double step) { strang(state, from, step); }, t, dt);
}

// ---- EigenbasisPropagator ----------------------------------------------------------------

EigenbasisPropagator::EigenbasisPropagator(PotentialPath path, Spectrum reference, std::vector<double> v_reference,
                                           OdeTolerances tolerances)
    : path_(std::move(path)), energies_(reference.energies), v_reference_(std::move(v_reference)),
      tolerances_(tolerances) {
  TRAPWORK_EXPECT(reference.states.rows() == Eigen::Index(path_.grid().size()) &&
                      v_reference_.size() == path_.grid().size(),
                  "EigenbasisPropagator: reference spectrum or potential not on the path's grid");
  basis_ = reference.states * std::sqrt(path_.grid().spacing());
}

EigenbasisPropagator::State EigenbasisPropagator::coefficients(const Eigen::MatrixXcd& grid_states) const {
  return basis_.transpose().cast<std::complex<double>>() * grid_states * std::sqrt(path_.grid().spacing());
}

Eigen::MatrixXcd EigenbasisPropagator::grid_states(const State& c) const {
  return basis_.cast<std::complex<double>>() * c / std::sqrt(path_.grid().spacing());
}

void EigenbasisPropagator::step(State& state, double t, double dt) {
  const Eigen::Index k = basis_.cols(), cols = state.cols();
  TRAPWORK_EXPECT(state.rows() == k, "EigenbasisPropagator::step: state rows != basis size");
  if (dt == 0) return;
  namespace odeint = boost::numeric::odeint;
  using Vector = std::vector<double>;
  Vector x(std::size_t(2 * k * cols));
  Eigen::Map<Eigen::MatrixXcd>(reinterpret_cast<std::complex<double>*>(x.data()), k, cols) = state;
  std::vector<double> v;
  Eigen::VectorXd dv(basis_.rows());
  Eigen::MatrixXd m(k, k);
  auto rhs = [&](const Vector& y, Vector& dydt, double time) {
    ++evaluations_;
    path_.sample(time, v);
    for (Eigen::Index j = 0; j < dv.size(); ++j) dv[j] = v[std::size_t(j)] - v_reference_[std::size_t(j)];
    m.noalias() = basis_.transpose() * (dv.asDiagonal() * basis_);
    m.diagonal() += energies_;
    Eigen::Map<const Eigen::MatrixXcd> c(reinterpret_cast<const std::complex<double>*>(y.data()), k, cols);
    Eigen::Map<Eigen::MatrixXcd> dc(reinterpret_cast<std::complex<double>*>(dydt.data()), k, cols);
    dc.noalias() = std::complex<double>(0, -1) * (m.cast<std::complex<double>>() * c);
  };
  auto stepper = odeint::make_controlled(tolerances_.absolute, tolerances_.relative, odeint::runge_kutta_dopri5<Vector>());
  double hint = step_hint_ > 0 ? std::min(step_hint_, std::abs(dt)) : std::abs(dt) / 4;
  hint = std::copysign(hint, dt);
  odeint::integrate_adaptive(stepper, rhs, x, t, t + dt, hint);
  state = Eigen::Map<Eigen::MatrixXcd>(reinterpret_cast<std::complex<double>*>(x.data()), k, cols);
  step_hint_ = std::abs(dt) / 4;
}

// ---- projections -------------------------------------------------------------------------

Eigen::MatrixXcd project(const Spectrum& onto, const Eigen::MatrixXcd& states) {
  TRAPWORK_EXPECT(onto.states.rows() == states.rows(), "project: state size != spectrum grid size");
  return onto.states.transpose().cast<std::complex<double>>() * states * onto.grid.spacing();
}

Eigen::MatrixXcd sudden_amplitudes(const Spectrum& initial, const Spectrum& final) {
  TRAPWORK_EXPECT(initial.states.rows() == final.states.rows(), "sudden_amplitudes: spectra on different grids");
  return (final.states.transpose() * initial.states * initial.grid.spacing()).cast<std::complex<double>>();
}

}  // namespace trapwork
