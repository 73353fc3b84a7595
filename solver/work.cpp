#include "solver/work.hpp"

#include <algorithm>
#include <cmath>
#include <future>
#include <limits>
#include <map>
#include <numbers>
#include <numeric>
#include <sstream>
#include <system_error>
#include <tuple>
#include <utility>

#include "solver/errors.hpp"
#include "solver/hamiltonian.hpp"
#include "solver/harmonic_reference.hpp"

namespace trapwork {

namespace {
std::string fmt(double v) {
  std::ostringstream s;
  s.precision(3);
  s << v;
  return s.str();
}
int group_of(const std::vector<int>& groups, int level) { return groups.empty() ? level : groups[std::size_t(level)]; }

// Mean energy of each level's group over the levels given.
Eigen::VectorXd group_mean_energy(const Eigen::VectorXd& e, const std::vector<int>& groups) {
  if (groups.empty()) return e;
  TRAPWORK_EXPECT(groups.size() >= std::size_t(e.size()), "degenerate groups shorter than the energies");
  std::map<int, std::pair<double, int>> sum;
  for (Eigen::Index i = 0; i < e.size(); ++i) {
    auto& s = sum[groups[std::size_t(i)]];
    s.first += e[i];
    s.second += 1;
  }
  Eigen::VectorXd out(e.size());
  for (Eigen::Index i = 0; i < e.size(); ++i) {
    const auto& s = sum[groups[std::size_t(i)]];
    out[i] = s.first / s.second;
  }
  return out;
}

double shifted_partition(const Eigen::VectorXd& e, double beta) {
  double z = 0;
  for (Eigen::Index i = e.size() - 1; i >= 0; --i) z += std::exp(-beta * (e[i] - e[0]));
  return z;
}
}  // namespace

Eigen::VectorXd TransitionMatrix::unresolved() const {
  return Eigen::VectorXd::Ones(probability.rows()) - probability.rowwise().sum();
}

TransitionMatrix transition_matrix(const Eigen::MatrixXcd& amplitudes) {
  return {amplitudes.cwiseAbs2().transpose()};
}

TransitionMatrix adiabatic_transition_matrix(int initial_levels, int final_levels) {
  return {Eigen::MatrixXd::Identity(initial_levels, final_levels)};
}

WorkDistribution work_distribution(const WorkInput& in, double merge_tolerance) {
  const Eigen::MatrixXd& p = in.transitions.probability;
  const int rows = int(p.rows()), cols = int(p.cols());
  TRAPWORK_EXPECT(in.initial_weights.size() == std::size_t(rows), "work_distribution: one weight per initial level");
  TRAPWORK_EXPECT(in.initial_energies.size() >= rows && in.final_energies.size() == cols,
                  "work_distribution: energies do not match the transition matrix");
  const Eigen::VectorXd ea = group_mean_energy(in.initial_energies, in.initial_groups);
  const Eigen::VectorXd eb = group_mean_energy(in.final_energies, in.final_groups);

  WorkDistribution d;
  d.merge_tolerance = merge_tolerance;
  // lines per (initial group, final group): the eigenspace probabilities
  std::map<std::pair<int, int>, WorkLine> pairs;
  for (int m = 0; m < rows; ++m) {
    const double w = in.initial_weights[std::size_t(m)];
    d.unresolved_weight += w * (1.0 - p.row(m).sum());
    if (w == 0) continue;
    for (int n = 0; n < cols; ++n) {
      auto [it, fresh] = pairs.try_emplace({group_of(in.initial_groups, m), group_of(in.final_groups, n)});
      if (fresh) it->second = WorkLine{eb[n] - ea[m], 0.0, m, n};
      it->second.probability += w * p(m, n);
    }
  }
  std::vector<WorkLine> raw;
  raw.reserve(pairs.size());
  for (auto& [key, line] : pairs) raw.push_back(line);
  std::stable_sort(raw.begin(), raw.end(), [](const WorkLine& a, const WorkLine& b) { return a.work < b.work; });
  for (const auto& line : raw) {
    if (!d.lines.empty() && std::abs(line.work - d.lines.back().work) <= merge_tolerance)
      d.lines.back().probability += line.probability;
    else
      d.lines.push_back(line);
  }
  // moments about the mean, of the resolved lines renormalised
  for (const auto& l : d.lines) d.resolved_weight += l.probability;
  if (d.resolved_weight > 0) {
    for (const auto& l : d.lines) d.mean += l.probability * l.work;
    d.mean /= d.resolved_weight;
    double m2 = 0, m3 = 0;
    for (const auto& l : d.lines) {
      const double x = l.work - d.mean;
      m2 += l.probability * x * x;
      m3 += l.probability * x * x * x;
    }
    d.variance = m2 / d.resolved_weight;
    d.skewness = d.variance > 0 ? (m3 / d.resolved_weight) / std::pow(d.variance, 1.5) : 0.0;
  }
  if (in.beta) {
    const double beta = *in.beta;
    const double e0a = in.initial_energies[0], e0b = in.final_energies[0];
    // Gibbs weights: p_m exp(beta (E_m - E_0^A)) = p_0 for every kept level m, also where p_m
    // itself underflows to 0 (a cold box drops no level: the levels kept to bound p_R(>=K)
    // carry the reverse run's contribution to the average).
    const double p0 = in.initial_weights.front();
    for (int m = 0; m < rows; ++m) {
      const double w = in.initial_weights[std::size_t(m)];
      TRAPWORK_EXPECT(w < 1e-250 || std::abs(w * std::exp(beta * (in.initial_energies[m] - e0a)) / p0 - 1) < 1e-8,
                      "work_distribution: beta given but the initial weights are not Gibbs weights");
    }
    double average = 0;  // shifted: times exp(-beta (E0B - E0A)) below
    for (int n = 0; n < cols; ++n) average += p.col(n).sum() * std::exp(-beta * (in.final_energies[n] - e0b));
    average *= p0;
    const double ratio = shifted_partition(in.final_energies, beta) / shifted_partition(in.initial_energies, beta);
    d.beta = beta;
    d.jarzynski_residual = average / ratio - 1;
    d.jarzynski_average = average * std::exp(-beta * (e0b - e0a));
    d.partition_ratio = ratio * std::exp(-beta * (e0b - e0a));
    d.free_energy_change = (e0b - e0a) - std::log(ratio) / beta;
    d.dissipated_work = d.mean - d.free_energy_change;
  }
  return d;
}

std::vector<double> final_populations(const WorkInput& in) {
  const Eigen::MatrixXd& p = in.transitions.probability;
  TRAPWORK_EXPECT(in.initial_weights.size() == std::size_t(p.rows()), "final_populations: one weight per initial level");
  std::vector<double> out(std::size_t(p.cols()), 0.0);
  for (Eigen::Index m = 0; m < p.rows(); ++m)
    for (Eigen::Index n = 0; n < p.cols(); ++n) out[std::size_t(n)] += in.initial_weights[std::size_t(m)] * p(m, n);
  return out;
}

StateEnergies state_energies(const Grid& grid, const std::vector<double>& v, const Eigen::MatrixXcd& states) {
  TRAPWORK_EXPECT(states.rows() == Eigen::Index(grid.size()) && v.size() == grid.size(),
                  "state_energies: states and potential must have one row per grid point");
  const Eigen::Index cols = states.cols();
  StateEnergies out{Eigen::VectorXd::Zero(cols), Eigen::VectorXd::Zero(cols)};
  if (cols == 0) return out;
  KineticOperator kinetic(grid, int(cols));
  const Eigen::MatrixXd re = states.real(), im = states.imag();
  Eigen::MatrixXd h_re, h_im;
  apply_hamiltonian(kinetic, v, re, h_re);
  apply_hamiltonian(kinetic, v, im, h_im);
  for (Eigen::Index c = 0; c < cols; ++c) {
    const double norm = states.col(c).squaredNorm();  // the grid spacing cancels in the ratios
    const double e = (re.col(c).dot(h_re.col(c)) + im.col(c).dot(h_im.col(c))) / norm;
    out.energy[c] = e;
    out.energy_variance[c] = ((h_re.col(c) - e * re.col(c)).squaredNorm() + (h_im.col(c) - e * im.col(c)).squaredNorm()) / norm;
  }
  return out;
}

bool MomentErrors::mean_met() const { return mean_error <= std::max(tolerance * scale_mean, rounding_mean); }
bool MomentErrors::variance_met() const {
  return variance_error <= std::max(tolerance * scale_variance, rounding_variance);
}

std::string MomentErrors::dominant() const {
  if (mean_met() && variance_met()) return {};
  // the quantity that misses by more (relative), then its largest part
  const double miss_mean = mean_error / scale_mean, miss_var = variance_error / scale_variance;
  const bool var = !(miss_mean >= miss_var);
  const double f = std::abs(var ? variance_final : mean_final), t = var ? variance_thermal : mean_thermal,
               b = var ? variance_basis : mean_basis;
  if (!(b <= std::max(f, t))) return "basis";  // includes an unknown (NaN) basis part
  return f >= t ? "final" : "thermal";
}

void total_moment_errors(MomentErrors& e) {
  e.mean_error = std::abs(e.mean_final) + e.mean_thermal + e.mean_basis;
  e.variance_error = std::abs(e.variance_final) + e.variance_thermal + e.variance_basis;
}

double MomentErrors::reported_mean_error() const {
  return mean_error + (std::isfinite(mean_discretisation) ? mean_discretisation : 0.0);
}
double MomentErrors::reported_variance_error() const {
  return variance_error + (std::isfinite(variance_discretisation) ? variance_discretisation : 0.0);
}

namespace {
// The rows' mean work w_m and <W^2> s_m, and the direct moments with them (see moment_errors).
struct DirectRows {
  Eigen::VectorXd w, s;
  double total = 0, mean = 0, second = 0, variance = 0;
};
DirectRows direct_rows(const WorkInput& in, const StateEnergies& direct) {
  const int rows = in.transitions.initial_levels();
  TRAPWORK_EXPECT(direct.energy.size() == rows && direct.energy_variance.size() == rows,
                  "moment_errors: one direct energy per kept initial level");
  DirectRows r{Eigen::VectorXd(rows), Eigen::VectorXd(rows)};
  for (int m = 0; m < rows; ++m) {
    r.w[m] = direct.energy[m] - in.initial_energies[m];    // the row's mean work
    r.s[m] = direct.energy_variance[m] + r.w[m] * r.w[m];  // the row's <W^2>
    const double p = in.initial_weights[std::size_t(m)];
    r.total += p;
    r.mean += p * r.w[m];
  }
  r.mean /= r.total;
  // var W = sum_m p_m (var_m + (w_m - <W>)^2): no difference of large second moments (a protocol
  // that shifts every level by much more than sd W would lose digits in <W^2> - <W>^2)
  for (int m = 0; m < rows; ++m) {
    const double p = in.initial_weights[std::size_t(m)];
    r.second += p * r.s[m];
    r.variance += p * (direct.energy_variance[m] + (r.w[m] - r.mean) * (r.w[m] - r.mean));
  }
  r.second /= r.total;
  r.variance /= r.total;
  return r;
}
}  // namespace

DirectMoments direct_moments(const WorkInput& in, const StateEnergies& direct) {
  const DirectRows r = direct_rows(in, direct);
  return {r.mean, r.variance};
}

void set_discretisation(MomentErrors& e, const DirectMoments& check, double factor, const std::string& from) {
  e.mean_discretisation = factor * std::abs(check.mean - e.mean_direct);
  e.variance_discretisation = factor * std::abs(check.variance - e.variance_direct);
  e.discretisation_from = from;
}

MomentErrors moment_errors(const WorkInput& in, const WorkDistribution& d, const StateEnergies& direct,
                           double left_out_thermal_weight, double tolerance) {
  const int rows = in.transitions.initial_levels();
  const DirectRows r = direct_rows(in, direct);
  const Eigen::VectorXd &w = r.w, &s = r.s;
  const double mean = r.mean, second = r.second;
  MomentErrors e;
  e.tolerance = tolerance;
  e.mean_direct = mean;
  e.variance_direct = r.variance;
  e.mean_final = d.mean - e.mean_direct;
  e.variance_final = d.variance - e.variance_direct;
  const double eps = std::max(0.0, left_out_thermal_weight);
  if (eps > 0 && rows > 0) {
    e.mean_thermal = eps * (2 * std::abs(w[rows - 1]) + std::abs(mean));
    const double second_thermal = eps * (2 * std::abs(s[rows - 1]) + std::abs(second));
    e.variance_thermal = second_thermal + 2 * std::abs(mean) * e.mean_thermal;
  }
  e.scale_mean = std::max(std::abs(d.mean), std::sqrt(std::max(0.0, d.variance)));
  // a (near-)deterministic W: the variance is judged against rounding of the W^2 sums instead
  e.scale_variance = std::max(d.variance, 1e-8 * mean * mean);
  double largest = 0;
  for (int m = 0; m < rows; ++m) largest = std::max(largest, std::abs(in.initial_energies[m]));
  e.rounding_mean = 1e-11 * largest;
  e.rounding_variance = e.rounding_mean * (e.rounding_mean + 2 * std::sqrt(std::max(0.0, d.variance)));
  total_moment_errors(e);
  return e;
}

std::string moment_warning(const MomentErrors& e, int final_levels, const std::string& basis_cause) {
  const std::string part = e.dominant();
  if (part.empty()) return {};
  auto relative = [](double error, double scale) { return fmt(error / scale); };
  std::string text =
      "moments miss their relative tolerance " + fmt(e.tolerance) + ": <W> error " + relative(e.mean_error, e.scale_mean) +
      " of max(|<W>|, sd W), var W error " + relative(e.variance_error, e.scale_variance) + " of var W (parts: final levels " +
      fmt(std::max(std::abs(e.mean_final) / e.scale_mean, std::abs(e.variance_final) / e.scale_variance)) +
      ", thermal cut " + fmt(std::max(e.mean_thermal / e.scale_mean, e.variance_thermal / e.scale_variance)) +
      ", basis " + fmt(std::max(e.mean_basis / e.scale_mean, e.variance_basis / e.scale_variance)) + "); likely cause: ";
  if (part == "final") {
    text += "too few final levels (" + std::to_string(final_levels) + "): raise final_margin";
    const double basis = std::max(e.mean_basis / e.scale_mean, e.variance_basis / e.scale_variance);
    if (!(basis <= e.tolerance)) text += "; then the basis part also misses it: " + basis_cause;
  }
  else if (part == "thermal")
    text += "the thermal cut: lower thermal_tolerance";
  else
    text += basis_cause;
  return text;
}

std::string enlargement_note(int attempt, double escape, const MomentErrors& e, int final_margin,
                             double thermal_tolerance) {
  return "levels enlarged " + std::to_string(attempt) +
         " time(s) to bound the escape probability and the moments' truncation error (escape now " + fmt(escape) +
         ", relative <W> error " + fmt(e.mean_error / e.scale_mean) + ", relative var W error " +
         fmt(e.variance_error / e.scale_variance) + "; final margin " + std::to_string(final_margin) +
         ", thermal tolerance " + fmt(thermal_tolerance) + ")";
}

WorkHistogram histogram(const WorkDistribution& d, double bin_width) {
  if (!(bin_width > 0)) throw InputError("bin_width", fmt(bin_width), "a bin width > 0");
  WorkHistogram h;
  h.width = bin_width;
  if (d.lines.empty()) return h;
  h.start = std::floor(d.lines.front().work / bin_width) * bin_width;
  const double span = d.lines.back().work - h.start;
  if (!(span / bin_width < 1e7))  // 80 MB of bins: a bin width far below the work range's scale
    throw PhysicsError("histogram: a bin width of " + fmt(bin_width) + " gives " + fmt(span / bin_width) +
                       " bins over the work range of " + fmt(span) + ": set a wider [work] bin_width");
  h.probability.assign(std::size_t(std::floor(span / bin_width)) + 1, 0.0);
  for (const auto& l : d.lines) {
    const auto k = std::min(h.probability.size() - 1, std::size_t(std::floor((l.work - h.start) / bin_width)));
    h.probability[k] += l.probability;
  }
  return h;
}

std::vector<double> broadened_density(const WorkDistribution& d, double sigma, const std::vector<double>& w) {
  if (!(sigma > 0)) throw InputError("resolution", fmt(sigma), "an energy resolution sigma > 0");
  std::vector<double> rho(w.size(), 0.0);
  const double norm = 1 / (sigma * std::sqrt(2 * std::numbers::pi));
  // A line further than 40 sigma adds exactly 0 (exp(-800) underflows to 0 in double): over
  // lines in ascending work (as work_distribution makes them) only those within 40 sigma are
  // summed, in the same order, which gives the same numbers bit for bit.
  const auto by_work = [](const WorkLine& a, const WorkLine& b) { return a.work < b.work; };
  const bool sorted = std::is_sorted(d.lines.begin(), d.lines.end(), by_work);
  for (std::size_t i = 0; i < w.size(); ++i) {
    auto first = d.lines.begin(), last = d.lines.end();
    if (sorted) {
      first = std::lower_bound(first, last, w[i] - 40 * sigma,
                               [](const WorkLine& l, double x) { return l.work < x; });
      last = std::upper_bound(first, last, w[i] + 40 * sigma,
                              [](double x, const WorkLine& l) { return x < l.work; });
    }
    for (auto l = first; l != last; ++l) {
      const double z = (w[i] - l->work) / sigma;
      rho[i] += l->probability * norm * std::exp(-0.5 * z * z);
    }
  }
  return rho;
}

std::vector<std::complex<double>> characteristic_function(const WorkDistribution& d, const std::vector<double>& u) {
  std::vector<std::complex<double>> g(u.size());
  for (std::size_t i = 0; i < u.size(); ++i)
    for (const auto& l : d.lines) g[i] += l.probability * std::polar(1.0, u[i] * l.work);
  return g;
}

LineDistance line_distance(const WorkInput& a, const WorkInput& b) {
  const Eigen::MatrixXd& pa = a.transitions.probability;
  const Eigen::MatrixXd& pb = b.transitions.probability;
  auto joint = [](const WorkInput& w, Eigen::Index m, Eigen::Index n) {
    return w.initial_weights[std::size_t(m)] * w.transitions.probability(m, n);
  };
  LineDistance d;
  double total_a = 0, total_b = 0, common_a = 0, common_b = 0;
  for (Eigen::Index m = 0; m < pa.rows(); ++m)
    for (Eigen::Index n = 0; n < pa.cols(); ++n) total_a += joint(a, m, n);
  for (Eigen::Index m = 0; m < pb.rows(); ++m)
    for (Eigen::Index n = 0; n < pb.cols(); ++n) total_b += joint(b, m, n);
  const Eigen::Index rows = std::min(pa.rows(), pb.rows()), cols = std::min(pa.cols(), pb.cols());
  for (Eigen::Index m = 0; m < rows; ++m)
    for (Eigen::Index n = 0; n < cols; ++n) {
      const double ja = joint(a, m, n), jb = joint(b, m, n);
      common_a += ja;
      common_b += jb;
      d.distance += 0.5 * std::abs(ja - jb);
      if (std::max(ja, jb) > 1e-9)
        d.max_work_shift = std::max(d.max_work_shift, std::abs((a.final_energies[n] - a.initial_energies[m]) -
                                                               (b.final_energies[n] - b.initial_energies[m])));
    }
  d.distance += 0.5 * ((total_a - common_a) + (total_b - common_b)) + 0.5 * std::abs((1 - total_a) - (1 - total_b));
  return d;
}

CrooksCheck crooks_check(const WorkInput& forward, const WorkInput& reverse, double merge_tolerance,
                         double min_probability) {
  TRAPWORK_EXPECT(forward.beta && reverse.beta && std::abs(*forward.beta - *reverse.beta) <= 1e-14 * *forward.beta,
                  "crooks_check: both runs must start thermal at the same beta");
  const Eigen::MatrixXd& f = forward.transitions.probability;  // A -> B
  const Eigen::MatrixXd& r = reverse.transitions.probability;  // B -> A
  const int na = int(std::min(f.rows(), r.cols())), nb = int(std::min(f.cols(), r.rows()));
  CrooksCheck c;
  // groups fully inside the common block
  auto block_groups = [](const std::vector<int>& groups, int size, int available) {
    std::map<int, std::vector<int>> members;
    for (int i = 0; i < available; ++i) members[group_of(groups, i)].push_back(i);
    std::vector<std::vector<int>> out;
    for (auto& [g, list] : members)
      if (list.back() < size) out.push_back(list);
    return out;
  };
  const auto ga = block_groups(forward.initial_groups, na, int(forward.initial_energies.size()));
  const auto gb = block_groups(forward.final_groups, nb, int(forward.final_energies.size()));
  for (const auto& g : ga)
    for (const auto& h : gb) {
      double sf = 0, sr = 0;
      for (int m : g)
        for (int n : h) {
          sf += f(m, n);
          sr += r(n, m);
        }
      c.max_line_difference = std::max(c.max_line_difference, std::abs(sf - sr));
      ++c.lines_compared;
    }
  // ratio check on the work values made of pairs kept in both runs
  WorkInput fb = forward, rb = reverse;
  fb.transitions.probability = f.topLeftCorner(na, nb);
  fb.initial_weights.resize(std::size_t(na));
  fb.final_energies = forward.final_energies.head(nb);
  rb.transitions.probability = r.topLeftCorner(nb, na);
  rb.initial_weights.resize(std::size_t(nb));
  rb.final_energies = reverse.final_energies.head(na);
  if (!fb.final_groups.empty()) fb.final_groups.resize(std::size_t(nb));
  if (!rb.final_groups.empty()) rb.final_groups.resize(std::size_t(na));
  const WorkDistribution df = work_distribution(fb, merge_tolerance);
  const WorkDistribution dr = work_distribution(rb, merge_tolerance);
  const double beta = *forward.beta;
  const double delta_f = work_distribution(forward, merge_tolerance).free_energy_change;
  for (const auto& l : df.lines) {
    if (l.probability < min_probability) continue;
    auto it = std::lower_bound(dr.lines.begin(), dr.lines.end(), -l.work - merge_tolerance,
                               [](const WorkLine& a, double w) { return a.work < w; });
    if (it == dr.lines.end() || std::abs(it->work + l.work) > merge_tolerance || it->probability < min_probability)
      continue;
    const double predicted = it->probability * std::exp(beta * (l.work - delta_f));
    c.max_ratio_error = std::max(c.max_ratio_error, std::abs(l.probability / predicted - 1));
    ++c.ratios_compared;
  }
  return c;
}

// ---- run_work --------------------------------------------------------------------------------

namespace {

// V at x + shift, formulas at the potential's own time (H_A at 0, H_B at tau).
std::vector<double> samples(const Potential& v, const std::vector<double>& x, double shift = 0) {
  std::vector<double> xs(x);
  for (double& xi : xs) xi += shift;
  return v.evaluate(xs);
}

// first() and second() (two independent solves), at once on a thread of their own for second()
// when threads > 1 (one after the other when 1, or when the system refuses a thread). Each
// computes what it would alone, so results do not depend on `threads`. An exception from
// either passes through (first()'s when both throw, after second() has ended).
template <class First, class Second>
auto concurrently(int threads, const First& first, const Second& second) {
  using A = decltype(first());
  using B = decltype(second());
  std::future<B> later;
  if (threads > 1) {
    try {
      later = std::async(std::launch::async, second);
    } catch (const std::system_error&) {  // no thread to be had: one after the other
    }
  }
  if (!later.valid()) {
    A a = first();
    return std::pair<A, B>(std::move(a), second());
  }
  A a = first();
  return std::pair<A, B>(std::move(a), later.get());
}

// The level count run_work_once's loop tries first.
int first_levels(const WorkRequest& request) {
  const int levels = std::max(request.spectrum.options.levels,
                              std::min(request.max_initial_levels, 20) + request.final_margin);
  return std::max(levels, request.min_initial_levels + request.final_margin);
}

// The level count run_work_once's loop settles on for a Gibbs state (first, 2 first, ... up to
// max_initial_levels + final_margin, the first that holds the levels the thermal tolerance keeps
// plus the final margin), predicted from WKB energies of H_A before any level is solved; 0 (no
// prediction) for other initial states and for hard-walled boxes. The loop itself still decides
// from the solved energies: a prediction only says how many levels to solve at once.
// `wkb` holds the WKB energies of H_A computed so far (one run_work call's attempts share them).
int predicted_levels(const Potential& va, const WorkRequest& request, int first, std::vector<double>& wkb) {
  if (!request.initial.is_gibbs() || request.spectrum.box) return 0;
  const int cap = request.max_initial_levels + request.final_margin;
  // The loop below returns `first` at once when it holds the cap already (levels asked for in the
  // scenario): no WKB pass. Those passes cost count x 10 sweeps of the scan (levels = 50000 took
  // a minute before the memory check could refuse it).
  if (first >= cap) return first;
  const double centre = request.spectrum.search_centre, half = request.spectrum.search_half_width;
  // WKB energies only as far as an attempt looks (the higher levels cost the longest passes)
  auto energies_of = [&](int count) {
    if (int(wkb.size()) < count)
      wkb = wkb_level_energies(va, count, centre - half, centre + half, request.spectrum.options.memo);
    return Eigen::Map<const Eigen::VectorXd>(wkb.data(), Eigen::Index(count));
  };
  int levels = first;
  {
    const Eigen::VectorXd energies = energies_of(std::max(first, 2));
    if (!(energies(energies.size() - 1) > energies(0))) return 0;  // no bound levels above the lowest
  }
  for (int attempt = 0;; ++attempt) {
    const Eigen::VectorXd held = energies_of(levels);
    InitialWeights w = initial_weights(request.initial, held, request.thermal_tolerance, request.max_initial_levels);
    if (int(w.weights.size()) < request.min_initial_levels && request.min_initial_levels <= levels) {
      w = initial_weights(request.initial, held, 0.0, request.min_initial_levels);
      w.choice.reached = w.choice.left_out < request.thermal_tolerance;
    }
    const bool enough = w.choice.reached && w.choice.kept + request.final_margin <= levels;
    if (enough || attempt >= 3 || levels >= cap) return levels;
    levels = std::min(2 * levels, cap);
  }
}

Spectrum spectrum_on(const Grid& grid, std::vector<double> v, const SpectrumOptions& options, double cutoff) {
  const double v_min = *std::min_element(v.begin(), v.end());
  cap_potential(v, v_min, cutoff);
  return solve_spectrum(grid, v, options);
}

Grid shifted(const Grid& g, double d) {
  if (d == 0) return g;
  return Grid::periodic(g.left() + d, g.right() + d, g.size());
}

// One direction of the protocol: propagate the kept initial states, project on the final ones.
struct Run {
  Eigen::MatrixXcd amplitudes;  // A(n, m)
  // per kept initial level: its momentum_edge and position_edge (columns; see Diagnostics; NaN: not measured)
  Eigen::MatrixXd edges;
  StateEnergies energies;       // of the final states under H_B (v_final given)
  // per kept initial level: max |psi|^2 in the outer 2% of the grid / max |psi|^2 of its final state
  Eigen::VectorXd edge_densities;
  double norm_drift = 0, max_phase = 0, arithmetic = 0;
  int carried = 0;  // states taken from an earlier attempt (Propagated), not propagated
  std::string thread_shortfall;  // the threads the system refused to start, with its reason
};

// What TraceRecorder records (see there), kept apart so that run_work's next attempt can carry it.
struct TraceColumns {
  int interval = 1;
  std::vector<double> time;
  // per recorded time: rows sum_j x_j |psi_j|^2, sum_j |psi_j|^2, energy, populations of the
  // lowest trace levels (NaN where not computed); one column per propagated state
  std::vector<Eigen::MatrixXd> columns;
  // per recorded time, the instantaneous spectrum solved there (empty where H_A or H_B served or
  // the solve failed); a later attempt measures its states against the same ones
  std::vector<std::optional<Spectrum>> solved;
  std::string failure;  // the first instantaneous spectrum that could not be solved (empty: none)
};

// Records WorkTraces of one run at every `interval`-th step and at the last (see work.hpp): per
// recorded time, each propagated state's position, energy and populations (TraceColumns),
// summed with the thermal weights by traces() at the end, so that a later attempt of run_work
// (more levels) can carry the states it does not propagate again (see Carried).
struct TraceRecorder {
  const Potential& base;
  const Protocol& protocol;
  const Spectrum& initial;  // H_A on the run's grid (frame)
  const Spectrum& final;    // H_B on the run's grid (frame)
  SpectrumOptions options;  // levels = trace_levels
  double cutoff = 0;
  int steps = 1;
  TraceColumns data;                     // data.interval: record every that many steps
  const TraceColumns* earlier = nullptr;  // its solved spectra are used instead of solving again

