// seatilt/resources.hpp — refusing work that cannot fit in memory.
//
// Owns: finding how many bytes this process may still allocate, and the one
// rule every command applies before it allocates grid-sized buffers: when
// the bytes a declared grid needs exceed that amount, throw InputError
// (exit 3) with one line naming file, variable, the bytes needed and the
// bytes available, instead of dying later in the allocator (std::bad_alloc,
// the kernel's OOM killer, or a swap storm). Does not own the memory models
// of the commands (tiling.hpp gives the one of the row-band pipeline; each
// call site states what it holds) nor any allocation.
//
// Available memory is the smallest of these limits (each one only when the
// system reports it):
//   physical   MemAvailable + SwapFree of /proc/meminfo [1] (fallback:
//              sysconf(_SC_AVPHYS_PAGES) x page size [2]);
//   RLIMIT_AS  (ulimit -v) minus the current virtual size (/proc/self/statm) [3];
//   RLIMIT_DATA (ulimit -d) minus the current data size (/proc/self/statm) [3];
//   cgroup     memory.max - memory.current (cgroup v2) or
//              memory.limit_in_bytes - memory.usage_in_bytes (v1) of the
//              process's cgroup and each ancestor [4];
//   SEATILT_MAX_MEMORY_MB  an optional cap in MiB from the environment (an
//              operator's own ceiling, also used by the tests and fuzzers);
//              ignored unless a positive number.
// The figures are read afresh at each check (memory comes and goes); a check
// never throws for a limit it cannot read.
//
// The rule is a refusal of the clearly impossible, not an accountant: the
// needs the call sites give are lower bounds of what a run holds, so a run
// that passes may still need a little more than stated.
//
// References
//  [1] Linux kernel documentation, Documentation/filesystems/proc.rst,
//      /proc/meminfo (MemAvailable: estimate of memory available for new
//      allocations without swapping) and /proc/PID/statm.
//  [2] POSIX.1-2017 sysconf(3); _SC_PHYS_PAGES, _SC_AVPHYS_PAGES (GNU).
//  [3] POSIX.1-2017 getrlimit(2): RLIMIT_AS, RLIMIT_DATA.
//  [4] Linux kernel documentation, Documentation/admin-guide/cgroup-v2.rst
//      (memory.max, memory.current) and cgroup-v1/memory.rst
//      (memory.limit_in_bytes, memory.usage_in_bytes).
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>

namespace seatilt {

/// The raw figures of the available-memory rule, in bytes; nullopt = no
/// such limit (or unreadable).
struct MemoryFacts {
  std::optional<double> physical;       ///< MemAvailable + SwapFree
  std::optional<double> address_space;  ///< RLIMIT_AS - current virtual size
  std::optional<double> data;           ///< RLIMIT_DATA - current data size
  std::optional<double> cgroup;         ///< smallest memory.max - memory.current up the tree
  std::optional<double> user_cap;       ///< SEATILT_MAX_MEMORY_MB x 2^20
};

/// The smallest limit and where it comes from.
struct MemoryLimit {
  double bytes = 0.0;  ///< bytes that may still be allocated (>= 0; +inf when nothing is known)
  std::string source;  ///< e.g. "free physical memory (MemAvailable + SwapFree)"
};

/// Reads the figures from /proc, getrlimit, the cgroup files and the
/// environment. Never throws.
MemoryFacts probe_memory();

/// Returns the smallest of FACTS' limits (+inf with source "no limit known"
/// when none is set). Negative figures count as 0.
MemoryLimit smallest_limit(const MemoryFacts& facts);

/// smallest_limit(probe_memory()).
MemoryLimit available_memory();

/// Throws InputError "FILE: variable VARIABLE: WHAT would need about N, more than
/// the M available (SOURCE)[; HINT]" when NEED_BYTES (>= 0; may exceed 2^64,
/// hence double) exceeds AVAILABLE.bytes. VARIABLE may be "".
void require_memory(double need_bytes, const std::string& what, const std::string& file,
                    const std::string& variable, const std::string& hint,
                    const MemoryLimit& available);

/// The same against available_memory().
void require_memory(double need_bytes, const std::string& what, const std::string& file,
                    const std::string& variable, const std::string& hint = "");

/// Bytes held by the `currents` row-band pipeline for bands of ROWS rows with
/// a halo of HALO rows on an NX-column grid, by tiling.hpp's memory model
/// (2 bands in flight x nx x (86 ROWS + 50 HALO) bytes).
double band_pipeline_bytes(std::size_t nx, std::size_t rows, std::size_t halo);

/// Formats BYTES for messages: "512 bytes", "3.0 KiB", "1.5 GiB", "2.0e+06 TiB".
std::string format_bytes(double bytes);

// ---- parsers of the system files (exposed for the tests) ----------------------------

/// MemAvailable + SwapFree (bytes) from the text of /proc/meminfo; nullopt
/// when MemAvailable is absent (kernels before 3.14).
std::optional<double> parse_meminfo_available(const std::string& meminfo);

/// A cgroup limit file's value (bytes): nullopt for "max" (v2), for values
/// at or above 2^62 (v1's "unlimited" is 2^63 rounded down to a page), and
/// for anything unparsable.
std::optional<double> parse_cgroup_limit(const std::string& text);

}  // namespace seatilt
