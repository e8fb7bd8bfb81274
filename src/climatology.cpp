// climatology.cpp — streaming, mergeable current statistics (see climatology.hpp).
//
// Notation: P periods, ny x nx grid, C = ny * nx cells; moment index
// i = p * C + j * nx + i_col. u, v in m s-1, vorticity in s-1; n = count;
// mu, mv, ms = running means of u, v, speed; M2u, M2v = sums of squared
// deviations; Cuv = sum of products of deviations (m2 s-2). Dates are civil
// dates of the input's calendar; day numbers (calendar_day_number) are only
// ever subtracted from each other.
//
// File layout of this source:
//   1. periods, dates and calendars
//   2. MomentGrid (Welford update, Chan et al. merge) and derived statistics
//   3. ClimatologyState merge
//   4. reading inputs (height files through the kernels, currents outputs)
//   5. netCDF output: atomic file, the CF climatology, the partial state
//   6. reduction over MPI ranks
#include "seatilt/climatology.hpp"

#include <fcntl.h>
#include <netcdf.h>
#include <omp.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <cctype>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <exception>
#include <initializer_list>
#include <limits>
#include <random>
#include <stdexcept>
#include <utility>

#include "seatilt/chunkio.hpp"
#include "seatilt/diagnostics.hpp"
#include "seatilt/error.hpp"
#include "seatilt/writer.hpp"
#include "seatilt/product.hpp"
#include "seatilt/tiling.hpp"

