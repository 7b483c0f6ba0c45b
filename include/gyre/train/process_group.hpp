#pragma once
// The processes of one training job. A plain `gyre train` is a group of one; a build configured
// with -DGYRE_WITH_MPI=ON and started by an MPI launcher (`mpirun -np N gyre train ...`) is a
// group of N ranks that exchange gradients through MPI (see src/train/process_group.cpp).
//
// Data-parallel training across ranks keeps the single-process arithmetic: with R ranks of T
// threads, global worker g = rank * T + thread takes examples g, g + R*T, ... of each batch, every
// rank receives every worker's gradient and sums them in worker order, so R ranks of T threads end
// with the same bits as one process with R*T threads.

#include <cstddef>
#include <filesystem>
#include <span>
#include <string>
#include <vector>

namespace gyre::train {

class ProcessGroup {
 public:
  virtual ~ProcessGroup() = default;
  virtual int rank() const noexcept = 0;
  virtual int size() const noexcept = 0;
  /// Every rank passes its bytes; afterwards `all` holds all ranks' bytes concatenated in rank
  /// order and `offsets[r]` (size()+1 entries) where rank r's bytes start. Collective: every rank
  /// must call it the same number of times.
  virtual void all_gather(std::span<const std::byte> mine, std::vector<std::byte>& all,
                          std::vector<std::size_t>& offsets) = 0;
  /// Collective: returns when every rank has called it.
  virtual void barrier() = 0;
};

/// The group this process belongs to. Without an MPI launcher (or in a build without MPI) a group
/// of one. In a build with MPI, started by a launcher, the MPI world (initialised on first call,
/// finalised at exit). Throws gyre::ConfigError when the launcher started several processes but
/// this build cannot talk MPI: they would each train alone into the same run directory.
ProcessGroup& process_group();

/// A group of one: for work that one process does alone even inside an MPI job (each run of a
/// `gyre compare` grid spread over ranks trains on its own rank).
ProcessGroup& local_group();

/// Collective: every rank's `mine`, in rank order.
std::vector<std::string> all_gather_strings(ProcessGroup& group, const std::string& mine);

/// Dynamic work sharing among the ranks of a job (a rank that finishes takes the next piece):
/// claim(name) is true on exactly one rank per name, through an exclusive file create in a
/// directory of this job, PARENT/.claims-<job>, which every rank must see (a shared filesystem
/// across hosts). The constructor is collective and checks that every rank sees the directory.
class RankClaims {
 public:
  RankClaims(ProcessGroup& group, const std::filesystem::path& parent);
  /// True when this rank is the first to claim `name` (a file name) in this job.
  bool claim(const std::string& name);
  /// Collective: waits for every rank, then rank 0 removes the directory.
  void finish();

 private:
  ProcessGroup& group_;
  std::filesystem::path dir_;
};

/// Number of processes an MPI launcher says it started (Open MPI, MPICH/Hydra, MVAPICH and Slurm
/// variables), 1 when none is set.
int launcher_process_count();

/// True when this build can train across MPI ranks (-DGYRE_WITH_MPI=ON).
bool built_with_mpi() noexcept;

}  // namespace gyre::train
