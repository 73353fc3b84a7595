// `mpirun -n P trapwork sweep ...`: the points of a sweep shared among MPI ranks
// (sweep_points.hpp). Built with MPI when CMake finds it (TRAPWORK_MPI); without it a
// process is always rank 0 of 1 and the sharing functions are never called.
//
// Messages (MPI_COMM_WORLD): a worker thread asks rank 0 for a point (tag ask) and waits for
// the answer (tag point: the point's number, or -1 when none is left); it sends each finished
// point as its exact line of sweep-points.txt (tag row); each rank ends with tag done carrying
// the seconds its threads computed. Rank 0 polls with MPI_Iprobe and sleeps 1 ms between
// polls, so that it takes little of a core, and computes points itself on its own thread(s),
// which take them from the same counter and call no MPI.
#include <chrono>
#include <cstdlib>
#include <iostream>
#include <algorithm>
#include <atomic>
#include <exception>
#include <map>
#include <mutex>
#include <thread>

#include "solver/errors.hpp"
#include "solver/tool/sweep_points.hpp"

#ifdef TRAPWORK_MPI
#include <mpi.h>
#endif

namespace trapwork {

#ifdef TRAPWORK_MPI

namespace {
enum Tag : int { ask = 1, point = 2, row = 3, done = 4 };

// Launched by mpirun/mpiexec: Open MPI, MPICH (hydra) and PMIx launchers set these.
bool launched_by_mpirun() {
  for (const char* name : {"OMPI_COMM_WORLD_SIZE", "PMI_SIZE", "PMIX_RANK"})
    if (std::getenv(name) != nullptr) return true;
  return false;
}

void check(int code, const char* what) {
  if (code != MPI_SUCCESS) throw std::runtime_error(std::string("MPI error in ") + what);
}
}  // namespace

MpiWorld::MpiWorld() {
  if (!launched_by_mpirun()) return;
  int provided = 0;
  check(MPI_Init_thread(nullptr, nullptr, MPI_THREAD_SERIALIZED, &provided), "MPI_Init_thread");
  started_ = true;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank_);
  MPI_Comm_size(MPI_COMM_WORLD, &size_);
  // The point threads of a rank call MPI one at a time (under a lock): MPI_THREAD_SERIALIZED.
  if (provided < MPI_THREAD_SERIALIZED && size_ > 1) {
    std::cerr << "trapwork: error: this MPI library does not allow calls from several threads (one at a time); "
                 "run without mpirun\n";
    MPI_Abort(MPI_COMM_WORLD, 2);
  }
}

MpiWorld::~MpiWorld() {
  if (started_) MPI_Finalize();
}

void MpiWorld::abort(int code) const {
  if (started_) MPI_Abort(MPI_COMM_WORLD, code);
  std::exit(code);
}