namespace seatilt {

namespace {

constexpr double nan_value = std::numeric_limits<double>::quiet_NaN();

std::string lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

std::string trim(const std::string& s) {
  const auto a = s.find_first_not_of(" \t\r\n");
  if (a == std::string::npos) return {};
  const auto b = s.find_last_not_of(" \t\r\n");
  return s.substr(a, b - a + 1);
}

/// Text of a number as written into metadata comparisons (17 significant digits: exact).
std::string number_text(double v) {
  char buf[40];
  std::snprintf(buf, sizeof buf, "%.17g", v);
  return buf;
}

/// An attribute as comparable text.
std::string attribute_text(const Attribute& a) {
  if (a.nc_type == NC_CHAR || a.nc_type == NC_STRING) return a.text;
  std::string out;
  for (double v : a.values) out += (out.empty() ? "" : ", ") + number_text(v);
  return out;
}

const Attribute* find_attribute(const std::vector<Attribute>& attrs, const std::string& name) {
  for (const auto& a : attrs)
    if (a.name == name) return &a;
  return nullptr;
}

/// Names of the settings attributes a `currents` output carries (product.cpp).
const char* const settings_names[] = {"geostrophy_stencil_order",    "geostrophy_equator_method",
                                      "geostrophy_equator_band_deg", "geostrophy_coast_method",
                                      "geostrophy_earth_model",      "geostrophy_gravity"};

std::vector<Attribute> pick_settings(const std::vector<Attribute>& attrs) {
  std::vector<Attribute> out;
  for (const char* name : settings_names)
    if (const Attribute* a = find_attribute(attrs, name)) out.push_back(*a);
  return out;
}

std::string settings_text(const std::vector<Attribute>& settings) {
  std::string out;
  for (const auto& a : settings)
    out += (out.empty() ? "" : "; ") + a.name + "=" + attribute_text(a);
  return out.empty() ? std::string("(none recorded)") : out;
}

const char* kind_text(HeightKind k) { return k == HeightKind::anomaly ? "anomaly" : "absolute"; }

// ---- 1. periods, dates and calendars ------------------------------------------

const char* const month_names[12] = {"January",   "February", "March",    "April",
                                     "May",       "June",     "July",     "August",
                                     "September", "October",  "November", "December"};
const char* const season_names[4] = {"DJF", "MAM", "JJA", "SON"};
/// First month of each season (DJF starts in December).
constexpr int season_start[4] = {12, 3, 6, 9};

enum class Cal { standard, proleptic, julian, noleap, all_leap, d360 };

Cal calendar_kind(const std::string& canonical) {
  if (canonical == "standard") return Cal::standard;
  if (canonical == "proleptic_gregorian") return Cal::proleptic;
  if (canonical == "julian") return Cal::julian;
  if (canonical == "noleap") return Cal::noleap;
  if (canonical == "all_leap") return Cal::all_leap;
  if (canonical == "360_day") return Cal::d360;
  throw std::invalid_argument("unsupported calendar '" + canonical + "'");
}

long long floor_div(long long a, long long b) {
  long long q = a / b;
  if ((a % b != 0) && ((a < 0) != (b < 0))) --q;
  return q;
}

bool gregorian_leap(long long y) { return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0; }
bool julian_leap(long long y) { return floor_div(y, 4) * 4 == y; }

/// Julian Day Number of a Gregorian (proleptic) date, astronomical years
/// (Fliegel & Van Flandern 1968, CACM 11(10) 657; e.g. 2000-01-01 -> 2451545).
long long jdn_gregorian(long long y, long long m, long long d) {
  const long long a = floor_div(14 - m, 12);
  const long long yy = y + 4800 - a, mm = m + 12 * a - 3;
  return d + floor_div(153 * mm + 2, 5) + 365 * yy + floor_div(yy, 4) - floor_div(yy, 100) +
         floor_div(yy, 400) - 32045;
}

/// Julian Day Number of a Julian-calendar date (same source; 1582-10-04 -> 2299160).
long long jdn_julian(long long y, long long m, long long d) {
  const long long a = floor_div(14 - m, 12);
  const long long yy = y + 4800 - a, mm = m + 12 * a - 3;
  return d + floor_div(153 * mm + 2, 5) + 365 * yy + floor_div(yy, 4) - 32083;
}

int days_in_month(Cal cal, long long y, int m) {
  static constexpr int common[13] = {0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  switch (cal) {
    case Cal::d360:
      return 30;
    case Cal::noleap:
      return common[m];
    case Cal::all_leap:
      return m == 2 ? 29 : common[m];
    case Cal::proleptic:
      return m == 2 && gregorian_leap(y) ? 29 : common[m];
    case Cal::julian:
      return m == 2 && julian_leap(y) ? 29 : common[m];
    case Cal::standard:
      return m == 2 && (y < 1582 ? julian_leap(y) : gregorian_leap(y)) ? 29 : common[m];
  }
  return common[m];
}

/// Adds K months to the first day of (Y, M).
Ymd add_months(int y, int m, int k) {
  const int idx = (m - 1) + k;
  return {y + static_cast<int>(floor_div(idx, 12)),
          static_cast<int>(idx - floor_div(idx, 12) * 12) + 1, 1};
}

/// The year a sample counts for in the bounds: the year itself, except that
/// January and February count for the DJF season that began the December before.
int season_year(ClimatologyPeriod period, const Ymd& d) {
  return period == ClimatologyPeriod::season && d.month < 3 ? d.year - 1 : d.year;
}

}  // namespace

ClimatologyPeriod parse_climatology_period(const std::string& text) {
  const std::string t = lower(trim(text));
  if (t == "all") return ClimatologyPeriod::all;
  if (t == "month") return ClimatologyPeriod::month;
  if (t == "season") return ClimatologyPeriod::season;
  throw UsageError("--by: '" + text + "' is not one of all, month, season");
}

const char* to_string(ClimatologyPeriod period) {
  switch (period) {
    case ClimatologyPeriod::all:
      return "all";
    case ClimatologyPeriod::month:
      return "month";
    case ClimatologyPeriod::season:
      return "season";
  }
  return "?";
}

std::size_t period_count(ClimatologyPeriod period) {
  switch (period) {
    case ClimatologyPeriod::all:
      return 1;
    case ClimatologyPeriod::month:
      return 12;
    case ClimatologyPeriod::season:
      return 4;
  }
  return 1;
}

std::size_t period_index(ClimatologyPeriod period, int month) {
  if (month < 1 || month > 12)
    throw std::invalid_argument("month " + std::to_string(month) + " outside 1..12");
  switch (period) {
    case ClimatologyPeriod::all:
      return 0;
    case ClimatologyPeriod::month:
      return static_cast<std::size_t>(month - 1);
    case ClimatologyPeriod::season:
      return static_cast<std::size_t>((month % 12) / 3);  // 12,1,2 -> 0
  }
  return 0;
}

std::string period_label(ClimatologyPeriod period, std::size_t index) {
  switch (period) {
    case ClimatologyPeriod::all:
      return "all";
    case ClimatologyPeriod::month:
      return index < 12 ? month_names[index] : "?";
    case ClimatologyPeriod::season:
      return index < 4 ? season_names[index] : "?";
  }
  return "?";
}

std::string Ymd::iso() const {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%04d-%02d-%02d", year, month, day);
  return buf;
}

Ymd parse_ymd(const std::string& text, const std::string& option) {
  const std::string t = trim(text);
  int y = 0, m = 0, d = 0;
  char tail = 0;
  const int got = std::sscanf(t.c_str(), "%d-%d-%d%c", &y, &m, &d, &tail);
  if (got != 3 || m < 1 || m > 12 || d < 1 || d > 31)
    throw UsageError(option + ": '" + text + "' is not a date YYYY-MM-DD");
  return {y, m, d};
}

std::string canonical_calendar(const std::string& calendar) {
  const std::string c = lower(trim(calendar));
  if (c.empty() || c == "standard" || c == "gregorian") return "standard";
  if (c == "proleptic_gregorian") return c;
  if (c == "julian") return c;
  if (c == "noleap" || c == "365_day") return "noleap";
  if (c == "all_leap" || c == "366_day") return "all_leap";
  if (c == "360_day") return c;
  throw std::invalid_argument("calendar '" + calendar +
                              "' is not one of standard, gregorian, proleptic_gregorian, julian, "
                              "noleap, 365_day, all_leap, 366_day, 360_day");
}

long long calendar_day_number(const std::string& calendar, const Ymd& date) {
  const Cal cal = calendar_kind(canonical_calendar(calendar));
  const long long y = date.year;
  const int m = date.month, d = date.day;
  if (m < 1 || m > 12 || d < 1 || d > days_in_month(cal, y, m))
    throw std::invalid_argument("date " + date.iso() + " does not exist in the " +
                                canonical_calendar(calendar) + " calendar");
  switch (cal) {
    case Cal::d360:
      return y * 360 + (m - 1) * 30 + (d - 1);
    case Cal::noleap: {
      static constexpr int cum[12] = {0, 31, 59, 90, 120, 151, 181, 212, 243, 273, 304, 334};
      return y * 365 + cum[m - 1] + (d - 1);
    }
    case Cal::all_leap: {
      static constexpr int cum[12] = {0, 31, 60, 91, 121, 152, 182, 213, 244, 274, 305, 335};
      return y * 366 + cum[m - 1] + (d - 1);
    }
    case Cal::proleptic:
      return jdn_gregorian(y, m, d);
    case Cal::julian:
      if (y < 1)
        throw std::invalid_argument("years before 1 are not supported in the julian calendar");
      return jdn_julian(y, m, d);
    case Cal::standard: {
      if (y < 1)
        throw std::invalid_argument("years before 1 are not supported in the standard calendar");
      const Ymd switch_day{1582, 10, 15};
      if (!(date < switch_day)) return jdn_gregorian(y, m, d);
      if (Ymd{1582, 10, 4} < date)
        throw std::invalid_argument("date " + date.iso() +
                                    " does not exist in the standard calendar (1582-10-05..14)");
      return jdn_julian(y, m, d);
    }
  }
  return 0;
}

// ---- 2. MomentGrid -----------------------------------------------------------------

MomentGrid::MomentGrid(std::size_t p, std::size_t c) : periods(p), cells(c) {
  // Zeroed in transparent huge pages where the kernel offers them: a month
  // climatology of a 1/4 degree grid holds ~0.8 GB of moments, and first
  // touching that in 4 KiB pages took seconds (chunkio.hpp advise_huge).
  for (auto* v : {&count, &count_vorticity}) chunkio::resize_huge(*v, p * c);
  for (auto* v : {&mean_u, &mean_v, &mean_speed, &m2_u, &m2_v, &comoment_uv, &mean_vorticity})
    chunkio::resize_huge(*v, p * c);
}

void MomentGrid::add(std::size_t p, std::size_t c0, std::size_t n, const double* u, const double* v,
                     const double* vorticity) {
  if (p >= periods || c0 > cells || n > cells - c0)
    throw std::out_of_range("MomentGrid::add: period or cells outside the grid");
  const std::size_t base = p * cells + c0;
  bool overflow = false;
  const auto nn = static_cast<std::ptrdiff_t>(n);
#pragma omp parallel for schedule(static) reduction(|| : overflow) if (n > 16384)
  for (std::ptrdiff_t s = 0; s < nn; ++s) {
    const auto k = static_cast<std::size_t>(s);
    const std::size_t i = base + k;
    const double uk = u[k], vk = v[k];
    if (std::isfinite(uk) && std::isfinite(vk)) {
      if (count[i] == std::numeric_limits<std::uint32_t>::max()) {
        overflow = true;
      } else {
        // Welford [1]; co-moment with the old u deviation and the new v mean [3] Eq. 3.1.
        const double c = static_cast<double>(++count[i]);
        const double du = uk - mean_u[i];
        const double dv = vk - mean_v[i];
        mean_u[i] += du / c;
        mean_v[i] += dv / c;
        m2_u[i] += du * (uk - mean_u[i]);
        const double dv_new = vk - mean_v[i];
        m2_v[i] += dv * dv_new;
        comoment_uv[i] += du * dv_new;
        mean_speed[i] += (std::sqrt(uk * uk + vk * vk) - mean_speed[i]) / c;  // |u|, as diagnostics
      }
    }
    if (vorticity != nullptr && std::isfinite(vorticity[k]) &&
        count_vorticity[i] != std::numeric_limits<std::uint32_t>::max()) {
      const double c = static_cast<double>(++count_vorticity[i]);
      mean_vorticity[i] += (vorticity[k] - mean_vorticity[i]) / c;
    }
  }
  if (overflow) throw std::overflow_error("MomentGrid::add: more than 2^32 - 1 samples in a cell");
}

void MomentGrid::merge(const MomentGrid& o) {
  if (o.periods != periods || o.cells != cells)
    throw std::invalid_argument("MomentGrid::merge: shapes differ");
  const auto total = static_cast<std::ptrdiff_t>(periods * cells);
  bool overflow = false;
#pragma omp parallel for schedule(static) reduction(|| : overflow)
  for (std::ptrdiff_t s = 0; s < total; ++s) {
    const auto i = static_cast<std::size_t>(s);
    const std::uint64_t nb_i = o.count[i];
    if (nb_i > 0) {
      const std::uint64_t na_i = count[i];
      if (na_i + nb_i > std::numeric_limits<std::uint32_t>::max()) {
        overflow = true;
      } else if (na_i == 0) {
        count[i] = o.count[i];
        mean_u[i] = o.mean_u[i];
        mean_v[i] = o.mean_v[i];
        mean_speed[i] = o.mean_speed[i];
        m2_u[i] = o.m2_u[i];
        m2_v[i] = o.m2_v[i];
        comoment_uv[i] = o.comoment_uv[i];
      } else {
        // Chan, Golub & LeVeque [2] Eq. 2.1; co-moment [3] Eq. 3.4.
        const double na = static_cast<double>(na_i), nb = static_cast<double>(nb_i);
        const double n = na + nb;
        const double du = o.mean_u[i] - mean_u[i];
        const double dv = o.mean_v[i] - mean_v[i];
        const double ds = o.mean_speed[i] - mean_speed[i];
        const double w = na * nb / n;
        m2_u[i] += o.m2_u[i] + du * du * w;
        m2_v[i] += o.m2_v[i] + dv * dv * w;
        comoment_uv[i] += o.comoment_uv[i] + du * dv * w;
        mean_u[i] += du * (nb / n);
        mean_v[i] += dv * (nb / n);
        mean_speed[i] += ds * (nb / n);
        count[i] = static_cast<std::uint32_t>(na_i + nb_i);
      }
    }
    const std::uint64_t zb = o.count_vorticity[i];
    if (zb > 0) {
      const std::uint64_t za = count_vorticity[i];
      if (za + zb > std::numeric_limits<std::uint32_t>::max()) {
        overflow = true;
      } else {
        const double n = static_cast<double>(za + zb);
        mean_vorticity[i] +=
            (o.mean_vorticity[i] - mean_vorticity[i]) * (static_cast<double>(zb) / n);
        count_vorticity[i] = static_cast<std::uint32_t>(za + zb);
      }
    }
  }
  if (overflow)
    throw std::overflow_error("MomentGrid::merge: more than 2^32 - 1 samples in a cell");
}

PrincipalAxes principal_axes(double u_var, double v_var, double uv_cov) {
  // Eigenvalues of the symmetric 2x2 covariance [4]; closed form.
  const double half_sum = 0.5 * (u_var + v_var);
  const double half_diff = 0.5 * (u_var - v_var);
  const double r = std::hypot(half_diff, uv_cov);
  PrincipalAxes a{};
  a.major_std = std::sqrt(std::max(half_sum + r, 0.0));
  a.minor_std = std::sqrt(std::max(half_sum - r, 0.0));
  if (!(r > 1e-12 * std::fabs(half_sum)) || r == 0.0) {
    a.direction_deg = nan_value;  // isotropic: every direction is a principal axis
  } else {
    // theta = 0.5 atan2(2 cov, var_u - var_v) [4], counter-clockwise from east.
    double deg = 0.5 * std::atan2(uv_cov, half_diff) * (180.0 / 3.14159265358979323846);
    if (deg <= -90.0) deg += 180.0;
    a.direction_deg = deg;
  }
  return a;
}

CellStatistics cell_statistics(const MomentGrid& m, std::size_t i) {
  CellStatistics s{};
  s.count = m.count[i];
  if (s.count == 0) {
    s.u_mean = s.v_mean = s.speed_mean = s.u_var = s.v_var = s.uv_cov = s.eke = nan_value;
    s.major_std = s.minor_std = s.major_direction_deg = nan_value;
  } else {
    const double n = static_cast<double>(s.count);
    s.u_mean = m.mean_u[i];
    s.v_mean = m.mean_v[i];
    s.speed_mean = m.mean_speed[i];
    // Population moments (divided by n); rounding can leave -0 or -tiny for
    // constant data: clamp variances at 0.
    s.u_var = std::max(m.m2_u[i] / n, 0.0);
    s.v_var = std::max(m.m2_v[i] / n, 0.0);
    s.uv_cov = m.comoment_uv[i] / n;
    s.eke = 0.5 * (s.u_var + s.v_var);  // eddy kinetic energy per unit mass, m2 s-2
    const PrincipalAxes a = principal_axes(s.u_var, s.v_var, s.uv_cov);
    s.major_std = a.major_std;
    s.minor_std = a.minor_std;
    s.major_direction_deg = a.direction_deg;
  }
  s.vorticity_mean = m.count_vorticity[i] > 0 ? m.mean_vorticity[i] : nan_value;
  return s;
}

// ---- 3. ClimatologyState --------------------------------------------------------------

namespace {

/// Largest coordinate difference accepted between inputs (degrees): float32
/// storage of the same grid differs by up to ~1e-5 degrees at 360 (common
/// practice, no source).
constexpr double grid_tolerance_deg = 1e-4;

std::string grid_difference(const CoordVar& a, const CoordVar& b, const char* what) {
  if (a.values.size() != b.values.size())
    return std::string(what) + " has " + std::to_string(b.values.size()) + " points, not " +
           std::to_string(a.values.size());
  for (std::size_t k = 0; k < a.values.size(); ++k)
    if (!(std::fabs(a.values[k] - b.values[k]) <= grid_tolerance_deg))
      return std::string(what) + " value " + std::to_string(k) + " is " + number_text(b.values[k]) +
             ", not " + number_text(a.values[k]);
  return {};
}

/// Returns "" when B can be merged into A, else the reason.
std::string incompatibility(const ClimatologyState& a, const ClimatologyState& b) {
  if (a.period != b.period)
    return std::string("grouped --by ") + to_string(b.period) + ", not " + to_string(a.period);
  if (a.calendar != b.calendar) return "calendar " + b.calendar + ", not " + a.calendar;
  if (a.kind != b.kind)
    return std::string("heights are ") + kind_text(b.kind) + ", not " + kind_text(a.kind);
  if (settings_text(a.settings) != settings_text(b.settings))
    return "geostrophy settings " + settings_text(b.settings) + ", not " +
           settings_text(a.settings);
  std::string g = grid_difference(a.lat, b.lat, "latitude");
  if (g.empty()) g = grid_difference(a.lon, b.lon, "longitude");
  if (!g.empty()) return "grid differs: " + g;
  if (a.moments.periods != b.moments.periods || a.moments.cells != b.moments.cells)
    return "accumulator shape differs";
  return {};
}

void merge_record(PeriodRecord& a, const PeriodRecord& b) {
  a.steps += b.steps;
  if (b.first && (!a.first || *b.first < *a.first)) a.first = b.first;
  if (b.last && (!a.last || *a.last < *b.last)) a.last = b.last;
}

}  // namespace

void ClimatologyState::merge(ClimatologyState other, const std::string& other_name,
                             const std::string& this_name) {
  if (other.empty()) return;
  if (empty()) {
    *this = std::move(other);
    return;
  }
  const std::string& them = other_name.empty() ? other.first_input : other_name;
  const std::string& us = this_name.empty() ? first_input : this_name;
  const std::string why = incompatibility(*this, other);
  if (!why.empty())
    throw InputError(input_message(them, "", "cannot be combined with " + us + ": " + why));
  try {
    moments.merge(other.moments);
  } catch (const std::overflow_error& e) {
    throw InputError(input_message(them, "", e.what()));
  }
  for (std::size_t p = 0; p < records.size(); ++p) merge_record(records[p], other.records[p]);
  inputs += other.inputs;
}

// ---- 4. reading inputs ----------------------------------------------------------------

namespace {

/// Reads a global or variable text attribute through netCDF (nullopt when absent).
std::optional<std::string> nc_text(int ncid, int varid, const char* name) {
  nc_type t = NC_NAT;
  std::size_t len = 0;
  if (nc_inq_att(ncid, varid, name, &t, &len) != NC_NOERR || t != NC_CHAR) return std::nullopt;
  std::string s(len, '\0');
  if (len && nc_get_att_text(ncid, varid, name, s.data()) != NC_NOERR) return std::nullopt;
  while (!s.empty() && s.back() == '\0') s.pop_back();
  return s;
}

bool starts_with(const std::string& s, const char* prefix) {
  return s.compare(0, std::strlen(prefix), prefix) == 0;
}

/// Opens PATH read-only; -1 when it is not netCDF.
struct NcReadHandle {
  int id = -1;
  explicit NcReadHandle(const std::string& path) {
    if (nc_open(path.c_str(), NC_NOWRITE, &id) != NC_NOERR) id = -1;
  }
  ~NcReadHandle() {
    if (id >= 0) nc_close(id);
  }
  NcReadHandle(const NcReadHandle&) = delete;
  NcReadHandle& operator=(const NcReadHandle&) = delete;
};

bool has_variable(int ncid, const char* name) {
  int varid = -1;
  return nc_inq_varid(ncid, name, &varid) == NC_NOERR;
}

/// The selected time steps of an input: step index, period and date.
struct Step {
  std::size_t t = 0, p = 0;
  Ymd date;
};

/// Decodes the dates of READER's time steps and keeps those inside the job's
/// --from/--to; checks the calendar against STATE's (when not empty).
std::vector<Step> select_steps(const Reader& reader, const ClimatologyJob& job,
                               std::string& calendar) {
  const HeightInfo& info = reader.info();
  if (!info.time)
    throw InputError(input_message(info.path, info.variable,
                                   "has no time coordinate: a climatology needs the date of "
                                   "every map"));
  try {
    calendar = canonical_calendar(info.calendar);
  } catch (const std::invalid_argument& e) {
    throw InputError(input_message(info.path, info.time->name, e.what()));
  }
  std::vector<Step> steps;
  for (std::size_t t = 0; t < info.nt; ++t) {
    const CivilTime c = reader.date(t);  // InputError for undecodable time
    const Ymd d{c.year, c.month, c.day};
    if (job.from && d < *job.from) continue;
    if (job.to && *job.to < d) continue;
    steps.push_back({t, period_index(job.period, c.month), d});
  }
  return steps;
}

/// Makes STATE ready for an input with this grid and settings: adopts them
/// when STATE is empty, else checks that they match.
void adopt_or_check(ClimatologyState& state, const std::string& path, const ClimatologyJob& job,
                    const HeightInfo& info, const std::string& calendar, HeightKind kind,
                    const std::vector<Attribute>& settings) {
  ClimatologyState probe;
  probe.period = job.period;
  probe.calendar = calendar;
  probe.kind = kind;
  probe.settings = settings;
  probe.lat = info.lat;
  probe.lon = info.lon;
  probe.first_input = path;
  if (state.empty()) {
    probe.records.assign(period_count(job.period), PeriodRecord{});
    // 64 B per cell and period (MomentGrid) and the output's copy (resources.hpp).
    require_memory(2.0 * 64.0 * static_cast<double>(period_count(job.period)) *
                       static_cast<double>(info.ny) * static_cast<double>(info.nx),
                   "the moments of " + std::to_string(period_count(job.period)) + " period(s) x " +
                       std::to_string(info.ny) + " x " + std::to_string(info.nx) + " cells",
                   path, info.variable);
    probe.moments = MomentGrid(period_count(job.period), info.ny * info.nx);
    state = std::move(probe);
    return;
  }
  probe.moments.periods = state.moments.periods;
  probe.moments.cells = info.ny * info.nx;
  const std::string why = incompatibility(state, probe);
  if (!why.empty())
    throw InputError(input_message(path, info.variable,
                                   "cannot be combined with " + state.first_input + ": " + why));
}

void note_step(ClimatologyState& state, const Step& s) {
  PeriodRecord& r = state.records[s.p];
  r.steps += 1;
  if (!r.first || s.date < *r.first) r.first = s.date;
  if (!r.last || *r.last < s.date) r.last = s.date;
}

void add_rows(ClimatologyState& state, const std::string& path, std::size_t p, std::size_t c0,
              std::size_t n, const double* u, const double* v, const double* z) {
  try {
    state.moments.add(p, c0, n, u, v, z);
  } catch (const std::overflow_error& e) {
    throw InputError(input_message(path, "", e.what()));
  }
}

std::string when_text(const Reader& r, std::size_t t) {
  std::string when = "time step " + std::to_string(t);
  try {
    when += " (" + r.date(t).iso() + ")";
  } catch (const Error&) {
  }
  return when;
}

Grid make_grid(const HeightInfo& info) {
  try {
    return Grid(info.lat.values, info.lon.values);
  } catch (const std::invalid_argument& e) {
    throw InputError(input_message(info.path, info.variable, e.what()));
  }
}

/// Heights: u, v, vorticity through the kernels, band by band (as run_currents).
void accumulate_height(const std::string& path, const ClimatologyJob& job,
                       ClimatologyState& state) {
  validate(job.options);
  Reader reader(path, job.reader);
  const HeightInfo& info = reader.info();
  std::string calendar;
  const std::vector<Step> steps = select_steps(reader, job, calendar);
  const std::vector<Attribute> settings =
      pick_settings(currents_global_attributes(info, job.options, ""));
  adopt_or_check(state, path, job, info, calendar, info.kind, settings);

  const Grid grid = make_grid(info);
  const GeostrophicKernel kernel(grid, job.options);
  const KinematicsKernel kinematics(grid, job.options.order, job.options.coast, job.options.earth);
  const std::size_t hv = kernel.halo_rows(), hd = kinematics.halo_rows();
  const std::size_t ny = grid.ny(), nx = grid.nx();
  // Bands of ~1 MiB of doubles per field (heights, u, v, six diagnostics:
  // 72 bytes per cell per band in flight), computed in parallel, one band per
  // thread; the heights of a group of bands (up to a quarter of --memory, at
  // least one band per thread) are read first, on this thread, since netCDF
  // is not thread-safe; the reader inflates their chunks on all threads.
  // Small bands stay in the caches and reuse their pages (fresh pages are
  // expensive: docs/performance.md).
  const auto threads = static_cast<std::size_t>(std::max(1, omp_get_max_threads()));
  const std::size_t rows = std::clamp<std::size_t>(
      (std::size_t{1} << 20) / (8 * std::max<std::size_t>(nx, 1)), 16,
      std::max<std::size_t>(16, band_rows_for_budget(nx, ny, hv + hd, job.memory_bytes, 1)));
  const std::vector<Band> bands = plan_bands(ny, rows);
  const std::size_t group_rows = std::max(
      rows * threads, job.memory_bytes / 4 / (8 * std::max<std::size_t>(nx, 1)));
  const std::size_t per_group = std::max<std::size_t>(1, group_rows / rows);

  struct Work {
    Field u, v, zeta;
    std::vector<std::uint8_t> flags;
  };
  std::vector<Work> work(threads);
  Field eta;
  for (const Step& s : steps) {
    std::size_t valid_height = 0;
    for (std::size_t g0 = 0; g0 < bands.size(); g0 += per_group) {
      const std::size_t g1 = std::min(bands.size(), g0 + per_group);
      // Rows the group's bands need: their own, the diagnostic halo and the
      // velocity halo (as run_currents).
      const std::size_t j_lo = bands[g0].j0, j_hi = bands[g1 - 1].j0 + bands[g1 - 1].n;
      const std::size_t e0 = j_lo >= hd + hv ? j_lo - hd - hv : 0;
      const std::size_t e1 = std::min(ny, j_hi + hd + hv);
      reader.read_rows(s.t, e0, e1 - e0, eta);
      for (std::size_t j = j_lo - e0; j < j_hi - e0; ++j)
        for (std::size_t i = 0; i < nx; ++i) valid_height += !std::isnan(eta.at(j, i));
      std::exception_ptr error;
      const auto n_bands = static_cast<std::ptrdiff_t>(g1 - g0);
      // One band per thread; the kernels' own parallel loops run nested, on
      // one thread. Bands write disjoint cells of the moments.
#pragma omp parallel for schedule(dynamic, 1) num_threads(static_cast<int>(threads))
      for (std::ptrdiff_t k = 0; k < n_bands; ++k) {
        try {
          Work& w = work[static_cast<std::size_t>(omp_get_thread_num())];
          const Band& b = bands[g0 + static_cast<std::size_t>(k)];
          const std::size_t v0 = b.j0 >= hd ? b.j0 - hd : 0;
          const std::size_t v1 = std::min(ny, b.j0 + b.n + hd);
          kernel.compute(eta, e0, v0, v1 - v0, w.u, w.v, w.flags);
          kinematics.vorticity(w.u, w.v, v0, b.j0, b.n, w.zeta);
          add_rows(state, path, s.p, b.j0 * nx, b.n * nx, w.u.row(b.j0 - v0),
                   w.v.row(b.j0 - v0), w.zeta.data.data());
        } catch (...) {
#pragma omp critical(seatilt_climatology_error)
          if (!error) error = std::current_exception();
        }
      }
      if (error) std::rethrow_exception(error);
    }
    if (valid_height == 0)
      throw InputError(input_message(path, info.variable,
                                     "every cell is missing (fill) at " + when_text(reader, s.t)));
    note_step(state, s);
  }
}

/// Parses the kinematics settings of a currents output (defaults: the job's).
void kinematics_settings(const std::vector<Attribute>& attrs, const CurrentsOptions& fallback,
                         int& order, CoastMethod& coast, EarthModel& earth) {
  order = fallback.order;
  coast = fallback.coast;
  earth = fallback.earth;
  if (const Attribute* a = find_attribute(attrs, "geostrophy_stencil_order");
      a && !a->values.empty())
    order = static_cast<int>(a->values[0]);
  if (const Attribute* a = find_attribute(attrs, "geostrophy_coast_method"))
    coast =
        trim(a->text) == to_string(CoastMethod::mask) ? CoastMethod::mask : CoastMethod::one_sided;
  if (const Attribute* a = find_attribute(attrs, "geostrophy_earth_model"))
    earth = trim(a->text) == to_string(EarthModel::sphere) ? EarthModel::sphere : EarthModel::wgs84;
}

void require_units(const HeightInfo& info, std::initializer_list<const char*> accepted) {
  const Attribute* a = find_attribute(info.variable_attrs, "units");
  const std::string units = a ? trim(a->text) : std::string();
  for (const char* ok : accepted)
    if (units == ok) return;
  throw InputError(input_message(info.path, info.variable,
                                 "units \"" + units + "\" are not " + *accepted.begin()));
}

/// A currents output: read u, v (and vorticity, or compute it).
void accumulate_currents(const std::string& path, const ClimatologyJob& job,
                         ClimatologyState& state) {
  // The reader reads any variable; units "m" make its length conversion the
  // identity (scale 1), and the real units are checked below.
  Reader ru(path, ReaderOptions{"u", "m"});
  Reader rv(path, ReaderOptions{"v", "m"});
  const HeightInfo& info = ru.info();
  require_units(info, {"m s-1", "m/s", "m s^-1", "m.s-1"});
  require_units(rv.info(), {"m s-1", "m/s", "m s^-1", "m.s-1"});
  if (rv.info().ny != info.ny || rv.info().nx != info.nx || rv.info().nt != info.nt)
    throw InputError(input_message(path, "v", "has another shape than u"));
  std::optional<Reader> rz;
  {
    NcReadHandle nc(path);
    if (nc.id >= 0 && has_variable(nc.id, "vorticity"))
      rz.emplace(path, ReaderOptions{"vorticity", "m"});
  }
  if (rz) require_units(rz->info(), {"s-1", "1/s", "s^-1"});

  std::string calendar;
  const std::vector<Step> steps = select_steps(ru, job, calendar);
  const Attribute* u_sn = find_attribute(info.variable_attrs, "standard_name");
  const Attribute* kind_attr = find_attribute(info.global_attrs, "input_height_kind");
  HeightKind kind = HeightKind::absolute;
  if (u_sn && u_sn->text.find("sea_level_for_geoid") != std::string::npos)
    kind = HeightKind::anomaly;
  else if (!u_sn && kind_attr && trim(kind_attr->text) == "anomaly")
    kind = HeightKind::anomaly;
  std::vector<Attribute> settings = pick_settings(info.global_attrs);
  adopt_or_check(state, path, job, info, calendar, kind, settings);

  const std::size_t ny = info.ny, nx = info.nx;
  std::optional<Grid> grid;
  std::optional<KinematicsKernel> kinematics;
  std::size_t hd = 0;
  if (!rz) {
    int order = 2;
    CoastMethod coast = CoastMethod::one_sided;
    EarthModel earth = EarthModel::wgs84;
    kinematics_settings(info.global_attrs, job.options, order, coast, earth);
    if (order != 2 && order != 4 && order != 6)
      throw InputError(input_message(
          path, "", "geostrophy_stencil_order " + std::to_string(order) + " is not 2, 4 or 6"));
    grid.emplace(make_grid(info));
    kinematics.emplace(*grid, order, coast, earth);
    hd = kinematics->halo_rows();
  }
  // Budget: u, v (with halo) and vorticity as doubles, plus the diagnostics.
  const std::size_t rows = band_rows_for_budget(nx, ny, hd, job.memory_bytes, 1);
  Field u, v, z;
  Kinematics kin;
  std::vector<std::uint8_t> flags;
  for (const Step& s : steps) {
    std::size_t valid = 0;
    for (const Band& b : plan_bands(ny, rows)) {
      const std::size_t v0 = b.j0 >= hd ? b.j0 - hd : 0;
      const std::size_t v1 = std::min(ny, b.j0 + b.n + hd);
      ru.read_rows(s.t, v0, v1 - v0, u);
      rv.read_rows(s.t, v0, v1 - v0, v);
      for (std::size_t k = (b.j0 - v0) * nx; k < (b.j0 - v0 + b.n) * nx; ++k)
        valid += std::isfinite(u.data[k]) && std::isfinite(v.data[k]);
      const double* zp = nullptr;
      if (rz) {
        rz->read_rows(s.t, b.j0, b.n, z);
        zp = z.data.data();
      } else {
        flags.assign(b.n * nx, 0);
        kinematics->compute(u, v, v0, b.j0, b.n, kin, flags);
        zp = kin.vorticity.data.data();
      }
      add_rows(state, path, s.p, b.j0 * nx, b.n * nx, u.row(b.j0 - v0), v.row(b.j0 - v0), zp);
    }
    if (valid == 0)
      throw InputError(
          input_message(path, "u", "every cell is missing (fill) at " + when_text(ru, s.t)));
    note_step(state, s);
  }
}

}  // namespace

ClimatologyInput detect_climatology_input(const std::string& path) {
  NcReadHandle nc(path);
  if (nc.id < 0) return ClimatologyInput::height;
  nc_type t = NC_NAT;
  if (nc_inq_atttype(nc.id, NC_GLOBAL, "geostrophy_stencil_order", &t) == NC_NOERR &&
      has_variable(nc.id, "u") && has_variable(nc.id, "v"))
    return ClimatologyInput::currents;
  int uid = -1, vid = -1;
  if (nc_inq_varid(nc.id, "u", &uid) == NC_NOERR && nc_inq_varid(nc.id, "v", &vid) == NC_NOERR) {
    const std::string su = nc_text(nc.id, uid, "standard_name").value_or("");
    const std::string sv = nc_text(nc.id, vid, "standard_name").value_or("");
    // Current and alias CF names of surface geostrophic velocity (REFERENCES.md 1).
    const bool gu = starts_with(su, "surface_geostrophic_eastward_sea_water_velocity") ||
                    starts_with(su, "surface_eastward_geostrophic_sea_water_velocity");
    const bool gv = starts_with(sv, "surface_geostrophic_northward_sea_water_velocity") ||
                    starts_with(sv, "surface_northward_geostrophic_sea_water_velocity");
    if (gu && gv) return ClimatologyInput::currents;
  }
  return ClimatologyInput::height;
}

void accumulate(const std::string& path, const ClimatologyJob& job, ClimatologyState& state) {
  if (job.from && job.to && *job.to < *job.from)
    throw UsageError("--from " + job.from->iso() + " is after --to " + job.to->iso());
  if (is_partial_file(path))
    throw InputError(input_message(path, "",
                                   "is a partial climatology state; combine partial states "
                                   "with `seatilt merge`"));
  const std::uint64_t before = state.inputs;
  if (detect_climatology_input(path) == ClimatologyInput::currents)
    accumulate_currents(path, job, state);
  else
    accumulate_height(path, job, state);
  state.inputs = before + 1;
}

// ---- 5. netCDF output --------------------------------------------------------------------

namespace {

std::string errno_text(int err) { return std::strerror(err); }

std::pair<std::string, std::string> split_path(const std::string& path) {
  const auto slash = path.rfind('/');
  if (slash == std::string::npos) return {".", path};
  return {slash == 0 ? std::string("/") : path.substr(0, slash), path.substr(slash + 1)};
}


std::uint32_t random_bits() {
  try {
    std::random_device rd;
    return static_cast<std::uint32_t>(rd());
  } catch (...) {
    return static_cast<std::uint32_t>(std::chrono::steady_clock::now().time_since_epoch().count());
  }
}

/// A netCDF-4 file written under a hidden temporary name beside PATH and
/// renamed onto PATH by commit() (same publish rules as writer.hpp).
class AtomicNc {
 public:
  AtomicNc(const std::string& path, bool force) : path_(path), force_(force) {
    check_output_target(path, force);
    const auto [folder, name] = split_path(path);
    int status = NC_NOERR;
    for (int attempt = 0; attempt < 4; ++attempt) {
      char tag[32];
      std::snprintf(tag, sizeof tag, "%ld-%08x", static_cast<long>(::getpid()),
                    static_cast<unsigned>(random_bits()));
      tmp_ = folder + "/." + name + ".tmp-" + tag;
      status = nc_create(tmp_.c_str(), NC_NETCDF4 | NC_NOCLOBBER, &id_);
      if (status == NC_NOERR) {
        open_ = true;
        exists_ = true;
        return;
      }
      if (status != NC_EEXIST && status != EEXIST) break;
    }
    fail("", std::string("cannot create temporary file ") + tmp_ + ": " + nc_strerror(status));
  }
  ~AtomicNc() { discard(); }
  AtomicNc(const AtomicNc&) = delete;
  AtomicNc& operator=(const AtomicNc&) = delete;

