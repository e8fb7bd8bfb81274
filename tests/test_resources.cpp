// Tests of the available-memory rule (resources.hpp).
#include <doctest/doctest.h>
#include <sys/resource.h>

#include <cmath>
#include <cstdlib>
#include <limits>
#include <string>

#include "seatilt/error.hpp"
#include "seatilt/resources.hpp"

using namespace seatilt;

TEST_CASE("parse_meminfo_available: MemAvailable plus SwapFree, kB are KiB") {
  // Layout of /proc/meminfo as in Linux Documentation/filesystems/proc.rst.
  const std::string text =
      "MemTotal:       24683548 kB\n"
      "MemFree:        20000000 kB\n"
      "MemAvailable:   23174124 kB\n"
      "Buffers:          100000 kB\n"
      "SwapTotal:       2097148 kB\n"
      "SwapFree:        1000000 kB\n";
  const auto v = parse_meminfo_available(text);
  REQUIRE(v);
  CHECK(*v == doctest::Approx((23174124.0 + 1000000.0) * 1024.0));
  // Kernels before 3.14 have no MemAvailable: no figure from this file.
  CHECK_FALSE(parse_meminfo_available("MemTotal: 100 kB\nMemFree: 50 kB\n"));
  CHECK_FALSE(parse_meminfo_available(""));
  CHECK_FALSE(parse_meminfo_available("garbage\n\xff\xfe\n"));
}

TEST_CASE("parse_cgroup_limit: numbers, v2 max, v1 unlimited, garbage") {
  // cgroup-v2.rst: memory.max holds "max" or bytes; cgroup-v1 memory.rst:
  // unlimited reads as 9223372036854771712 (LONG_MAX rounded down to a page).
  CHECK(*parse_cgroup_limit("1073741824\n") == 1073741824.0);
  CHECK_FALSE(parse_cgroup_limit("max\n"));
  CHECK_FALSE(parse_cgroup_limit("9223372036854771712\n"));
  CHECK_FALSE(parse_cgroup_limit(""));
  CHECK_FALSE(parse_cgroup_limit("-5"));
  CHECK_FALSE(parse_cgroup_limit("12abc"));
}

TEST_CASE("smallest_limit picks the smallest figure and names it") {
  MemoryFacts f;
  CHECK(std::isinf(smallest_limit(f).bytes));
  f.physical = 8e9;
  f.cgroup = 2e9;
  f.address_space = 5e9;
  MemoryLimit m = smallest_limit(f);
  CHECK(m.bytes == 2e9);
  CHECK(m.source.find("cgroup") != std::string::npos);
  f.user_cap = 1e9;
  m = smallest_limit(f);
  CHECK(m.bytes == 1e9);
  CHECK(m.source == "SEATILT_MAX_MEMORY_MB");
  f.data = -4096.0;  // already above the limit: nothing left
  m = smallest_limit(f);
  CHECK(m.bytes == 0.0);
  CHECK(m.source.find("RLIMIT_DATA") != std::string::npos);
}

TEST_CASE("require_memory refuses with file, variable, both figures and exit 3") {
  const MemoryLimit limit{64.0 * 1048576.0, "test limit"};
  CHECK_NOTHROW(require_memory(64.0 * 1048576.0, "row bands", "in.nc", "ssh", "", limit));
  CHECK_NOTHROW(require_memory(std::nan(""), "row bands", "in.nc", "ssh", "", limit));
  try {
    require_memory(3.0 * 1073741824.0, "row bands of 8 rows", "in.nc", "ssh", "lower --rows",
                   limit);
    FAIL("expected InputError");
  } catch (const InputError& e) {
    const std::string m = e.what();
    CHECK(e.code() == ExitCode::input);
    CHECK(m.find("in.nc") != std::string::npos);
    CHECK(m.find("variable ssh") != std::string::npos);
    CHECK(m.find("row bands of 8 rows would need about 3.0 GiB") != std::string::npos);
    CHECK(m.find("64.0 MiB available (test limit)") != std::string::npos);
    CHECK(m.find("; lower --rows") != std::string::npos);
    CHECK(m.find('\n') == std::string::npos);
  }
  // Needs beyond 2^64 bytes (products of huge declared dimensions) do not wrap.
  CHECK_THROWS_AS(require_memory(std::ldexp(1.0, 70), "grid", "in.nc", "", "", limit), InputError);
}

