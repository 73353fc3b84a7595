#include "solver/propagator.hpp"

#include <fftw3.h>
#if defined(__x86_64__)
#include <immintrin.h>
#endif

#include <algorithm>
#include <atomic>
#include <boost/numeric/odeint.hpp>
#include <cmath>
#include <condition_variable>
#include <cstdint>
#include <cstdio>
#include <string>
#include <system_error>
#include <thread>

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
  if (const std::string why = protocol.co_moving_obstacle(*translation); !why.empty())
    throw PhysicsError("co-moving frame: " + why + "; use frame = \"lab\"");
  Potential initial = protocol.initial(base);
  return PotentialPath(std::move(grid), std::move(initial), std::move(protocol), std::move(translation));
}

void PotentialPath::sample(double t, std::vector<double>& v) const {
  v.resize(points_.size());
  auto perturb = [&] {
    if (!perturbation_) return;
    std::vector<double> lab(points_);
    const double d = displacement(t);
    for (double& x : lab) x += d;
    perturbation_(t, lab, v);
  };
  if (!translation_) {
    protocol_.at(base_, t).evaluate(points_.data(), v.data(), points_.size());  // formulas at its time
    perturb();
    check_potential_finite(v, points_, t, "x");
    return;
  }
  base_.evaluate(points_.data(), v.data(), points_.size());
  const double acceleration = protocol_.displacement(*translation_, t).acceleration;
  for (std::size_t j = 0; j < v.size(); ++j) v[j] += acceleration * points_[j];
  perturb();
  check_potential_finite(v, points_, t, "y = x - d(t) (co-moving frame)");
}