ClusterSweepOutcome coordinate_sweep(const MpiWorld& world, const Scenario& scenario, const SweepOptions& options) {
  TRAPWORK_EXPECT(world.rank() == 0 && world.size() > 1, "coordinate_sweep: rank 0 of two or more");
  const std::vector<std::size_t> todo = options.todo.value_or(std::vector<std::size_t>{});
  ClusterSweepOutcome result;
  result.run.scenario = scenario;
  result.run.jobs = options.jobs > 0 ? std::size_t(options.jobs) : std::max(1u, std::thread::hardware_concurrency());
  result.points_per_rank.assign(std::size_t(world.size()), 0);
  result.busy_seconds.assign(std::size_t(world.size()), 0.0);
  std::mutex handing;   // guards `next`: the points are handed to the ranks and to rank 0's own threads
  std::mutex recording; // one row recorded at a time (options.on_point, result), from either source
  std::size_t next = 0;
  auto take = [&]() -> std::optional<std::size_t> {
    std::lock_guard lock(handing);
    if (next < todo.size()) return todo[next++];
    return std::nullopt;
  };
  // A row, from a rank's message or from rank 0's own threads, as its exact line (the same path
  // for both, so a row is the same wherever it was computed).
  auto record = [&](int source, const std::string& line) {
    const auto parsed = parse_sweep_point(line, *scenario.sweep);
    if (!parsed) throw std::runtime_error("rank " + std::to_string(source) + " sent a damaged point: " + line);
    std::lock_guard lock(recording);
    result.run.rows.push_back(*parsed);
    ++result.points_per_rank[std::size_t(source)];
    if (options.on_point) options.on_point(parsed->first, parsed->second);
  };

  // Rank 0 computes too: sweep_task on its own thread(s), taking points from the same counter.
  // They call no MPI (MPI_THREAD_SERIALIZED: this thread alone talks to the other ranks).
  std::map<std::size_t, std::chrono::steady_clock::time_point> started;  // guarded by `handing`
  double own_busy = 0;                                                    // guarded by `recording`
  std::atomic<bool> own_done{false};
  std::exception_ptr own_failure;
  // For tests only, as on the other ranks (serve_sweep): end this process when given this point.
  std::optional<std::size_t> abort_at;
  if (const char* text = std::getenv("TRAPWORK_TEST_ABORT_AT_POINT")) abort_at = std::size_t(std::strtoull(text, nullptr, 10));
  std::thread own([&] {
    try {
      SweepOptions mine;
      mine.jobs = options.jobs;
      mine.next = [&]() -> std::optional<std::size_t> {
        const auto i = take();
        if (i && abort_at && *i == *abort_at) std::abort();
        std::lock_guard lock(handing);
        if (i) started[*i] = std::chrono::steady_clock::now();
        return i;
      };
      mine.on_point = [&](std::size_t i, const SweepRow& r) {
        std::chrono::steady_clock::time_point begun;
        {
          std::lock_guard lock(handing);
          begun = started[i];
        }
        record(0, sweep_point_line(i, r));
        std::lock_guard lock(recording);
        own_busy += std::chrono::duration<double>(std::chrono::steady_clock::now() - begun).count();
      };
      (void)sweep_task(scenario, mine);
    } catch (...) {
      own_failure = std::current_exception();
    }
    own_done = true;
  });

  int ended = 0;
  try {
    while (ended < world.size() - 1 || !own_done) {
      int flag = 0;
      MPI_Status status;
      check(MPI_Iprobe(MPI_ANY_SOURCE, MPI_ANY_TAG, MPI_COMM_WORLD, &flag, &status), "MPI_Iprobe");
      if (!flag) {
        std::this_thread::sleep_for(std::chrono::milliseconds(1));
        continue;
      }
      const int source = status.MPI_SOURCE;
      if (status.MPI_TAG == ask) {
        int unused = 0;
        check(MPI_Recv(&unused, 1, MPI_INT, source, ask, MPI_COMM_WORLD, MPI_STATUS_IGNORE), "MPI_Recv");
        const auto i = take();
        long long answer = i ? static_cast<long long>(*i) : -1;
        check(MPI_Send(&answer, 1, MPI_LONG_LONG, source, point, MPI_COMM_WORLD), "MPI_Send");
      } else if (status.MPI_TAG == row) {
        int length = 0;
        MPI_Get_count(&status, MPI_CHAR, &length);
        std::string line(std::size_t(length), '\0');
        check(MPI_Recv(line.data(), length, MPI_CHAR, source, row, MPI_COMM_WORLD, MPI_STATUS_IGNORE), "MPI_Recv");
        record(source, line);
      } else if (status.MPI_TAG == done) {
        double seconds = 0;
        check(MPI_Recv(&seconds, 1, MPI_DOUBLE, source, done, MPI_COMM_WORLD, MPI_STATUS_IGNORE), "MPI_Recv");
        result.busy_seconds[std::size_t(source)] = seconds;
        ++ended;
      } else {
        throw std::runtime_error("unexpected MPI message (tag " + std::to_string(status.MPI_TAG) + ") from rank " +
                                 std::to_string(source));
      }
    }
  } catch (...) {
    {  // rank 0's threads stop at their next point; the caller ends the other ranks
      std::lock_guard lock(handing);
      next = todo.size();
    }
    own.join();
    throw;
  }
  own.join();
  if (own_failure) std::rethrow_exception(own_failure);
  result.busy_seconds[0] = own_busy;
  if (next < todo.size() || result.run.rows.size() != todo.size())
    throw std::runtime_error("the ranks ended with " + std::to_string(todo.size() - result.run.rows.size()) +
                             " point(s) not done");
  return result;
}

void serve_sweep(const MpiWorld& world, const Scenario& scenario, int jobs) {
  TRAPWORK_EXPECT(world.rank() > 0, "serve_sweep: a rank other than 0");
  // For tests only: end this process as a killed rank would, when given this point.
  std::optional<std::size_t> abort_at;
  if (const char* text = std::getenv("TRAPWORK_TEST_ABORT_AT_POINT")) abort_at = std::size_t(std::strtoull(text, nullptr, 10));
  std::mutex mpi;  // one MPI call at a time (MPI_THREAD_SERIALIZED)
  // Busy time: from handing a point to a thread to its row, summed over the points (guarded by `mpi`).
  std::map<std::size_t, std::chrono::steady_clock::time_point> started;
  double busy = 0;
  SweepOptions options;
  options.jobs = jobs;
  options.next = [&]() -> std::optional<std::size_t> {
    std::lock_guard lock(mpi);
    int unused = 0;
    long long answer = -1;
    check(MPI_Send(&unused, 1, MPI_INT, 0, ask, MPI_COMM_WORLD), "MPI_Send");
    check(MPI_Recv(&answer, 1, MPI_LONG_LONG, 0, point, MPI_COMM_WORLD, MPI_STATUS_IGNORE), "MPI_Recv");
    if (answer < 0) return std::nullopt;
    if (abort_at && std::size_t(answer) == *abort_at) std::abort();
    started[std::size_t(answer)] = std::chrono::steady_clock::now();
    return std::size_t(answer);
  };
  options.on_point = [&](std::size_t i, const SweepRow& r) {
    const std::string line = sweep_point_line(i, r);
    std::lock_guard lock(mpi);
    busy += std::chrono::duration<double>(std::chrono::steady_clock::now() - started[i]).count();
    check(MPI_Send(line.data(), int(line.size()), MPI_CHAR, 0, row, MPI_COMM_WORLD), "MPI_Send");
  };
  (void)sweep_task(scenario, options);
  std::lock_guard lock(mpi);
  check(MPI_Send(&busy, 1, MPI_DOUBLE, 0, done, MPI_COMM_WORLD), "MPI_Send");
}