TEST_CASE("SEATILT_MAX_MEMORY_MB caps the probed figure; bad values are ignored") {
  ::setenv("SEATILT_MAX_MEMORY_MB", "100", 1);
  MemoryFacts f = probe_memory();
  REQUIRE(f.user_cap);
  CHECK(*f.user_cap == 100.0 * 1048576.0);
  CHECK(available_memory().bytes <= 100.0 * 1048576.0);
  CHECK_THROWS_AS(require_memory(200.0 * 1048576.0, "grid", "in.nc", "ssh"), InputError);
  CHECK_NOTHROW(require_memory(50.0 * 1048576.0, "grid", "in.nc", "ssh"));
  for (const char* bad : {"", "abc", "-5", "0", "nan", "12MB"}) {
    ::setenv("SEATILT_MAX_MEMORY_MB", bad, 1);
    CHECK_FALSE(probe_memory().user_cap);
  }
  ::unsetenv("SEATILT_MAX_MEMORY_MB");
}

TEST_CASE("probe_memory sees RLIMIT_AS (ulimit -v) of this process") {
  struct rlimit old {};
  REQUIRE(::getrlimit(RLIMIT_AS, &old) == 0);
  if (old.rlim_cur != RLIM_INFINITY) return;  // already limited by the caller
    // Under AddressSanitizer the shadow memory makes the virtual size huge; a
    // limit near it would only measure that, so this check runs without it.
#if defined(__SANITIZE_ADDRESS__)
  return;
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
  return;
#endif
#endif
  struct rlimit lim = old;
  lim.rlim_cur = static_cast<rlim_t>(64) << 30;  // 64 GiB: above this process's size
  REQUIRE(::setrlimit(RLIMIT_AS, &lim) == 0);
  const MemoryFacts f = probe_memory();
  ::setrlimit(RLIMIT_AS, &old);
  REQUIRE(f.address_space);
  CHECK(*f.address_space < 64.0 * 1073741824.0);
  CHECK(*f.address_space > 32.0 * 1073741824.0);  // this test program is far below 32 GiB
}

TEST_CASE("probe_memory on this machine: physical memory is known and positive") {
  // Linux always has /proc/meminfo with MemAvailable (>= 3.14) or sysconf.
  const MemoryFacts f = probe_memory();
  REQUIRE(f.physical);
  CHECK(*f.physical > 0.0);
  const MemoryLimit m = available_memory();
  CHECK(m.bytes > 0.0);
  CHECK(m.bytes <= *f.physical);
}

TEST_CASE("band_pipeline_bytes follows tiling.hpp's model 2 nx (86 R + 50 h)") {
  CHECK(band_pipeline_bytes(1000, 16, 4) == 2.0 * 1000 * (86.0 * 16 + 50.0 * 4));
  // 2^31 columns, one row: far beyond any machine, and no wrap-around.
  CHECK(band_pipeline_bytes(std::size_t{1} << 31, 1, 3) > 4e11);
}

TEST_CASE("format_bytes") {
  CHECK(format_bytes(512) == "512 bytes");
  CHECK(format_bytes(3 * 1024.0) == "3.0 KiB");
  CHECK(format_bytes(1.5 * 1073741824.0) == "1.5 GiB");
  CHECK(format_bytes(std::ldexp(1.0, 80)) == "1.1e+12 TiB");
  CHECK(format_bytes(-1) == "0 bytes");
}