PotentialPath PotentialPath::with_perturbation(Perturbation perturbation) const {
  PotentialPath path = *this;
  path.perturbation_ = std::move(perturbation);
  return path;
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

// ---- guards --------------------------------------------------------------------------------

std::string format_number(double value) {
  char text[32];
  std::snprintf(text, sizeof text, "%.6g", value);  // 6 significant digits: enough to locate
  return text;
}

namespace {
std::string non_finite_text(const std::string& coordinate, Dimension d, double position, double time, bool nan,
                            const MessageUnits& units) {
  return "potential at " + coordinate + " = " + units(position, d) + " is " + (nan ? "NaN" : "infinite") +
         " at t = " + units(time, Dimension::time()) + ": the potential or its schedule is singular there";
}
}  // namespace

NonFinitePotentialError::NonFinitePotentialError(std::string coordinate_, Dimension dimension, double position_,
                                                 double time_, bool nan)
    : PhysicsError(non_finite_text(coordinate_, dimension, position_, time_, nan, {})),
      coordinate(std::move(coordinate_)),
      coordinate_dimension(dimension),
      position(position_),
      time(time_),
      is_nan(nan) {}

std::string NonFinitePotentialError::describe(const MessageUnits& units) const {
  const std::string text = non_finite_text(coordinate, coordinate_dimension, position, time, is_nan, units);
  if (step == 0) return text;
  return "propagation step " + std::to_string(step) + " of " + std::to_string(steps) + " (t = " +
         units(step_time, Dimension::time()) + "): " + text;
}

void NonFinitePotentialError::set_step(int step_, int steps_, double step_time_) {
  step = step_;
  steps = steps_;
  step_time = step_time_;
  static_cast<PhysicsError&>(*this) = PhysicsError(describe({}));
}

void check_potential_finite(const std::vector<double>& v, const std::vector<double>& points, double t,
                            const std::string& coordinate) {
  const Dimension d = coordinate == "x" || coordinate.rfind("y = x", 0) == 0 ? Dimension::length() : Dimension::none();
  for (std::size_t j = 0; j < v.size(); ++j)
    if (!std::isfinite(v[j])) throw NonFinitePotentialError(coordinate, d, points[j], t, std::isnan(v[j]));
}

int first_nonfinite_column(const Eigen::MatrixXcd& state) {
  // A sum is finite exactly when every term is (finite terms of order one cannot overflow;
  // NaN and infinity propagate), and Eigen vectorises the reduction.
  for (Eigen::Index c = 0; c < state.cols(); ++c) {
    const std::complex<double> sum = state.col(c).sum();
    if (!std::isfinite(sum.real()) || !std::isfinite(sum.imag())) return int(c);
  }
  return -1;
}

// ---- the fused batch pass ------------------------------------------------------------------

namespace {

using complex = std::complex<double>;

// out[j] = a[j] k[j] (out may be a), written on the real and imaginary parts so that the
// compiler vectorises it, without std::complex's NaN recovery branch. `ahead` (may be null):
// n complex samples to prefetch into the cache meanwhile, one line per 4 samples (the next
// block's column, so that its first pass does not wait for memory). Compiled also for AVX2
// and AVX-512 and chosen once at load time (GCC function multi-versioning); those versions may
// fuse a*b - c*d into FMA, which changes the last bit against the baseline version, but every
// thread of a process runs the same version, so results never depend on the thread count.
__attribute__((target_clones("avx512f", "avx2", "default"))) void multiply(const complex* a, const complex* k,
                                                                          complex* out, std::size_t n,
                                                                          const complex* ahead = nullptr) {
  const double* x = reinterpret_cast<const double*>(a);
  const double* y = reinterpret_cast<const double*>(k);
  double* z = reinterpret_cast<double*>(out);
  for (std::size_t j0 = 0; j0 < n; j0 += 64) {  // chunks of 1 KiB
    const std::size_t j1 = std::min(n, j0 + 64);
    if (ahead)
      for (std::size_t j = j0; j < j1; j += 4) __builtin_prefetch(ahead + j);
    for (std::size_t i = 2 * j0; i < 2 * j1; i += 2) {
      const double ar = x[i], ai = x[i + 1], kr = y[i], ki = y[i + 1];
      z[i] = ar * kr - ai * ki;
      z[i + 1] = ar * ki + ai * kr;
    }
  }
}

// row[j] = exp(-i v[j] w), j < n: the potential kick of a split-operator substep. Where the
// processor has AVX-512 or AVX2, the cosines and sines come from glibc's vector math library
// (libmvec, which g++ links through libm), 8 or 4 at a time: 9.5 and 5.4 times faster than
// std::polar (measured here; these rows took 5 % of a 2048-point job's CPU time). Its
// documented maximum error is 4 ulp (glibc manual, from memory) against 1 ulp for the scalar
// functions; measured on 2048 kicks, the rows differ from std::polar by at most 3.3e-16 and
// |row[j]| from 1 by 3.3e-16. The version is chosen once per process, so every thread and every
// run of a process computes the same numbers.
#if defined(__x86_64__) && defined(__GLIBC__)
// (declared with their instruction sets: clang refuses vector arguments whose ABI the caller's
// and callee's targets would disagree on)
extern "C" __attribute__((target("avx512f"))) __m512d _ZGVeN8v_cos(__m512d);
extern "C" __attribute__((target("avx512f"))) __m512d _ZGVeN8v_sin(__m512d);
extern "C" __attribute__((target("avx2"))) __m256d _ZGVdN4v_cos(__m256d);
extern "C" __attribute__((target("avx2"))) __m256d _ZGVdN4v_sin(__m256d);

__attribute__((target("avx512f"))) void phase_row_avx512(const double* v, double w, complex* row, std::size_t n) {
  double* z = reinterpret_cast<double*>(row);
  const __m512d scale = _mm512_set1_pd(-w);
  std::size_t j = 0;
  for (; j + 8 <= n; j += 8) {
    const __m512d p = _mm512_mul_pd(_mm512_loadu_pd(v + j), scale);
    alignas(64) double c[8], s[8];
    _mm512_store_pd(c, _ZGVeN8v_cos(p));
    _mm512_store_pd(s, _ZGVeN8v_sin(p));
    for (int q = 0; q < 8; ++q) z[2 * (j + q)] = c[q], z[2 * (j + q) + 1] = s[q];
  }
  for (; j < n; ++j) row[j] = std::polar(1.0, -v[j] * w);
}

__attribute__((target("avx2"))) void phase_row_avx2(const double* v, double w, complex* row, std::size_t n) {
  double* z = reinterpret_cast<double*>(row);
  const __m256d scale = _mm256_set1_pd(-w);
  std::size_t j = 0;
  for (; j + 4 <= n; j += 4) {
    const __m256d p = _mm256_mul_pd(_mm256_loadu_pd(v + j), scale);
    alignas(32) double c[4], s[4];
    _mm256_store_pd(c, _ZGVdN4v_cos(p));
    _mm256_store_pd(s, _ZGVdN4v_sin(p));
    for (int q = 0; q < 4; ++q) z[2 * (j + q)] = c[q], z[2 * (j + q) + 1] = s[q];
  }
  for (; j < n; ++j) row[j] = std::polar(1.0, -v[j] * w);
}
#endif

void phase_row_scalar(const double* v, double w, complex* row, std::size_t n) {
  for (std::size_t j = 0; j < n; ++j) row[j] = std::polar(1.0, -v[j] * w);
}

using PhaseRow = void (*)(const double*, double, complex*, std::size_t);
PhaseRow chosen_phase_row() {
#if defined(__x86_64__) && defined(__GLIBC__)
  __builtin_cpu_init();
  if (__builtin_cpu_supports("avx512f")) return phase_row_avx512;
  if (__builtin_cpu_supports("avx2")) return phase_row_avx2;
#endif
  return phase_row_scalar;
}

void phase_row(const double* v, double w, complex* row, std::size_t n) {
  static const PhaseRow chosen = chosen_phase_row();
  chosen(v, w, row, n);
}

// threads - 1 persistent worker threads plus the calling thread. run(blocks, task) calls
// task(worker, block, next) once for every block in [0, blocks) and returns when all are done
// (next: the block the same worker runs after this one, or -1);
// blocks are claimed in order from a shared counter, so a worker that the system pauses
// holds up at most one block. Tasks must not throw.
// A worker the system refuses to start (std::thread throws std::system_error: a process or
// memory limit) is not waited for: the pool runs with the threads it could start, threads()
// says how many, and refusal() gives the system's reason.
class WorkerPool {
 public:
  explicit WorkerPool(int threads) {
    for (int w = 1; w < threads; ++w) {
      try {
        workers_.emplace_back([this, w] { serve(w); });
      } catch (const std::system_error& e) {
        refusal_ = e.what();
        break;
      }
    }
  }
  ~WorkerPool() {
    {
      std::lock_guard lock(mutex_);
      stop_ = true;
    }
    wake_.notify_all();
    for (auto& t : workers_) t.join();
  }
  WorkerPool(const WorkerPool&) = delete;
  WorkerPool& operator=(const WorkerPool&) = delete;
  int threads() const { return int(workers_.size()) + 1; }
  const std::string& refusal() const { return refusal_; }  // empty: every thread started

  // meanwhile (may be empty) runs on the calling thread first, while the other workers start
  // on the blocks; the calling thread then joins them.
  template <class Task>
  void run(int blocks, Task& task, const std::function<void()>& meanwhile = {}) {
    if (workers_.empty()) {
      if (meanwhile) meanwhile();
      for (int b = 0; b < blocks; ++b) task(0, b, b + 1 < blocks ? b + 1 : -1);
      return;
    }
    {
      std::lock_guard lock(mutex_);
      call_ = [](void* f, int worker, int block, int next) { (*static_cast<Task*>(f))(worker, block, next); };
      task_ = &task;
      blocks_ = blocks;
      next_.store(0);
      busy_ = int(workers_.size());
      ++generation_;
    }
    wake_.notify_all();
    if (meanwhile) meanwhile();
    claim(0);
    std::unique_lock lock(mutex_);
    done_.wait(lock, [&] { return busy_ == 0; });
  }

 private:
  // Each worker claims its next block before running the current one, so that the task can
  // prefetch it (next = -1: none).
  void claim(int worker) {
    for (int b = next_.fetch_add(1); b < blocks_;) {
      const int following = next_.fetch_add(1);
      call_(task_, worker, b, following < blocks_ ? following : -1);
      b = following;
    }
  }
  void serve(int worker) {
    std::uint64_t seen = 0;
    for (;;) {
      {
        std::unique_lock lock(mutex_);
        wake_.wait(lock, [&] { return stop_ || generation_ != seen; });
        if (stop_) return;
        seen = generation_;
      }
      claim(worker);
      std::lock_guard lock(mutex_);
      if (--busy_ == 0) done_.notify_one();
    }
  }
  std::vector<std::thread> workers_;
  std::string refusal_;
  std::mutex mutex_;
  std::condition_variable wake_, done_;
  std::uint64_t generation_ = 0;
  bool stop_ = false;
  int busy_ = 0, blocks_ = 0;
  std::atomic<int> next_{0};
  void (*call_)(void*, int, int, int) = nullptr;
  void* task_ = nullptr;
};

// Columns per block: the block's scratch near 256 KiB (it, its transform of the same size and
// the transform's work arrays stay in a core's L2 cache), and at least 16 blocks when there
// are 16 columns or more, so that two or more threads share the work evenly (with 8 blocks of
// 9 columns of the benchmark's reference job, the calling thread, which also samples the
// potential between the passes, ran 1.4 times the other's transforms: 2 threads took 9.6 s
// against 8.4 s with 16, measured). Depends on points and columns only, so that results do
// not depend on the thread count.
int block_columns_for(std::size_t points, int columns) {
  const std::size_t scratch_bytes = 256 * 1024;
  const int by_cache = int(std::max<std::size_t>(1, scratch_bytes / (points * sizeof(complex))));
  const int by_balance = std::max(1, (columns + 15) / 16);
  return std::min({by_cache, by_balance, columns});
}

}  // namespace

struct BatchedSplitStep::Impl {
  std::size_t n;
  int columns, block, blocks;
  bool sine;
  std::vector<fftw_complex*> scratch;   // one block per worker: the samples psi(x_j)
  std::vector<fftw_complex*> spectral;  // one block per worker: their transforms (Fourier grid)
  // [0]: a full block; [1]: the last, shorter block (null when the blocks divide the columns).
  // Fourier grid: forward scratch -> spectral, backward spectral -> scratch (out of place, each
  // allowed to overwrite its input). Out-of-place plans were 1.3 times faster than in-place
  // ones for 2048 points in blocks of 5 columns, and less dependent on FFTW_MEASURE's luck
  // (measured here, 4 December 2026: 2.6 to 3.2 us per transform against 3.3 to 3.9 us; with
  // FFTW_ESTIMATE 2.9 against 4.7 us). A sine transform is its own inverse and stays in place:
  // backward is forward, and spectral is scratch.
  fftw_plan forward[2] = {nullptr, nullptr}, backward[2] = {nullptr, nullptr};
  WorkerPool pool;
  // momentum_edge(), position_edge(): one per column (each written by one worker per call);
  // norms: per worker and block column, the column's norm at the measurement
  std::vector<double> edge, position_edge, norms;
  long calls = 0;  // apply_many calls with one substep (every 32nd is measured)

  Impl(std::size_t n_, int columns_, bool sine_, int threads, FftPlanning planning)
      : n(n_), columns(columns_), block(block_columns_for(n_, columns_)),
        blocks((columns_ + block - 1) / block), sine(sine_), pool(std::max(1, threads)),
        edge(std::size_t(columns_), 0.0), position_edge(std::size_t(columns_), 0.0),
        norms(std::size_t(pool.threads()) * std::size_t(block), 0.0) {
    try {
      for (int w = 0; w < pool.threads(); ++w)
        for (auto* list : {&scratch, &spectral}) {
          if (list == &spectral && sine) {
            spectral.push_back(scratch.back());
            continue;
          }
          list->push_back(fftw_alloc_complex(n * std::size_t(block)));
          if (!list->back()) throw PhysicsError("split-operator propagator: cannot allocate the transform scratch");
        }
      std::lock_guard<std::mutex> lock(fftw_planner_mutex());
      const unsigned flags = (planning == FftPlanning::measure ? FFTW_MEASURE : FFTW_ESTIMATE) | FFTW_DESTROY_INPUT;
      const int last = columns - (blocks - 1) * block;
      for (int k = 0; k < (last == block ? 1 : 2); ++k) {
        const int count = k == 0 ? block : last;
        // FFTW_MEASURE overwrites the scratch: planned before any data is written.
        if (!sine) {
          const int size = int(n);
          forward[k] = fftw_plan_many_dft(1, &size, count, scratch[0], nullptr, 1, size, spectral[0], nullptr, 1,
                                          size, FFTW_FORWARD, flags);
          backward[k] = fftw_plan_many_dft(1, &size, count, spectral[0], nullptr, 1, size, scratch[0], nullptr, 1,
                                           size, FFTW_BACKWARD, flags);
        } else {
          // real and imaginary parts of every column, each a RODFT00 of length n with stride 2
          fftw_iodim dim{int(n), 2, 2};
          fftw_iodim many[2] = {{count, 2 * int(n), 2 * int(n)}, {2, 1, 1}};
          fftw_r2r_kind kind = FFTW_RODFT00;
          double* data = reinterpret_cast<double*>(scratch[0]);
          forward[k] = backward[k] = fftw_plan_guru_r2r(1, &dim, 2, many, data, data, &kind, flags);
        }
        if (!forward[k] || !backward[k]) throw PhysicsError("split-operator propagator: FFTW could not create a plan");
      }
    } catch (...) {
      release();
      throw;
    }
  }
  ~Impl() { release(); }
  void release() {
    {
      std::lock_guard<std::mutex> lock(fftw_planner_mutex());
      for (int k = 0; k < 2; ++k) {
        if (backward[k] && backward[k] != forward[k]) fftw_destroy_plan(backward[k]);
        if (forward[k]) fftw_destroy_plan(forward[k]);
        forward[k] = backward[k] = nullptr;
      }
    }
    for (auto* s : scratch) fftw_free(s);
    if (!sine)
      for (auto* s : spectral) fftw_free(s);
    scratch.clear();
    spectral.clear();
  }
  void execute(fftw_plan plan, complex* in, complex* out) const {
    if (sine)
      fftw_execute_r2r(plan, reinterpret_cast<double*>(in), reinterpret_cast<double*>(out));
    else
      fftw_execute_dft(plan, reinterpret_cast<fftw_complex*>(in), reinterpret_cast<fftw_complex*>(out));
  }
};

BatchedSplitStep::BatchedSplitStep(std::size_t points, int columns, bool sine_transform, int threads,
                                   FftPlanning planning) {
  TRAPWORK_EXPECT(points >= 1 && columns >= 1, "BatchedSplitStep needs points >= 1 and columns >= 1");
  impl_ = std::make_unique<Impl>(points, columns, sine_transform, threads, planning);
}
BatchedSplitStep::~BatchedSplitStep() = default;
BatchedSplitStep::BatchedSplitStep(BatchedSplitStep&&) noexcept = default;
BatchedSplitStep& BatchedSplitStep::operator=(BatchedSplitStep&&) noexcept = default;
std::size_t BatchedSplitStep::points() const { return impl_->n; }
int BatchedSplitStep::columns() const { return impl_->columns; }
int BatchedSplitStep::threads() const { return impl_->pool.threads(); }
const std::string& BatchedSplitStep::thread_refusal() const { return impl_->pool.refusal(); }
int BatchedSplitStep::block_columns() const { return impl_->block; }
const std::vector<double>& BatchedSplitStep::momentum_edge() const {
  return impl_->edge;
}
const std::vector<double>& BatchedSplitStep::position_edge() const {
  return impl_->position_edge;
}

void BatchedSplitStep::apply(Eigen::MatrixXcd& state, const complex* before, const complex* kinetic,
                             const complex* after) {
  const complex* kicks[2] = {before, after};
  apply_many(state, 1, kicks, &kinetic);
}

void BatchedSplitStep::apply_many(Eigen::MatrixXcd& state, int substeps, const complex* const* kicks,
                                  const complex* const* kinetic, const std::function<void()>& meanwhile) {
  Impl& p = *impl_;
  TRAPWORK_EXPECT(state.rows() == Eigen::Index(p.n) && state.cols() == p.columns,
                  "BatchedSplitStep::apply: state is not points x columns");
  TRAPWORK_EXPECT(substeps >= 1, "BatchedSplitStep::apply_many needs substeps >= 1");
  const std::size_t n = p.n;
  std::vector<double>& norms = p.norms;
  const bool measure = substeps > 1 || p.calls++ % 32 == 0;
  // the outer 2% of the modes: [n/2 - band, n/2 + band) in FFT order, the top 2 band sine modes
  const std::size_t band = std::max<std::size_t>(1, n / 100);
  const std::size_t edge_from = p.sine ? n - std::min(n, 2 * band) : n / 2 - std::min(n / 2, band);
  const std::size_t edge_to = p.sine ? n : std::min(n, n / 2 + band);
  auto task = [&](int worker, int b, int next) {
    const int first = b * p.block, count = std::min(p.block, p.columns - first);
    const int shape = count == p.block ? 0 : 1;
    const int next_first = next < 0 ? 0 : next * p.block, next_count = next < 0 ? 0 : std::min(p.block, p.columns - next_first);
    auto ahead = [&](int c) { return c < next_count ? state.col(next_first + c).data() : nullptr; };
    complex* buffer = reinterpret_cast<complex*>(p.scratch[std::size_t(worker)]);
    complex* spectral = reinterpret_cast<complex*>(p.spectral[std::size_t(worker)]);
    auto column = [&](int c) { return buffer + std::size_t(c) * n; };
    auto mode = [&](int c) { return spectral + std::size_t(c) * n; };
    for (int c = 0; c < count; ++c) multiply(state.col(first + c).data(), kicks[0], column(c), n);
    for (int s = 0; s < substeps; ++s) {
      // the norms and the outer points' share before the transform (which may destroy its input)
      if (s == 0 && measure)
        for (int c = 0; c < count; ++c) {
          const complex* x = column(c);
          double all = 0, outer = 0;
          for (std::size_t j = 0; j < n; ++j) all += std::norm(x[j]);
          for (std::size_t j = 0; j < band && !p.sine; ++j)
            outer += std::norm(x[j]) + std::norm(x[n - 1 - j]);
          norms[std::size_t(c) + std::size_t(worker) * std::size_t(p.block)] = all;
          double& e = p.position_edge[std::size_t(first + c)];
          if (all > 0) e = std::max(e, outer / all);
        }
      p.execute(p.forward[shape], buffer, spectral);
      if (s == 0 && measure)
        for (int c = 0; c < count; ++c) {
          const complex* m = mode(c);
          double outer = 0;
          for (std::size_t j = edge_from; j < edge_to; ++j) outer += std::norm(m[j]);
          // Parseval: the unnormalised transform's norm is n (FFT) or 2 (n + 1) (DST-I) times the samples'
          const double all = norms[std::size_t(c) + std::size_t(worker) * std::size_t(p.block)] *
                             (p.sine ? 2.0 * double(n + 1) : double(n));
          double& e = p.edge[std::size_t(first + c)];
          if (all > 0) e = std::max(e, outer / all);
        }
      for (int c = 0; c < count; ++c) multiply(mode(c), kinetic[s], mode(c), n);
      p.execute(p.backward[shape], spectral, buffer);
      if (s + 1 < substeps)
        for (int c = 0; c < count; ++c) multiply(column(c), kicks[s + 1], column(c), n);
    }
    // while the block is written back, the next one is fetched
    for (int c = 0; c < count; ++c) multiply(column(c), kicks[substeps], state.col(first + c).data(), n, ahead(c));
  };
  p.pool.run(p.blocks, task, meanwhile);
}

// ---- SplitOperatorPropagator -----------------------------------------------------------------

SplitOperatorPropagator::SplitOperatorPropagator(PotentialPath path, int columns, SplitOrder order, int threads,
                                                 FftPlanning planning)
    : path_(std::move(path)), columns_(columns), order_(order),
      pass_(path_.grid().size(), std::max(1, columns), path_.grid().boundary() == Boundary::hard_wall, threads,
            planning),
      kinetic_(path_.grid().kinetic_modes()) {
  TRAPWORK_EXPECT(columns >= 1, "SplitOperatorPropagator needs at least one column");
  const std::size_t n = path_.grid().size();
  TRAPWORK_EXPECT(kinetic_.size() == n, "grid kinetic modes size != grid size");
  normalisation_ = path_.grid().boundary() == Boundary::hard_wall ? 1.0 / (2.0 * double(n + 1)) : 1.0 / double(n);
}

SplitOperatorPropagator::~SplitOperatorPropagator() = default;
SplitOperatorPropagator::SplitOperatorPropagator(SplitOperatorPropagator&&) noexcept = default;
SplitOperatorPropagator& SplitOperatorPropagator::operator=(SplitOperatorPropagator&&) noexcept = default;

const std::vector<double>& SplitOperatorPropagator::potential_at(double t) {
  return samples_.at(t, [&](double time, std::vector<double>& v) { path_.sample(time, v); });
}

// Least recently used first: a hit moves to the back, so the phases of the last few lookups
// stay (moving a vector keeps its data pointer).
const std::vector<std::complex<double>>& SplitOperatorPropagator::kinetic_phase(double dt) {
  for (auto k = kinetic_phases_.begin(); k != kinetic_phases_.end(); ++k)
    if (k->dt == dt) {
      std::rotate(k, k + 1, kinetic_phases_.end());
      return kinetic_phases_.back().phase;
    }
  if (kinetic_phases_.size() >= 4) kinetic_phases_.erase(kinetic_phases_.begin());
  KineticPhase k{dt, std::vector<std::complex<double>>(kinetic_.size())};
  for (std::size_t j = 0; j < kinetic_.size(); ++j) k.phase[j] = std::polar(normalisation_, -kinetic_[j] * dt);
  kinetic_phases_.push_back(std::move(k));
  return kinetic_phases_.back().phase;
}

double potential_kick(const std::vector<double>& v, double dt, std::vector<std::complex<double>>& kick) {
  kick.resize(v.size());
  phase_row(v.data(), dt / 2, kick.data(), v.size());
  double lo = v[0], hi = v[0];
  for (const double x : v) {
    lo = std::min(lo, x);
    hi = std::max(hi, x);
  }
  return (hi - lo) * std::abs(dt) / 2;
}

void SplitOperatorPropagator::strang(State& state, double t, double dt) {
  kicks_.update(t, dt, [&](double time) -> const std::vector<double>& { return potential_at(time); });
  max_phase_ = std::max(max_phase_, kicks_.spread());
  pass_.apply(state, kicks_.before(), kinetic_phase(dt).data(), kicks_.after());
}

int SplitOperatorPropagator::chunk_substeps() const {
  // kicks of a chunk near 1 MiB, at most 64 substeps, a whole number of steps
  const int per_step = order_ == SplitOrder::strang ? 1 : 3;
  const std::size_t budget = (std::size_t(1) << 20) / (path_.grid().size() * sizeof(complex));
  const int substeps = int(std::clamp<std::size_t>(budget, 1, 64));
  return std::max(1, substeps / per_step) * per_step;
}

void SplitOperatorPropagator::steps(State& state, double t_begin, double t_end, int total, int first, int count) {
  TRAPWORK_EXPECT(state.rows() == Eigen::Index(path_.grid().size()) && state.cols() == columns_,
                  "SplitOperatorPropagator::steps: state is not grid points x columns");
  TRAPWORK_EXPECT(total >= 1 && first >= 0 && count >= 0 && first + count <= total,
                  "SplitOperatorPropagator::steps: steps outside the subdivision");
  const std::size_t n = path_.grid().size();
  const bool fourth = order_ == SplitOrder::fourth;
  const int per_step = fourth ? 3 : 1, chunk = chunk_substeps();
  const double dt = (t_end - t_begin) / total;
  // nominal substep lengths of one step and their kinetic phases (kinetic_phase keeps the
  // last few looked up, so the pointers stay valid)
  const double g1 = triple_jump_g1(), g0 = triple_jump_g0();
  const double h[3] = {fourth ? g1 * dt : dt, g0 * dt, g1 * dt};
  const complex* phase[3];
  for (int k = 0; k < per_step; ++k) phase[k] = kinetic_phase(h[k]).data();
  // two slots of chunk kicks: while the blocks go through one chunk, the calling thread
  // computes the next chunk's kicks into the other (pipelined; the same numbers either way)
  const std::size_t rows = std::size_t(chunk + 1);
  chunk_kicks_.resize(2 * rows * n);
  kick_rows_.resize(2 * rows);
  kinetic_rows_.resize(2 * rows);
  max_phase_ = 0;
  // the kicks and kinetic phases of steps begin .. end - 1 into slot `slot`; returns the substeps
  auto fill = [&](int begin, int end, int slot) {
    const int substeps = (end - begin) * per_step;
    const std::size_t base = std::size_t(slot) * rows;
    // boundary b of the chunk: time, and the lengths of the substeps before and after it
    int b = 0;
    auto kick = [&](int step, double t, double before, double after) {
      try {
        path_.sample(t, chunk_samples_);
      } catch (NonFinitePotentialError& e) {
        e.set_step(step + 1, total, subdivision_time(t_begin, t_end, total, step + 1));
        throw;
      } catch (const PhysicsError& e) {
        throw StepError(step, e.what());
      }
      complex* row = chunk_kicks_.data() + (base + std::size_t(b)) * n;
      const double w = (before + after) / 2;
      phase_row(chunk_samples_.data(), w, row, n);
      double lo = chunk_samples_[0], hi = chunk_samples_[0];
      for (const double v : chunk_samples_) {
        lo = std::min(lo, v);
        hi = std::max(hi, v);
      }
      max_phase_ = std::max(max_phase_, (hi - lo) * std::max(std::abs(before), std::abs(after)) / 2);
      kick_rows_[base + std::size_t(b)] = row;
      if (b < substeps) kinetic_rows_[base + std::size_t(b)] = phase[b % per_step];
      ++b;
    };
    kick(begin, subdivision_time(t_begin, t_end, total, begin), 0, h[0]);
    for (int i = begin; i < end; ++i) {
      const double t = subdivision_time(t_begin, t_end, total, i), t_next = subdivision_time(t_begin, t_end, total, i + 1);
      const double step_dt = t_next - t;
      max_phase_ = std::max(max_phase_, path_.grid().max_kinetic() * std::abs(step_dt));
      if (fourth) {  // the inner boundaries of the triple jump, at triple_jump's times
        kick(i, t + g1 * step_dt, h[0], h[1]);
        kick(i, t + (g1 + g0) * step_dt, h[1], h[2]);
      }
      kick(i, t_next, h[per_step - 1], i + 1 < end ? h[0] : 0);
    }
    return substeps;
  };
  const int last = first + count;
  auto chunk_end = [&](int begin) { return std::min(last, begin + chunk / per_step); };
  if (count == 0) return;
  int end = chunk_end(first), slot = 0;
  int substeps = fill(first, end, slot);
  for (;;) {
    const int next_end = chunk_end(end);
    int next_substeps = 0;
    std::exception_ptr failure;
    // a failure in the next chunk's kicks is raised once this chunk has run: the state is then
    // at the start of the chunk where it was found
    const std::function<void()> meanwhile = [&] {
      try {
        next_substeps = fill(end, next_end, 1 - slot);
      } catch (...) {
        failure = std::current_exception();
      }
    };
    const std::size_t base = std::size_t(slot) * rows;
    pass_.apply_many(state, substeps, kick_rows_.data() + base, kinetic_rows_.data() + base,
                     end < last ? meanwhile : std::function<void()>{});
    if (failure) std::rethrow_exception(failure);
    if (end >= last) return;
    end = next_end;
    substeps = next_substeps;
    slot = 1 - slot;
  }
}

void SplitOperatorPropagator::step(State& state, double t, double dt) {
  TRAPWORK_EXPECT(state.rows() == Eigen::Index(path_.grid().size()) && state.cols() == columns_,
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
                                           OdeTolerances tolerances, double arithmetic_limit)
    : path_(std::move(path)), energies_(reference.energies), v_reference_(std::move(v_reference)),
      tolerances_(tolerances), arithmetic_limit_(arithmetic_limit) {
  TRAPWORK_EXPECT(reference.states.rows() == Eigen::Index(path_.grid().size()) &&
                      v_reference_.size() == path_.grid().size(),
                  "EigenbasisPropagator: reference spectrum or potential not on the path's grid");
  basis_ = reference.states * std::sqrt(path_.grid().spacing());
  density_ = basis_.rowwise().squaredNorm();
  shapes_.resize(basis_.rows(), 0);
  shape_limit_ = tolerances_.absolute / (100 * std::max(path_.protocol().duration(), 1.0));
}

// Every 4096 evaluations: the evaluations so far over the time covered, projected to the
// whole duration. A 1e30 s protocol otherwise ran on for ever (adaptive steps of the order of
// the inverse energy range); at 6e9 evaluations (1e9 Dormand-Prince steps) a run takes days.
void EigenbasisPropagator::check_pace(double t) {
  constexpr double most = 6e9;
  if (pace_calls_++ == 0) pace_start_ = t;
  if (pace_calls_ % 4096 != 0) return;
  const double tau = path_.protocol().duration(), covered = std::abs(t - pace_start_);
  const double projected = covered > 0 ? double(pace_calls_) * (tau / covered) : HUGE_VAL;
  if (projected > most)
    throw PhysicsError("eigenbasis ODE: at its pace so far (" + std::to_string(pace_calls_) +
                       " evaluations of the coupling over " + format_number(covered / tau) +
                       " of the protocol's duration) the run would need about " + format_number(projected) +
                       " evaluations, more than the " + format_number(most) +
                       " a run may take: shorten [protocol] duration");
}

EigenbasisPropagator::State EigenbasisPropagator::coefficients(const Eigen::MatrixXcd& grid_states) const {
  return basis_.transpose().cast<std::complex<double>>() * grid_states * std::sqrt(path_.grid().spacing());
}

Eigen::MatrixXcd EigenbasisPropagator::grid_states(const State& c) const {
  return basis_.cast<std::complex<double>>() * c / std::sqrt(path_.grid().spacing());
}

// M(t) = sum_r f_r M_r when the remainder of dV outside the shapes is below the limit; else
// the remainder becomes a shape (two Gram-Schmidt passes), or, with 64 shapes, M is formed
// directly.
void EigenbasisPropagator::matrix_at(double t, Eigen::MatrixXd& m) {
  const Eigen::Index n = basis_.rows(), k = basis_.cols();
  check_pace(t);
  path_.sample(t, v_);
  dv_.resize(n);
  for (Eigen::Index j = 0; j < n; ++j) dv_[j] = v_[std::size_t(j)] - v_reference_[std::size_t(j)];
  // rounding floor: dV is a difference of potentials, rounded relative to V itself
  double size = 0;
  for (Eigen::Index j = 0; j < n; ++j) size += std::abs(v_[std::size_t(j)]) * density_[j];
  const double limit = std::max(shape_limit_, 1000 * std::numeric_limits<double>::epsilon() * size);
  // the remainder of dV outside the shapes (member scratch: no allocation per evaluation)
  Eigen::VectorXd& rem = rem_;
  rem = dv_;
  for (int pass = 0; pass < 2 && shapes_.cols() > 0; ++pass) {
    f_.noalias() = shapes_.transpose() * rem;
    rem.noalias() -= shapes_ * f_;
  }
  arithmetic_ += 8.0 * double(n * shapes_.cols()) + 10.0 * double(n);
  if (rem.cwiseAbs().dot(density_) > limit) {
    if (shapes_.cols() >= 64) {
      ++direct_evaluations_;
      m.noalias() = basis_.transpose() * (dv_.asDiagonal() * basis_);
      arithmetic_ += 2.0 * double(n * k * k);
      return;
    }
    const Eigen::VectorXd shape = rem / rem.norm();
    shapes_.conservativeResize(Eigen::NoChange, shapes_.cols() + 1);
    shapes_.col(shapes_.cols() - 1) = shape;
    shape_matrices_.push_back(basis_.transpose() * (shape.asDiagonal() * basis_));
    arithmetic_ += 2.0 * double(n * k * k);
  }
  f_.noalias() = shapes_.transpose() * dv_;
  m.setZero(k, k);
  for (Eigen::Index r = 0; r < f_.size(); ++r) m += f_[r] * shape_matrices_[std::size_t(r)];
  arithmetic_ += 2.0 * double(n * f_.size()) + 2.0 * double(k * k * f_.size());
}

void EigenbasisPropagator::step(State& state, double t, double dt) {
  const Eigen::Index k = basis_.cols(), cols = state.cols();
  TRAPWORK_EXPECT(state.rows() == k, "EigenbasisPropagator::step: state rows != basis size");
  if (dt == 0) return;
  using Vector = std::vector<double>;
  using Complex = std::complex<double>;
  Vector x(std::size_t(2 * k * cols));
  Eigen::Map<Eigen::MatrixXcd>(reinterpret_cast<Complex*>(x.data()), k, cols) = state;
  Eigen::MatrixXd m(k, k), re(k, cols), im(k, cols), b_re(k, cols), b_im(k, cols);
  Eigen::VectorXcd phase(k);
  // Interaction picture from t: c = exp(-i E s) a, da/dt = -i exp(i E s) M(t) c.
  auto rhs = [&](const Vector& y, Vector& dydt, double time) {
    ++evaluations_;
    matrix_at(time, m);
    const double s = time - t;
    for (Eigen::Index i = 0; i < k; ++i) phase[i] = std::polar(1.0, -energies_[i] * s);
    Eigen::Map<const Eigen::MatrixXcd> a(reinterpret_cast<const Complex*>(y.data()), k, cols);
    b_re = (phase.asDiagonal() * a).real();  // plain matrices for the products (no temporaries)
    b_im = (phase.asDiagonal() * a).imag();
    re.noalias() = m * b_re;
    im.noalias() = m * b_im;
    Eigen::Map<Eigen::MatrixXcd> da(reinterpret_cast<Complex*>(dydt.data()), k, cols);
    da = phase.conjugate().asDiagonal() * (Complex(0, -1) * (re.cast<Complex>() + Complex(0, 1) * im.cast<Complex>()));
    arithmetic_ += 4.0 * double(k * k * cols) + 16.0 * double(k * cols);
    if (arithmetic_limit_ > 0) {
      // projected to the whole protocol from the part behind (from 10 % of it on): a run that
      // would need twice the limit stops there, not after spending the limit
      const double done = time / std::max(path_.protocol().duration(), 1e-300);
      const bool projected = done >= 0.1 && arithmetic_ / done > 2 * arithmetic_limit_;
      if (arithmetic_ > arithmetic_limit_ || projected)
        throw ArithmeticLimitReached("eigenbasis ODE: estimated arithmetic " +
                                     std::string(projected ? "projected to pass twice" : "passed") + " the limit of " +
                                     format_number(arithmetic_limit_) + " operations at t = " + format_number(time),
                                     arithmetic_, projected);
    }
  };
  integrate_controlled(rhs, x, t, dt, tolerances_, step_hint_);
  const double s = dt;
  for (Eigen::Index i = 0; i < k; ++i) phase[i] = std::polar(1.0, -energies_[i] * s);
  state = phase.asDiagonal() * Eigen::Map<Eigen::MatrixXcd>(reinterpret_cast<Complex*>(x.data()), k, cols);
}

Eigen::MatrixXd EigenbasisPropagator::project_function(const Eigen::VectorXd& w) const {
  TRAPWORK_EXPECT(w.size() == basis_.rows(), "EigenbasisPropagator::project_function: w not on the grid");
  return basis_.transpose() * (w.asDiagonal() * basis_);
}

void integrate_controlled(const OdeRhs& rhs, std::vector<double>& x, double t, double dt,
                          const OdeTolerances& tolerances, double& step_hint) {
  namespace odeint = boost::numeric::odeint;
  auto stepper = odeint::make_controlled(tolerances.absolute, tolerances.relative,
                                         odeint::runge_kutta_dopri5<std::vector<double>>());
  const double end = t + dt, sign = dt > 0 ? 1.0 : -1.0;
  double time = t, h = sign * (step_hint > 0 ? step_hint : std::abs(dt) / 4);
  for (int rejected = 0; sign * (end - time) > 0;) {
    const bool last = std::abs(h) >= std::abs(end - time);
    const double free = h;
    if (last) h = end - time;
    if (stepper.try_step(rhs, x, time, h) == odeint::success) {
      rejected = 0;
      step_hint = last ? std::max(std::abs(free), std::abs(h)) : std::abs(h);
      if (last) time = end;
    } else if (++rejected > 200) {
      throw PhysicsError("eigenbasis ODE: 200 rejected steps in a row at t = " + format_number(time) +
                         " (step " + format_number(std::abs(h)) + "): the potential may be singular in time");
    }
  }
}

// ---- projections -------------------------------------------------------------------------

Eigen::MatrixXcd project(const Spectrum& onto, const Eigen::MatrixXcd& states, Eigen::Index levels) {
  TRAPWORK_EXPECT(onto.states.rows() == states.rows(), "project: state size != spectrum grid size");
  const Eigen::Index rows = levels < 0 ? onto.states.cols() : std::min(levels, onto.states.cols());
  // two real products (half the arithmetic of casting the real states to complex)
  const auto s = onto.states.leftCols(rows).transpose();
  const Eigen::MatrixXd re = s * states.real(), im = s * states.imag();
  Eigen::MatrixXcd out(rows, states.cols());
  out.real() = re * onto.grid.spacing();
  out.imag() = im * onto.grid.spacing();
  return out;
}

Eigen::MatrixXcd sudden_amplitudes(const Spectrum& initial, const Spectrum& final) {
  TRAPWORK_EXPECT(initial.states.rows() == final.states.rows(), "sudden_amplitudes: spectra on different grids");
  return (final.states.transpose() * initial.states * initial.grid.spacing()).cast<std::complex<double>>();
}

}  // namespace trapwork
