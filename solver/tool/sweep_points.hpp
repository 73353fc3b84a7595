#pragma once
// The records of `trapwork sweep` in its output folder, shared by the single-process run
// (work_command.cpp), the shards and `trapwork merge` (merge_command.cpp) and the MPI run
// (sweep_mpi.cpp): sweep-points.txt (every finished point, exact), sweep.csv made from it, and
// for a shard sweep-shard.txt with the resolved scenario text in sweep-scenario.toml.
#include <cstddef>
#include <filesystem>
#include <optional>
#include <ostream>
#include <string>
#include <utility>
#include <vector>

#include "solver/scenario/scenario.hpp"
#include "solver/sharing.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

// FNV-1a (64 bit, hex) of the resolved scenario text (set_scenario_text: the file with the
// --set changes) and of the sweep's points as read: two runs with the same fingerprint sweep
// the same points of the same scenario.
std::string sweep_fingerprint(const std::string& resolved_text, const Scenario& scenario);
// One point as a line of sweep-points.txt (no newline): its number (0-based), its swept
// values, then its 12 numbers, or "failed" and its message; exact (number_text).
std::string sweep_point_line(std::size_t point, const SweepRow& row);
// The point of such a line, or nothing when the line is damaged or its values are not those of
// that point of `sweep`, bit for bit.
std::optional<std::pair<std::size_t, SweepRow>> parse_sweep_point(const std::string& line, const SweepSpec& sweep);
void write_sweep_points(std::ostream& out, const std::string& fingerprint,
                        const std::vector<std::pair<std::size_t, SweepRow>>& done);
// The finished points of an earlier run of the same scenario. Throws InputError naming the file
// (and line) when it belongs to another scenario or is damaged.
std::vector<std::pair<std::size_t, SweepRow>> read_sweep_points(const std::filesystem::path& file,
                                                                const std::string& fingerprint,
                                                                const SweepSpec& sweep);
// sweep-points.txt, then sweep.csv from it (with the fingerprint comment), each atomically
// (temporary file and rename) into `folder`.
void write_sweep_table(const std::filesystem::path& folder, const Scenario& scenario, const std::string& fingerprint,
                       const std::vector<std::pair<std::size_t, SweepRow>>& done);

// ---- MPI (sweep_mpi.cpp; without MPI in the build: one process, and these never run) --------
// The MPI world of this process: started (MPI_Init_thread) when the build has MPI and the
// process was launched by mpirun/mpiexec (its environment says so), else rank 0 of 1.
// Ended (MPI_Finalize) by the destructor.
class MpiWorld {
 public:
  MpiWorld();
  ~MpiWorld();
  MpiWorld(const MpiWorld&) = delete;
  MpiWorld& operator=(const MpiWorld&) = delete;
  int rank() const { return rank_; }
  int size() const { return size_; }
  // Ends every process of the world after an error on one of them (MPI_Abort with `code`).
  [[noreturn]] void abort(int code) const;

 private:
  int rank_ = 0, size_ = 1;
  bool started_ = false;
};
// What rank 0 saw of an MPI sweep: the outcome (rows in arrival order; jobs: the threads of
// each rank as asked) and, per rank (index 0 is rank 0), the points it computed and the
// seconds its threads spent computing them (summed over its threads).
struct ClusterSweepOutcome {
  SweepOutcome run;
  std::vector<std::size_t> points_per_rank;
  std::vector<double> busy_seconds;
};
// Rank 0 of a world of two or more: hands out the points of options.todo one at a time to the
// ranks that ask (dynamic load balancing) and to its own options.jobs point threads, calls
// options.on_point (one call at a time) as the rows arrive, and returns when every point is
// done and every rank has ended. TRAPWORK_TEST_ABORT_AT_POINT (below) applies to its threads too.
ClusterSweepOutcome coordinate_sweep(const MpiWorld& world, const Scenario& scenario, const SweepOptions& options);
// `trapwork work` with noise realisations and `trapwork design` with a robust design's members:
// every rank runs the same task, and the parts (solver/sharing.hpp) are exchanged over
// MPI_COMM_WORLD, each rank broadcasting its own in turn (a collective: every rank calls it for
// the same parts). A rank whose parts failed sends its message; every rank then throws
// "rank K of P failed: ...". TRAPWORK_TEST_FAIL_RANK=K (for tests only) makes rank K report a
// failure at its first exchange. One rank: no exchange.
PartSharing mpi_part_sharing(const MpiWorld& world);

// Every other rank: sweep_task on `jobs` threads, each asking rank 0 for its next point and
// sending back its row. TRAPWORK_TEST_ABORT_AT_POINT=N (for tests only) aborts the process
// (std::abort) when it is given point N (0-based), as a killed rank would end.
void serve_sweep(const MpiWorld& world, const Scenario& scenario, int jobs);

}  // namespace trapwork
