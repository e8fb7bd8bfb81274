// resources.cpp — available memory and the refusal rule (see seatilt/resources.hpp).
//
// Units: every figure is bytes held in a double, so that products of
// declared dimensions (up to 2^64 each) never wrap around.
#include "seatilt/resources.hpp"

#include <sys/resource.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <limits>
#include <sstream>
#include <vector>

#include "seatilt/error.hpp"

namespace seatilt {
namespace {

std::optional<std::string> read_text(const std::string& path) {
  std::ifstream in(path);
  if (!in) return std::nullopt;
  std::ostringstream s;
  s << in.rdbuf();
  if (in.bad()) return std::nullopt;
  return s.str();
}

double page_bytes() {
  const long p = ::sysconf(_SC_PAGESIZE);
  return p > 0 ? static_cast<double>(p) : 4096.0;
}

// Field K (0-based, in pages) of /proc/self/statm [1]: 0 = size, 5 = data.
std::optional<double> statm_bytes(int k) {
  const auto text = read_text("/proc/self/statm");
  if (!text) return std::nullopt;
  std::istringstream in(*text);
  double v = 0.0;
  for (int i = 0; i <= k; ++i)
    if (!(in >> v)) return std::nullopt;
  return v * page_bytes();
}

// Soft limit RESOURCE minus the current use, or nullopt when unlimited [3].
std::optional<double> rlimit_left(int resource, int statm_field) {
  struct rlimit r {};
  if (::getrlimit(resource, &r) != 0 || r.rlim_cur == RLIM_INFINITY) return std::nullopt;
  const double used = statm_bytes(statm_field).value_or(0.0);
  return static_cast<double>(r.rlim_cur) - used;
}

// The folders of the process's memory cgroup and its ancestors under BASE,
// plus BASE itself (inside a cgroup namespace the mount root is the
// container's own cgroup and /proc/self/cgroup says "/").
std::vector<std::string> cgroup_folders(const std::string& base, const std::string& path) {
  std::vector<std::string> out;
  std::string p = path;
  while (!p.empty() && p != "/") {
    out.push_back(base + p);
    const auto slash = p.find_last_of('/');
    p = slash == std::string::npos ? std::string() : p.substr(0, slash);
  }
  out.push_back(base);
  return out;
}

// Smallest limit - usage over the cgroup folders [4].
std::optional<double> cgroup_left() {
  const auto self = read_text("/proc/self/cgroup");
  if (!self) return std::nullopt;
  std::optional<double> best;
  const auto consider = [&](const std::vector<std::string>& folders, const char* limit_file,
                            const char* usage_file) {
    for (const std::string& f : folders) {
      const auto limit_text = read_text(f + "/" + limit_file);
      if (!limit_text) continue;
      const auto limit = parse_cgroup_limit(*limit_text);
      if (!limit) continue;
      const auto usage_text = read_text(f + "/" + usage_file);
      const double usage = usage_text ? parse_cgroup_limit(*usage_text).value_or(0.0) : 0.0;
      const double left = *limit - usage;
      if (!best || left < *best) best = left;
    }
  };
  std::istringstream lines(*self);
  for (std::string line; std::getline(lines, line);) {
    // "ID:CONTROLLERS:PATH"; v2 has ID 0 and no controllers.
    const auto a = line.find(':');
    const auto b = a == std::string::npos ? a : line.find(':', a + 1);
    if (b == std::string::npos) continue;
    const std::string controllers = line.substr(a + 1, b - a - 1);
    const std::string path = line.substr(b + 1);
    if (line.compare(0, a, "0") == 0 && controllers.empty()) {
      consider(cgroup_folders("/sys/fs/cgroup", path), "memory.max", "memory.current");
    } else {
      std::istringstream names(controllers);
      for (std::string name; std::getline(names, name, ',');)
        if (name == "memory")
          consider(cgroup_folders("/sys/fs/cgroup/memory", path), "memory.limit_in_bytes",
                   "memory.usage_in_bytes");
    }
  }
  return best;
}

std::optional<double> physical_left() {
  if (const auto text = read_text("/proc/meminfo"))
    if (const auto v = parse_meminfo_available(*text)) return v;
  const long pages = ::sysconf(_SC_AVPHYS_PAGES);
  if (pages > 0) return static_cast<double>(pages) * page_bytes();
  return std::nullopt;
}

std::optional<double> user_cap() {
  const char* text = std::getenv("SEATILT_MAX_MEMORY_MB");
  if (!text || !*text) return std::nullopt;
  char* end = nullptr;
  const double mb = std::strtod(text, &end);
  if (end == text || *end != '\0' || !(mb > 0.0) || !std::isfinite(mb)) return std::nullopt;
  return mb * 1048576.0;
}

}  // namespace

std::optional<double> parse_meminfo_available(const std::string& meminfo) {
  std::istringstream lines(meminfo);
  std::optional<double> available;
  double swap = 0.0;
  for (std::string line; std::getline(lines, line);) {
    std::istringstream in(line);
    std::string key, unit;
    double value = 0.0;
    if (!(in >> key >> value)) continue;
    in >> unit;
    const double scale = unit == "kB" ? 1024.0 : 1.0;  // proc.rst: values in kibibytes
    if (key == "MemAvailable:") available = value * scale;
    if (key == "SwapFree:") swap = value * scale;
  }
  if (!available) return std::nullopt;
  return *available + swap;
}

std::optional<double> parse_cgroup_limit(const std::string& text) {
  std::istringstream in(text);
  std::string word;
  if (!(in >> word) || word == "max") return std::nullopt;
  char* end = nullptr;
  const unsigned long long v = std::strtoull(word.c_str(), &end, 10);
  if (end == word.c_str() || *end != '\0' || word[0] == '-') return std::nullopt;
  if (v >= (1ULL << 62)) return std::nullopt;  // v1 "unlimited" (LONG_MAX rounded to a page)
  return static_cast<double>(v);
}

MemoryFacts probe_memory() {
  MemoryFacts f;
  try {
    f.physical = physical_left();
    f.address_space = rlimit_left(RLIMIT_AS, 0);
    f.data = rlimit_left(RLIMIT_DATA, 5);
    f.cgroup = cgroup_left();
    f.user_cap = user_cap();
  } catch (const std::exception&) {
    // A figure that cannot be read is no limit (resources.hpp).
  }
  return f;
}

MemoryLimit smallest_limit(const MemoryFacts& facts) {
  MemoryLimit m{std::numeric_limits<double>::infinity(), "no limit known"};
  const auto take = [&](const std::optional<double>& v, const char* source) {
    if (v && std::max(*v, 0.0) < m.bytes) m = {std::max(*v, 0.0), source};
  };
  take(facts.physical, "free physical memory, MemAvailable + SwapFree");
  take(facts.address_space, "address-space limit RLIMIT_AS (ulimit -v) less the current size");
  take(facts.data, "data-size limit RLIMIT_DATA (ulimit -d) less the current size");
  take(facts.cgroup, "cgroup memory limit less its current usage");
  take(facts.user_cap, "SEATILT_MAX_MEMORY_MB");
  return m;
}

MemoryLimit available_memory() { return smallest_limit(probe_memory()); }

std::string format_bytes(double bytes) {
  if (!(bytes >= 0.0)) bytes = 0.0;
  if (std::isinf(bytes)) return "unlimited bytes";
  char buf[64];
  if (bytes < 1024.0) {
    std::snprintf(buf, sizeof buf, "%.0f bytes", bytes);
    return buf;
  }
  static const char* units[] = {"KiB", "MiB", "GiB", "TiB"};
  double v = bytes / 1024.0;
  int k = 0;
  while (v >= 1024.0 && k < 3) {
    v /= 1024.0;
    ++k;
  }
  std::snprintf(buf, sizeof buf, v < 1e6 ? "%.1f %s" : "%.1e %s", v, units[k]);
  return buf;
}

void require_memory(double need_bytes, const std::string& what, const std::string& file,
                    const std::string& variable, const std::string& hint,
                    const MemoryLimit& available) {
  if (!(need_bytes > available.bytes)) return;  // also passes a NaN need (nothing known)
  std::string problem = what + " would need about " + format_bytes(need_bytes) +
                        ", more than the " + format_bytes(available.bytes) + " available (" +
                        available.source + ")";
  if (!hint.empty()) problem += "; " + hint;
  throw InputError(input_message(file, variable, problem));
}

void require_memory(double need_bytes, const std::string& what, const std::string& file,
                    const std::string& variable, const std::string& hint) {
  // Probe only when the need is not trivially small (1 MiB; the probe reads
  // a few /proc and cgroup files).
  if (need_bytes < 1048576.0) return;
  require_memory(need_bytes, what, file, variable, hint, available_memory());
}

double band_pipeline_bytes(std::size_t nx, std::size_t rows, std::size_t halo) {
  // tiling.hpp "Memory": 2 bands in flight x nx x (86 R + 50 h) bytes.
  return 2.0 * static_cast<double>(nx) *
         (86.0 * static_cast<double>(rows) + 50.0 * static_cast<double>(halo));
}

}  // namespace seatilt
