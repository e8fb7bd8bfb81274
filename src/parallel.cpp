// parallel.cpp — optional MPI session (see parallel.hpp). Compiled with
// SEATILT_HAVE_MPI when CMake found MPI and SEATILT_MPI is ON; otherwise every
// member is the serial case.
#include "seatilt/parallel.hpp"

#include <algorithm>
#include <cstdlib>
#include <exception>
#include <stdexcept>
#include <string>

#ifdef SEATILT_HAVE_MPI
// The C API only: skip the deprecated MPI-2 C++ bindings that mpi.h would pull in.
#define OMPI_SKIP_MPICXX 1
#define MPICH_SKIP_MPICXX 1
#include <mpi.h>
#endif

#include "seatilt/error.hpp"

namespace seatilt {

namespace {

bool session_open = false;

bool env_set(const char* name) {
  const char* v = std::getenv(name);
  return v != nullptr && *v != '\0';
}

#ifdef SEATILT_HAVE_MPI
void mpi_check(int status, const char* what) {
  if (status == MPI_SUCCESS) return;
  char text[MPI_MAX_ERROR_STRING] = {0};
  int len = 0;
  MPI_Error_string(status, text, &len);
  throw std::runtime_error(std::string("MPI: ") + what + ": " + text);
}

/// Largest message: 1 GiB (MPI counts are int; common practice, no source).
constexpr std::size_t max_message = std::size_t{1} << 30;
#endif

}  // namespace

bool mpi_built() {
#ifdef SEATILT_HAVE_MPI
  return true;
#else
  return false;
#endif
}

bool launched_by_mpi() {
  // OpenMPI's mpirun/orterun (OMPI_COMM_WORLD_*), MPICH Hydra and Slurm PMI-1/2
  // (PMI_SIZE), PMIx launchers such as OpenMPI 5 and srun --mpi=pmix (PMIX_RANK).
  return env_set("OMPI_COMM_WORLD_SIZE") || env_set("PMI_SIZE") || env_set("PMIX_RANK");
}

#ifndef SEATILT_HAVE_MPI
/// Number of processes the launcher started (1 when unknown).
static long launcher_size() {
  for (const char* name : {"OMPI_COMM_WORLD_SIZE", "PMI_SIZE"}) {
    if (const char* v = std::getenv(name)) {
      const long n = std::strtol(v, nullptr, 10);
      if (n > 0) return n;
    }
  }
  return 1;
}
#endif

ParallelSession::ParallelSession() {
  if (session_open) throw std::runtime_error("ParallelSession: a session is already open");
#ifndef SEATILT_HAVE_MPI
  // Every process would do all the work and write the same outputs.
  if (launched_by_mpi() && launcher_size() > 1)
    throw UsageError(
        "this seatilt was built without MPI (SEATILT_MPI=OFF) but was started by an "
        "MPI launcher with " +
        std::to_string(launcher_size()) +
        " processes; run it without mpirun, or rebuild with libopenmpi-dev");
#endif
  session_open = true;
  uncaught_at_start_ = std::uncaught_exceptions();
#ifdef SEATILT_HAVE_MPI
  if (!launched_by_mpi()) return;
  int initialised = 0;
  MPI_Initialized(&initialised);
  if (!initialised) {
    int provided = 0;
    try {
      mpi_check(MPI_Init_thread(nullptr, nullptr, MPI_THREAD_FUNNELED, &provided),
                "MPI_Init_thread");
    } catch (...) {
      session_open = false;
      throw;
    }
  }
  active_ = true;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank_);
  MPI_Comm_size(MPI_COMM_WORLD, &size_);
#endif
}

ParallelSession::~ParallelSession() {
  session_open = false;
#ifdef SEATILT_HAVE_MPI
  if (!active_) return;
  int finalised = 0;
  MPI_Finalized(&finalised);
  if (finalised) return;
  if (size_ > 1 && std::uncaught_exceptions() > uncaught_at_start_) {
    // An exception escapes a command on this rank only: the others would wait
    // in their next collective forever. Abort the whole job instead.
    MPI_Abort(MPI_COMM_WORLD, 70);
    return;
  }
  MPI_Finalize();
#endif
}

