// seatilt/parallel.hpp — optional MPI: dealing inputs to ranks, combining results.
//
// Owns: starting and stopping MPI, which rank owns which input, collective
// combination of exit codes, and moving raw bytes between ranks. Does not own
// what is moved (climatology.hpp serialises its accumulators) or any netCDF
// access: every rank opens its own files with the serial netCDF/HDF5 (no
// MPI-flavoured HDF5 is linked; CHUNK_IO.md pitfall 10).
//
// When MPI is used. Built without MPI (CMake SEATILT_MPI=OFF, or OpenMPI not
// found) every function here is a serial no-op: one rank that owns every input.
// Built with MPI, a ParallelSession starts MPI only when the process was started
// by an MPI launcher — the launcher's environment names the rank
// (OMPI_COMM_WORLD_SIZE for OpenMPI's mpirun; PMI_SIZE or PMIX_RANK for Hydra,
// Slurm's srun and PMIx launchers). A plain `seatilt ...` never touches MPI:
// OpenMPI's singleton start-up (MPI_Init without mpirun) costs about a second
// and spawns a helper daemon, which a cron job or a test suite should not pay.
//
// Threads: MPI is started with MPI_THREAD_FUNNELED; only the main thread calls
// MPI (OpenMP threads never do).
//
// Collectives: every member marked "collective" must be called by every rank
// in the same order, or the job hangs. Callers therefore catch their own
// errors, keep going to the next collective, and combine the outcome there.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace seatilt {

/// Returns true when this binary was built with MPI support.
bool mpi_built();

/// Returns true when the environment says an MPI launcher started this
/// process (see the top of this header), whether or not MPI is built in.
bool launched_by_mpi();

/// The MPI session of one command run (RAII). At most one may exist at a time.
class ParallelSession {
 public:
  /// Starts MPI when built with it and launched_by_mpi(); otherwise a serial
  /// session (rank 0 of 1). Throws UsageError when built without MPI but
  /// started by a launcher with more than one process (every process would
  /// write the same outputs); std::runtime_error when MPI fails to start or a
  /// second session is created.
  ParallelSession();
  /// Finalises MPI. When destroyed during stack unwinding of an exception
  /// with more than one rank, calls MPI_Abort instead (the other ranks would
  /// otherwise wait forever in the next collective).
  ~ParallelSession();
  ParallelSession(const ParallelSession&) = delete;
  ParallelSession& operator=(const ParallelSession&) = delete;

  /// True when MPI is running (even with one rank).
  [[nodiscard]] bool active() const { return active_; }
  /// This rank, 0..size()-1.
  [[nodiscard]] int rank() const { return rank_; }
  /// Number of ranks (1 when serial).
  [[nodiscard]] int size() const { return size_; }
  /// True on rank 0 (the rank that writes shared outputs and prints summaries).
  [[nodiscard]] bool root() const { return rank_ == 0; }

  /// Returns true when input number ITEM (0-based, command-line order) is
  /// this rank's: inputs are dealt round-robin, ITEM % size() == rank().
  [[nodiscard]] bool owns(std::size_t item) const {
    return item % static_cast<std::size_t>(size_) == static_cast<std::size_t>(rank_);
  }

  /// Collective. Returns the largest VALUE over all ranks (VALUE when serial).
  [[nodiscard]] int max_over_ranks(int value) const;

  /// Collective. Returns the exit code of a batch over all ranks, the same on
  /// every rank: 0 when no input failed; when every input failed, the
  /// largest of the ranks' CODE (the code of their failures); otherwise 5
  /// (ExitCode::batch). FAILED and TOTAL count this rank's inputs.
  [[nodiscard]] int batch_exit_code(std::size_t failed, std::size_t total, int code) const;

  /// Sends BYTES bytes at DATA to rank TO as one length-prefixed transfer
  /// (blocking; any size, split into messages of at most 1 GiB). Throws
  /// std::runtime_error on an MPI failure or when MPI is not active.
  void send(int to, const void* data, std::size_t bytes) const;

  /// Receives a whole transfer that rank FROM made with send(). Throws
  /// std::runtime_error on an MPI failure or when MPI is not active.
  [[nodiscard]] std::vector<char> receive(int from) const;

  /// Receives a transfer of exactly BYTES bytes from rank FROM into DATA.
  /// Throws std::runtime_error when the sender sent another size.
  void receive_into(int from, void* data, std::size_t bytes) const;

 private:
  bool active_ = false;
  int rank_ = 0;
  int size_ = 1;
  int uncaught_at_start_ = 0;
};

}  // namespace seatilt
