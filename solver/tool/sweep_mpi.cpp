// `mpirun -n P trapwork sweep ...`: the points of a sweep shared among MPI ranks
// (sweep_points.hpp). Built with MPI when CMake finds it (TRAPWORK_MPI); without it a
// process is always rank 0 of 1 and the sharing functions are never called.
//
// Messages (MPI_COMM_WORLD): a worker thread asks rank 0 for a point (tag ask) and waits for
// the answer (tag point: the point's number, or -1 when none is left); it sends each finished
// point as its exact line of sweep-points.txt (tag row); each rank ends with tag done carrying
// the seconds its threads computed. Rank 0 polls with MPI_Iprobe and sleeps 1 ms between
// polls, so that it does not take a core from the workers.
#include <chrono>
#include <cstdlib>
#include <iostream>
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

SweepWorld::SweepWorld() {
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

SweepWorld::~SweepWorld() {
  if (started_) MPI_Finalize();
}

void SweepWorld::abort(int code) const {
  if (started_) MPI_Abort(MPI_COMM_WORLD, code);
  std::exit(code);
}

ClusterSweepOutcome coordinate_sweep(const SweepWorld& world, const Scenario& scenario, const SweepOptions& options) {
  TRAPWORK_EXPECT(world.rank() == 0 && world.size() > 1, "coordinate_sweep: rank 0 of two or more");
  const std::vector<std::size_t> todo = options.todo.value_or(std::vector<std::size_t>{});
  ClusterSweepOutcome result;
  result.run.scenario = scenario;
  result.run.jobs = options.jobs > 0 ? std::size_t(options.jobs) : std::max(1u, std::thread::hardware_concurrency());
  result.points_per_rank.assign(std::size_t(world.size()), 0);
  result.busy_seconds.assign(std::size_t(world.size()), 0.0);
  std::size_t next = 0;
  int ended = 0;
  while (ended < world.size() - 1) {
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
      long long answer = next < todo.size() ? static_cast<long long>(todo[next++]) : -1;
      check(MPI_Send(&answer, 1, MPI_LONG_LONG, source, point, MPI_COMM_WORLD), "MPI_Send");
    } else if (status.MPI_TAG == row) {
      int length = 0;
      MPI_Get_count(&status, MPI_CHAR, &length);
      std::string line(std::size_t(length), '\0');
      check(MPI_Recv(line.data(), length, MPI_CHAR, source, row, MPI_COMM_WORLD, MPI_STATUS_IGNORE), "MPI_Recv");
      const auto parsed = parse_sweep_point(line, *scenario.sweep);
      if (!parsed) throw std::runtime_error("rank " + std::to_string(source) + " sent a damaged point: " + line);
      result.run.rows.push_back(*parsed);
      ++result.points_per_rank[std::size_t(source)];
      if (options.on_point) options.on_point(parsed->first, parsed->second);
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
  if (next < todo.size() || result.run.rows.size() != todo.size())
    throw std::runtime_error("the ranks ended with " + std::to_string(todo.size() - result.run.rows.size()) +
                             " point(s) not done");
  return result;
}

void serve_sweep(const SweepWorld& world, const Scenario& scenario, int jobs) {
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

#else  // without MPI: one process

SweepWorld::SweepWorld() = default;
SweepWorld::~SweepWorld() = default;
void SweepWorld::abort(int code) const { std::exit(code); }
ClusterSweepOutcome coordinate_sweep(const SweepWorld&, const Scenario&, const SweepOptions&) {
  throw std::logic_error("coordinate_sweep: this trapwork was built without MPI");
}
void serve_sweep(const SweepWorld&, const Scenario&, int) {
  throw std::logic_error("serve_sweep: this trapwork was built without MPI");
}

#endif

}  // namespace trapwork