int ParallelSession::max_over_ranks(int value) const {
#ifdef SEATILT_HAVE_MPI
  if (active_) {
    int out = value;
    mpi_check(MPI_Allreduce(&value, &out, 1, MPI_INT, MPI_MAX, MPI_COMM_WORLD), "MPI_Allreduce");
    return out;
  }
#endif
  return value;
}

int ParallelSession::batch_exit_code(std::size_t failed, std::size_t total, int code) const {
  unsigned long long counts[2] = {failed, total};
#ifdef SEATILT_HAVE_MPI
  if (active_) {
    unsigned long long sums[2] = {0, 0};
    mpi_check(MPI_Allreduce(counts, sums, 2, MPI_UNSIGNED_LONG_LONG, MPI_SUM, MPI_COMM_WORLD),
              "MPI_Allreduce");
    counts[0] = sums[0];
    counts[1] = sums[1];
  }
#endif
  const int worst = max_over_ranks(failed > 0 ? code : 0);
  if (counts[0] == 0) return static_cast<int>(ExitCode::ok);
  if (counts[0] == counts[1]) return worst;
  return static_cast<int>(ExitCode::batch);
}

void ParallelSession::send(int to, const void* data, std::size_t bytes) const {
#ifdef SEATILT_HAVE_MPI
  if (active_) {
    unsigned long long n = bytes;
    mpi_check(MPI_Send(&n, 1, MPI_UNSIGNED_LONG_LONG, to, 0, MPI_COMM_WORLD), "MPI_Send");
    const char* p = static_cast<const char*>(data);
    for (std::size_t at = 0; at < bytes; at += max_message) {
      const int count = static_cast<int>(std::min(max_message, bytes - at));
      mpi_check(MPI_Send(p + at, count, MPI_BYTE, to, 1, MPI_COMM_WORLD), "MPI_Send");
    }
    return;
  }
#endif
  (void)to;
  (void)data;
  (void)bytes;
  throw std::runtime_error("ParallelSession::send: MPI is not active");
}

#ifdef SEATILT_HAVE_MPI
namespace {
void receive_payload(int from, char* p, std::size_t bytes) {
  for (std::size_t at = 0; at < bytes; at += max_message) {
    const int count = static_cast<int>(std::min(max_message, bytes - at));
    mpi_check(MPI_Recv(p + at, count, MPI_BYTE, from, 1, MPI_COMM_WORLD, MPI_STATUS_IGNORE),
              "MPI_Recv");
  }
}
unsigned long long receive_length(int from) {
  unsigned long long n = 0;
  mpi_check(MPI_Recv(&n, 1, MPI_UNSIGNED_LONG_LONG, from, 0, MPI_COMM_WORLD, MPI_STATUS_IGNORE),
            "MPI_Recv");
  return n;
}
}  // namespace
#endif

std::vector<char> ParallelSession::receive(int from) const {
#ifdef SEATILT_HAVE_MPI
  if (active_) {
    std::vector<char> bytes(static_cast<std::size_t>(receive_length(from)));
    receive_payload(from, bytes.data(), bytes.size());
    return bytes;
  }
#endif
  (void)from;
  throw std::runtime_error("ParallelSession::receive: MPI is not active");
}

void ParallelSession::receive_into(int from, void* data, std::size_t bytes) const {
#ifdef SEATILT_HAVE_MPI
  if (active_) {
    const unsigned long long n = receive_length(from);
    if (n != bytes)
      throw std::runtime_error("ParallelSession::receive_into: rank " + std::to_string(from) +
                               " sent " + std::to_string(n) + " bytes, expected " +
                               std::to_string(bytes));
    receive_payload(from, static_cast<char*>(data), bytes);
    return;
  }
#endif
  (void)from;
  (void)data;
  (void)bytes;
  throw std::runtime_error("ParallelSession::receive_into: MPI is not active");
}

}  // namespace seatilt
