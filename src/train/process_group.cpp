#include "gyre/train/process_group.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <chrono>
#include <cstdlib>
#include <cstring>
#include <memory>
#include <string>

#include "gyre/core/error.hpp"

#if GYRE_WITH_MPI
#include <mpi.h>
#endif

namespace gyre::train {
namespace {

class LocalGroup final : public ProcessGroup {
 public:
  int rank() const noexcept override { return 0; }
  int size() const noexcept override { return 1; }
  void all_gather(std::span<const std::byte> mine, std::vector<std::byte>& all,
                  std::vector<std::size_t>& offsets) override {
    all.assign(mine.begin(), mine.end());
    offsets = {0, mine.size()};
  }
  void barrier() override {}
};

#if GYRE_WITH_MPI
void check_mpi(int rc, const char* what) {
  if (rc == MPI_SUCCESS) return;
  char text[MPI_MAX_ERROR_STRING];
  int length = 0;
  MPI_Error_string(rc, text, &length);
  throw Error(std::string("MPI ") + what + " failed: " + std::string(text, static_cast<std::size_t>(length)));
}

class MpiGroup final : public ProcessGroup {
 public:
  MpiGroup() {
    int provided = 0;
    // Only the thread that calls the trainer talks MPI; the worker pool never does.
    check_mpi(MPI_Init_thread(nullptr, nullptr, MPI_THREAD_FUNNELED, &provided), "initialisation");
    // A failed call returns an error (turned into a gyre error that ends this rank with a
    // non-zero exit, upon which the launcher stops the job) rather than aborting inside MPI.
    MPI_Comm_set_errhandler(MPI_COMM_WORLD, MPI_ERRORS_RETURN);
    MPI_Comm_rank(MPI_COMM_WORLD, &rank_);
    MPI_Comm_size(MPI_COMM_WORLD, &size_);
    std::atexit([] {
      int finalized = 0;
      MPI_Finalized(&finalized);
      if (!finalized) MPI_Finalize();
    });
  }
  int rank() const noexcept override { return rank_; }
  int size() const noexcept override { return size_; }
  void all_gather(std::span<const std::byte> mine, std::vector<std::byte>& all,
                  std::vector<std::size_t>& offsets) override {
    // Byte counts first (they differ: sparse embedding rows), then the bytes. MPI counts are int,
    // so a step's exchange is limited to 2 GiB per rank (a model far beyond this tool's range).
    if (mine.size() > static_cast<std::size_t>(INT32_MAX)) throw Error("MPI exchange over 2 GiB in one step");
    const int count = static_cast<int>(mine.size());
    counts_.assign(static_cast<std::size_t>(size_), 0);
    check_mpi(MPI_Allgather(&count, 1, MPI_INT, counts_.data(), 1, MPI_INT, MPI_COMM_WORLD),
              "all-gather of sizes");
    displs_.assign(static_cast<std::size_t>(size_), 0);
    offsets.assign(static_cast<std::size_t>(size_) + 1, 0);
    for (int r = 0; r < size_; ++r) {
      const auto i = static_cast<std::size_t>(r);
      offsets[i + 1] = offsets[i] + static_cast<std::size_t>(counts_[i]);
      if (offsets[i + 1] > static_cast<std::size_t>(INT32_MAX))
        throw Error("MPI exchange over 2 GiB in one step");
      displs_[i] = static_cast<int>(offsets[i]);
    }
    all.resize(offsets.back());
    check_mpi(MPI_Allgatherv(mine.data(), count, MPI_BYTE, all.data(), counts_.data(), displs_.data(),
                             MPI_BYTE, MPI_COMM_WORLD),
              "all-gather of gradients");
  }
  void barrier() override { check_mpi(MPI_Barrier(MPI_COMM_WORLD), "barrier"); }