  [[nodiscard]] int id() const { return id_; }

  [[noreturn]] void fail(const std::string& variable, const std::string& problem) {
    discard();
    throw OutputError(input_message(path_, variable, problem));
  }
  void check(int status, const std::string& variable, const std::string& action) {
    if (status != NC_NOERR) fail(variable, std::string(nc_strerror(status)) + " (" + action + ")");
  }
  void put(int varid, const std::string& owner, const Attribute& a) {
    if (a.nc_type == NC_CHAR || a.nc_type == NC_STRING)
      check(nc_put_att_text(id_, varid, a.name.c_str(), a.text.size(), a.text.c_str()), owner,
            "writing attribute " + a.name);
    else
      check(nc_put_att_double(id_, varid, a.name.c_str(), a.nc_type, a.values.size(),
                              a.values.data()),
            owner, "writing attribute " + a.name);
  }
  void text(int varid, const std::string& owner, const std::string& name,
            const std::string& value) {
    put(varid, owner, text_attribute(name, value));
  }

  void commit() {
    open_ = false;
    if (const int status = nc_close(id_); status != NC_NOERR)
      fail("", std::string(nc_strerror(status)) + " (closing)");
    if (const int err = sync_path(tmp_, false); err != 0)
      fail("", "flushing to disk: " + errno_text(err));
    const int err = force_ ? (std::rename(tmp_.c_str(), path_.c_str()) == 0 ? 0 : errno)
                           : rename_noreplace(tmp_, path_);
    if (err != 0)
      fail("", err == EEXIST ? std::string("output exists (use --force to overwrite)")
                             : "renaming " + tmp_ + ": " + errno_text(err));
    exists_ = false;
    sync_path(split_path(path_).first, true);
  }

