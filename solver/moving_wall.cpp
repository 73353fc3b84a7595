#include "solver/moving_wall.hpp"


#include <algorithm>
#include <boost/numeric/odeint.hpp>
#include <cmath>
#include <numbers>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/hamiltonian.hpp"
#include "solver/thermal.hpp"

namespace trapwork {

static_assert(Propagator<WallSplitOperatorPropagator>);
static_assert(Propagator<WallEigenbasisPropagator>);

namespace {

constexpr double pi = std::numbers::pi;
using complex = std::complex<double>;

std::string fmt(double v) {
  std::ostringstream s;
  s.precision(6);
  s << v;
  return s.str();
}

std::string address_prefix(const std::string& address, const std::string& suffix) {
  if (address.size() <= suffix.size() || address.compare(address.size() - suffix.size(), suffix.size(), suffix) != 0)
    return {};
  return address.substr(0, address.size() - suffix.size());
}

// 5-point Gauss-Legendre on [t, t + dt] (symmetric in the interval, so the splitting stays
// time-reversible): nodes and weights on [-1, 1] (Abramowitz & Stegun 25.4.30, common practice).
template <class F>
double gauss5(F&& f, double t, double dt) {
  static constexpr double x[5] = {-0.9061798459386640, -0.5384693101056831, 0.0, 0.5384693101056831,
                                  0.9061798459386640};
  static constexpr double w[5] = {0.2369268850561891, 0.4786286704993665, 0.5688888888888889,
                                  0.4786286704993665, 0.2369268850561891};
  double s = 0;
  for (int i = 0; i < 5; ++i) s += w[i] * f(t + dt * (1 + x[i]) / 2);
  return s * dt / 2;
}

// gamma(t) = (1/2) int_0^t a'^2: 32 panels of 5-point Gauss-Legendre.
double left_wall_phase(const WallProtocol& p, double t) {
  if (t == 0) return 0;
  const int panels = 32;
  double s = 0;
  for (int i = 0; i < panels; ++i)
    s += gauss5([&](double time) { const double r = p.walls(time).left.rate; return r * r / 2; },
                t * i / panels, t / panels);
  return s;
}

// Sign convention of solver/spectrum.hpp for boxes: the first lobe at the left wall positive.
// For a sine-basis vector c that is the sign of psi'(left) ~ sum_k k c_k.
void fix_sine_signs(Eigen::MatrixXd& vectors) {
  for (Eigen::Index j = 0; j < vectors.cols(); ++j) {
    double slope = 0;
    for (Eigen::Index k = 0; k < vectors.rows(); ++k) slope += double(k + 1) * vectors(k, j);
    if (slope < 0) vectors.col(j) *= -1;
  }
}

double log_sum_weights(const Eigen::VectorXd& energies, double beta) { return log_partition(energies, beta); }

}  // namespace

// ---- WallProtocol ------------------------------------------------------------------------

WallProtocol::WallProtocol(double tau, Schedule left, Schedule right, Potential inner, std::vector<Schedule> inner_schedules)
    : tau_(tau), left_(std::move(left)), right_(std::move(right)), inner_(std::move(inner)),
      inner_protocol_(tau, std::move(inner_schedules)) {
  name_ = address_prefix(left_.address(), ".left");
  if (name_.empty() || address_prefix(right_.address(), ".right") != name_)
    throw InputError(left_.address() + ", " + right_.address(), left_.address() + ", " + right_.address(),
                     "wall schedules addressed \"<name>.left\" and \"<name>.right\" with one name (say walls.left, walls.right)");
  left_.check(tau_);
  right_.check(tau_);
  // The dilated frame of the wall route carries the walls' accelerations (the terms
  // (m/2) L L'' y^2 and m L a'' y); a table ramp is piecewise linear, its acceleration a delta
  // function at each row that those terms cannot represent (they would see 0 between rows:
  // a box_expansion ramp given as a 4001-row table gave <W> -0.72 where the ramp gives -0.26).
  for (const Schedule* s : {&left_, &right_})
    if (tau_ > 0 && s->form() == ScheduleForm::table)
      throw InputError(s->address(), "ramp = \"table\"",
                       "a wall ramp with an acceleration: linear, smooth, smoother or formula (a moving "
                       "wall's table ramp is piecewise linear, and the wall route needs its acceleration, a delta "
                       "function at each row); write the table's motion as a formula ramp");
  inner_protocol_.check(inner_);
  for (const auto& term : inner_.terms())
    if (term.name() == name_)
      throw InputError(name_, name_, "an inner potential term name other than the walls' name");
  const int samples = 1024;
  for (int i = 0; i <= samples; ++i) {
    const double t = tau_ * i / samples;
    const double l = tau_ > 0 ? walls(t).length() : (i == 0 ? initial_walls().length() : final_walls().length());
    if (!(l > 0))
      throw WallsMeetError("moving walls: the box width b - a = " + fmt(l) + " L0 at t = " + fmt(t) +
                               " T0 is not positive; the walls must not meet or cross",
                           t, l);
  }
}

WallProtocol WallProtocol::linear_right(double left, double right_from, double right_to, double tau, Potential inner) {
  return WallProtocol(tau, Schedule::constant("walls.left", left), Schedule::linear("walls.right", right_from, right_to),
                      std::move(inner));
}

WallState WallProtocol::walls(double t) const { return {left_.evaluate(t, tau_), right_.evaluate(t, tau_)}; }

WallState WallProtocol::initial_walls() const {
  if (tau_ > 0) return walls(0);
  return {{left_.initial_value(0), 0, 0}, {right_.initial_value(0), 0, 0}};
}

WallState WallProtocol::final_walls() const {
  if (tau_ > 0) return walls(tau_);
  return {{left_.final_value(0), 0, 0}, {right_.final_value(0), 0, 0}};
}

Potential WallProtocol::inner_at(double t) const {
  if (flat()) return inner_;
  return inner_protocol_.at(inner_, t);
}

Potential WallProtocol::initial_inner() const { return flat() ? inner_ : inner_protocol_.initial(inner_); }
Potential WallProtocol::final_inner() const { return flat() ? inner_ : inner_protocol_.final(inner_); }

WallProtocol WallProtocol::reversed() const {
  WallProtocol r = *this;  // checked when built; reversal keeps the walls apart
  r.left_ = left_.reversed();
  r.right_ = right_.reversed();
  r.inner_protocol_ = inner_protocol_.reversed();  // also reads formulas using t at tau - t
  return r;
}

Protocol WallProtocol::as_protocol() const {
  std::vector<Schedule> all{left_, right_};
  for (const auto& s : inner_protocol_.schedules()) all.push_back(s);
  return Protocol(tau_, std::move(all), inner_protocol_.is_time_reversed());
}

std::optional<double> WallProtocol::constant_speed() const {
  if (!flat() || !(tau_ > 0)) return std::nullopt;
  auto linear = [](const Schedule& s) { return s.form() == ScheduleForm::constant || s.form() == ScheduleForm::linear; };
  if (!linear(left_) || !linear(right_)) return std::nullopt;
  const double da = left_.final_value(tau_) - left_.initial_value(tau_);
  const double db = right_.final_value(tau_) - right_.initial_value(tau_);
  if (da != 0 && db != 0) return std::nullopt;
  return (db - da) / tau_;
}

// ---- split-operator on the dilated box -------------------------------------------------

WallSplitOperatorPropagator::WallSplitOperatorPropagator(WallProtocol protocol, std::size_t points, int columns,
                                                         SplitOrder order, int threads)
    : protocol_(std::move(protocol)), grid_(Grid::box(0, 1, points)), y_(grid_.points()), columns_(columns),
      order_(order), pass_(grid_.size(), std::max(1, columns), true, threads) {
  TRAPWORK_EXPECT(columns >= 1, "WallSplitOperatorPropagator needs at least one column");
}

WallSplitOperatorPropagator::~WallSplitOperatorPropagator() = default;
WallSplitOperatorPropagator::WallSplitOperatorPropagator(WallSplitOperatorPropagator&&) noexcept = default;
WallSplitOperatorPropagator& WallSplitOperatorPropagator::operator=(WallSplitOperatorPropagator&&) noexcept = default;

const std::vector<double>& WallSplitOperatorPropagator::potential_at(double t) {
  return samples_.at(t, [&](double time, std::vector<double>& v) { sample_potential(time, v); });
}

void WallSplitOperatorPropagator::sample_potential(double t, std::vector<double>& v) const {
  const std::size_t n = y_.size();
  v.assign(n, 0.0);
  const WallState w = protocol_.walls(t);
  const double l = w.length();
  if (!protocol_.flat()) {
    std::vector<double> x(n);
    for (std::size_t j = 0; j < n; ++j) x[j] = w.left.value + l * y_[j];
    protocol_.inner_at(t).evaluate(x.data(), v.data(), n);
  }
  for (std::size_t j = 0; j < n; ++j)
    v[j] += 0.5 * l * w.acceleration() * y_[j] * y_[j] + l * w.left.acceleration * y_[j];
  check_potential_finite(v, y_, t, "y = (x - a)/L (dilated box)");
}

void WallSplitOperatorPropagator::strang(State& state, double t, double dt) {
  kicks_.update(t, dt, [&](double time) -> const std::vector<double>& { return potential_at(time); });
  max_phase_ = std::max(max_phase_, kicks_.spread());
  // exact kinetic flow: exp(-i (k pi)^2/2 int_t^{t+dt} ds / L(s)^2); RODFT00 twice = 2(n+1)
  const double lambda = gauss5([&](double s) { const double l = protocol_.walls(s).length(); return 1 / (l * l); }, t, dt);
  const auto& modes = grid_.kinetic_modes();
  const std::size_t n = modes.size();
  const double normalisation = 1.0 / (2.0 * double(n + 1));
  kinetic_.resize(n);
  for (std::size_t j = 0; j < n; ++j) kinetic_[j] = std::polar(normalisation, -modes[j] * lambda);
  max_phase_ = std::max(max_phase_, grid_.max_kinetic() * std::abs(lambda));
  pass_.apply(state, kicks_.before(), kinetic_.data(), kicks_.after());
}

void WallSplitOperatorPropagator::step(State& state, double t, double dt) {
  TRAPWORK_EXPECT(state.rows() == Eigen::Index(grid_.size()) && state.cols() == columns_,
                  "WallSplitOperatorPropagator::step: state is not grid points x columns");
  max_phase_ = 0;
  if (order_ == SplitOrder::strang) {
    strang(state, t, dt);
    return;
  }
  triple_jump([&](double from, double step) { strang(state, from, step); }, t, dt);
}

namespace {
// Multiplies row j by exp(sign i theta(y_j, t)), theta = L a' y + L L' y^2/2 + gamma(t).
void chirp(const WallProtocol& p, const std::vector<double>& y, Eigen::MatrixXcd& state, double t, double sign) {
  TRAPWORK_EXPECT(state.rows() == Eigen::Index(y.size()), "chirp: state size != grid size");
  if (p.duration() == 0) return;  // no motion defined
  const WallState w = p.walls(t);
  const double l = w.length(), gamma = left_wall_phase(p, t);
  for (std::size_t j = 0; j < y.size(); ++j) {
    const double theta = l * w.left.rate * y[j] + 0.5 * l * w.rate() * y[j] * y[j] + gamma;
    state.row(Eigen::Index(j)) *= std::polar(1.0, sign * theta);
  }
}
}  // namespace

void WallSplitOperatorPropagator::to_lab(State& state, double t) const { chirp(protocol_, y_, state, t, +1); }
void WallSplitOperatorPropagator::from_lab(State& state, double t) const { chirp(protocol_, y_, state, t, -1); }

// ---- fixed-sine-basis ODE ---------------------------------------------------------------

WallEigenbasisPropagator::WallEigenbasisPropagator(WallProtocol protocol, int modes, OdeTolerances tolerances)
    : protocol_(std::move(protocol)), modes_(modes), tolerances_(tolerances), m_(modes, modes), d_(modes, modes) {
  TRAPWORK_EXPECT(modes >= 1, "WallEigenbasisPropagator needs at least one mode");
  for (int k = 1; k <= modes; ++k)
    for (int n = 1; n <= modes; ++n) {
      const double kk = k, nn = n, denominator = kk * kk - nn * nn;
      const bool odd = (k + n) % 2 != 0;
      m_(k - 1, n - 1) = k == n ? 0.0 : (odd ? 1.0 : -1.0) * 2 * kk * nn / denominator;
      d_(k - 1, n - 1) = odd ? 4 * kk * nn / denominator : 0.0;
    }
  if (!protocol_.flat()) {
    gauss_legendre(2 * modes + 64, nodes_, weights_);
    chi_.resize(nodes_.size(), modes);
    for (Eigen::Index q = 0; q < nodes_.size(); ++q)
      for (int k = 0; k < modes; ++k)
        chi_(q, k) = std::sqrt(2 * weights_[q]) * std::sin((k + 1) * pi * nodes_[q]);
  }
}

Eigen::MatrixXd WallEigenbasisPropagator::hamiltonian(double t) const {
  const WallState w = protocol_.walls(t);
  const double l = w.length();
  Eigen::MatrixXd h = Eigen::MatrixXd::Zero(modes_, modes_);
  if (!protocol_.flat()) {
    std::vector<double> x(std::size_t(nodes_.size())), v(x.size());
    for (std::size_t q = 0; q < x.size(); ++q) x[q] = w.left.value + l * nodes_[Eigen::Index(q)];
    protocol_.inner_at(t).evaluate(x.data(), v.data(), x.size());
    const Eigen::Map<const Eigen::VectorXd> vq(v.data(), Eigen::Index(v.size()));
    h.noalias() = chi_.transpose() * vq.asDiagonal() * chi_;
  }
  for (int k = 0; k < modes_; ++k) h(k, k) += 0.5 * std::pow((k + 1) * pi / l, 2);
  return h;
}

void WallEigenbasisPropagator::step(State& state, double t, double dt) {
  TRAPWORK_EXPECT(state.rows() == modes_, "WallEigenbasisPropagator::step: state rows != modes");
  if (dt == 0) return;
  namespace odeint = boost::numeric::odeint;
  using Vector = std::vector<double>;
  const Eigen::Index k = modes_, cols = state.cols();
  Vector x(std::size_t(2 * k * cols));
  Eigen::Map<Eigen::MatrixXcd>(reinterpret_cast<complex*>(x.data()), k, cols) = state;
  Eigen::MatrixXcd generator(k, k);
  auto rhs = [&](const Vector& y, Vector& dydt, double time) {
    ++evaluations_;
    const WallState w = protocol_.walls(time);
    const double l = w.length();
    // dc/dt = (-i H + (L'/L) M + (a'/L) D) c
    generator = complex(0, -1) * hamiltonian(time).cast<complex>();
    generator.real() += (w.rate() / l) * m_ + (w.left.rate / l) * d_;
    Eigen::Map<const Eigen::MatrixXcd> c(reinterpret_cast<const complex*>(y.data()), k, cols);
    Eigen::Map<Eigen::MatrixXcd> dc(reinterpret_cast<complex*>(dydt.data()), k, cols);
    dc.noalias() = generator * c;
  };
  auto stepper = odeint::make_controlled(tolerances_.absolute, tolerances_.relative, odeint::runge_kutta_dopri5<Vector>());
  double hint = step_hint_ > 0 ? std::min(step_hint_, std::abs(dt)) : std::abs(dt) / 64;
  odeint::integrate_adaptive(stepper, rhs, x, t, t + dt, std::copysign(hint, dt));
  state = Eigen::Map<Eigen::MatrixXcd>(reinterpret_cast<complex*>(x.data()), k, cols);
  step_hint_ = std::abs(dt) / 64;
}

Eigen::MatrixXcd wall_eigenbasis_amplitudes(const WallProtocol& protocol, int modes, int initial, int final,
                                            OdeTolerances tolerances) {
  TRAPWORK_EXPECT(initial >= 1 && final >= 1 && initial <= modes && final <= modes,
                  "wall_eigenbasis_amplitudes: level counts must be within 1..modes");
  WallEigenbasisPropagator p(protocol, modes, tolerances);
  auto eigenvectors = [&](double t) {
    Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> solver(p.hamiltonian(t));
    Eigen::MatrixXd v = solver.eigenvectors();
    fix_sine_signs(v);
    return v;
  };
  const Eigen::MatrixXd va = eigenvectors(0), vb = eigenvectors(protocol.duration());
  Eigen::MatrixXcd c = va.leftCols(initial).cast<complex>();
  p.step(c, 0, protocol.duration());
  return vb.leftCols(final).transpose().cast<complex>() * c;
}

// ---- closed forms -----------------------------------------------------------------------

void gauss_legendre(int n, Eigen::VectorXd& nodes, Eigen::VectorXd& weights) {
  TRAPWORK_EXPECT(n >= 1, "gauss_legendre needs n >= 1");
  nodes.resize(n);
  weights.resize(n);
  for (int i = 0; i < (n + 1) / 2; ++i) {
    double z = std::cos(pi * (i + 0.75) / (n + 0.5)), derivative = 0;
    for (int iteration = 0; iteration < 100; ++iteration) {
      double p0 = 1, p1 = 0;
      for (int j = 1; j <= n; ++j) {  // P_j(z) = ((2j-1) z P_{j-1} - (j-1) P_{j-2}) / j
        const double p2 = p1;
        p1 = p0;
        p0 = ((2.0 * j - 1) * z * p1 - (j - 1.0) * p2) / j;
      }
      derivative = n * (z * p0 - p1) / (z * z - 1);
      const double previous = z;
      z = previous - p0 / derivative;
      if (std::abs(z - previous) < 1e-16) break;
    }
    const double w = 2 / ((1 - z * z) * derivative * derivative);
    // on [0, 1]: y = (1 -+ z)/2, weight w/2
    nodes[i] = (1 - z) / 2;
    nodes[n - 1 - i] = (1 + z) / 2;
    weights[i] = weights[n - 1 - i] = w / 2;
  }
}

namespace {
// Gauss-Legendre nodes of chirp_matrix: the integrand's phase turns by up to pi modes + |theta|.
double chirp_nodes(double theta, int modes) { return std::ceil(pi * modes + std::abs(theta)) + 40; }
// The sine modes doescher_rice_amplitudes sums over: `modes`, or K + 100 when not given; at least K.
int doescher_rice_modes(int K, int modes) { return std::max(modes <= 0 ? K + 100 : modes, K); }
}  // namespace

Eigen::MatrixXcd chirp_matrix(double theta, int modes, int rows) {
  TRAPWORK_EXPECT(modes >= 1, "chirp_matrix needs modes >= 1");
  if (rows <= 0 || rows > modes) rows = modes;
  Eigen::VectorXd y, w;
  gauss_legendre(int(chirp_nodes(theta, modes)), y, w);
  Eigen::MatrixXd s(y.size(), modes);
  Eigen::VectorXd c(y.size()), sn(y.size());
  for (Eigen::Index q = 0; q < y.size(); ++q) {
    c[q] = std::cos(theta * y[q] * y[q]);
    sn[q] = std::sin(theta * y[q] * y[q]);
    for (int k = 0; k < modes; ++k) s(q, k) = std::sqrt(2 * w[q]) * std::sin((k + 1) * pi * y[q]);
  }
  // real and imaginary parts as two real products (G is symmetric: the first rows suffice)
  const auto top = s.leftCols(rows).transpose();
  Eigen::MatrixXcd g(rows, modes);
  g.real() = top * (c.asDiagonal() * s);
  g.imag() = top * (sn.asDiagonal() * s);
  return g;
}

Eigen::MatrixXcd doescher_rice_amplitudes(double L0, double L1, double u, int K, int modes, int initial) {
  TRAPWORK_EXPECT(K >= 1, "doescher_rice_amplitudes needs K >= 1");
  if (!(L0 > 0) || !(L1 > 0) || !std::isfinite(u))
    throw PhysicsError("Doescher-Rice: box widths must be positive (L0 = " + fmt(L0) + ", L1 = " + fmt(L1) + ")");
  const int columns = initial > 0 ? std::min(initial, K) : K;
  if (L1 == L0) return Eigen::MatrixXcd::Identity(K, columns);
  if (u == 0 || (L1 - L0) * u < 0)
    throw PhysicsError("Doescher-Rice: the wall speed u = " + fmt(u) + " does not take L from " + fmt(L0) +
                       " to " + fmt(L1));
  modes = doescher_rice_modes(K, modes);
  const double tau = (L1 - L0) / u;
  // G symmetric: G0's first K columns are the transpose of its first K rows
  const Eigen::MatrixXcd g1 = chirp_matrix(u * L1 / 2, modes, K), g0 = chirp_matrix(-u * L0 / 2, modes, columns).transpose();
  Eigen::VectorXcd phase(modes);
  for (int n = 1; n <= modes; ++n) phase[n - 1] = std::polar(1.0, -double(n) * n * pi * pi * tau / (2 * L0 * L1));
  return g1 * phase.asDiagonal() * g0;
}

double doescher_rice_operations(double L0, double L1, double u, int K, int modes, int initial) {
  modes = doescher_rice_modes(K, modes);
  const int columns = initial > 0 ? std::min(initial, K) : K;
  double total = 0;
  for (const auto& [theta, rows] : {std::pair{u * L1 / 2, K}, std::pair{u * L0 / 2, columns}}) {
    const double n = chirp_nodes(theta, modes);
    total += 10 * n * n + 20 * n * modes + 4 * double(rows) * n * modes;
  }
  return total;
}

double box_state_weight_inside(double a, double b, int m, double c, double d) {
  const double l = b - a, k = m + 1;
  auto f = [&](double s) { return s - std::sin(2 * k * pi * s) / (2 * k * pi); };
  return f((d - a) / l) - f((c - a) / l);
}

Eigen::MatrixXcd sudden_wall_amplitudes(double a0, double b0, double a1, double b1, int initial, int final) {
  TRAPWORK_EXPECT(initial >= 1 && final >= 1, "sudden_wall_amplitudes needs level counts >= 1");
  if (!(b0 > a0) || !(b1 > a1)) throw PhysicsError("sudden wall change: box widths must be positive");
  if (a1 > a0 || b1 < b0) {
    const double c = std::max(a0, a1), d = std::min(b0, b1);
    const double inside = d > c ? box_state_weight_inside(a0, b0, 0, c, d) : 0.0;
    throw PhysicsError(
        "sudden compression of a hard wall, box [" + fmt(a0) + ", " + fmt(b0) + "] -> [" + fmt(a1) + ", " + fmt(b1) +
        "], refused: the ground state has weight " + fmt(1 - inside) +
        " outside the new box. Projecting onto the new box would be a post-selected position measurement, not a "
        "unitary work protocol, and the cut state does not vanish at the new wall, so its energy in the new box is "
        "infinite. Move the wall at a finite speed (tau > 0) instead");
  }
  const double l0 = b0 - a0, l1 = b1 - a1, r = l0 / l1;
  auto sinc = [](double z) { return std::abs(z) < 1e-8 ? 1 - z * z / 6 : std::sin(z) / z; };
  Eigen::MatrixXcd a(final, initial);
  for (int n = 1; n <= final; ++n) {
    const double phi = n * pi * (a0 - a1) / l1, alpha = n * pi * r;
    for (int m = 1; m <= initial; ++m) {
      const double e = alpha - m * pi, h = alpha + m * pi;
      a(n - 1, m - 1) = std::sqrt(r) * (std::cos(phi + e / 2) * sinc(e / 2) - std::cos(phi + h / 2) * sinc(h / 2));
    }
  }
  return a;
}

Spectrum flat_box_spectrum(double a, double b, std::size_t points, int levels) {
  Spectrum s;
  s.grid = Grid::box(a, b, points);
  if (levels < 1 || std::size_t(levels) > points)
    throw PhysicsError("flat box: " + std::to_string(levels) + " levels asked for on a sine basis of " +
                       std::to_string(points) + " modes");
  const double l = b - a;
  s.energies.resize(levels);
  s.states.resize(Eigen::Index(points), levels);
  for (int k = 1; k <= levels; ++k) {
    s.energies[k - 1] = 0.5 * std::pow(k * pi / l, 2);
    for (std::size_t j = 0; j < points; ++j)
      s.states(Eigen::Index(j), k - 1) = std::sqrt(2 / l) * std::sin(k * pi * double(j + 1) / double(points + 1));
  }
  s.residuals.assign(std::size_t(levels), 0.0);
  s.group.resize(std::size_t(levels));
  for (int k = 0; k < levels; ++k) s.group[std::size_t(k)] = k;
  s.converged = levels;
  s.method = "analytic sine basis (flat box)";
  return s;
}

WorkDistribution adiabatic_wall_work(const Eigen::VectorXd& initial_energies, const Eigen::VectorXd& final_energies,
                                     const std::vector<double>& weights) {
  const int k = int(weights.size());
  TRAPWORK_EXPECT(initial_energies.size() >= k && final_energies.size() >= k,
                  "adiabatic_wall_work: fewer energies than weights");
  WorkInput in{adiabatic_transition_matrix(k, k), initial_energies.head(k), final_energies.head(k), weights, {}, {},
               std::nullopt};
  return work_distribution(in);
}

// ---- driver ---------------------------------------------------------------------------

namespace {

struct WallRun {
  Eigen::MatrixXcd amplitudes;  // final levels x initial levels
  StateEnergies energies;       // <H_B>, ||H_B psi||^2 of the final states in the sine basis
  double norm_drift = 0, max_phase = 0;
};

// Levels of the box at the start (final = false) or the end of the protocol.
Spectrum box_spectrum(const WallProtocol& p, bool final, const WallWorkRequest& request, int levels) {
  const WallState w = final ? p.final_walls() : p.initial_walls();
  levels = std::min<int>(levels, int(request.points));
  if (p.flat()) return flat_box_spectrum(w.left.value, w.right.value, request.points, levels);
  const Grid grid = Grid::box(w.left.value, w.right.value, request.points);
  levels = std::min<int>(levels, int(request.points) / 2);  // solve_spectrum resolves at most half the points
  SpectrumOptions options = request.spectrum;
  options.levels = levels;
  return solve_spectrum(grid, (final ? p.final_inner() : p.initial_inner()).evaluate(grid.points()), options);
}

WallRun run_walls(const WallProtocol& p, const Spectrum& initial, const Spectrum& final, int kept, int finals,
                  int steps, SplitOrder order, int threads, const std::function<void(double)>& progress = {}) {
  const double tau = p.duration();
  const WallState wa = p.walls(0), wb = p.walls(tau);
  WallSplitOperatorPropagator propagator(p, initial.grid.size(), kept, order, threads);
  const double dy = propagator.grid().spacing();
  Eigen::MatrixXcd state = (initial.states.leftCols(kept) * std::sqrt(wa.length())).cast<complex>();
  propagator.from_lab(state, 0);
  WallRun run;
  propagate(propagator, state, 0.0, tau, steps, [&](const Eigen::MatrixXcd&, double t) {
    run.max_phase = std::max(run.max_phase, propagator.max_phase());
    if (progress) progress(t / tau);
  });
  propagator.to_lab(state, tau);
  for (int c = 0; c < kept; ++c) run.norm_drift = std::max(run.norm_drift, std::abs(state.col(c).squaredNorm() * dy - 1));
  run.amplitudes = (final.states.leftCols(finals) * std::sqrt(wb.length())).transpose().cast<complex>() * state * dy;
  // H_B on the lab box at tau in the sine basis (final.grid has the same points; the scale
  // sqrt(L) cancels in state_energies): ||H_B psi||^2 is finite even where H_B psi does not
  // vanish at the wall (a wall still moving at tau), where <psi|H_B H_B psi> by parts is not.
  const std::vector<double> v = p.flat() ? std::vector<double>(final.grid.size(), 0.0)
                                         : p.final_inner().evaluate(final.grid.points(), tau);
  run.energies = state_energies(final.grid, v, state);
  return run;
}

// Phase rate that sets the automatic step: the splitting error comes from [T, W]; with
// W_span the range of W over the box and E_max the highest level used, omega = W_span +
// sqrt(2 E_max W_span) (the kinetic flow itself is exact). A heuristic: the half-step run
// reports the actual error.
double splitting_rate(const WallProtocol& p, std::size_t points, double e_max) {
  const Grid g = Grid::box(0, 1, std::min<std::size_t>(points, 256));
  const auto y = g.points();
  double span = 0;
  for (int i = 0; i <= 32; ++i) {
    const double t = p.duration() * i / 32;
    const WallState w = p.walls(t);
    std::vector<double> x(y.size()), v(y.size(), 0.0);
    for (std::size_t j = 0; j < y.size(); ++j) x[j] = w.left.value + w.length() * y[j];
    if (!p.flat()) p.inner_at(t).evaluate(x.data(), v.data(), x.size());
    for (std::size_t j = 0; j < y.size(); ++j)
      v[j] += 0.5 * w.length() * w.acceleration() * y[j] * y[j] + w.length() * w.left.acceleration * y[j];
    const auto [lo, hi] = std::minmax_element(v.begin(), v.end());
    span = std::max(span, *hi - *lo);
  }
  return span + std::sqrt(2 * e_max * span);
}

// Sudden expansion: amplitudes <n_B|m_A> for the first `kept` initial levels, the final
// spectrum, and int_A |phi_n^B|^2 for each final level (the Jarzynski failure term).
// Flat box: closed forms. Inner potential: both grid spectra are sine series on their own
// boxes (the interior grid is the sine basis: c = S^T psi dx, discrete orthogonality), so
//   <n_B|m_A> = sum_jk d_nj <s_j^B|s_k^A> c_mk = (D^T O C)_nm,
// with O the closed-form flat-box overlaps of sudden_wall_amplitudes, and
//   int_A |phi_n^B|^2 = d_n^T G d_n,  G_jj' = int_A s_j^B s_j'^B dx
//   = (1/pi) [F(j - j') - F(j + j')],  F(q) = int_{u_c}^{u_d} cos(q u) du,  u = pi (x - a1)/L1.
// Both exact for the grid eigenvectors (no quadrature across the kink at the old wall).
struct SuddenWalls {
  Eigen::MatrixXcd amplitudes;
  Spectrum final_spectrum;
  std::vector<double> weight_inside_old_box;
};

SuddenWalls sudden_walls(const WallProtocol& protocol, const Spectrum& sa, int kept, const WallWorkRequest& request) {
  const WallState wa = protocol.initial_walls(), wb = protocol.final_walls();
  const double a0 = wa.left.value, b0 = wa.right.value, a1 = wb.left.value, b1 = wb.right.value;
  SuddenWalls out;
  if (protocol.flat()) {
    const int finals = std::max(request.sudden_final_levels, kept + request.final_margin);
    out.amplitudes = sudden_wall_amplitudes(a0, b0, a1, b1, kept, finals);
    out.final_spectrum = flat_box_spectrum(a1, b1, std::max<std::size_t>(request.points, std::size_t(finals)), finals);
    for (int n = 0; n < finals; ++n) out.weight_inside_old_box.push_back(box_state_weight_inside(a1, b1, n, a0, b0));
    return out;
  }
  const int points = int(request.points);
  const int levels = std::min(points / 2, std::max(request.sudden_final_levels, kept + request.final_margin));
  out.final_spectrum = box_spectrum(protocol, true, request, levels);
  const Spectrum& sb = out.final_spectrum;
  const int finals = int(sb.energies.size());
  const Eigen::MatrixXd c = flat_box_spectrum(a0, b0, request.points, points).states.transpose() *
                            sa.states.leftCols(kept) * sa.grid.spacing();
  const Eigen::MatrixXd d = flat_box_spectrum(a1, b1, request.points, points).states.transpose() *
                            sb.states.leftCols(finals) * sb.grid.spacing();
  const Eigen::MatrixXd o = sudden_wall_amplitudes(a0, b0, a1, b1, points, points).real();  // throws for a compression
  out.amplitudes = (d.transpose() * o * c).cast<complex>();
  const double uc = pi * (a0 - a1) / (b1 - a1), ud = pi * (b0 - a1) / (b1 - a1);
  auto f = [&](int q) { return q == 0 ? ud - uc : (std::sin(q * ud) - std::sin(q * uc)) / q; };
  Eigen::MatrixXd g(points, points);
  for (int j = 1; j <= points; ++j)
    for (int k = 1; k <= points; ++k) g(j - 1, k - 1) = (f(j - k) - f(j + k)) / pi;
  for (int n = 0; n < finals; ++n) out.weight_inside_old_box.push_back(d.col(n).dot(g * d.col(n)));
  return out;
}

WallWorkResult run_wall_work_once(const WallProtocol& protocol, const WallWorkRequest& request) {
  const double tau = protocol.duration();
  const WallState wa = protocol.initial_walls(), wb = protocol.final_walls();
  const int levels = std::min<int>(int(request.points), std::max(request.max_initial_levels, request.min_initial_levels) +
                                                           request.final_margin);
  WallWorkResult out;
  WorkResult& result = out.work;
  Diagnostics& diag = result.diagnostics;
  diag.edge_amplitude = std::numeric_limits<double>::quiet_NaN();  // psi = 0 at hard walls: not applicable
  diag.grid_convergence = protocol.flat() ? 0.0 : std::numeric_limits<double>::quiet_NaN();

  // Cost before commitment: the sizes are fixed here (solver/cost.hpp).
  auto sizes = [&](std::size_t points, int steps) {
    WorkSizes z;
    z.points = points;
    z.levels = levels;
    z.kept = std::min(levels, std::max(request.max_initial_levels, request.min_initial_levels));
    z.steps = steps;
    z.substeps = request.order == SplitOrder::fourth ? 3 : 1;
    z.runs = 1 + (request.time_step_check ? 2 : 0) + (request.reverse_run ? 1 : 0) + (request.grid_check ? 2 : 0);
    z.dense = !protocol.flat() && points <= request.spectrum.dense_limit;
    return z;
  };
  check_memory(work_cost(sizes(request.points, 0)), request.spectrum.memory_limit, "refused before computing");
  if (request.grid_check && protocol.duration() > 0)
    check_memory(work_cost(sizes(2 * request.points + 1, 0)), request.spectrum.memory_limit,
                 "refused before computing (the check on twice the points)");
  Spectrum sa = box_spectrum(protocol, false, request, levels);
  InitialWeights weights_a =
      initial_weights(request.initial, sa.energies, request.thermal_tolerance, request.max_initial_levels);
  if (weights_a.gibbs && int(weights_a.weights.size()) < request.min_initial_levels) {
    // more levels than the thermal tail needs: the reverse run leaves the first ones (p_R(>=K))
    weights_a = initial_weights(request.initial, sa.energies, 0.0, request.min_initial_levels);
    weights_a.choice.reached = weights_a.choice.left_out < request.thermal_tolerance;
  }
  const int kept_a = int(weights_a.weights.size());
  const std::optional<double> beta = weights_a.gibbs ? std::optional<double>(weights_a.beta) : std::nullopt;
  if (weights_a.gibbs && !weights_a.choice.reached)
    diag.warnings.push_back("left-out thermal weight " + fmt(weights_a.choice.left_out) + " with " +
                            std::to_string(kept_a) + " levels is above the tolerance: raise max_initial_levels");

  if (tau == 0) {
    const SuddenWalls sudden = sudden_walls(protocol, sa, kept_a, request);
    const Spectrum& sb = sudden.final_spectrum;
    const int finals = int(sb.energies.size());
    result.grid = sa.grid;
    result.method = protocol.flat() ? "sudden expansion (closed-form overlaps)"
                                    : "sudden expansion (sine-basis overlaps of the grid eigenstates)";
    result.initial_spectrum = sa;
    result.final_spectrum = sb;
    result.forward = WorkInput{transition_matrix(sudden.amplitudes), sa.energies, sb.energies, weights_a.weights, {}, {}, beta};
    result.distribution = work_distribution(result.forward, request.merge_tolerance);
    diag.unresolved_weight = result.distribution.unresolved_weight;
    diag.jarzynski_residual = result.distribution.jarzynski_residual;
    diag.warnings.push_back("sudden expansion: <W^2> diverges (the old state has a kink at the old wall); the "
                            "variance over the computed lines does not converge with the number of final levels");
    if (beta) {
      // (1/Z_A) sum_n exp(-beta E_n^B) int_A |phi_n^B|^2, shifted by E_0^B (no overflow)
      double sum = 0;
      for (int n = 0; n < finals; ++n)
        sum += std::exp(-*beta * (sb.energies[n] - sb.energies[0])) * sudden.weight_inside_old_box[std::size_t(n)];
      SuddenJarzynski s;
      const double log_za = log_sum_weights(sa.energies, *beta), log_zb = log_sum_weights(sb.energies, *beta);
      s.average = std::exp(std::log(sum) - *beta * sb.energies[0] - log_za);
      s.partition_ratio = std::exp(log_zb - log_za);
      s.ratio = s.average / s.partition_ratio;
      out.sudden = s;
      diag.warnings.push_back(
          "sudden hard-wall expansion: <exp(-beta W)> = " + fmt(s.average) + " over all initial levels, but Z_B/Z_A = " +
          fmt(s.partition_ratio) + " (ratio " + fmt(s.ratio) +
          "). The Jarzynski equality does not hold for an instantaneous change of the Hilbert space: sum_m P(m->n) = "
          "int_A |phi_n^B|^2 < 1 (Quan & Jarzynski 2012). Any finite wall speed restores it.");
    }
    return out;
  }

  Spectrum sb = box_spectrum(protocol, true, request, levels);
  const int finals = std::min<int>(int(sb.energies.size()), kept_a + request.final_margin);
  const double e_max = std::max(sa.energies[std::min<Eigen::Index>(sa.energies.size() - 1, finals - 1)],
                                sb.energies[finals - 1]);
  const double per_step = request.phase_per_step > 0             ? request.phase_per_step
                          : request.order == SplitOrder::fourth ? 0.2
                                                                : 0.02;
  const int steps = request.steps > 0
                        ? request.steps
                        : automatic_steps(tau * splitting_rate(protocol, request.points, e_max), per_step);
  result.grid = sa.grid;  // the lab box at t = 0 (the propagation runs on its dilation onto [0, 1])
  result.steps = steps;
  result.method = std::string("dilated box, DST-I split-operator ") +
                  (request.order == SplitOrder::fourth ? "Yoshida triple jump (order 4)" : "Strang");
  result.initial_spectrum = sa;
  result.final_spectrum = sb;
  const CostEstimate cost = work_cost(sizes(request.points, steps));
  diag.estimated_bytes = cost.bytes;
  diag.estimated_operations = cost.operations;

  const bool end_chirp = wa.rate() != 0 || wa.left.rate != 0 || wb.rate() != 0 || wb.left.rate != 0;
  // Progress in units of forward runs: forward 1, grid check 2, half step 2, reverse 1.
  // The grid check runs for a flat box with walls at rest at both ends too: its spectra are
  // exact in the sine basis, but not the states in between (a 2 um expansion of a 10 um box in
  // 40 us, smooth ramp, gave <W> = 61 +- 1.7 kB*nK on 255 points, -0.0073 on 1023).
  const bool grid_check = request.grid_check;
  const double units = 1.0 + (grid_check ? 2.0 : 0.0) + (request.time_step_check ? 2.0 : 0.0) +
                       (request.reverse_run && beta ? 1.0 : 0.0);
  double done_units = 0;
  auto share = [&](double width) {
    const double from = done_units;
    done_units += width;
    return std::function<void(double)>([&request, from, width, units](double f) {
      if (request.progress) request.progress((from + width * f) / units);
    });
  };
  const WallRun fwd = run_walls(protocol, sa, sb, kept_a, finals, steps, request.order, request.threads, share(1));
  result.forward = WorkInput{transition_matrix(fwd.amplitudes), sa.energies, sb.energies.head(finals), weights_a.weights,
                             {}, {}, beta};
  result.distribution = work_distribution(result.forward, request.merge_tolerance);
  diag.norm_drift = fwd.norm_drift;
  diag.max_phase_per_step = fwd.max_phase;
  diag.unresolved_weight = result.distribution.unresolved_weight;
  diag.jarzynski_residual = result.distribution.jarzynski_residual;
  diag.moments = moment_errors(result.forward, result.distribution, fwd.energies, weights_a.choice.left_out,
                               request.unresolved_tolerance);
  diag.truncation.thermal_tail = weights_a.choice.left_out;  // the reverse run adds its parts below
  diag.final_margin = request.final_margin;
  diag.thermal_tolerance = request.thermal_tolerance;
  if (grid_check) {
    // Twice the sine modes: the end chirp of a wall already moving (and an inner potential's
    // levels) are represented on the grid only to a finite number of modes.
    WallWorkRequest fine = request;
    fine.points = 2 * request.points + 1;  // (n + 1) doubled: a fast DST-I when n + 1 is
    const Spectrum fa = box_spectrum(protocol, false, fine, levels), fb = box_spectrum(protocol, true, fine, levels);
    const WallRun f = run_walls(protocol, fa, fb, kept_a, finals, steps, request.order, request.threads, share(2));
    out.grid_line_change =
        (transition_matrix(f.amplitudes).probability - result.forward.transitions.probability).cwiseAbs().maxCoeff();
    // The direct moments' own sine-basis error: the change on twice the modes, times 3. For an
    // error falling as 1/modes (the slowest seen: a wall moving at an end leaves psi'' != 0 at
    // the wall, so |c_k|^2 ~ k^-6 and E_k^2 |c_k|^2 ~ k^-2) the remainder is twice the change;
    // the factor 3 leaves room for the next order.
    const MomentErrors finer = moment_errors(result.forward, result.distribution, f.energies,
                                             weights_a.choice.left_out, request.unresolved_tolerance);
    diag.moments.mean_basis = 3 * std::abs(finer.mean_direct - diag.moments.mean_direct);
    diag.moments.variance_basis = 3 * std::abs(finer.variance_direct - diag.moments.variance_direct);
    total_moment_errors(diag.moments);
    if (out.grid_line_change > 1e-6)
      diag.warnings.push_back("line probabilities change by " + fmt(out.grid_line_change) + " with twice the points (" +
                              std::to_string(fine.points) + ")" +
                              (end_chirp ? ": the walls move at the start or the end, use a smooth ramp or " : ": ") +
                              "raise the points");
  }
  else {  // the basis error of the direct moments is not known
    diag.moments.mean_basis = diag.moments.variance_basis = std::numeric_limits<double>::quiet_NaN();
    total_moment_errors(diag.moments);
  }
  if (request.time_step_check) {
    const WallRun half = run_walls(protocol, sa, sb, kept_a, finals, 2 * steps, request.order, request.threads, share(2));
    diag.time_step_error =
        (transition_matrix(half.amplitudes).probability - result.forward.transitions.probability).cwiseAbs().maxCoeff();
    // twice the shift, as run_work's half-step run (see there)
    set_discretisation(diag.moments, direct_moments(result.forward, half.energies), 2.0,
                       "the half-step run: the time step only");
  }

  if (request.reverse_run && beta) {
    const WallProtocol reversed = protocol.reversed();
    // The reverse run starts thermal at the forward run's beta (Crooks compares the two at one
    // temperature), whichever way the initial state was given (mean_phonons is a beta for A).
    const InitialWeights weights_b = initial_weights(InitialState::thermal(*beta), sb.energies,
                                                     request.thermal_tolerance, request.max_initial_levels);
    const int kept_b = int(weights_b.weights.size());
    const int finals_r = std::min<int>(int(sa.energies.size()), std::max(kept_a, kept_b) + request.final_margin);
    const WallRun rev = run_walls(reversed, sb, sa, kept_b, finals_r, steps, request.order, request.threads, share(1));
    result.reverse = WorkInput{transition_matrix(rev.amplitudes), sb.energies, sa.energies.head(finals_r),
                               weights_b.weights, {}, {}, weights_b.beta};
    result.reverse_distribution = work_distribution(*result.reverse, request.merge_tolerance);
    result.crooks = crooks_check(result.forward, *result.reverse, request.merge_tolerance);
    diag.crooks_line_difference = result.crooks->max_line_difference;
    diag.crooks_ratio_error = result.crooks->max_ratio_error;
    diag.norm_drift = std::max(diag.norm_drift, rev.norm_drift);
    diag.truncation = truncation_residual_bound(weights_a.choice.left_out, kept_a, result.reverse->transitions.probability,
                                                weights_b.weights, weights_b.choice.left_out);
    if (std::abs(diag.jarzynski_residual) > diag.truncation.bound + 1e-9)
      diag.warnings.push_back("Jarzynski residual " + fmt(diag.jarzynski_residual) + " exceeds the truncation bound " +
                              fmt(diag.truncation.bound) + ": check the grid (points) and the time step");
  }

  if (const std::string w = moment_warning(
          diag.moments, finals,
          end_chirp ? "the walls move at the start or the end: H_B psi does not vanish at the wall, its sine "
                      "coefficients fall slowly and <W^2> converges only as 1/modes; use a smooth ramp, or raise "
                      "[grid] points (now " + std::to_string(request.points) + ")"
                    : "the sine basis: raise [grid] points (now " + std::to_string(request.points) + ")");
      !w.empty())
    diag.warnings.push_back(w);
  if (diag.unresolved_weight > request.unresolved_tolerance)
    diag.warnings.push_back("unresolved weight " + fmt(diag.unresolved_weight) + ": raise final_margin");
  return out;
}

// The exact reference of a wall at constant speed through a flat box (none otherwise), for the
// run's last attempt (run_wall_work). Not summed on the run's final levels: the reference <W>
// keeps 4 times as many (at least 400, at most 1024; its error from the change against half of
// them), so that it judges the truncation of the run's moments too. Same initial levels and
// weights as the run. Its chirp quadrature grows with the wall speed: 1.3e11 estimated
// operations took 26 s here (u L1 / 2 = 4e4, 684 levels: an 87 u atom's wall moved 2 um in
// 400 ns), a move in 10 ns would take days; above 1e11 it is not computed, and
// out.doescher_rice_absent says so.
void compare_doescher_rice(const WallProtocol& protocol, const WallWorkRequest& request, WallWorkResult& out) {
  const auto u = protocol.constant_speed();
  if (!u || protocol.duration() == 0) return;
  const WorkResult& result = out.work;
  const WallState wa = protocol.initial_walls(), wb = protocol.final_walls();
  const int kept_a = result.forward.transitions.initial_levels(), finals = result.forward.transitions.final_levels();
  const int levels = std::min(1024, std::max({400, 4 * finals, kept_a}));
  const double operations = doescher_rice_operations(wa.length(), wb.length(), *u, levels, 0, kept_a);
  if (operations > 1e11) {
    out.doescher_rice_absent = "not computed: at this wall speed its chirp quadrature needs about " + fmt(operations) +
                               " operations, more than the 1e+11 allowed (about 20 s)";
    return;
  }
  DoescherRiceComparison c;
  c.speed = *u;
  c.levels = levels;
  const Eigen::MatrixXcd dr = doescher_rice_amplitudes(wa.length(), wb.length(), *u, c.levels, 0, kept_a);
  WorkInput reference = result.forward;
  reference.transitions = transition_matrix(dr.topLeftCorner(finals, kept_a));
  c.max_line_difference = (reference.transitions.probability - result.forward.transitions.probability).cwiseAbs().maxCoeff();
  auto reference_with = [&](int n) {
    WorkInput r = result.forward;
    r.transitions = transition_matrix(dr.topLeftCorner(n, kept_a));
    r.final_energies = flat_box_spectrum(wb.left.value, wb.right.value, std::size_t(n), n).energies;
    return work_distribution(r, request.merge_tolerance);
  };
  const WorkDistribution full = reference_with(c.levels), half = reference_with(c.levels / 2);
  c.mean_work = full.mean;
  c.mean_work_error = std::abs(full.mean - half.mean);
  c.variance = full.variance;
  c.variance_error = 2 * std::abs(full.variance - half.variance);  // 1/levels convergence (see above)
  c.mean_work_difference = result.distribution.mean - c.mean_work;
  out.doescher_rice = c;
}

}  // namespace

// As run_work (solver/work.cpp): when the unresolved final weight or the chance p_R(>=K) that
// the reverse run leaves the kept initial levels exceeds unresolved_tolerance, the run is
// repeated, at most twice: with twice the final margin for the first, and for the second with
// as many initial levels as the reverse run's transition matrix shows are needed (plus 4), even
// where the thermal tail is far smaller (a fast compression sends the reverse run high; the
// Jarzynski average needs those levels, weighted by exp(-beta W)). A sudden expansion is
// computed once: its closed form already keeps sudden_final_levels.
WallWorkResult run_wall_work(const WallProtocol& protocol, const WallWorkRequest& request) {
  WallWorkRequest r = request;
  for (int attempt = 0;; ++attempt) {
    WallWorkResult out = run_wall_work_once(protocol, r);
    Diagnostics& d = out.work.diagnostics;
    const double escape = std::max(d.unresolved_weight, d.truncation.reverse_tail);
    // more levels help the moments only where the final levels or the thermal cut dominate
    const std::string moments = d.moments.dominant();
    const bool levels_help = moments == "final" || moments == "thermal";
    if (protocol.duration() == 0 || (!(escape > r.unresolved_tolerance) && !levels_help) || attempt == 2) {
      if (attempt > 0)
        d.notes.push_back(enlargement_note(attempt, escape, d.moments, r.final_margin, r.thermal_tolerance));
      compare_doescher_rice(protocol, r, out);
      return out;
    }
    if (d.unresolved_weight > r.unresolved_tolerance || moments == "final") r.final_margin *= 2;
    if (moments == "thermal") r.thermal_tolerance /= 1e3;
    if (d.truncation.reverse_tail > r.unresolved_tolerance && out.work.reverse)
      r.min_initial_levels = levels_for_reverse_tail(out.work.reverse->transitions.probability,
                                                     out.work.reverse->initial_weights, r.unresolved_tolerance / 2) +
                             4;
  }
}

// ---- soft walls -------------------------------------------------------------------------

Term soft_walls(const std::string& name, const SoftWallShape& shape, double width, double left, double right) {
  return Term(name, Shape::power_walls,
              {{"left", left}, {"right", right}, {"height", shape.height}, {"width", width}, {"power", shape.power}});
}

SoftWallComparison compare_soft_walls(const WallProtocol& protocol, const WallWorkResult& hard,
                                      const WallWorkRequest& hard_request, const SoftWallRequest& soft) {
  for (double w : soft.widths)
    if (!(w > 0)) throw InputError("soft_walls.widths", fmt(w), "widths > 0");
  SoftWallComparison out;
  out.hard_mean_work = hard.work.distribution.mean;
  const WorkInput& h = hard.work.forward;
  double lo = protocol.initial_walls().left.value, hi = protocol.initial_walls().right.value;
  for (int i = 0; i <= 256; ++i) {
    const WallState w = protocol.duration() > 0 ? protocol.walls(protocol.duration() * i / 256) : protocol.final_walls();
    lo = std::min(lo, w.left.value);
    hi = std::max(hi, w.right.value);
  }
  const WallState w0 = protocol.initial_walls();
  // Progress: each width an equal share, each of its at most max_doublings + 3 runs a part.
  const double runs_per_width = soft.max_doublings + 3.0;
  int runs_done = 0;
  auto ran = [&] {
    ++runs_done;
    if (soft.progress)
      soft.progress(std::min(1.0, (double(out.runs.size()) + std::min(1.0, runs_done / runs_per_width)) /
                                      double(soft.widths.size())));
  };
  for (double width : soft.widths) {
    runs_done = 0;
    Potential base = protocol.inner();
    base.add(soft_walls(protocol.name(), soft.shape, width, w0.left.value, w0.right.value));
    const double extent = hi - lo + 2.5 * width;
    WorkRequest r;
    r.initial = hard_request.initial;
    r.thermal_tolerance = hard_request.thermal_tolerance;
    r.max_initial_levels = int(h.transitions.probability.rows());
    r.final_margin = int(h.transitions.probability.cols() - h.transitions.probability.rows());
    r.spectrum.box = std::make_pair(lo - 1.25 * width, hi + 1.25 * width);
    r.spectrum.points = soft.points > 0 ? soft.points
                                        : fast_fft_size(std::max<std::size_t>(257, std::size_t(std::ceil(6 * extent / width)))) - 1;
    r.spectrum.convergence_check = false;
    r.reverse_run = false;
    r.time_step_check = false;
    r.grid_check = false;
    r.threads = hard_request.threads;
    r.unresolved_tolerance = 1.0;  // compare as computed; the unresolved weight stays in the result
    // Steps doubled from run_work's choice until two runs agree; then one run on 3/2 the points.
    WorkResult run = run_work(base, protocol.as_protocol(), r);
    ran();
    SoftWallRun s;
    s.width = width;
    s.points = *r.spectrum.points;
    s.steps = run.steps;
    for (int k = 0; k <= soft.max_doublings && protocol.duration() > 0; ++k) {
      r.steps = 2 * s.steps;
      WorkResult finer = run_work(base, protocol.as_protocol(), r);
      ran();
      s.numerical_error = line_distance(run.forward, finer.forward).distance;
      run = std::move(finer);
      s.steps = r.steps;
      if (s.numerical_error <= soft.numerical_tolerance) break;
    }
    r.spectrum.points = fast_fft_size(3 * (s.points + 1) / 2) - 1;
    const WorkResult refined = run_work(base, protocol.as_protocol(), r);
    ran();
    s.numerical_error = std::max(s.numerical_error, line_distance(run.forward, refined.forward).distance);
    s.converged = s.numerical_error <= soft.numerical_tolerance;
    s.mean_work = run.distribution.mean;
    s.mean_work_difference = s.mean_work - out.hard_mean_work;
    s.distance = line_distance(run.forward, h);
    out.runs.push_back(s);
  }
  const std::size_t n = out.runs.size();
  if (n >= 3 && std::abs(out.runs[n - 2].width - 2 * out.runs[n - 1].width) <= 1e-9 * out.runs[n - 2].width &&
      std::abs(out.runs[n - 3].width - 2 * out.runs[n - 2].width) <= 1e-9 * out.runs[n - 3].width) {
    const double d1 = out.runs[n - 3].mean_work - out.runs[n - 2].mean_work;
    const double d2 = out.runs[n - 2].mean_work - out.runs[n - 1].mean_work;
    if (d1 * d2 > 0 && std::abs(d1) > std::abs(d2)) {
      out.observed_order = std::log2(d1 / d2);
      out.extrapolated_mean_work = out.runs[n - 1].mean_work - d2 / (d1 / d2 - 1);
    }
  }
  return out;
}

}  // namespace trapwork