  bool due(double t, double tau) const {
    const long i = std::lround(t / tau * steps);
    return i % data.interval == 0 || i == steps;
  }
  // frame_states: the run's states at t (columns = the propagated initial levels) on path.grid().
  void record(const PotentialPath& path, const Eigen::MatrixXcd& frame_states, double t) {
    const double tau = protocol.duration();
    const std::size_t k = data.time.size();
    Eigen::MatrixXcd lab = frame_states;
    path.to_lab(lab, t);
    const Grid& grid = path.grid();
    std::vector<double> x = grid.points();
    const double d = path.displacement(t);
    for (double& xi : x) xi += d;
    const std::vector<double> v = protocol.at(base, t).evaluate(x);
    const StateEnergies e = state_energies(grid, v, lab);
    // The instantaneous eigenstates: a co-moving run's H(t) is H_A carried along (same samples
    // on the frame grid); otherwise H_A, H_B at the ends and a spectrum of its own in between.
    std::optional<Spectrum> here;
    const Spectrum* now = &initial;
    if (!path.is_co_moving() && t > 0) {
      if (t == tau) {
        now = &final;
      } else if (earlier && k < earlier->time.size() && earlier->time[k] == t) {
        here = earlier->solved[k];  // nullopt where its solve failed
        now = here ? &*here : nullptr;
        if (!here && data.failure.empty()) data.failure = earlier->failure;
      } else {
        std::vector<double> capped = v;
        cap_potential(capped, *std::min_element(capped.begin(), capped.end()), cutoff);
        try {
          here = solve_spectrum(grid, capped, options);
          now = &*here;
        } catch (const PhysicsError& e) {  // the traces never stop the run: this point's populations stay NaN
          if (data.failure.empty()) data.failure = e.what();
          now = nullptr;
        }
      }
    }
    const int levels = now ? std::min<int>(options.levels, int(now->energies.size())) : 0;
    const Eigen::MatrixXd a2 =
        now ? Eigen::MatrixXd(project(*now, lab, levels).cwiseAbs2()) : Eigen::MatrixXd(0, lab.cols());
    Eigen::MatrixXd c = Eigen::MatrixXd::Constant(3 + options.levels, lab.cols(), std::numeric_limits<double>::quiet_NaN());
    for (Eigen::Index m = 0; m < lab.cols(); ++m) {
      const Eigen::VectorXd rho = lab.col(m).cwiseAbs2();
      double first = 0;
      for (Eigen::Index j = 0; j < rho.size(); ++j) first += x[std::size_t(j)] * rho[j];
      c(0, m) = first;
      c(1, m) = rho.sum();
      c(2, m) = e.energy[m];
      c.col(m).segment(3, levels) = a2.col(m);
    }
    data.time.push_back(t);
    data.columns.push_back(std::move(c));
    data.solved.push_back(std::move(here));
  }
  // The traces of the initial state: the recorded columns summed with its weights.
  WorkTraces traces(const std::vector<double>& weights) const {
    WorkTraces out;
    out.time = data.time;
    out.populations.resize(Eigen::Index(data.time.size()), options.levels);
    for (std::size_t k = 0; k < data.time.size(); ++k) {
      const Eigen::MatrixXd& c = data.columns[k];
      TRAPWORK_EXPECT(std::size_t(c.cols()) == weights.size(), "TraceRecorder: one column per weight");
      double xm = 0, em = 0;
      Eigen::RowVectorXd pop = Eigen::RowVectorXd::Zero(options.levels);
      for (Eigen::Index m = 0; m < c.cols(); ++m) {
        const double p = weights[std::size_t(m)];
        xm += p * c(0, m) / c(1, m);
        em += p * c(2, m);
        pop += p * c.col(m).tail(options.levels).transpose();
      }
      out.position_mean.push_back(xm);
      out.energy_mean.push_back(em);
      out.populations.row(Eigen::Index(k)) = pop;
    }
    return out;
  }
};

// What an attempt of run_work propagated in one run (forward, half-step or reverse), kept for
// its next attempt, which asks for more levels with the same numerics: the initial states
// propagated, their states at tau (lab frame) and, for the forward run, their traces. The next
// attempt propagates only the states that are new or whose eigenvector moved (propagate_run).
struct Propagated {
  Grid grid = Grid::periodic(0, 1, 4);
  int steps = 0;
  Eigen::MatrixXd initial;  // one column per initial state propagated
  Eigen::MatrixXcd final;   // its state at tau, lab frame
  Eigen::MatrixXd edges;    // as Run's
  double max_phase = 0;
  std::optional<TraceColumns> trace;  // the forward run's, when it recorded traces
};
struct Carried {
  std::optional<Propagated> forward, half, reverse;
  std::vector<double> wkb;  // WKB energies of H_A (predicted_levels)
};

// Whether a carried run was made on this grid with this many steps.
bool same_numerics(const Propagated& p, const Grid& g, int steps) {
  return p.grid.boundary() == g.boundary() && p.grid.left() == g.left() && p.grid.right() == g.right() &&
         p.grid.size() == g.size() && p.steps == steps;
}

// A carried state is used again when the eigenvector solved now equals the carried one to this
// distance (sqrt(dx) ||psi_now -+ psi_carried||, unit-norm states), far below the eigensolver's
// residual tolerance, so that the result is a fresh propagation's to rounding; a state that
// moved more is propagated again.
constexpr double carried_state_tolerance = 1e-11;
// At most this much is carried per run (states at tau and initial states): memory beside the
// propagation's own, as much as SpectrumMemo keeps by default.
constexpr double carried_bytes = 256.0 * (1 << 20);

// basis: the eigenbasis integrator's reference spectrum (of the same Hamiltonian as
// `initial`, possibly with more levels); null for the split-operator integrators.
// Below this many substeps a split-operator run plans with FFTW_ESTIMATE (see propagate_run).
constexpr int planning_substeps = 4096;

Run propagate_run(const PotentialPath& path, const Spectrum& initial, const Spectrum& final, const Spectrum* basis,
                  const std::vector<double>& v_initial, int kept, int steps, const WorkRequest& request,
                  const OdeTolerances& ode, const std::function<void(double)>& progress,
                  const std::vector<double>* v_final = nullptr, TraceRecorder* trace = nullptr,
                  std::optional<Propagated>* carry = nullptr) {
  const double tau = path.protocol().duration();
  const Eigen::MatrixXd start = initial.states.leftCols(kept);
  const double dx = path.grid().spacing();
  // An earlier attempt's run of the same numerics (carry, see Propagated): its states at tau
  // serve again where the eigenvector is the same to carried_state_tolerance (up to its sign,
  // which the state at tau takes along); the others are propagated now.
  const Propagated* earlier = nullptr;
  if (carry && *carry && tau > 0 && request.integrator != Integrator::eigenbasis) {
    const Propagated& e = **carry;
    if (same_numerics(e, path.grid(), steps) && bool(e.trace) == bool(trace) &&
        (!trace || e.trace->interval == trace->data.interval))
      earlier = &e;

  }
  Run run;
  std::vector<double> sign(std::size_t(kept), 0.0);  // +-1: carried, 0: propagated now
  std::vector<Eigen::Index> now;                      // the states propagated now
  for (int m = 0; m < kept; ++m) {
    if (earlier && m < earlier->initial.cols()) {
      const double s = earlier->initial.col(m).dot(start.col(m)) < 0 ? -1.0 : 1.0;
      if (std::sqrt(dx) * (start.col(m) - s * earlier->initial.col(m)).norm() <= carried_state_tolerance) {
        sign[std::size_t(m)] = s;
        ++run.carried;
        continue;
      }
    }
    now.push_back(m);
  }
  Eigen::MatrixXcd psi(start.rows(), Eigen::Index(now.size()));
  for (std::size_t i = 0; i < now.size(); ++i) psi.col(Eigen::Index(i)) = start.col(now[i]).cast<std::complex<double>>();
  Eigen::MatrixXd edges =
      Eigen::MatrixXd::Constant(Eigen::Index(now.size()), 2, std::numeric_limits<double>::quiet_NaN());
  if (tau > 0 && !now.empty()) {
    path.from_lab(psi, 0);
    auto observer = [&](const Eigen::MatrixXcd&, double t) {
      if (progress) progress(t / tau);
    };
    if (request.integrator == Integrator::eigenbasis) {
      TRAPWORK_EXPECT(basis != nullptr, "propagate_run: eigenbasis integrator without a basis");
      EigenbasisPropagator prop(path, *basis, v_initial, ode, request.ode_arithmetic_limit);
      auto c = prop.coefficients(psi);
      propagate(prop, c, 0.0, tau, steps, [&](const Eigen::MatrixXcd& state, double t) {
        if (trace && trace->due(t, tau)) trace->record(path, prop.grid_states(state), t);
        observer(state, t);
      });
      psi = prop.grid_states(c);
      run.arithmetic = prop.arithmetic();
    } else {
      const SplitOrder order = request.integrator == Integrator::strang ? SplitOrder::strang : SplitOrder::fourth;
      // Short runs plan their transforms at once: FFTW_MEASURE costs some hundred transforms
      // per shape, more than it saves below ~4096 substeps (measured: the --tolerance search on
      // the built-in scenario, 53..3440 order-4 steps, ran in about 0.6 of the time).
      const int substeps = steps * (order == SplitOrder::fourth ? 3 : 1);
      SplitOperatorPropagator prop(path, int(now.size()), order, request.threads,
                                   substeps < planning_substeps || request.repeatable_transforms
                                       ? FftPlanning::estimate
                                       : FftPlanning::measure);
      if (prop.threads() < request.threads)
        run.thread_shortfall = "propagated with " + std::to_string(prop.threads()) + " of " +
                               std::to_string(request.threads) + " threads: the system refused to start more (" +
                               prop.thread_refusal() + "); the results do not depend on it, only the time taken";
      // Observed every finite_check_interval steps, so that propagate() runs the time-blocked
      // path between observations (max_phase() covers all steps since the last call).
      // With traces, observed at their points instead (max_phase() is then taken over fewer steps).
      propagate(prop, psi, 0.0, tau, steps,
                observe_every(trace ? trace->data.interval : finite_check_interval,
                              [&](const Eigen::MatrixXcd& s, double t) {
                                run.max_phase = std::max(run.max_phase, prop.max_phase());
                                if (trace && trace->due(t, tau)) trace->record(path, s, t);
                                observer(s, t);
                              }));
      for (Eigen::Index i = 0; i < edges.rows(); ++i)
        edges.row(i) << prop.momentum_edge()[std::size_t(i)], prop.position_edge()[std::size_t(i)];
    }
    path.to_lab(psi, tau);
  }
  run.edges = edges;
  if (earlier) {  // the carried states, in their places
    Eigen::MatrixXcd all(start.rows(), kept);
    run.edges.resize(kept, 2);
    for (std::size_t m = 0, i = 0; m < sign.size(); ++m) {
      const bool old = sign[m] != 0;
      run.edges.row(Eigen::Index(m)) =
          old ? earlier->edges.row(Eigen::Index(m)).eval() : edges.row(Eigen::Index(i)).eval();
      all.col(Eigen::Index(m)) =
          old ? (sign[m] * earlier->final.col(Eigen::Index(m))).eval() : psi.col(Eigen::Index(i++));
    }
    psi = std::move(all);
    run.max_phase = std::max(run.max_phase, earlier->max_phase);
    if (trace) {
      const TraceColumns& old = *earlier->trace;
      TraceColumns& t = trace->data;
      if (t.time.empty()) {  // nothing propagated now
        t.time = old.time;
        t.solved = old.solved;
        t.failure = old.failure;
        t.columns.assign(old.time.size(), Eigen::MatrixXd(3 + trace->options.levels, 0));
      }
      TRAPWORK_EXPECT(t.time == old.time, "propagate_run: the carried traces were recorded at other times");
      for (std::size_t k = 0; k < t.time.size(); ++k) {
        Eigen::MatrixXd full(t.columns[k].rows(), kept);
        for (std::size_t m = 0, i = 0; m < sign.size(); ++m)
          full.col(Eigen::Index(m)) = sign[m] != 0 ? old.columns[k].col(Eigen::Index(m)).eval()
                                                   : t.columns[k].col(Eigen::Index(i++)).eval();
        t.columns[k] = std::move(full);
      }
    }
  }
  // kept only up to carried_bytes (a retry then propagates everything again, as before)
  if (carry) carry->reset();
  if (carry && tau > 0 && request.integrator != Integrator::eigenbasis &&
      double(psi.size() + start.size()) * sizeof(std::complex<double>) <= carried_bytes)
    *carry = Propagated{path.grid(),
                        steps,
                        start,
                        psi,
                        run.edges,
                        run.max_phase,
                        trace ? std::optional<TraceColumns>(trace->data) : std::nullopt};
  const Eigen::Index n = psi.rows(), edge = std::max<Eigen::Index>(1, n / 50);
  run.edge_densities = Eigen::VectorXd::Zero(psi.cols());
  for (Eigen::Index c = 0; c < psi.cols(); ++c) {
    run.norm_drift = std::max(run.norm_drift, std::abs(psi.col(c).squaredNorm() * dx - 1));
    const Eigen::VectorXd density = psi.col(c).cwiseAbs2();
    const double top = density.maxCoeff();
    const double outer = std::max(density.head(edge).maxCoeff(), density.tail(edge).maxCoeff());
    if (top > 0) run.edge_densities[c] = outer / top;
  }
  run.amplitudes = project(final, psi);
  if (v_final) run.energies = state_energies(path.grid(), *v_final, psi);
  return run;
}

// The grid run_work may refine (WorkRequest::spacing_factor, extent_factor): neither its extent,
// its walls nor its points are given.
bool refinable_grid(const WorkRequest& r) { return !r.spectrum.extent && !r.spectrum.box && !r.spectrum.points; }

// Diagnostics::edge_amplitude, momentum_edge and position_edge of runs: their levels' values
// averaged with their weights, the larger over the runs (NaN where none measured). Weighted, so
// that a high level of negligible population whose tail reaches the edge does not raise an alarm
// that the work distribution it barely enters cannot justify.
void weighted_edges(Diagnostics& d, const Run& run, const std::vector<double>& weights) {
  const double total = std::accumulate(weights.begin(), weights.end(), 0.0);
  if (run.edge_densities.size() == Eigen::Index(weights.size()) && total > 0) {
    double sum = 0;
    for (Eigen::Index m = 0; m < run.edge_densities.size(); ++m) sum += weights[std::size_t(m)] * run.edge_densities[m];
    d.edge_amplitude = std::max(d.edge_amplitude, sum / total);
  }
  if (run.edges.rows() == 0 || run.edges.rows() != Eigen::Index(weights.size())) return;
  for (int k = 0; k < 2; ++k) {
    double sum = 0;
    for (Eigen::Index m = 0; m < run.edges.rows(); ++m) sum += weights[std::size_t(m)] * run.edges(m, k);
    double& e = k == 0 ? d.momentum_edge : d.position_edge;
    if (total > 0 && (std::isnan(e) || sum / total > e)) e = sum / total;
  }
}

// The harmonic model of a protocol (see harmonic_comparison): the displaced oscillator of a
// rigid translation (parameter |alpha|^2) or the parametric oscillator of a change of the one
// harmonic frequency (parameter Q*), with the frequencies at both ends; nothing, with the
// reason in why_not, otherwise.
struct HarmonicModel {
  std::string model;
  bool displaced = false;
  double w0 = 0, w1 = 0, parameter = 0;
};

std::optional<HarmonicModel> harmonic_model(const Potential& base, const Protocol& protocol, std::string& why_not) {
  const auto part = base.harmonic_part();
  if (!part) {
    why_not = "the trap has no harmonic or polynomial term with a frequency (or their centres differ)";
    return std::nullopt;
  }
  if (base.depends_on_time()) {
    why_not = "a formula term uses t: the harmonic model would leave its time dependence out";
    return std::nullopt;
  }
  const double tau = protocol.duration();
  HarmonicModel h;
  h.w0 = h.w1 = part->first;
  const Term* carrier = nullptr;
  for (const auto& t : base.terms())
    if (t.harmonic_part()) carrier = carrier ? nullptr : &t;  // exactly one term with a harmonic part
  const bool frequency_change = carrier && protocol.schedules().size() == 1 &&
                                protocol.schedules().front().address() == carrier->name() + ".frequency";
  // The reference ODEs follow every period of the motion (about 1 s per 1e5 periods here): a
  // longer protocol gets no reference rather than minutes of it.
  constexpr double most_periods = 1e6;
  double fastest = h.w0;
  if (frequency_change)
    for (int i = 0; i <= 64; ++i)
      fastest = std::max(fastest, std::abs(protocol.schedules().front().evaluate(tau * i / 64, tau).value));
  const double periods = tau * fastest / (2 * std::numbers::pi);
  if (!(periods <= most_periods)) {
    why_not = "the protocol lasts " + fmt(periods) + " periods of the harmonic part, more than the " +
              fmt(most_periods) + " its reference ODE is run for";
    return std::nullopt;
  }
  if (protocol.translation(base)) {
    const Schedule& centre = protocol.schedules().front();
    const auto alpha = translation_alpha(h.w0, [&](double t) { return centre.evaluate(t, tau).value; }, tau);
    h.model = "displaced oscillator (Cahill & Glauber 1969)";
    h.displaced = true;
    h.parameter = std::norm(alpha);
  } else if (frequency_change) {
    if (carrier->shape() == Shape::polynomial && carrier->parameter("linear") != 0) {
      why_not = "the trap has a linear (force) term: changing the frequency moves its minimum, which the "
                "parametric-oscillator model leaves out";
      return std::nullopt;
    }
    const Schedule& s = protocol.schedules().front();
    h.w0 = std::abs(s.initial_value(tau));
    h.w1 = std::abs(s.final_value(tau));
    if (!(h.w0 > 0 && h.w1 > 0)) {  // e.g. a polynomial trap ramped to a pure quartic
      why_not = std::string("the harmonic frequency is 0 at the ") + (h.w0 > 0 ? "end" : "start") +
                " of the protocol (no harmonic trap there): the parametric-oscillator model needs a frequency "
                "above 0 at both ends";
      return std::nullopt;
    }
    h.model = "parametric oscillator (Husimi 1953)";
    h.parameter = tau > 0 ? parametric_q([&](double t) { double w = s.evaluate(t, tau).value; return w * w; }, tau)
                          : sudden_q(h.w0, h.w1);
  } else {
    why_not = "the protocol is neither a rigid translation nor a change of the one harmonic frequency alone";
    return std::nullopt;
  }
  return h;
}

// The harmonic prediction for the trap's harmonic part (omega_h, centre): the same protocol
// applied to (1/2) omega_h^2 (x - c)^2 alone, with the analytic transition probabilities,
// harmonic energies and, for a Gibbs state, harmonic Boltzmann weights at the same beta.
// Applies when the protocol moves every term rigidly (displaced oscillator), or changes only
// the frequency of the one term that carries the harmonic part (parametric oscillator), with
// omega > 0 at both ends. Otherwise nothing, with the reason in why_not.
std::optional<HarmonicComparison> harmonic_comparison(const Potential& base, const Protocol& protocol,
                                                      const WorkInput& forward, double merge_tolerance,
                                                      std::string& why_not) {
  const auto model = harmonic_model(base, protocol, why_not);
  if (!model) return std::nullopt;
  const int rows = forward.transitions.initial_levels(), cols = forward.transitions.final_levels();
  HarmonicComparison h;
  const double w0 = model->w0, w1 = model->w1;
  h.model = model->model;
  h.parameter = model->parameter;
  try {
    h.reference = {model->displaced ? displaced_transition_matrix(rows, cols, h.parameter)
                                    : husimi_transition_matrix(rows, cols, h.parameter)};
  } catch (const PhysicsError& e) {  // the closed forms' digits run out: no reference rather than a wrong one
    why_not = e.what();
    return std::nullopt;
  }
  h.exact = base.terms().size() == 1 && base.terms().front().shape() == Shape::harmonic;
  WorkInput ref;
  ref.transitions = h.reference;
  ref.initial_energies.resize(rows);
  ref.final_energies.resize(cols);
  for (int m = 0; m < rows; ++m) ref.initial_energies(m) = w0 * (m + 0.5);
  for (int n = 0; n < cols; ++n) ref.final_energies(n) = w1 * (n + 0.5);
  ref.beta = forward.beta;
  ref.initial_weights = forward.initial_weights;
  if (forward.beta) {  // harmonic Boltzmann weights at the same temperature, over the same rows
    double sum = 0;
    for (int m = 0; m < rows; ++m) sum += (ref.initial_weights[std::size_t(m)] = std::exp(-*forward.beta * w0 * m));
    for (auto& p : ref.initial_weights) p /= sum;
  }
  h.initial_weights = ref.initial_weights;
  h.distribution = work_distribution(ref, merge_tolerance);
  // <W> in closed form over all levels for a Gibbs state, not on the run's truncated basis, so
  // that the departure also shows the run's truncation: hbar omega |alpha|^2 (displaced; any
  // temperature) or parametric_mean_work (Husimi)
  h.mean_work = !forward.beta ? h.distribution.mean
                : h.model.rfind("displaced", 0) == 0 ? w0 * h.parameter
                                                     : parametric_mean_work(w0, w1, h.parameter, *forward.beta);
  h.max_line_difference = (h.reference.probability - forward.transitions.probability).cwiseAbs().maxCoeff();
  return h;
}

// carried: what the previous attempt propagated (run_work), updated with this attempt's runs.
WorkResult run_work_once(const Potential& base, const Protocol& protocol, const WorkRequest& request, Carried& carried) {
  protocol.check(base);
  const double tau = protocol.duration();
  const auto translation = protocol.translation(base);
  const std::string obstacle = translation ? protocol.co_moving_obstacle(*translation) : "";
  const bool co_moving = request.co_moving.value_or(translation.has_value() && obstacle.empty() && tau > 0);
  if (co_moving && !translation)
    throw PhysicsError("co-moving frame asked for, but the protocol is not a rigid translation of every term");
  if (co_moving && !obstacle.empty())
    throw PhysicsError("co-moving frame asked for, but " + obstacle + ": use frame = \"lab\"");
  if (co_moving && request.spectrum.box)
    throw PhysicsError("co-moving frame asked for on a hard-walled box: the walls do not move with the trap");
  const double displacement = co_moving ? protocol.displacement(*translation, tau).value : 0.0;
  const Potential va = protocol.initial(base), vb = protocol.final(base);
  auto progress = [&](double from, double to) {
    return std::function<void(double)>([&, from, to](double f) {
      if (request.progress) request.progress(from + (to - from) * f);
    });
  };

  WorkResult result;
  result.co_moving = co_moving;
  const SpectrumOptions base_options = request.spectrum.options;
  const bool fixed_grid = request.spectrum.extent || request.spectrum.box;
  int levels = first_levels(request);
  // The sizes of the run on a grid (cost.hpp), for its memory check and its estimate.
  auto run_sizes = [&](const Grid& g, int spectrum_levels, int steps) {
    WorkSizes z;
    z.points = g.size();
    z.levels = spectrum_levels;
    z.kept = std::min(request.max_initial_levels, spectrum_levels);
    z.spectra = co_moving && request.reverse_run ? 4 : 2;
    z.steps = tau > 0 ? steps : 0;
    z.substeps = request.integrator == Integrator::strang ? 1 : 3;
    z.runs = 1 + (request.time_step_check ? 2 : 0) + (request.reverse_run ? 1 : 0);
    if (request.integrator == Integrator::eigenbasis)
      z.basis_levels = request.eigenbasis_levels > 0 ? request.eigenbasis_levels : 2 * spectrum_levels;
    z.dense = solves_dense(base_options, g.size());
    return z;
  };
  Spectrum sa, sb;  // forward grid: H_A and H_B (in the frame)
  InitialWeights wa;
  Grid grid = Grid::periodic(0, 1, 4);
  double cutoff = 0;
  // Each Hamiltonian is solved once: the memo (run_work gives one) solves the level count the
  // loop below is predicted to settle on, and serves the smaller counts it tries first from it.
  const int solve_levels = std::max(base_options.memo_levels, predicted_levels(va, request, levels, carried.wkb));
  for (int attempt = 0;; ++attempt) {
    SpectrumRequest sr = request.spectrum;
    sr.options.levels = levels;
    sr.options.memo_levels = solve_levels;
    sr.options.on_estimate = request.on_spectrum_estimate;  // a long solve is said before it starts
    SpectrumRequest sr_b = sr;  // a fixed extent is the frame's: V_B sits displaced in the lab
    if (co_moving && sr_b.extent) sr_b.extent = std::make_pair(sr_b.extent->first + displacement, sr_b.extent->second + displacement);
    // H_A and H_B (each on its grid and its finer check grid) at once on the threads given
    const auto spectra = concurrently(
        request.threads, [&] { return compute_spectrum(va, sr); }, [&] { return compute_spectrum(vb, sr_b); });
    const SpectrumResult& ra = spectra.first;
    const SpectrumResult& rb = spectra.second;
    cutoff = std::max(ra.energy_cutoff, rb.energy_cutoff);
    result.diagnostics.finite_depth = ra.finite_depth || rb.finite_depth;
    result.diagnostics.grid_convergence =  // NaN: not checked ([grid] convergence_check = false)
        ra.convergence.done && rb.convergence.done
            ? std::max(ra.convergence.max_energy_change, rb.convergence.max_energy_change)
            : std::numeric_limits<double>::quiet_NaN();
    // common grid: the union of extents at the finer spacing (and the path in the lab frame)
    double left = ra.spectrum.grid.left(), right = ra.spectrum.grid.right();
    double dx = std::min(ra.spectrum.grid.spacing(), rb.spectrum.grid.spacing());
    if (!co_moving) {
      left = std::min(left, rb.spectrum.grid.left());
      right = std::max(right, rb.spectrum.grid.right());
      if (!fixed_grid && tau > 0) {
        std::vector<Potential> instants;
        for (int i = 1; i < 16; ++i) instants.push_back(protocol.at(base, tau * i / 16));
        for (const Grid& g : choose_grids(instants, cutoff, sr)) {
          left = std::min(left, g.left());
          right = std::max(right, g.right());
          dx = std::min(dx, g.spacing());
        }
      }
    }
    if (!fixed_grid && request.extent_factor != 1) {
      const double centre = (left + right) / 2, half = request.extent_factor * (right - left) / 2;
      left = centre - half;
      right = centre + half;
    }
    if (request.spectrum.box)
      grid = ra.spectrum.grid;
    else if (fixed_grid && request.spectrum.points)
      grid = Grid::periodic(left, right, *request.spectrum.points);
    else
      grid = Grid::periodic(
          left, right, fast_fft_size(std::size_t(std::ceil((right - left) / (dx * request.spacing_factor)))));
    check_memory(work_cost(run_sizes(grid, levels, 0)), request.spectrum.options.memory_limit,
                 "refused before computing");
    const auto x = grid.points();
    sr.options.levels = levels;
    std::tie(sa, sb) = concurrently(
        request.threads, [&] { return spectrum_on(grid, samples(va, x), sr.options, cutoff); },
        [&] { return spectrum_on(grid, samples(vb, x, displacement), sr.options, cutoff); });
    wa = initial_weights(request.initial, sa.energies, request.thermal_tolerance, request.max_initial_levels);
    if (wa.gibbs && int(wa.weights.size()) < request.min_initial_levels && request.min_initial_levels <= levels) {
      // more levels than the thermal tail needs: the reverse run leaves the first ones (p_R(>=K))
      wa = initial_weights(request.initial, sa.energies, 0.0, request.min_initial_levels);
      wa.choice.reached = wa.choice.left_out < request.thermal_tolerance;
    }
    const bool enough = wa.choice.reached && wa.choice.kept + request.final_margin <= levels;
    if (enough || attempt >= 3 || levels >= request.max_initial_levels + request.final_margin) break;
    levels = std::min(2 * levels, request.max_initial_levels + request.final_margin);
  }
  // The co-moving states carry the frame's momentum -d'(t) beside their own (lab momentum minus
  // the frame's): a frame faster than half the grid's range pi/dx aliases them (a 50 nm shuttle
  // in 1e-30 s left 22 % of its weight unresolved there; 30 nm in 10 ns passed every check on a
  // <W> 250 times too small; the lab frame is exact for both).
  if (co_moving && tau > 0) {
    double speed = 0;
    for (int i = 0; i <= 4096; ++i)
      speed = std::max(speed, std::abs(protocol.displacement(*translation, tau * i / 4096).rate));
    const double reach = speed / (std::numbers::pi / grid.spacing());
    if (reach > 0.5) {
      const std::string why = "the co-moving frame's momentum m max|d'(t)| is " + fmt(reach) +
                              " of the grid's range pi hbar/dx";
      if (!request.co_moving) {
        WorkRequest lab = request;
        lab.co_moving = false;
        WorkResult r = run_work_once(base, protocol, lab, carried);
        r.diagnostics.notes.push_back("lab frame: " + why + " (above 0.5: its states would alias)");
        return r;
      }
      result.diagnostics.warnings.push_back(why + ", above 0.5: its states may alias; use frame = \"lab\"");
    }
  }
  result.grid = grid;
  result.energy_cutoff = cutoff;
  const int kept_a = int(wa.weights.size());
  if (wa.gibbs && !wa.choice.reached)
    result.diagnostics.warnings.push_back("left-out thermal weight " + fmt(wa.choice.left_out) + " with " +
                                          std::to_string(kept_a) + " levels is above the tolerance " +
                                          fmt(request.thermal_tolerance) + ": raise max_initial_levels");

  // time steps
  const auto v_a = samples(va, grid.points());
  const double v_min = *std::min_element(v_a.begin(), v_a.end());
  const double range = std::max(sa.energies(sa.energies.size() - 1), sb.energies(sb.energies.size() - 1)) -
                       std::min(v_min, std::min(sa.energies(0), sb.energies(0)));
  // Largest phase E dt per step over the energy range in use: the splitting error per unit
  // time goes as (E dt)^p; these choices give line errors of ~1e-9 in the validation cases,
  // and the half-step run reports the actual error.
  const double phase_per_step = request.phase_per_step > 0                  ? request.phase_per_step
                                : request.integrator == Integrator::strang ? 0.02
                                                                           : 0.2;
  const int steps = request.steps > 0 ? request.steps
                    : request.integrator == Integrator::eigenbasis
                        ? 64
                        : automatic_steps(tau * range, phase_per_step);
  result.steps = tau > 0 ? steps : 0;
  result.method = tau == 0 ? "sudden (U = 1)"
                  : request.integrator == Integrator::strang       ? "split-operator Strang"
                  : request.integrator == Integrator::fourth_order ? "split-operator Yoshida triple jump (order 4)"
                                                                   : "eigenbasis ODE (Dormand-Prince 5(4))";
  if (co_moving) result.method += ", co-moving frame";
  const CostEstimate cost = work_cost(run_sizes(grid, levels, steps));
  result.diagnostics.estimated_bytes = cost.bytes;
  result.diagnostics.estimated_operations = cost.operations;
  if (request.on_estimate) request.on_estimate(cost);

  const auto forward_path = co_moving ? PotentialPath::co_moving(grid, base, protocol) : PotentialPath::lab(grid, base, protocol);
  const bool reverse = request.reverse_run && wa.gibbs;
  const bool eigenbasis = request.integrator == Integrator::eigenbasis && tau > 0;
  const int basis_levels = request.eigenbasis_levels > 0 ? request.eigenbasis_levels : 2 * levels;
  auto basis_for = [&](const Grid& g, const std::vector<double>& v) {
    SpectrumOptions options = base_options;
    options.levels = std::min<int>(basis_levels, int(g.size()) / 2);
    // A budget the basis alone would pass is not spent on solving it: its spectrum's estimated
    // operations (cost.hpp) against the ODE's limit (the two ran at about the same rate here:
    // 240 levels on 2048 points, 8.6e9 estimated, in 0.6 s).
    if (request.ode_arithmetic_limit > 0) {
      const double solve = spectrum_cost(g.size(), options.levels, solves_dense(options, g.size())).operations;
      if (solve > request.ode_arithmetic_limit)
        throw ArithmeticLimitReached("eigenbasis ODE: its basis of " + std::to_string(options.levels) +
                                         " levels alone (estimated " + fmt(solve) + " operations) passes the limit of " +
                                         fmt(request.ode_arithmetic_limit),
                                     0, false, true);
    }
    return spectrum_on(g, v, options, cutoff);
  };
  const Spectrum basis_a = eigenbasis ? basis_for(grid, v_a) : Spectrum{};
  // Progress in units of forward steps: forward 1, half-step check 2, reverse 1.
  const double units = 1.0 + (request.time_step_check && tau > 0 ? 2.0 : 0.0) + (reverse ? 1.0 : 0.0);
  const double share = 1.0 / units;
  // H_B on the grid as its spectrum saw it (capped like spectrum_on), for the direct moments
  std::vector<double> v_b = samples(vb, grid.points(), displacement);
  cap_potential(v_b, *std::min_element(v_b.begin(), v_b.end()), cutoff);
  std::optional<TraceRecorder> trace;
  if (request.trace_points > 1 && request.trace_levels > 0 && tau > 0) {
    SpectrumOptions options = base_options;
    options.levels = request.trace_levels;
    options.memo = nullptr;  // the instantaneous spectra are not asked for again
    // A few levels by shift-invert Lanczos with Fourier Rayleigh-Ritz refinement (to the same
    // residual tolerance): about 50 times faster than the dense solver on 432 points (measured,
    // 2.4 ms against 0.13 s), which would cost a third of the run at 40 points.
    if (grid.size() > 128) options.method = EigenMethod::lanczos;
    // Points: trace_points, but in the lab frame (one spectrum per point) at most as many as
    // keep the spectra within 5% of the run's estimated arithmetic, and at least 9.
    int points = request.trace_points;
    if (!co_moving) {
      WorkSizes sizes = run_sizes(grid, levels, steps);
      sizes.kept = kept_a;  // the states actually propagated (the memory estimate assumes the most)
      const double run = work_cost(sizes).operations;
      const double solve = spectrum_cost(grid.size(), options.levels, options.method == EigenMethod::dense).operations;
      points = std::min(points, std::max(9, int(std::min(1e6, 0.05 * run / solve))));
    }
    trace.emplace(TraceRecorder{base, protocol, sa, sb, options, cutoff, steps, {}, nullptr});
    trace->data.interval = std::max(1, (steps + points - 2) / (points - 1));
    // A later attempt records where the earlier one did (the point count above follows the
    // run's cost, which grows with the levels), so that the states it carries have their traces.
    if (carried.forward && carried.forward->trace && same_numerics(*carried.forward, grid, steps)) {
      trace->earlier = &*carried.forward->trace;
      trace->data.interval = trace->earlier->interval;
    }
  }
  Run fwd = propagate_run(forward_path, sa, sb, &basis_a, v_a, kept_a, steps, request, request.ode, progress(0, share),
                          &v_b, trace ? &*trace : nullptr, &carried.forward);
  if (trace && !trace->data.failure.empty())
    result.diagnostics.warnings.push_back("time traces: an instantaneous spectrum could not be solved (" +
                                          trace->data.failure + "); the populations are left empty (nan) there");
  if (trace) result.traces = trace->traces(wa.weights);
  else result.traces.absent = tau == 0 ? "not computed for a sudden switch (tau = 0: no time evolution)"
                                       : "not asked for (trace_points < 2 or trace_levels < 1)";

  result.initial_spectrum = sa;
  result.final_spectrum = sb;
  result.forward = WorkInput{transition_matrix(fwd.amplitudes), sa.energies, sb.energies, wa.weights, sa.group, sb.group,
                             wa.gibbs ? std::optional<double>(wa.beta) : std::nullopt};
  result.distribution = work_distribution(result.forward, request.merge_tolerance);
  Diagnostics& diag = result.diagnostics;
  diag.norm_drift = fwd.norm_drift;
  weighted_edges(diag, fwd, wa.weights);
  diag.grid_refinements = request.grid_refinements;
  diag.max_phase_per_step = fwd.max_phase;
  diag.ode_arithmetic = fwd.arithmetic;
  diag.ode_basis_levels = int(basis_a.energies.size());
  diag.carried_states = fwd.carried;
  if (!fwd.thread_shortfall.empty()) diag.warnings.push_back(fwd.thread_shortfall);
  diag.unresolved_weight = result.distribution.unresolved_weight;
  diag.jarzynski_residual = result.distribution.jarzynski_residual;
  diag.moments = moment_errors(result.forward, result.distribution, fwd.energies, wa.choice.left_out,
                               request.unresolved_tolerance);
  if (tau == 0) {
    diag.moments.mean_discretisation = diag.moments.variance_discretisation = 0;
    diag.moments.discretisation_from = "nothing: a sudden switch has no time step";
  }
  diag.truncation.thermal_tail = wa.choice.left_out;  // the reverse run adds its parts below
  diag.final_margin = request.final_margin;
  diag.thermal_tolerance = request.thermal_tolerance;

  if (request.time_step_check && tau > 0) {
    OdeTolerances tighter{request.ode.absolute / 100, request.ode.relative / 100};
    Run half = propagate_run(forward_path, sa, sb, &basis_a, v_a, kept_a, 2 * steps, request, tighter,
                             progress(share, 3 * share), &v_b, nullptr, &carried.half);
    diag.time_step_error =
        (transition_matrix(half.amplitudes).probability - result.forward.transitions.probability).cwiseAbs().maxCoeff();
    // Twice the shift from the half-step run: Richardson's rule (common practice) puts an order-p
    // run's error at 2^p / (2^p - 1) times it, at most 4/3, near the asymptotic range; the factor
    // 2 also covers runs outside it (measured: Strang ramps of a harmonic trap at phases of 20 to
    // 77 rad per step missed by 1.01 to 1.24 times 4/3 of the shift). The ODE's check runs at
    // 1/100 its tolerances: its shift is its error.
    set_discretisation(diag.moments, direct_moments(result.forward, half.energies), 2.0,
                       "the half-step run: the time step only");
  }

  if (reverse) {
    const Protocol back = protocol.reversed();
    const Grid grid_r = shifted(grid, displacement);
    const auto x = grid_r.points();
    SpectrumOptions options = base_options;
    options.levels = levels;
    options.memo_levels = solve_levels;
    const Spectrum rb = co_moving ? spectrum_on(grid_r, samples(vb, x), options, cutoff) : sb;
    const Spectrum ra = co_moving ? spectrum_on(grid_r, samples(va, x, -displacement), options, cutoff) : sa;
    const InitialWeights wb = initial_weights(InitialState::thermal(wa.beta), rb.energies, request.thermal_tolerance,
                                              request.max_initial_levels);
    const int kept_b = int(wb.weights.size());
    const auto path = co_moving ? PotentialPath::co_moving(grid_r, base, back) : PotentialPath::lab(grid_r, base, back);
    const double from = 1.0 - share;
    const auto v_b = samples(vb, x);
    const Spectrum basis_b = eigenbasis ? basis_for(grid_r, v_b) : Spectrum{};
    Run rev = propagate_run(path, rb, ra, &basis_b, v_b, kept_b, steps, request, request.ode, progress(from, 1),
                            nullptr, nullptr, &carried.reverse);
    result.reverse = WorkInput{transition_matrix(rev.amplitudes), rb.energies, ra.energies, wb.weights, rb.group, ra.group,
                               wa.beta};
    result.reverse_distribution = work_distribution(*result.reverse, request.merge_tolerance);
    result.crooks = crooks_check(result.forward, *result.reverse, request.merge_tolerance);
    diag.crooks_line_difference = result.crooks->max_line_difference;
    diag.crooks_ratio_error = result.crooks->max_ratio_error;
    diag.truncation = truncation_residual_bound(wa.choice.left_out, kept_a, result.reverse->transitions.probability,
                                                wb.weights, wb.choice.left_out);
    diag.norm_drift = std::max(diag.norm_drift, rev.norm_drift);
    weighted_edges(diag, rev, wb.weights);
    if (std::abs(diag.jarzynski_residual) > diag.truncation.bound + 1e-9)
      diag.warnings.push_back("Jarzynski residual " + fmt(diag.jarzynski_residual) + " exceeds the truncation bound " +
                              fmt(diag.truncation.bound) + " (eps_K + p_R(>=K)): raise max_initial_levels or the grid");
  } else if (!wa.gibbs) {
    diag.warnings.push_back("initial state is not a Gibbs state of H_A: Jarzynski and Crooks do not apply");
  }
  result.harmonic = harmonic_comparison(base, protocol, result.forward, request.merge_tolerance, result.harmonic_absent);

  if (diag.unresolved_weight > request.unresolved_tolerance)
    diag.warnings.push_back("unresolved final weight " + fmt(diag.unresolved_weight) + " above " +
                            fmt(request.unresolved_tolerance) + ": raise final_margin (final levels " +
                            std::to_string(levels) + ")");
  if (const std::string w = moment_warning(diag.moments, result.forward.transitions.final_levels(), "");
      !w.empty())
    diag.warnings.push_back(w);
  if (diag.edge_amplitude > 1e-8)
    diag.warnings.push_back(
        "final states reach the grid edge (relative density " + fmt(diag.edge_amplitude) +
        " in the outer 2%, averaged with the initial populations): widen the grid" +
        (co_moving || !translation || !obstacle.empty() ? "" : " or use the co-moving frame"));
  const std::string refined = !refinable_grid(request) ? std::string()
                                                        : " (the automatic grid was refined " +
                                                              std::to_string(diag.grid_refinements) +
                                                              " time(s) already)";
  if (diag.momentum_edge > momentum_edge_tolerance)
    diag.warnings.push_back(
        "the propagated states reach the grid's momentum limit pi hbar/dx (weight " +
        fmt(diag.momentum_edge) +
        " in the outer 2% of its momenta, the largest over the run): their motion aliases and "
        "the lines are not reliable; set a finer grid: [grid] points above " +
        std::to_string(2 * grid.size()) + " with left and right" + refined);
  if (diag.position_edge > momentum_edge_tolerance)
    diag.warnings.push_back(
        "the propagated states reach the ends of the grid (weight " + fmt(diag.position_edge) +
        " in its outer 2%, the largest over the run): they wrap around and the lines are not reliable; " +
        (diag.finite_depth
             ? std::string("the trap has a finite depth: what leaves it is lost wherever the grid "
                           "ends (see the unresolved weight)")
             : "widen the grid: [grid] left and right beyond " +
                   request.spectrum.message_units(grid.left(), Dimension::length()) + " and " +
                   request.spectrum.message_units(grid.right(), Dimension::length()) + refined));
  if (diag.time_step_error > 1e-6)
    diag.warnings.push_back("line probabilities change by " + fmt(diag.time_step_error) +
                            " at half the time step: raise steps (now " + std::to_string(steps) + ")");
  if (request.progress) request.progress(1.0);
  return result;
}

}  // namespace

std::optional<HarmonicMoments> harmonic_moments(const Potential& base, const Protocol& protocol,
                                                const InitialState& initial, std::string& why_not) {
  const auto h = harmonic_model(base, protocol, why_not);
  if (!h) return std::nullopt;
  // <m> and <m^2> of the initial level index m in the harmonic trap (thermal: <m^2> = 2 nbar^2 + nbar)
  double mean_occupation = 0, second = 0;
  switch (initial.kind()) {
    case InitialState::Kind::thermal:
    case InitialState::Kind::phonons:
      mean_occupation = initial.kind() == InitialState::Kind::phonons ? initial.parameter()
                                                                       : 1 / std::expm1(initial.parameter() * h->w0);
      second = 2 * mean_occupation * mean_occupation + mean_occupation;
      break;
    case InitialState::Kind::eigenstate:
      mean_occupation = initial.level();
      second = mean_occupation * mean_occupation;
      break;
    case InitialState::Kind::mixture: {
      const auto& p = initial.mixture_weights();
      double total = 0;
      for (std::size_t m = 0; m < p.size(); ++m) {
        mean_occupation += double(m) * p[m];
        second += double(m) * double(m) * p[m];
        total += p[m];
      }
      mean_occupation /= total;
      second /= total;
      break;
    }
  }
  HarmonicMoments m;
  m.model = h->model;
  if (h->displaced) {  // <W> = omega |alpha|^2, var W = omega^2 |alpha|^2 (2 nbar + 1)
    m.mean = h->w0 * h->parameter;
    m.sd = h->w0 * std::sqrt(h->parameter * (2 * mean_occupation + 1));
  } else {
    // <W> = (omega1 Q* - omega0) (nbar + 1/2). var W: the evolution is a Bogoliubov map,
    // U^+ a_1 U = u a_0 + v a_0^+ (|u|^2 - |v|^2 = 1, Q* = |u|^2 + |v|^2), so from level m the
    // final energy has mean omega1 Q* (m + 1/2) and variance omega1^2 |u v|^2 <m|a^2 a^+2 + a^+2 a^2|m>
    // = omega1^2 (Q*^2 - 1) (m^2 + m + 1) / 2; over the initial levels
    // var W = omega1^2 (Q*^2 - 1) <m^2 + m + 1> / 2 + (omega1 Q* - omega0)^2 var m
    // (derived here from Husimi's Q*; tested against the Husimi transition matrix).
    const double q = h->parameter, slope = h->w1 * q - h->w0;
    m.mean = slope * (mean_occupation + 0.5);
    const double var_m = std::max(0.0, second - mean_occupation * mean_occupation);
    m.sd = std::sqrt(h->w1 * h->w1 * (q * q - 1) * (second + mean_occupation + 1) / 2 + slope * slope * var_m);
  }
  return m;
}

// Levels are kept until the left-out thermal weight, the unresolved final weight and the
// chance p_R(>=K) that the reverse run leaves the kept initial levels are all small (the last
// bounds the Jarzynski residual; the thermal tail alone does not), and the moments' truncation
// error (Diagnostics::moments) is within unresolved_tolerance (relative). When either escape
// probability exceeds unresolved_tolerance, or the moments miss it, the run is repeated with
// more levels where they were missed (enlarged), at most twice (the cost bound); moments still
// missing then are a warning naming the cause.
namespace {
// What insured_levels expects of run_work's next attempt where everything missed: twice the
// final margin and max_initial_levels, a 1000 times tighter thermal tolerance (the attempt
// itself asks for more where the thermal part missed by over 100 times, and less where only
// some parts missed: enlarged_request).
WorkRequest enlarged(WorkRequest r) {
  r.final_margin *= 2;
  r.thermal_tolerance /= 1e3;
  r.max_initial_levels *= 2;
  return r;
}

// Levels to solve at once in case run_work enlarges its levels (0: none beyond the first
// attempt's). Whether it will cannot be told before the run (the escape probabilities and the
// moments' error come from the propagation), so the enlarged count (predicted_levels at the
// enlarged settings) is solved at once only where that costs nothing or little: a dense solver
// finds every level at once anyway; a Lanczos solve of a fixed grid at given steps takes it
// when the extra arithmetic of the four solves (H_A and H_B, on the grid and on the check grid
// of 1.5 times the points) is within 5% of the run's estimated arithmetic (cost.hpp). An
// enlarged attempt then finds every spectrum it needs solved; the first one is served from them.
int insured_levels(const Potential& base, const Protocol& protocol, const WorkRequest& r, std::vector<double>& wkb) {
  const SpectrumOptions& o = r.spectrum.options;
  if (o.method == EigenMethod::hermite || o.method == EigenMethod::finite_difference) return 0;
  const Potential va = protocol.initial(base);
  const int now = predicted_levels(va, r, first_levels(r), wkb);
  const WorkRequest next = enlarged(r);
  const int later = predicted_levels(va, next, first_levels(next), wkb);
  if (now == 0 || later <= now) return 0;
  const bool known = r.spectrum.points.has_value();
  const std::size_t n = known ? *r.spectrum.points : 0;
  if (o.method == EigenMethod::dense || (known && solves_dense(o, n))) return later;
  if (!known || r.steps <= 0 || r.integrator == Integrator::eigenbasis) return 0;
  const auto n_check = std::size_t(1.5 * double(n));
  const double extra = 2 * (spectrum_cost(n, later, false).operations - spectrum_cost(n, now, false).operations +
                            spectrum_cost(n_check, later, false).operations -
                            spectrum_cost(n_check, now, false).operations);
  WorkSizes run;
  run.points = n;
  run.levels = now;
  run.kept = std::max(1, now - r.final_margin);
  run.steps = r.steps;
  run.substeps = r.integrator == Integrator::fourth_order ? 3 : 1;
  run.runs = 1 + (r.time_step_check ? 2 : 0) + (r.reverse_run ? 1 : 0);
  return extra <= 0.05 * work_cost(run).operations ? later : 0;
}
}  // namespace

WorkRequest enlarged_request(WorkRequest r, const Diagnostics& d) {
  const MomentErrors& e = d.moments;
  auto need = [&](double mean_part, double variance_part) {  // the part over the tolerance, relative
    const double n = std::max(std::abs(mean_part) / (e.tolerance * e.scale_mean),
                              std::abs(variance_part) / (e.tolerance * e.scale_variance));
    return std::isnan(n) ? std::numeric_limits<double>::infinity() : n;
  };
  const bool missed = !(e.mean_met() && e.variance_met());
  const std::string dominant = e.dominant();
  const double thermal = need(e.mean_thermal, e.variance_thermal);
  const bool more_final = d.unresolved_weight > r.unresolved_tolerance ||
                          (missed && (dominant != "thermal" || need(e.mean_final, e.variance_final) >= 1.0 / 3 ||
                                      need(e.mean_basis, e.variance_basis) >= 1.0 / 3));
  if (more_final) r.final_margin *= 2;
  if (missed && (dominant == "thermal" || thermal >= 1.0 / 3))
    r.thermal_tolerance /= std::min(1e6, std::max(10.0, 10 * thermal));
  r.max_initial_levels *= 2;
  return r;
}

WorkResult run_work(const Potential& base, const Protocol& protocol, const WorkRequest& request) {
  WorkRequest r = request;
  Carried carried;  // an attempt propagates only the states the previous one did not
  // Spectra asked for twice (the preliminary spectrum of a fixed grid is the run's own when its
  // capped samples agree) are solved once; a caller's memo serves instead when it gives one.
  if (!r.spectrum.options.memo) r.spectrum.options.memo = std::make_shared<SpectrumMemo>();
  r.spectrum.options.memo_levels = std::max(r.spectrum.options.memo_levels, insured_levels(base, protocol, r, carried.wkb));
  // A run whose states reach the grid's momentum limit or its ends is repeated on half the
  // spacing or 3/2 the extent, at most twice, once no more levels are wanted (more levels raise
  // the energy range the automatic grid is chosen for, which may be all it needed: a harmonic
  // trap's centre swept 10 oscillator lengths and back in tau = 5.5/omega, lab frame,
  // reached 0.057 of its momenta on the first attempt's grid, none on the enlarged run's).
  const bool automatic_grid = refinable_grid(r);
  std::string refined;
  for (int attempt = 0;; ++attempt) {
    WorkResult result = run_work_once(base, protocol, r, carried);
    const Diagnostics& d = result.diagnostics;
    const double escape = std::max(d.unresolved_weight, d.truncation.reverse_tail);
    const bool moments = d.moments.mean_met() && d.moments.variance_met();
    const bool levels_done = (!(escape > r.unresolved_tolerance) && moments) || attempt == 2;
    const bool fast = d.momentum_edge > momentum_edge_tolerance,
               far = d.position_edge > momentum_edge_tolerance && !d.finite_depth;
    if (levels_done && automatic_grid && (fast || far) && r.grid_refinements < 2) {
      ++r.grid_refinements;
      if (fast) r.spacing_factor /= 2;
      if (far) r.extent_factor *= 1.5;
      refined =
          "grid refined " + std::to_string(r.grid_refinements) + " time(s) (last from " +
          std::to_string(result.grid.size()) + " points): the propagated states reached" +
          (fast ? " its momentum limit pi hbar/dx (weight " + fmt(d.momentum_edge) +
                      " in the outer 2% of its momenta" + (far ? "; spacing halved)" : ": spacing halved)")
                : "") +
          (far ? std::string(fast ? " and" : "") + " its ends (weight " + fmt(d.position_edge) +
                     " in its outer 2%: extent 3/2 as wide)"
               : "");
      --attempt;  // the same levels on the finer grid
      continue;
    }
    if (levels_done) {
      if (!refined.empty()) result.diagnostics.notes.push_back(refined);
      if (attempt > 0)
        result.diagnostics.notes.push_back(
            enlargement_note(attempt, escape, d.moments, r.final_margin, r.thermal_tolerance) +
            (d.carried_states > 0 ? "; " + std::to_string(d.carried_states) + " of " +
                                        std::to_string(result.forward.transitions.initial_levels()) +
                                        " initial states carried over from the previous run, not propagated again"
                                  : ""));
      return result;
    }
    r = enlarged_request(r, d);
    // the reverse run says how many initial levels bound p_R(>=K): keep those (and a few more)
    if (d.truncation.reverse_tail > r.unresolved_tolerance && result.reverse)
      r.min_initial_levels = std::min(r.max_initial_levels,
                                      levels_for_reverse_tail(result.reverse->transitions.probability,
                                                              result.reverse->initial_weights, r.unresolved_tolerance / 2) +
                                          4);
    // the whole work runs again: a new stage, so that progress does not sit at 100 % meanwhile
    if (r.stage)
      r.stage("more levels (escape probability " + fmt(escape) + "), run " + std::to_string(attempt + 2) + " of at most 3");
  }
}

}  // namespace trapwork
