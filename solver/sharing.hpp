#pragma once
// Independent parts of one computation (the realisations of a noise run, the members of a
// robust design) shared among several processes. The library does no communication: a front
// end (the command line's MPI layer, solver/tool/run_mpi.cpp) fills `exchange`, and every
// process runs the same computation with the same inputs, computes the parts it owns and
// calls `exchange`, after which every process holds every part. The owner of part i is
// i % processes, a pure function of the part's number, and every sum over parts runs in the
// order of their numbers, so the results are the same, bit for bit, for any number of
// processes.
#include <cstddef>
#include <functional>
#include <string>
#include <vector>

namespace trapwork {

struct PartSharing {
  int process = 0, processes = 1;
  // Called by every process with the same parts, numbered first, first + 1, ...: each part
  // `width` doubles; this process has filled the parts it owns (mine), and exchange fills in
  // the others. `failure` is this process's error message when computing its parts failed
  // (nullptr otherwise): every process then learns of it, and exchange throws on every process
  // (naming the processes that failed, with their messages), so none waits for a part that
  // will not come. Empty: one process.
  std::function<void(std::vector<std::vector<double>>& parts, std::size_t first, std::size_t width,
                     const std::string* failure)>
      exchange;
  bool shared() const { return processes > 1 && static_cast<bool>(exchange); }
  bool mine(std::size_t part) const { return !shared() || int(part % std::size_t(processes)) == process; }
};

// Parts first .. first + count - 1 (each `width` doubles, compute(i) on this thread) computed
// by their owners and exchanged: the result holds all of them, in order, on every process.
// An error of this process goes to the exchange (which throws on every process), or with one
// process is rethrown as it was.
std::vector<std::vector<double>> shared_parts(const PartSharing& sharing, std::size_t first, std::size_t count,
                                              std::size_t width,
                                              const std::function<std::vector<double>(std::size_t)>& compute);

// Runs `compute` inside a try, then the exchange of `parts` with this process's error, if any,
// then rethrows that error: the pattern of shared_parts for parts computed otherwise (threads).
void exchange_parts(const PartSharing& sharing, std::vector<std::vector<double>>& parts, std::size_t first,
                    std::size_t width, const std::function<void()>& compute);

}  // namespace trapwork