 private:
  int rank_ = 0, size_ = 1;
  std::vector<int> counts_, displs_;
};
#endif

int env_count(const char* name) {
  const char* v = std::getenv(name);
  if (v == nullptr || *v == '\0') return 0;
  char* end = nullptr;
  const long n = std::strtol(v, &end, 10);
  return end != v && n > 0 && n < 1'000'000 ? static_cast<int>(n) : 0;
}

}  // namespace

bool built_with_mpi() noexcept {
#if GYRE_WITH_MPI
  return true;
#else
  return false;
#endif
}

int launcher_process_count() {
  // Open MPI, MPICH/Hydra (PMI), MVAPICH, Slurm's srun: each sets one of these in every process.
  int n = 1;
  for (const char* name :
       {"OMPI_COMM_WORLD_SIZE", "PMI_SIZE", "PMIX_SIZE", "MV2_COMM_WORLD_SIZE", "SLURM_NTASKS"})
    n = std::max(n, env_count(name));
  // srun without an MPI job step still sets SLURM_NTASKS; only trust it with a task id beside it.
  if (n > 1 && env_count("OMPI_COMM_WORLD_SIZE") == 0 && env_count("PMI_SIZE") == 0 &&
      env_count("PMIX_SIZE") == 0 && env_count("MV2_COMM_WORLD_SIZE") == 0 &&
      std::getenv("SLURM_PROCID") == nullptr)
    n = 1;
  return n;
}

std::vector<std::string> all_gather_strings(ProcessGroup& group, const std::string& mine) {
  std::vector<std::byte> all;
  std::vector<std::size_t> offsets;
  group.all_gather(std::as_bytes(std::span(mine.data(), mine.size())), all, offsets);
  std::vector<std::string> out;
  for (int r = 0; r < group.size(); ++r) {
    const auto i = static_cast<std::size_t>(r);
    out.emplace_back(reinterpret_cast<const char*>(all.data()) + offsets[i], offsets[i + 1] - offsets[i]);
  }
  return out;
}

RankClaims::RankClaims(ProcessGroup& group, const std::filesystem::path& parent) : group_(group) {
  // Named by rank 0 (its pid and clock), so a later job never sees this job's claims.
  std::string token;
  if (group.rank() == 0)
    token = std::to_string(::getpid()) + "-" +
            std::to_string(std::chrono::steady_clock::now().time_since_epoch().count());
  dir_ = parent / (".claims-" + all_gather_strings(group, token)[0]);
  if (group.rank() == 0) {
    std::error_code ec;
    std::filesystem::create_directories(dir_, ec);
    if (ec) throw IoError("cannot create directory " + dir_.string() + ": " + ec.message());
  }
  group.barrier();
  if (!std::filesystem::is_directory(dir_))
    throw ConfigError("out", "rank " + std::to_string(group.rank()) + " does not see " + dir_.string() +
                                 " that rank 0 created: with several MPI ranks, --out must be on a "
                                 "filesystem that every rank sees");
}

bool RankClaims::claim(const std::string& name) {
  const std::filesystem::path file = dir_ / name;
  const int fd = ::open(file.c_str(), O_CREAT | O_EXCL | O_WRONLY, 0644);
  if (fd < 0) {
    if (errno == EEXIST) return false;  // another rank has it
    throw IoError("cannot create " + file.string() + ": " + std::strerror(errno));
  }
  ::close(fd);
  return true;
}

void RankClaims::finish() {
  group_.barrier();
  if (group_.rank() == 0) {
    std::error_code ec;
    std::filesystem::remove_all(dir_, ec);
  }
}

ProcessGroup& local_group() {
  static LocalGroup group;
  return group;
}

ProcessGroup& process_group() {
  static std::unique_ptr<ProcessGroup> group = []() -> std::unique_ptr<ProcessGroup> {
    const int launched = launcher_process_count();
#if GYRE_WITH_MPI
    if (launched > 1) return std::make_unique<MpiGroup>();
#else
    if (launched > 1)
      throw ConfigError("mpi", "an MPI launcher started " + std::to_string(launched) +
                                   " gyre processes, but this gyre was built without MPI: each would train "
                                   "alone into the same run directory. Rebuild with -DGYRE_WITH_MPI=ON, or "
                                   "start one process (use --threads for this machine's cores)");
#endif
    return std::make_unique<LocalGroup>();
  }();
  return *group;
}

}  // namespace gyre::train