PartSharing mpi_part_sharing(const MpiWorld& world) {
  PartSharing sharing;
  sharing.process = world.rank();
  sharing.processes = world.size();
  if (world.size() < 2) return sharing;
  int injected = -1;  // for tests only
  if (const char* text = std::getenv("TRAPWORK_TEST_FAIL_RANK")) injected = std::atoi(text);
  const int rank = world.rank(), size = world.size();
  sharing.exchange = [rank, size, injected](std::vector<std::vector<double>>& parts, std::size_t first,
                                            std::size_t width, const std::string* failure) mutable {
    std::string message = failure ? (failure->empty() ? std::string("an error") : *failure) : std::string();
    if (rank == injected && message.empty()) message = "a failure injected for a test (TRAPWORK_TEST_FAIL_RANK)";
    injected = -1;  // at the first exchange only
    // Every rank's state: the length of its error message (0: its parts are done), and which
    // parts of what width it exchanges (the same on every rank, or the ranks disagree).
    constexpr std::size_t n = 4;
    long long state[n] = {static_cast<long long>(message.size()), static_cast<long long>(first),
                          static_cast<long long>(parts.size()), static_cast<long long>(width)};
    std::vector<long long> states(n * std::size_t(size));
    check(MPI_Allgather(state, int(n), MPI_LONG_LONG, states.data(), int(n), MPI_LONG_LONG, MPI_COMM_WORLD),
          "MPI_Allgather");
    std::string failed;
    for (int r = 0; r < size; ++r) {
      const long long length = states[n * std::size_t(r)];
      if (length == 0) continue;
      std::string text = r == rank ? message : std::string(std::size_t(length), '\0');
      check(MPI_Bcast(text.data(), int(length), MPI_CHAR, r, MPI_COMM_WORLD), "MPI_Bcast");
      failed += (failed.empty() ? "" : "; ") + std::string("rank ") + std::to_string(r) + " of " +
                std::to_string(size) + " failed: " + text;
    }
    if (!failed.empty()) throw std::runtime_error(failed);
    auto parts_of = [&](int r) {
      const std::size_t at = n * std::size_t(r);
      return "parts " + std::to_string(states[at + 1]) + " to " + std::to_string(states[at + 1] + states[at + 2] - 1) +
             " of " + std::to_string(states[at + 3]) + " numbers";
    };
    for (int r = 1; r < size; ++r)
      if (parts_of(r) != parts_of(0))
        throw std::runtime_error("the ranks disagree on the parts they exchange (rank 0: " + parts_of(0) + ", rank " +
                                 std::to_string(r) + ": " + parts_of(r) + ")");
    // Each rank's parts in turn, in the order of their numbers (owner of part i: i % size).
    std::vector<double> buffer;
    for (int root = 0; root < size; ++root) {
      std::vector<std::size_t> owned;
      for (std::size_t k = 0; k < parts.size(); ++k)
        if (int((first + k) % std::size_t(size)) == root) owned.push_back(k);
      if (owned.empty()) continue;
      buffer.assign(owned.size() * width, 0.0);
      if (root == rank)
        for (std::size_t j = 0; j < owned.size(); ++j)
          std::copy(parts[owned[j]].begin(), parts[owned[j]].end(), buffer.begin() + std::ptrdiff_t(j * width));
      check(MPI_Bcast(buffer.data(), int(buffer.size()), MPI_DOUBLE, root, MPI_COMM_WORLD), "MPI_Bcast");
      if (root != rank)
        for (std::size_t j = 0; j < owned.size(); ++j)
          parts[owned[j]].assign(buffer.begin() + std::ptrdiff_t(j * width),
                                 buffer.begin() + std::ptrdiff_t((j + 1) * width));
    }
  };
  return sharing;
}

#else  // without MPI: one process

MpiWorld::MpiWorld() = default;
MpiWorld::~MpiWorld() = default;
void MpiWorld::abort(int code) const { std::exit(code); }
ClusterSweepOutcome coordinate_sweep(const MpiWorld&, const Scenario&, const SweepOptions&) {
  throw std::logic_error("coordinate_sweep: this trapwork was built without MPI");
}
void serve_sweep(const MpiWorld&, const Scenario&, int) {
  throw std::logic_error("serve_sweep: this trapwork was built without MPI");
}
PartSharing mpi_part_sharing(const MpiWorld&) { return {}; }

#endif

}  // namespace trapwork