 private:
  void discard() noexcept {
    if (open_) {
      nc_close(id_);
      open_ = false;
    }
    if (exists_) {
      ::unlink(tmp_.c_str());
      exists_ = false;
    }
  }
  std::string path_, tmp_;
  bool force_ = false;
  int id_ = -1;
  bool open_ = false, exists_ = false;
};

bool skip_coordinate_attribute(const std::string& n) {
  return n == "_FillValue" || n == "scale_factor" || n == "add_offset" || n == "missing_value" ||
         n == "valid_min" || n == "valid_max" || n == "valid_range" || n == "_Unsigned" ||
         n == "bounds" || (!n.empty() && n[0] == '_');
}

/// Defines a coordinate (double) on DIM with the attributes of C; returns its id.
int define_coordinate(AtomicNc& f, const CoordVar& c, int dim) {
  int varid = -1;
  f.check(nc_def_var(f.id(), c.name.c_str(), NC_DOUBLE, 1, &dim, &varid), c.name,
          "defining coordinate");
  for (const Attribute& a : c.attrs)
    if (!skip_coordinate_attribute(a.name)) f.put(varid, c.name, a);
  return varid;
}

std::string dim_name(const CoordVar& c) { return c.dim.empty() ? c.name : c.dim; }

std::size_t chunk_rows_for(std::size_t nx, std::size_t ny) {
  // ~1 MiB float32 chunks, as writer.hpp.
  return std::clamp<std::size_t>((262144 + nx - 1) / nx, 1, std::max<std::size_t>(ny, 1));
}

/// Defines a chunked, compressed (period/time, lat, lon) variable.
int define_grid_variable(AtomicNc& f, const std::string& name, nc_type type, const int* dims,
                         std::size_t ny, std::size_t nx, int deflate) {
  int varid = -1;
  f.check(nc_def_var(f.id(), name.c_str(), type, 3, dims, &varid), name, "defining variable");
  const std::size_t chunks[3] = {1, chunk_rows_for(nx, ny), nx};
  f.check(nc_def_var_chunking(f.id(), varid, NC_CHUNKED, chunks), name, "setting chunking");
  if (deflate > 0)
    f.check(nc_def_var_deflate(f.id(), varid, 1, 1, deflate), name, "setting deflate");
  return varid;
}

std::string now_iso() {
  std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

/// Climatological interval of period P (CF 7.4): start of the first
/// sub-interval, end of the last, and the representative time (middle of the
/// first sub-interval). Day numbers on the state's calendar.
struct Interval {
  long long start = 0, end = 0;
  double middle = 0.0;
  Ymd start_date;
};

Interval period_interval(const ClimatologyState& st, std::size_t p, const Ymd& all_first,
                         const Ymd& all_last) {
  const PeriodRecord& r = st.records[p];
  const Ymd first = r.first.value_or(all_first), last = r.last.value_or(all_last);
  const std::string& cal = st.calendar;
  Interval iv;
  switch (st.period) {
    case ClimatologyPeriod::all: {
      iv.start_date = first;
      iv.start = calendar_day_number(cal, first);
      iv.end = calendar_day_number(cal, last) + 1;  // whole days: up to the end of the last day
      iv.middle = 0.5 * static_cast<double>(iv.start + iv.end);
      return iv;
    }
    case ClimatologyPeriod::month: {
      const int m = static_cast<int>(p) + 1;
      iv.start_date = {first.year, m, 1};
      iv.start = calendar_day_number(cal, iv.start_date);
      iv.end = calendar_day_number(cal, add_months(last.year, m, 1));
      const long long first_end = calendar_day_number(cal, add_months(first.year, m, 1));
      iv.middle = 0.5 * static_cast<double>(iv.start + first_end);
      return iv;
    }
    case ClimatologyPeriod::season: {
      const int m = season_start[p];
      const int y0 = season_year(st.period, first), y1 = season_year(st.period, last);
      iv.start_date = {y0, m, 1};
      iv.start = calendar_day_number(cal, iv.start_date);
      iv.end = calendar_day_number(cal, add_months(y1, m, 3));
      const long long first_end = calendar_day_number(cal, add_months(y0, m, 3));
      iv.middle = 0.5 * static_cast<double>(iv.start + first_end);
      return iv;
    }
  }
  return iv;
}

/// First and last sample dates over every period; throws InputError when
/// no period has a sample.
std::pair<Ymd, Ymd> overall_dates(const ClimatologyState& st) {
  std::optional<Ymd> first, last;
  for (const auto& r : st.records) {
    if (r.first && (!first || *r.first < *first)) first = r.first;
    if (r.last && (!last || *last < *r.last)) last = r.last;
  }
  if (!first || !last)
    throw InputError(
        input_message(st.first_input, "", "no time step was selected (check --from/--to)"));
  return {*first, *last};
}

struct FieldSpec {
  const char* name;
  const char* standard_name;          // absolute input ("" none)
  const char* standard_name_anomaly;  // anomaly input
  const char* long_name;
  const char* units;
  enum Method { mean, variance, product, none } method;
  const char* cell_comment;  // extra text in parentheses for non-mean methods
  const char* comment;
};

const FieldSpec output_fields[] = {
    {"u_mean", "surface_geostrophic_eastward_sea_water_velocity",
     "surface_geostrophic_eastward_sea_water_velocity_assuming_mean_sea_level_for_geoid",
     "mean eastward geostrophic surface velocity", "m s-1", FieldSpec::mean, "", ""},
    {"v_mean", "surface_geostrophic_northward_sea_water_velocity",
     "surface_geostrophic_northward_sea_water_velocity_assuming_mean_sea_level_for_geoid",
     "mean northward geostrophic surface velocity", "m s-1", FieldSpec::mean, "", ""},
    {"speed_mean", "sea_water_speed", "sea_water_speed", "mean geostrophic surface speed", "m s-1",
     FieldSpec::mean, "",
     "Mean of the speed sqrt(u^2 + v^2) of each map, not the speed of the mean velocity."},
    {"u_var", "", "", "variance of the eastward geostrophic surface velocity about u_mean",
     "m2 s-2", FieldSpec::variance, "squared deviation from u_mean",
     "Population variance (sum of squared deviations divided by count)."},
    {"v_var", "", "", "variance of the northward geostrophic surface velocity about v_mean",
     "m2 s-2", FieldSpec::variance, "squared deviation from v_mean",
     "Population variance (sum of squared deviations divided by count)."},
    {"uv_cov", "", "", "covariance of the eastward and northward geostrophic surface velocity",
     "m2 s-2", FieldSpec::product, "product of the deviations from u_mean and v_mean",
     "Population covariance (sum of products of deviations divided by count)."},
    {"eke", "", "", "eddy kinetic energy per unit mass of the geostrophic surface flow", "m2 s-2",
     FieldSpec::product, "half the squared deviation from the mean velocity",
     "eke = (u_var + v_var) / 2: kinetic energy of the deviations from the mean velocity of the "
     "period."},
    {"variance_major_axis_std", "", "",
     "standard deviation of the geostrophic surface velocity along the major principal axis of "
     "its variance",
     "m s-1", FieldSpec::none, "",
     "Square root of the larger eigenvalue of the covariance matrix [[u_var, uv_cov], [uv_cov, "
     "v_var]] (principal axes, Emery and Thomson 2001)."},
    {"variance_minor_axis_std", "", "",
     "standard deviation of the geostrophic surface velocity along the minor principal axis of "
     "its variance",
     "m s-1", FieldSpec::none, "",
     "Square root of the smaller eigenvalue of the covariance matrix [[u_var, uv_cov], [uv_cov, "
     "v_var]]."},
    {"variance_major_axis_direction", "", "",
     "orientation of the major principal axis of the geostrophic surface velocity variance",
     "degree", FieldSpec::none, "",
     "Angle of the major axis in degrees counter-clockwise from east, in (-90, 90]: 0 = "
     "east-west, 90 = north-south. An axis, not a direction of flow (theta and theta + 180 are "
     "the same axis). theta = 0.5 atan2(2 uv_cov, u_var - v_var). _FillValue where the variance "
     "is isotropic."},
    {"vorticity_mean", "ocean_relative_vorticity", "ocean_relative_vorticity",
     "mean relative vorticity of the geostrophic surface flow", "s-1", FieldSpec::mean, "", ""},
};
constexpr std::size_t field_count = sizeof(output_fields) / sizeof(output_fields[0]);

double field_value(const CellStatistics& s, std::size_t k) {
  switch (k) {
    case 0:
      return s.u_mean;
    case 1:
      return s.v_mean;
    case 2:
      return s.speed_mean;
    case 3:
      return s.u_var;
    case 4:
      return s.v_var;
    case 5:
      return s.uv_cov;
    case 6:
      return s.eke;
    case 7:
      return s.major_std;
    case 8:
      return s.minor_std;
    case 9:
      return s.major_direction_deg;
    case 10:
      return s.vorticity_mean;
    default:
      return nan_value;
  }
}

std::string cell_methods(const FieldSpec& f, ClimatologyPeriod period) {
  const bool clim = period != ClimatologyPeriod::all;
  switch (f.method) {
    case FieldSpec::mean:
      return clim ? "time: mean within years time: mean over years" : "time: mean";
    case FieldSpec::variance:
      if (!clim) return "time: variance";
      [[fallthrough]];
    case FieldSpec::product:
      return std::string(clim ? "time: mean within years time: mean over years" : "time: mean") +
             " (" + f.cell_comment + ")";
    case FieldSpec::none:
      return {};
  }
  return {};
}

std::vector<Attribute> common_global_attributes(const ClimatologyState& st,
                                                const std::string& command_line,
                                                const std::string& title,
                                                const std::string& summary) {
  std::vector<Attribute> g;
  const std::string created = now_iso();
  g.push_back(text_attribute("Conventions", "CF-1.12, ACDD-1.3"));
  g.push_back(text_attribute("title", title));
  g.push_back(text_attribute("summary", summary));
  g.push_back(text_attribute("keywords",
                             "geostrophic currents, climatology, eddy kinetic energy, "
                             "velocity variance, sea surface height"));
  g.push_back(text_attribute("comment", currents_caution()));
  g.push_back(text_attribute("history", created + " " + command_line));
  g.push_back(text_attribute("source", std::string("seatilt ") + SEATILT_VERSION + " from " +
                                           std::to_string(st.inputs) + " input file(s), first " +
                                           st.first_input));
  g.push_back(text_attribute("processing_level", "L4 derived product"));
  g.push_back(text_attribute("standard_name_vocabulary", "CF Standard Name Table v83"));
  g.push_back(text_attribute("date_created", created));
  const auto [lat_lo, lat_hi] = std::minmax_element(st.lat.values.begin(), st.lat.values.end());
  const auto [lon_lo, lon_hi] = std::minmax_element(st.lon.values.begin(), st.lon.values.end());
  g.push_back(number_attribute("geospatial_lat_min", NC_DOUBLE, {*lat_lo}));
  g.push_back(number_attribute("geospatial_lat_max", NC_DOUBLE, {*lat_hi}));
  g.push_back(text_attribute("geospatial_lat_units", "degrees_north"));
  g.push_back(number_attribute("geospatial_lon_min", NC_DOUBLE, {*lon_lo}));
  g.push_back(number_attribute("geospatial_lon_max", NC_DOUBLE, {*lon_hi}));
  g.push_back(text_attribute("geospatial_lon_units", "degrees_east"));
  for (const Attribute& a : st.settings) g.push_back(a);
  g.push_back(text_attribute("input_height_kind", kind_text(st.kind)));
  g.push_back(text_attribute("climatology_period", to_string(st.period)));
  g.push_back(text_attribute("climatology_calendar", st.calendar));
  g.push_back(
      number_attribute("climatology_input_files", NC_DOUBLE, {static_cast<double>(st.inputs)}));
  return g;
}

void check_deflate(int deflate) {
  if (deflate < 0 || deflate > 9)
    throw UsageError("--deflate: " + std::to_string(deflate) + " is outside 0..9");
}

}  // namespace

void check_output_target(const std::string& path, bool force) {
  const auto [folder, name] = split_path(path);
  const auto fail = [&](const std::string& problem) {
    throw OutputError(input_message(path, "", problem));
  };
  if (name.empty() || name == "." || name == "..") fail("output is not a file name");
  struct stat st {};
  if (::stat(folder.c_str(), &st) != 0) fail("output folder " + folder + ": " + errno_text(errno));
  if (!S_ISDIR(st.st_mode)) fail("output folder " + folder + ": " + errno_text(ENOTDIR));
  if (::access(folder.c_str(), W_OK | X_OK) != 0)
    fail("output folder " + folder + ": " + errno_text(errno));
  if (::lstat(path.c_str(), &st) == 0) {
    struct stat target {};
    if (::stat(path.c_str(), &target) == 0 && S_ISDIR(target.st_mode)) fail("output is a folder");
    if (!force) fail("output exists (use --force to overwrite)");
  } else if (errno != ENOENT) {
    fail(errno_text(errno));
  }
}

void write_climatology(const ClimatologyState& st, const ClimatologyOutputOptions& out) {
  if (!(out.min_valid >= 0.0 && out.min_valid <= 1.0))
    throw UsageError("--min-valid: " + number_text(out.min_valid) + " is outside 0..1");
  check_deflate(out.deflate);
  if (st.empty()) throw InputError("no input was accumulated");
  const auto [all_first, all_last] = overall_dates(st);
  const std::size_t P = st.records.size(), ny = st.lat.values.size(), nx = st.lon.values.size();
  const std::size_t C = ny * nx;

  std::vector<Interval> iv;
  Ymd ref;
  long long ref_day = 0;
  try {
    for (std::size_t p = 0; p < P; ++p) iv.push_back(period_interval(st, p, all_first, all_last));
    ref = {iv[0].start_date.year, 1, 1};
    for (const auto& i : iv) ref.year = std::min(ref.year, i.start_date.year);
    ref_day = calendar_day_number(st.calendar, ref);
  } catch (const std::invalid_argument& e) {
    throw InputError(input_message(st.first_input, "time", e.what()));
  }
  char units[64];
  std::snprintf(units, sizeof units, "days since %04d-01-01 00:00:00", ref.year);

  AtomicNc f(out.path, out.force);
  const int nc = f.id();
  int old_fill = 0;
  f.check(nc_set_fill(nc, NC_FILL, &old_fill), "", "setting fill mode");
  int d_time = -1, d_nv = -1, d_lat = -1, d_lon = -1;
  f.check(nc_def_dim(nc, "time", P, &d_time), "time", "defining dimension");
  f.check(nc_def_dim(nc, "nv", 2, &d_nv), "nv", "defining dimension");
  f.check(nc_def_dim(nc, dim_name(st.lat).c_str(), ny, &d_lat), st.lat.name, "defining dimension");
  f.check(nc_def_dim(nc, dim_name(st.lon).c_str(), nx, &d_lon), st.lon.name, "defining dimension");

  const bool clim = st.period != ClimatologyPeriod::all;
  const std::string bounds_name = clim ? "climatology_bounds" : "time_bounds";
  int v_time = -1, v_bounds = -1;
  f.check(nc_def_var(nc, "time", NC_DOUBLE, 1, &d_time, &v_time), "time", "defining coordinate");
  f.text(v_time, "time", "standard_name", "time");
  f.text(v_time, "time", "long_name",
         clim ? "time of the climatological period (middle of its first occurrence)"
              : "middle of the averaging period");
  f.text(v_time, "time", "units", units);
  f.text(v_time, "time", "calendar", st.calendar);
  f.text(v_time, "time", "axis", "T");
  // CF 7.4: a climatological time axis names its bounds with `climatology`
  // (never `bounds`); a single contiguous period uses ordinary bounds (CF 7.1).
  f.text(v_time, "time", clim ? "climatology" : "bounds", bounds_name);
  const int bdims[2] = {d_time, d_nv};
  f.check(nc_def_var(nc, bounds_name.c_str(), NC_DOUBLE, 2, bdims, &v_bounds), bounds_name,
          "defining variable");
  // CF 7.1 lets bounds repeat the parent's units and calendar (they must then
  // agree); readers that do not propagate them (xarray) decode them this way.
  f.text(v_bounds, bounds_name, "units", units);
  f.text(v_bounds, bounds_name, "calendar", st.calendar);
  const int v_lat = define_coordinate(f, st.lat, d_lat);
  const int v_lon = define_coordinate(f, st.lon, d_lon);

  const int dims[3] = {d_time, d_lat, d_lon};
  std::vector<int> ids(field_count, -1);
  const float fill = NC_FILL_FLOAT;
  for (std::size_t k = 0; k < field_count; ++k) {
    const FieldSpec& fs = output_fields[k];
    ids[k] = define_grid_variable(f, fs.name, NC_FLOAT, dims, ny, nx, out.deflate);
    f.check(nc_put_att_float(nc, ids[k], "_FillValue", NC_FLOAT, 1, &fill), fs.name,
            "writing attribute _FillValue");
    const char* sn = st.kind == HeightKind::anomaly ? fs.standard_name_anomaly : fs.standard_name;
    if (*sn) f.text(ids[k], fs.name, "standard_name", sn);
    f.text(ids[k], fs.name, "long_name", fs.long_name);
    f.text(ids[k], fs.name, "units", fs.units);
    const std::string cm = cell_methods(fs, st.period);
    if (!cm.empty()) f.text(ids[k], fs.name, "cell_methods", cm);
    if (*fs.comment) f.text(ids[k], fs.name, "comment", fs.comment);
    f.text(ids[k], fs.name, "coverage_content_type", "modelResult");
    f.text(ids[k], fs.name, "ancillary_variables", "count");
  }
  const int v_count = define_grid_variable(f, "count", NC_INT, dims, ny, nx, out.deflate);
  // CF Appendix C: number_of_observations is preferred over the number_of_observations modifier.
  f.text(v_count, "count", "standard_name", "number_of_observations");
  f.text(v_count, "count", "long_name", "number of maps with a valid velocity in the cell");
  f.text(v_count, "count", "units", "1");
  f.text(v_count, "count", "coverage_content_type", "auxiliaryInformation");
  int v_steps = -1;
  f.check(nc_def_var(nc, "period_steps", NC_INT, 1, &d_time, &v_steps), "period_steps",
          "defining variable");
  f.text(v_steps, "period_steps", "long_name",
         "number of maps (time steps) that fell into the period");
  f.text(v_steps, "period_steps", "units", "1");
  f.text(v_steps, "period_steps", "coverage_content_type", "auxiliaryInformation");

  std::string title = "Geostrophic surface current statistics";
  if (st.period == ClimatologyPeriod::month) title += " by calendar month";
  if (st.period == ClimatologyPeriod::season) title += " by season (DJF, MAM, JJA, SON)";
  auto g = common_global_attributes(
      st, out.command_line, title,
      "Mean, variance, covariance, eddy kinetic energy and principal axes of the variance of "
      "the geostrophic surface velocity, mean speed and mean relative vorticity, from " +
          std::to_string(st.inputs) + " file(s) of " +
          (st.kind == HeightKind::anomaly ? "sea level anomaly" : "absolute dynamic topography") +
          " maps. Moments are population moments (divided by count), accumulated in one "
          "streaming pass (Welford 1962) and merged exactly (Chan, Golub and LeVeque 1983).");
  g.push_back(text_attribute("time_coverage_start", all_first.iso()));
  g.push_back(text_attribute("time_coverage_end", all_last.iso()));
  g.push_back(number_attribute("climatology_min_valid_fraction", NC_DOUBLE, {out.min_valid}));
  g.push_back(text_attribute(
      "references",
      "Welford (1962) Technometrics 4(3) 419; Chan, Golub and LeVeque (1983) Am. Stat. 37(3) 242; "
      "Emery and Thomson (2001) Data Analysis Methods in Physical Oceanography (principal axes); "
      "CF Conventions 1.12 section 7.4"));
  for (const Attribute& a : g) f.put(NC_GLOBAL, "", a);
  f.check(nc_enddef(nc), "", "ending define mode");

  // Coordinates and bounds.
  std::vector<double> times(P), bounds(2 * P);
  std::vector<int> steps(P);
  for (std::size_t p = 0; p < P; ++p) {
    times[p] = iv[p].middle - static_cast<double>(ref_day);
    bounds[2 * p] = static_cast<double>(iv[p].start - ref_day);
    bounds[2 * p + 1] = static_cast<double>(iv[p].end - ref_day);
    steps[p] = static_cast<int>(std::min<std::uint64_t>(st.records[p].steps, 2147483647u));
  }
  f.check(nc_put_var_double(nc, v_time, times.data()), "time", "writing coordinate values");
  f.check(nc_put_var_double(nc, v_bounds, bounds.data()), bounds_name, "writing bounds");
  f.check(nc_put_var_double(nc, v_lat, st.lat.values.data()), st.lat.name,
          "writing coordinate values");
  f.check(nc_put_var_double(nc, v_lon, st.lon.values.data()), st.lon.name,
          "writing coordinate values");
  f.check(nc_put_var_int(nc, v_steps, steps.data()), "period_steps", "writing values");

  // Statistics, one period at a time (float32, fill where masked).
  std::vector<int> counts(C);
  std::vector<std::vector<float>> planes(field_count, std::vector<float>(C));
  for (std::size_t p = 0; p < P; ++p) {
    const double need = out.min_valid * static_cast<double>(st.records[p].steps);
    const auto nc_cells = static_cast<std::ptrdiff_t>(C);
#pragma omp parallel for schedule(static)
    for (std::ptrdiff_t s = 0; s < nc_cells; ++s) {
      const auto c = static_cast<std::size_t>(s);
      const CellStatistics cs = cell_statistics(st.moments, p * C + c);
      counts[c] = static_cast<int>(cs.count);
      const bool keep = cs.count > 0 && static_cast<double>(cs.count) >= need;
      for (std::size_t k = 0; k < field_count; ++k) {
        const double x = keep ? field_value(cs, k) : nan_value;
        planes[k][c] = std::isfinite(x) && std::fabs(x) <= 3.4e38 ? static_cast<float>(x) : fill;
      }
    }
    const std::size_t start[3] = {p, 0, 0}, count[3] = {1, ny, nx};
    // A period without any map is all fill: its chunks are never written
    // (HDF5 returns _FillValue for them), which saves compressing them.
    if (st.records[p].steps > 0)
      for (std::size_t k = 0; k < field_count; ++k)
        f.check(nc_put_vara_float(nc, ids[k], start, count, planes[k].data()),
                output_fields[k].name, "writing period " + std::to_string(p));
    f.check(nc_put_vara_int(nc, v_count, start, count, counts.data()), "count",
            "writing period " + std::to_string(p));
  }
  f.text(NC_GLOBAL, "", "seatilt_status", "complete");
  f.commit();
}

// ---- the partial state ----------------------------------------------------------------

namespace {

constexpr int partial_format = 1;

struct PartialArray {
  const char* name;
  bool is_count;
  const char* long_name;
  const char* units;
};
const PartialArray partial_arrays[] = {
    {"count", true, "number of samples with finite u and v", "1"},
    {"mean_u", false, "running mean of u (Welford)", "m s-1"},
    {"mean_v", false, "running mean of v (Welford)", "m s-1"},
    {"mean_speed", false, "running mean of sqrt(u^2 + v^2)", "m s-1"},
    {"m2_u", false, "sum of squared deviations of u from mean_u", "m2 s-2"},
    {"m2_v", false, "sum of squared deviations of v from mean_v", "m2 s-2"},
    {"comoment_uv", false, "sum of products of the deviations of u and v", "m2 s-2"},
    {"count_vorticity", true, "number of samples with finite vorticity", "1"},
    {"mean_vorticity", false, "running mean of the relative vorticity", "s-1"},
};

template <class G>
auto count_array(G& m, std::size_t k) {
  return k == 0 ? &m.count : &m.count_vorticity;
}
template <class G>
auto double_array(G& m, std::size_t k) -> decltype(&m.mean_u) {
  switch (k) {
    case 1:
      return &m.mean_u;
    case 2:
      return &m.mean_v;
    case 3:
      return &m.mean_speed;
    case 4:
      return &m.m2_u;
    case 5:
      return &m.m2_v;
    case 6:
      return &m.comoment_uv;
    case 8:
      return &m.mean_vorticity;
    default:
      return nullptr;
  }
}

/// Dates as (period, 3) ints; fill marks a period without samples.
constexpr int no_date = NC_FILL_INT;

}  // namespace

void write_partial(const ClimatologyState& st, const ClimatologyOutputOptions& out) {
  check_deflate(out.deflate);
  if (st.empty()) throw InputError("no input was accumulated");
  const std::size_t P = st.records.size(), ny = st.lat.values.size(), nx = st.lon.values.size();
  const std::size_t C = ny * nx;
  AtomicNc f(out.path, out.force);
  const int nc = f.id();
  int old_fill = 0;
  f.check(nc_set_fill(nc, NC_FILL, &old_fill), "", "setting fill mode");
  int d_p = -1, d_lat = -1, d_lon = -1, d_ymd = -1;
  f.check(nc_def_dim(nc, "period", P, &d_p), "period", "defining dimension");
  f.check(nc_def_dim(nc, "ymd", 3, &d_ymd), "ymd", "defining dimension");
  f.check(nc_def_dim(nc, dim_name(st.lat).c_str(), ny, &d_lat), st.lat.name, "defining dimension");
  f.check(nc_def_dim(nc, dim_name(st.lon).c_str(), nx, &d_lon), st.lon.name, "defining dimension");
  const int v_lat = define_coordinate(f, st.lat, d_lat);
  const int v_lon = define_coordinate(f, st.lon, d_lon);
  const int dims[3] = {d_p, d_lat, d_lon};
  std::vector<int> ids;
  for (const PartialArray& a : partial_arrays) {
    const int id = define_grid_variable(f, a.name, a.is_count ? NC_UINT : NC_DOUBLE, dims, ny, nx,
                                        out.deflate);
    // Fill 0 = the empty accumulator: periods without a map are not written.
    if (a.is_count) {
      const unsigned zero = 0;
      f.check(nc_put_att_uint(nc, id, "_FillValue", NC_UINT, 1, &zero), a.name,
              "writing _FillValue");
    } else {
      const double zero = 0.0;
      f.check(nc_put_att_double(nc, id, "_FillValue", NC_DOUBLE, 1, &zero), a.name,
              "writing _FillValue");
    }
    f.text(id, a.name, "long_name", a.long_name);
    f.text(id, a.name, "units", a.units);
    ids.push_back(id);
  }
  int v_steps = -1, v_first = -1, v_last = -1;
  f.check(nc_def_var(nc, "period_steps", NC_UINT64, 1, &d_p, &v_steps), "period_steps",
          "defining variable");
  f.text(v_steps, "period_steps", "long_name", "number of time steps that fell into the period");
  const int ddims[2] = {d_p, d_ymd};
  f.check(nc_def_var(nc, "period_first_date", NC_INT, 2, ddims, &v_first), "period_first_date",
          "defining variable");
  f.text(v_first, "period_first_date", "long_name", "year, month, day of the first sample");
  f.check(nc_def_var(nc, "period_last_date", NC_INT, 2, ddims, &v_last), "period_last_date",
          "defining variable");
  f.text(v_last, "period_last_date", "long_name", "year, month, day of the last sample");

  auto g = common_global_attributes(
      st, out.command_line,
      "seatilt partial climatology state (not a climatology: combine with seatilt merge)",
      "Accumulator state of a seatilt climatology (counts, Welford means, sums of squared "
      "deviations and co-moments in double precision). `seatilt merge` combines such files "
      "exactly (Chan, Golub and LeVeque 1983) into the climatology of all their inputs.");
  g.push_back(
      number_attribute("seatilt_partial_format", NC_INT, {static_cast<double>(partial_format)}));
  g.push_back(text_attribute("partial_first_input", st.first_input));
  g.push_back(text_attribute("partial_latitude", st.lat.name));
  g.push_back(text_attribute("partial_longitude", st.lon.name));
  for (const Attribute& a : g) f.put(NC_GLOBAL, "", a);
  f.check(nc_enddef(nc), "", "ending define mode");

  f.check(nc_put_var_double(nc, v_lat, st.lat.values.data()), st.lat.name,
          "writing coordinate values");
  f.check(nc_put_var_double(nc, v_lon, st.lon.values.data()), st.lon.name,
          "writing coordinate values");
  const MomentGrid& m = st.moments;
  for (std::size_t k = 0; k < std::size(partial_arrays); ++k) {
    for (std::size_t p = 0; p < P; ++p) {
      if (st.records[p].steps == 0) continue;  // all zero = the fill value
      const std::size_t start[3] = {p, 0, 0}, count[3] = {1, ny, nx};
      const std::string what = "writing period " + std::to_string(p);
      if (partial_arrays[k].is_count)
        f.check(nc_put_vara_uint(nc, ids[k], start, count, count_array(m, k)->data() + p * C),
                partial_arrays[k].name, what);
      else
        f.check(nc_put_vara_double(nc, ids[k], start, count, double_array(m, k)->data() + p * C),
                partial_arrays[k].name, what);
    }
  }
  std::vector<unsigned long long> steps(P);
  std::vector<int> first(3 * P, no_date), last(3 * P, no_date);
  for (std::size_t p = 0; p < P; ++p) {
    const PeriodRecord& r = st.records[p];
    steps[p] = r.steps;
    if (r.first) {
      first[3 * p] = r.first->year;
      first[3 * p + 1] = r.first->month;
      first[3 * p + 2] = r.first->day;
    }
    if (r.last) {
      last[3 * p] = r.last->year;
      last[3 * p + 1] = r.last->month;
      last[3 * p + 2] = r.last->day;
    }
  }
  f.check(nc_put_var_ulonglong(nc, v_steps, steps.data()), "period_steps", "writing values");
  f.check(nc_put_var_int(nc, v_first, first.data()), "period_first_date", "writing values");
  f.check(nc_put_var_int(nc, v_last, last.data()), "period_last_date", "writing values");
  f.text(NC_GLOBAL, "", "seatilt_status", "complete");
  f.commit();
}

namespace {

/// Copies the text and numeric attributes of VARID.
std::vector<Attribute> read_attributes(int ncid, int varid) {
  std::vector<Attribute> out;
  int natts = 0;
  if ((varid == NC_GLOBAL ? nc_inq_natts(ncid, &natts) : nc_inq_varnatts(ncid, varid, &natts)) !=
      NC_NOERR)
    return out;
  for (int k = 0; k < natts; ++k) {
    char name[NC_MAX_NAME + 1] = {0};
    nc_type t = NC_NAT;
    std::size_t len = 0;
    if (nc_inq_attname(ncid, varid, k, name) != NC_NOERR ||
        nc_inq_att(ncid, varid, name, &t, &len) != NC_NOERR)
      continue;
    Attribute a;
    a.name = name;
    a.nc_type = t;
    if (t == NC_CHAR) {
      a.text = nc_text(ncid, varid, name).value_or("");
    } else if (t == NC_STRING) {
      continue;
    } else if (t >= NC_BYTE && t <= NC_UINT64 && t != NC_CHAR) {
      a.values.resize(len);
      if (len && nc_get_att_double(ncid, varid, name, a.values.data()) != NC_NOERR) continue;
    } else {
      continue;
    }
    out.push_back(std::move(a));
  }
  return out;
}

}  // namespace

bool is_partial_file(const std::string& path) {
  NcReadHandle nc(path);
  nc_type t = NC_NAT;
  return nc.id >= 0 && nc_inq_atttype(nc.id, NC_GLOBAL, "seatilt_partial_format", &t) == NC_NOERR;
}

ClimatologyState read_partial(const std::string& path) {
  NcReadHandle nc(path);
  const auto fail = [&](const std::string& var, const std::string& problem) {
    throw InputError(input_message(path, var, problem));
  };
  if (nc.id < 0) fail("", "cannot be opened as netCDF");
  const int id = nc.id;
  const auto check = [&](int status, const std::string& var, const std::string& what) {
    if (status != NC_NOERR) fail(var, what + ": " + nc_strerror(status));
  };
  const std::vector<Attribute> g = read_attributes(id, NC_GLOBAL);
  const Attribute* fmt = find_attribute(g, "seatilt_partial_format");
  if (!fmt || fmt->values.empty())
    fail("", "is not a seatilt partial climatology state (no seatilt_partial_format attribute)");
  if (static_cast<int>(fmt->values[0]) != partial_format)
    fail("", "partial-state format " + number_text(fmt->values[0]) + " is not " +
                 std::to_string(partial_format) + " (written by another seatilt version)");
  const Attribute* status = find_attribute(g, "seatilt_status");
  if (!status || trim(status->text) != "complete") fail("", "partial state is incomplete");
  const auto text_of = [&](const char* name) {
    const Attribute* a = find_attribute(g, name);
    if (!a) fail("", std::string("attribute ") + name + " is missing");
    return trim(a->text);
  };

  ClimatologyState st;
  st.period = parse_climatology_period(text_of("climatology_period"));
  try {
    st.calendar = canonical_calendar(text_of("climatology_calendar"));
  } catch (const std::invalid_argument& e) {
    fail("", e.what());
  }
  st.kind = text_of("input_height_kind") == "anomaly" ? HeightKind::anomaly : HeightKind::absolute;
  st.settings = pick_settings(g);
  st.first_input = text_of("partial_first_input");
  const Attribute* files = find_attribute(g, "climatology_input_files");
  if (!files || files->values.empty() || !(files->values[0] >= 1))
    fail("", "input count is missing");
  st.inputs = static_cast<std::uint64_t>(files->values[0]);

  const auto read_coord = [&](const std::string& name) {
    CoordVar c;
    int varid = -1, ndims = 0, dimid = -1;
    check(nc_inq_varid(id, name.c_str(), &varid), name, "coordinate missing");
    check(nc_inq_varndims(id, varid, &ndims), name, "reading coordinate");
    if (ndims != 1) fail(name, "coordinate is not 1-D");
    check(nc_inq_vardimid(id, varid, &dimid), name, "reading coordinate");
    char dname[NC_MAX_NAME + 1] = {0};
    std::size_t len = 0;
    check(nc_inq_dim(id, dimid, dname, &len), name, "reading coordinate");
    c.name = name;
    c.dim = dname;
    c.nc_type = NC_DOUBLE;
    c.attrs = read_attributes(id, varid);
    require_memory(32.0 * static_cast<double>(len),  // resources.hpp: declared size, 4 copies
                   "coordinate " + name + " of " + std::to_string(len) + " declared values", path,
                   name);
    c.values.resize(len);
    check(nc_get_var_double(id, varid, c.values.data()), name, "reading coordinate values");
    return c;
  };
  st.lat = read_coord(text_of("partial_latitude"));
  st.lon = read_coord(text_of("partial_longitude"));
  const std::size_t P = period_count(st.period);
  const std::size_t ny = st.lat.values.size(), nx = st.lon.values.size(), C = ny * nx;
  require_memory(2.0 * 64.0 * static_cast<double>(P) * static_cast<double>(ny) *
                     static_cast<double>(nx),  // MomentGrid and the merged copy (resources.hpp)
                 "the moments of " + std::to_string(P) + " period(s) x " + std::to_string(ny) +
                     " x " + std::to_string(nx) + " cells",
                 path, "");
  st.moments = MomentGrid(P, C);
  for (std::size_t k = 0; k < std::size(partial_arrays); ++k) {
    const char* name = partial_arrays[k].name;
    int varid = -1, ndims = 0;
    check(nc_inq_varid(id, name, &varid), name, "variable missing");
    check(nc_inq_varndims(id, varid, &ndims), name, "reading variable");
    int dimids[3] = {-1, -1, -1};
    if (ndims != 3) fail(name, "is not (period, lat, lon)");
    check(nc_inq_vardimid(id, varid, dimids), name, "reading variable");
    std::size_t lens[3] = {0, 0, 0};
    for (int d = 0; d < 3; ++d)
      check(nc_inq_dimlen(id, dimids[d], &lens[d]), name, "reading variable");
    if (lens[0] != P || lens[1] != ny || lens[2] != nx) fail(name, "has the wrong shape");
    const int s = partial_arrays[k].is_count
                      ? nc_get_var_uint(id, varid, count_array(st.moments, k)->data())
                      : nc_get_var_double(id, varid, double_array(st.moments, k)->data());
    check(s, name, "reading values");
  }
  std::vector<unsigned long long> steps(P);
  std::vector<int> first(3 * P), last(3 * P);
  int v = -1;
  check(nc_inq_varid(id, "period_steps", &v), "period_steps", "variable missing");
  check(nc_get_var_ulonglong(id, v, steps.data()), "period_steps", "reading values");
  check(nc_inq_varid(id, "period_first_date", &v), "period_first_date", "variable missing");
  check(nc_get_var_int(id, v, first.data()), "period_first_date", "reading values");
  check(nc_inq_varid(id, "period_last_date", &v), "period_last_date", "variable missing");
  check(nc_get_var_int(id, v, last.data()), "period_last_date", "reading values");
  st.records.assign(P, PeriodRecord{});
  for (std::size_t p = 0; p < P; ++p) {
    st.records[p].steps = steps[p];
    if (first[3 * p] != no_date)
      st.records[p].first = Ymd{first[3 * p], first[3 * p + 1], first[3 * p + 2]};
    if (last[3 * p] != no_date)
      st.records[p].last = Ymd{last[3 * p], last[3 * p + 1], last[3 * p + 2]};
  }
  return st;
}

// ---- 6. reduction over MPI ranks -----------------------------------------------------------

namespace {

/// Byte buffer for the header of a state sent between ranks (same binary on
/// every rank, so native layout is fine).
struct Packer {
  std::vector<char> bytes;
  template <class T>
  void raw(const T& v) {
    const char* p = reinterpret_cast<const char*>(&v);
    bytes.insert(bytes.end(), p, p + sizeof(T));
  }
  void str(const std::string& s) {
    raw<std::uint64_t>(s.size());
    bytes.insert(bytes.end(), s.begin(), s.end());
  }
  void doubles(const std::vector<double>& v) {
    raw<std::uint64_t>(v.size());
    for (double x : v) raw(x);
  }
  void attrs(const std::vector<Attribute>& a) {
    raw<std::uint64_t>(a.size());
    for (const auto& x : a) {
      str(x.name);
      raw<std::int32_t>(x.nc_type);
      str(x.text);
      doubles(x.values);
    }
  }
  void coord(const CoordVar& c) {
    str(c.name);
    str(c.dim);
    raw<std::int32_t>(c.nc_type);
    doubles(c.values);
    attrs(c.attrs);
  }
};

struct Unpacker {
  const std::vector<char>& bytes;
  std::size_t at = 0;
  template <class T>
  T raw() {
    if (at + sizeof(T) > bytes.size()) throw std::runtime_error("state message too short");
    T v;
    std::memcpy(&v, bytes.data() + at, sizeof(T));
    at += sizeof(T);
    return v;
  }
  std::string str() {
    const auto n = static_cast<std::size_t>(raw<std::uint64_t>());
    if (at + n > bytes.size()) throw std::runtime_error("state message too short");
    std::string s(bytes.data() + at, n);
    at += n;
    return s;
  }
  std::vector<double> doubles() {
    std::vector<double> v(static_cast<std::size_t>(raw<std::uint64_t>()));
    for (double& x : v) x = raw<double>();
    return v;
  }
  std::vector<Attribute> attrs() {
    std::vector<Attribute> a(static_cast<std::size_t>(raw<std::uint64_t>()));
    for (auto& x : a) {
      x.name = str();
      x.nc_type = raw<std::int32_t>();
      x.text = str();
      x.values = doubles();
    }
    return a;
  }
  CoordVar coord() {
    CoordVar c;
    c.name = str();
    c.dim = str();
    c.nc_type = raw<std::int32_t>();
    c.values = doubles();
    c.attrs = attrs();
    return c;
  }
};

void pack_date(Packer& pk, const std::optional<Ymd>& d) {
  pk.raw<std::int32_t>(d ? 1 : 0);
  pk.raw<std::int32_t>(d ? d->year : 0);
  pk.raw<std::int32_t>(d ? d->month : 0);
  pk.raw<std::int32_t>(d ? d->day : 0);
}
std::optional<Ymd> unpack_date(Unpacker& u) {
  const auto has = u.raw<std::int32_t>();
  const Ymd d{u.raw<std::int32_t>(), u.raw<std::int32_t>(), u.raw<std::int32_t>()};
  return has ? std::optional<Ymd>(d) : std::nullopt;
}

void send_state(const ParallelSession& s, int to, const ClimatologyState& st,
                const ReduceFailure& failure) {
  Packer pk;
  pk.raw<std::int32_t>(failure.code);
  pk.str(failure.message);
  const bool payload = failure.code == 0 && !st.empty();
  pk.raw<std::int32_t>(payload ? 1 : 0);
  if (payload) {
    pk.raw<std::int32_t>(static_cast<std::int32_t>(st.period));
    pk.str(st.calendar);
    pk.raw<std::int32_t>(st.kind == HeightKind::anomaly ? 1 : 0);
    pk.attrs(st.settings);
    pk.coord(st.lat);
    pk.coord(st.lon);
    pk.raw<std::uint64_t>(st.records.size());
    for (const auto& r : st.records) {
      pk.raw<std::uint64_t>(r.steps);
      pack_date(pk, r.first);
      pack_date(pk, r.last);
    }
    pk.raw<std::uint64_t>(st.inputs);
    pk.str(st.first_input);
    pk.raw<std::uint64_t>(st.moments.periods);
    pk.raw<std::uint64_t>(st.moments.cells);
  }
  s.send(to, pk.bytes.data(), pk.bytes.size());
  if (!payload) return;
  const MomentGrid& m = st.moments;
  const auto send_u = [&](const std::vector<std::uint32_t>& v) {
    s.send(to, v.data(), v.size() * 4);
  };
  const auto send_d = [&](const std::vector<double>& v) { s.send(to, v.data(), v.size() * 8); };
  send_u(m.count);
  send_d(m.mean_u);
  send_d(m.mean_v);
  send_d(m.mean_speed);
  send_d(m.m2_u);
  send_d(m.m2_v);
  send_d(m.comoment_uv);
  send_u(m.count_vorticity);
  send_d(m.mean_vorticity);
}

/// Receives a state from FROM; returns it with the sender's failure.
ClimatologyState receive_state(const ParallelSession& s, int from, ReduceFailure& failure) {
  const std::vector<char> header = s.receive(from);
  Unpacker u{header};
  failure.code = u.raw<std::int32_t>();
  failure.message = u.str();
  ClimatologyState st;
  if (u.raw<std::int32_t>() == 0) return st;
  st.period = static_cast<ClimatologyPeriod>(u.raw<std::int32_t>());
  st.calendar = u.str();
  st.kind = u.raw<std::int32_t>() ? HeightKind::anomaly : HeightKind::absolute;
  st.settings = u.attrs();
  st.lat = u.coord();
  st.lon = u.coord();
  st.records.resize(static_cast<std::size_t>(u.raw<std::uint64_t>()));
  for (auto& r : st.records) {
    r.steps = u.raw<std::uint64_t>();
    r.first = unpack_date(u);
    r.last = unpack_date(u);
  }
  st.inputs = u.raw<std::uint64_t>();
  st.first_input = u.str();
  const auto periods = static_cast<std::size_t>(u.raw<std::uint64_t>());
  const auto cells = static_cast<std::size_t>(u.raw<std::uint64_t>());
  st.moments = MomentGrid(periods, cells);
  MomentGrid& m = st.moments;
  const auto recv_u = [&](std::vector<std::uint32_t>& v) {
    s.receive_into(from, v.data(), v.size() * 4);
  };
  const auto recv_d = [&](std::vector<double>& v) { s.receive_into(from, v.data(), v.size() * 8); };
  recv_u(m.count);
  recv_d(m.mean_u);
  recv_d(m.mean_v);
  recv_d(m.mean_speed);
  recv_d(m.m2_u);
  recv_d(m.m2_v);
  recv_d(m.comoment_uv);
  recv_u(m.count_vorticity);
  recv_d(m.mean_vorticity);
  return st;
}

}  // namespace

ReduceFailure reduce_states(const ParallelSession& session, ClimatologyState& state) {
  ReduceFailure failure;
  const int rank = session.rank(), size = session.size();
  for (int step = 1; step < size; step *= 2) {
    if (rank % (2 * step) == step) {
      send_state(session, rank - step, state, failure);
      state = ClimatologyState{};
      return failure;
    }
    if (rank % (2 * step) == 0 && rank + step < size) {
      ReduceFailure theirs;
      ClimatologyState other = receive_state(session, rank + step, theirs);
      if (failure.code != 0) continue;  // keep the first failure; still drain the sender
      if (theirs.code != 0) {
        failure = theirs;
        state = ClimatologyState{};
        continue;
      }
      try {
        state.merge(std::move(other));
      } catch (const Error& e) {
        failure = {static_cast<int>(e.code()), e.what()};
        state = ClimatologyState{};
      }
    }
  }
  return failure;
}

}  // namespace seatilt
