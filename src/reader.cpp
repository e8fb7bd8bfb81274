// reader.cpp — netCDF sea-surface-height input (see seatilt/reader.hpp).
//
// Notation
//   raw     a value as stored in the file ("packed units"), after the
//           _Unsigned reinterpretation of signed integer storage
//   h       the unpacked height in the file's units: h = raw * scale_factor + add_offset   [CF 8.1]
//   metres  h * to_metres_scale + to_metres_offset (UDUNITS-2 converter, linear for lengths)
//   day     an integer day number in a calendar: the Julian Day Number (the
//           civil day, midnight to midnight, that contains the noon of JD n)
//           for standard, julian and proleptic_gregorian; a plain day count
//           from year 0 for the idealised calendars (noleap, all_leap, 360_day)
//   years   astronomical inside (year 0 exists); converted at the edges for
//           the calendars with historical numbering (standard, julian)
//
// Missing data [CF 2.5.1]: raw is missing when it is NaN or infinite, equals
// _FillValue (or, without that attribute, the netCDF default fill of the
// type, except for byte types, as netCDF4-python does), equals one of
// missing_value, or lies outside valid_range / [valid_min, valid_max]. All
// these comparisons are made on raw values, i.e. in packed units.

#include "seatilt/reader.hpp"

#include <hdf5.h>
#include <netcdf.h>
#include <netcdf_mem.h>
#include <sys/stat.h>
#include <udunits2.h>

#include <algorithm>
#include <array>
#include <cctype>
#include <cmath>
#include <cstdio>
#include <exception>
#include <filesystem>
#include <limits>
#include <mutex>
#include <set>
#include <sstream>
#include <stdexcept>
#include <utility>

#include "seatilt/chunkio.hpp"
#include "seatilt/error.hpp"
#include "seatilt/resources.hpp"

namespace seatilt {

namespace {

// ---- small string helpers ---------------------------------------------------

std::string trim(const std::string& s) {
  const auto b = s.find_first_not_of(" \t\r\n");
  if (b == std::string::npos) return {};
  const auto e = s.find_last_not_of(" \t\r\n");
  return s.substr(b, e - b + 1);
}

std::string lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

std::string join(const std::vector<std::string>& items, const char* sep) {
  std::string out;
  for (std::size_t k = 0; k < items.size(); ++k) {
    if (k) out += sep;
    out += items[k];
  }
  return out;
}

std::string nc_message(int status) { return nc_strerror(status); }

// Text from a file made printable for a one-line message: control bytes and
// bytes that are not part of a well-formed UTF-8 sequence (RFC 3629: no
// overlongs, no surrogates, at most U+10FFFF) become '?'.
std::string printable(const std::string& s) {
  std::string out;
  out.reserve(s.size());
  const auto byte = [&](std::size_t k) { return static_cast<unsigned char>(s[k]); };
  for (std::size_t k = 0; k < s.size();) {
    const unsigned char c = byte(k);
    if (c < 0x80) {
      out += c < 0x20 || c == 0x7f ? '?' : static_cast<char>(c);
      ++k;
      continue;
    }
    std::size_t n = 0;
    unsigned char lo = 0x80, hi = 0xbf;  // allowed range of the second byte
    if (c >= 0xc2 && c <= 0xdf) {
      n = 1;
    } else if (c >= 0xe0 && c <= 0xef) {
      n = 2;
      if (c == 0xe0) lo = 0xa0;
      if (c == 0xed) hi = 0x9f;
    } else if (c >= 0xf0 && c <= 0xf4) {
      n = 3;
      if (c == 0xf0) lo = 0x90;
      if (c == 0xf4) hi = 0x8f;
    }
    bool ok = n > 0 && k + n < s.size();  // the n continuation bytes exist
    for (std::size_t m = 1; ok && m <= n; ++m) {
      const unsigned char b = byte(k + m);
      ok = m == 1 ? (b >= lo && b <= hi) : (b >= 0x80 && b <= 0xbf);
    }
    if (ok) {
      out.append(s, k, n + 1);
      k += n + 1;
    } else {
      out += '?';
      ++k;
    }
  }
  return out;
}

// ---- CF sea-surface-height standard names [CF standard-name table v83] -----

enum class HeightName { none, absolute, anomaly, ellipsoid };

HeightName classify_height_name(const std::string& standard_name) {
  const std::string s = trim(standard_name);
  if (s == "sea_surface_height_above_geoid" ||
      s == "sea_surface_height_above_geopotential_datum")
    return HeightName::absolute;
  if (s == "sea_surface_height_above_mean_sea_level" ||
      s == "sea_surface_height_above_sea_level" || s == "sea_surface_height")
    return HeightName::anomaly;
  if (s == "sea_surface_height_above_reference_ellipsoid") return HeightName::ellipsoid;
  return HeightName::none;
}

const char* ellipsoid_refusal =
    "standard_name sea_surface_height_above_reference_ellipsoid is refused: an "
    "ellipsoidal height includes the geoid (about +-100 m), whose slopes are not "
    "geostrophic; subtract a geoid first and give heights above the geoid or above "
    "mean sea level";

// ---- attribute access ---------------------------------------------------------

bool is_numeric_type(nc_type t) {
  switch (t) {
    case NC_BYTE: case NC_UBYTE: case NC_SHORT: case NC_USHORT: case NC_INT:
    case NC_UINT: case NC_INT64: case NC_UINT64: case NC_FLOAT: case NC_DOUBLE:
      return true;
    default:
      return false;
  }
}

bool is_signed_integer_type(nc_type t) {
  return t == NC_BYTE || t == NC_SHORT || t == NC_INT || t == NC_INT64;
}

int type_bits(nc_type t) {
  switch (t) {
    case NC_BYTE: case NC_UBYTE: return 8;
    case NC_SHORT: case NC_USHORT: return 16;
    case NC_INT: case NC_UINT: case NC_FLOAT: return 32;
    default: return 64;
  }
}

// ---- netCDF handles that must not be closed -------------------------------------
// netCDF-C 4.9.0 loads the attributes of a netCDF-4 variable at the first
// query; when that fails half-way in a corrupted file (an HDF5 error, not
// NC_ENOTATT), the half-built attributes crash nc_close later (a free of an
// invalid pointer in nc_reclaim_data; found by fuzz/fuzz_metadata, exit 139).
// Such a handle is left open (its memory is leaked) instead of closed.

std::mutex& poison_mutex() {
  static std::mutex m;
  return m;
}
std::set<int>& poisoned_ids() {
  static std::set<int> ids;
  return ids;
}

// Returns whether STATUS of an attribute call on NCID is NC_NOERR; notes
// NCID as not to be closed on any failure but "no such attribute".
bool att_ok(int ncid, int status) {
  if (status != NC_NOERR && status != NC_ENOTATT) {
    std::lock_guard<std::mutex> lock(poison_mutex());
    poisoned_ids().insert(ncid);
  }
  return status == NC_NOERR;
}

// Closes NCID unless an attribute call on it failed (see above).
void close_unless_poisoned(int ncid) {
  {
    std::lock_guard<std::mutex> lock(poison_mutex());
    if (poisoned_ids().erase(ncid) > 0) return;
  }
  nc_close(ncid);
}

// Reads attribute NAME of VARID (NC_GLOBAL allowed) as text; nullopt when absent
// or not text. NC_STRING arrays are joined with ", ".
std::optional<std::string> text_att(int ncid, int varid, const char* name) {
  nc_type t = NC_NAT;
  std::size_t len = 0;
  if (!att_ok(ncid, nc_inq_att(ncid, varid, name, &t, &len))) return std::nullopt;
  if (t == NC_CHAR) {
    std::string s(len, '\0');
    if (len && !att_ok(ncid, nc_get_att_text(ncid, varid, name, s.data()))) return std::nullopt;
    // Some writers include the C terminator in the length.
    while (!s.empty() && s.back() == '\0') s.pop_back();
    return s;
  }
  if (t == NC_STRING) {
    std::vector<char*> p(len, nullptr);
    if (len && !att_ok(ncid, nc_get_att_string(ncid, varid, name, p.data()))) return std::nullopt;
    std::vector<std::string> parts;
    for (char* c : p) parts.emplace_back(c ? c : "");
    if (len) nc_free_string(len, p.data());
    return join(parts, ", ");
  }
  return std::nullopt;
}

// Numeric attribute: absent -> nullopt; present but not numeric -> empty vector
// with *bad = true.
std::optional<std::vector<double>> number_att(int ncid, int varid, const char* name,
                                              bool* bad = nullptr, nc_type* type = nullptr) {
  nc_type t = NC_NAT;
  std::size_t len = 0;
  if (bad) *bad = false;
  if (!att_ok(ncid, nc_inq_att(ncid, varid, name, &t, &len))) return std::nullopt;
  if (type) *type = t;
  if (!is_numeric_type(t) || len == 0) {
    if (bad) *bad = true;
    return std::vector<double>{};
  }
  std::vector<double> v(len);
  if (!att_ok(ncid, nc_get_att_double(ncid, varid, name, v.data()))) {
    if (bad) *bad = true;
    return std::vector<double>{};
  }
  return v;
}

// Copies every attribute of VARID that is text or numeric (user-defined types
// are skipped: nothing downstream can use them).
std::vector<Attribute> copy_attributes(int ncid, int varid) {
  std::vector<Attribute> out;
  int natts = 0;
  if (varid == NC_GLOBAL) {
    if (!att_ok(ncid, nc_inq_natts(ncid, &natts))) return out;
  } else if (!att_ok(ncid, nc_inq_varnatts(ncid, varid, &natts))) {
    return out;
  }
  for (int k = 0; k < natts; ++k) {
    char name[NC_MAX_NAME + 1] = {0};
    if (!att_ok(ncid, nc_inq_attname(ncid, varid, k, name))) continue;
    nc_type t = NC_NAT;
    std::size_t len = 0;
    if (!att_ok(ncid, nc_inq_att(ncid, varid, name, &t, &len))) continue;
    Attribute a;
    a.name = name;
    a.nc_type = t;
    if (t == NC_CHAR || t == NC_STRING) {
      a.text = text_att(ncid, varid, name).value_or("");
    } else if (is_numeric_type(t)) {
      a.values.resize(len);
      if (len && !att_ok(ncid, nc_get_att_double(ncid, varid, name, a.values.data()))) continue;
    } else {
      continue;
    }
    out.push_back(std::move(a));
  }
  return out;
}

// ---- UDUNITS-2 -------------------------------------------------------------------
// One unit system per process, read lazily; the parser is not thread-safe
// (REFERENCES.md 8), so every UDUNITS call below runs under units_mutex().

std::mutex& units_mutex() {
  static std::mutex m;
  return m;
}

ut_system* unit_system() {
  static std::once_flag once;
  static ut_system* system = nullptr;
  std::call_once(once, [] {
    // Silence UDUNITS' own stderr messages (XML override warnings, parse errors):
    // library code never prints; failures are reported through exceptions.
    ut_set_error_message_handler(ut_ignore);
    system = ut_read_xml(nullptr);
  });
  return system;
}

struct UnitFree {
  void operator()(ut_unit* u) const { ut_free(u); }
};
struct ConverterFree {
  void operator()(cv_converter* c) const { cv_free(c); }
};

enum class UnitStatus { ok, unparsable, not_length, no_database };

// Finds metres = value * scale + offset for UNITS. The converter of a length
// unit to "m" is linear, so two evaluations give scale and offset exactly.
UnitStatus length_to_metres(const std::string& units, double& scale, double& offset) {
  std::lock_guard<std::mutex> lock(units_mutex());
  ut_system* system = unit_system();
  if (!system) return UnitStatus::no_database;
  std::string buffer = units;
  char* text = ut_trim(buffer.data(), UT_UTF8);
  std::unique_ptr<ut_unit, UnitFree> from(ut_parse(system, text, UT_UTF8));
  if (!from) return UnitStatus::unparsable;
  std::unique_ptr<ut_unit, UnitFree> metre(ut_parse(system, "m", UT_ASCII));
  if (!metre) return UnitStatus::no_database;
  if (!ut_are_convertible(from.get(), metre.get())) return UnitStatus::not_length;
  std::unique_ptr<cv_converter, ConverterFree> cv(ut_get_converter(from.get(), metre.get()));
  if (!cv) return UnitStatus::not_length;
  offset = cv_convert_double(cv.get(), 0.0);
  scale = cv_convert_double(cv.get(), 1.0) - offset;
  return UnitStatus::ok;
}

// ---- coordinate classification [CF 4.1, 4.2, 4.4] ----------------------------

enum class Axis { none, lat, lon, time };

bool is_lat_units(const std::string& u) {
  static const std::array<const char*, 6> names = {"degrees_north", "degree_north", "degree_n",
                                                    "degrees_n", "degreen", "degreesn"};
  const std::string s = lower(trim(u));
  return std::find(names.begin(), names.end(), s) != names.end();
}

bool is_lon_units(const std::string& u) {
  static const std::array<const char*, 6> names = {"degrees_east", "degree_east", "degree_e",
                                                   "degrees_e", "degreee", "degreese"};
  const std::string s = lower(trim(u));
  return std::find(names.begin(), names.end(), s) != names.end();
}

bool is_time_units(const std::string& u) {
  const std::string s = lower(trim(u));
  const auto p = s.find(" since ");
  return p != std::string::npos && p > 0;
}

Axis classify_coordinate(int ncid, int varid) {
  const std::string units = text_att(ncid, varid, "units").value_or("");
  const std::string sn = trim(text_att(ncid, varid, "standard_name").value_or(""));
  const std::string axis = lower(trim(text_att(ncid, varid, "axis").value_or("")));
  const bool degrees = lower(trim(units)).rfind("degree", 0) == 0;
  if (is_lat_units(units) || sn == "latitude" || (axis == "y" && degrees)) return Axis::lat;
  if (is_lon_units(units) || sn == "longitude" || (axis == "x" && degrees)) return Axis::lon;
  if (sn == "time" || axis == "t" || is_time_units(units)) return Axis::time;
  return Axis::none;
}

// ---- CF calendars [CF 1.12 4.4.1] --------------------------------------------
// Each calendar is a pair of functions between (astronomical year, month, day)
// and an integer day number. Integer division below is floor division so that
// negative years work.

long long floor_div(long long a, long long b) {
  long long q = a / b;
  if ((a % b != 0) && ((a < 0) != (b < 0))) --q;
  return q;
}

struct Ymd {
  long long y;
  int m, d;
};

// Proleptic Gregorian <-> JDN: days_from_civil of H. Hinnant, "chrono-Compatible
// Low-Level Date Algorithms" (2013), shifted so that 1970-01-01 = JDN 2440588.
long long gregorian_to_jdn(long long y, int m, int d) {
  y -= m <= 2;
  const long long era = floor_div(y, 400);
  const long long yoe = y - era * 400;                                      // [0, 399]
  const long long doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;    // [0, 365]
  const long long doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;              // [0, 146096]
  return era * 146097 + doe - 719468 + 2440588;
}

Ymd jdn_to_gregorian(long long jdn) {
  const long long z = jdn - 2440588 + 719468;
  const long long era = floor_div(z, 146097);
  const long long doe = z - era * 146097;
  const long long yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
  const long long doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
  const long long mp = (5 * doy + 2) / 153;
  const int d = static_cast<int>(doy - (153 * mp + 2) / 5 + 1);
  const int m = static_cast<int>(mp < 10 ? mp + 3 : mp - 9);
  return {yoe + era * 400 + (m <= 2), m, d};
}

// Julian calendar <-> JDN: the same algorithm with a 4-year era of 1461 days
// (March-based years, leap day at the end of each era). 0000-03-01 Julian is
// JDN 1721118 (0001-01-01 Julian = JDN 1721424, 306 days later).
long long julian_to_jdn(long long y, int m, int d) {
  y -= m <= 2;
  const long long era = floor_div(y, 4);
  const long long yoe = y - era * 4;                                        // [0, 3]
  const long long doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;    // [0, 365]
  return era * 1461 + yoe * 365 + doy + 1721118;
}

Ymd jdn_to_julian(long long jdn) {
  const long long z = jdn - 1721118;
  const long long era = floor_div(z, 1461);
  const long long doe = z - era * 1461;              // [0, 1460]
  const long long yoe = std::min<long long>(doe / 365, 3);
  const long long doy = doe - 365 * yoe;
  const long long mp = (5 * doy + 2) / 153;
  const int d = static_cast<int>(doy - (153 * mp + 2) / 5 + 1);
  const int m = static_cast<int>(mp < 10 ? mp + 3 : mp - 9);
  return {yoe + era * 4 + (m <= 2), m, d};
}

// Mixed Julian/Gregorian ("standard"): Gregorian from 1582-10-15 (JDN 2299161),
// Julian up to 1582-10-04 (JDN 2299160); the ten days between do not exist.
constexpr long long gregorian_start_jdn = 2299161;

const std::array<int, 13> cum_noleap = {0, 31, 59, 90, 120, 151, 181, 212, 243, 273, 304, 334, 365};
const std::array<int, 13> cum_leap = {0, 31, 60, 91, 121, 152, 182, 213, 244, 274, 305, 335, 366};

long long fixed_year_to_day(long long y, int m, int d, const std::array<int, 13>& cum) {
  return y * cum[12] + cum[m - 1] + d - 1;
}

Ymd day_to_fixed_year(long long day, const std::array<int, 13>& cum) {
  const long long y = floor_div(day, cum[12]);
  const int doy = static_cast<int>(day - y * cum[12]);
  int m = 1;
  while (m < 12 && doy >= cum[m]) ++m;
  return {y, m, doy - cum[m - 1] + 1};
}

enum class Calendar { standard, proleptic_gregorian, julian, noleap, all_leap, day360 };

Calendar parse_calendar(const std::string& name) {
  const std::string c = lower(trim(name));
  if (c.empty() || c == "standard" || c == "gregorian") return Calendar::standard;
  if (c == "proleptic_gregorian") return Calendar::proleptic_gregorian;
  if (c == "julian") return Calendar::julian;
  if (c == "noleap" || c == "365_day") return Calendar::noleap;
  if (c == "all_leap" || c == "366_day") return Calendar::all_leap;
  if (c == "360_day") return Calendar::day360;
  throw std::invalid_argument("calendar \"" + name +
                              "\" is not supported (standard, gregorian, proleptic_gregorian, "
                              "julian, noleap, 365_day, all_leap, 366_day, 360_day)");
}

bool gregorian_leap(long long y) { return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0; }
bool julian_leap(long long y) { return floor_div(y, 4) * 4 == y; }

int days_in_month(Calendar cal, long long y, int m) {
  static const std::array<int, 12> len = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  switch (cal) {
    case Calendar::day360: return 30;
    case Calendar::noleap: return len[m - 1];
    case Calendar::all_leap: return m == 2 ? 29 : len[m - 1];
    case Calendar::julian: return m == 2 && julian_leap(y) ? 29 : len[m - 1];
    case Calendar::proleptic_gregorian: return m == 2 && gregorian_leap(y) ? 29 : len[m - 1];
    case Calendar::standard:
      if (m != 2) return len[m - 1];
      return (y < 1582 ? julian_leap(y) : gregorian_leap(y)) ? 29 : 28;
  }
  return 31;
}

// Astronomical year (year 0 exists) -> day number in CAL.
long long to_day(Calendar cal, long long y, int m, int d) {
  switch (cal) {
    case Calendar::proleptic_gregorian: return gregorian_to_jdn(y, m, d);
    case Calendar::julian: return julian_to_jdn(y, m, d);
    case Calendar::standard: {
      if (y > 1582 || (y == 1582 && (m > 10 || (m == 10 && d >= 15))))
        return gregorian_to_jdn(y, m, d);
      if (y == 1582 && m == 10 && d > 4)
        throw std::invalid_argument("1582-10-05 to 1582-10-14 do not exist in the standard calendar");
      return julian_to_jdn(y, m, d);
    }
    case Calendar::noleap: return fixed_year_to_day(y, m, d, cum_noleap);
    case Calendar::all_leap: return fixed_year_to_day(y, m, d, cum_leap);
    case Calendar::day360: return y * 360 + (m - 1) * 30 + d - 1;
  }
  return 0;
}

Ymd from_day(Calendar cal, long long day) {
  switch (cal) {
    case Calendar::proleptic_gregorian: return jdn_to_gregorian(day);
    case Calendar::julian: return jdn_to_julian(day);
    case Calendar::standard:
      return day >= gregorian_start_jdn ? jdn_to_gregorian(day) : jdn_to_julian(day);
    case Calendar::noleap: return day_to_fixed_year(day, cum_noleap);
    case Calendar::all_leap: return day_to_fixed_year(day, cum_leap);
    case Calendar::day360: {
      const long long y = floor_div(day, 360);
      const int doy = static_cast<int>(day - y * 360);
      return {y, doy / 30 + 1, doy % 30 + 1};
    }
  }
  return {0, 1, 1};
}

// CF 1.9+ (and cftime's default): the julian and standard calendars have no
// year 0 (1 BC is written -1); the others use astronomical numbering.
bool historical_years(Calendar cal) {
  return cal == Calendar::standard || cal == Calendar::julian;
}

// Parses an unsigned integer at s[pos...]; returns false when none.
bool parse_int(const std::string& s, std::size_t& pos, long long& value) {
  const std::size_t start = pos;
  value = 0;
  while (pos < s.size() && std::isdigit(static_cast<unsigned char>(s[pos]))) {
    if (pos - start > 12) return false;
    value = value * 10 + (s[pos] - '0');
    ++pos;
  }
  return pos > start;
}

struct RefTime {
  long long y = 0;
  int m = 1, d = 1;
  double seconds_of_day = 0.0;  // may be outside [0, 86400) after a time-zone shift
};

// Parses "Y-M-D[( |T)h[:m[:s[.f]]]][Z| UTC| ±h[:mm]| ±hhmm]" [CF 4.4, UDUNITS-2 time syntax].
RefTime parse_reference(const std::string& text) {
  const std::string s = trim(text);
  const auto bad = [&](const char* why) {
    return std::invalid_argument("reference date \"" + s + "\": " + why);
  };
  RefTime r;
  std::size_t p = 0;
  bool negative = false;
  if (p < s.size() && (s[p] == '-' || s[p] == '+')) negative = s[p++] == '-';
  long long v = 0;
  if (!parse_int(s, p, v) || p >= s.size() || s[p] != '-') throw bad("expected YYYY-MM-DD");
  r.y = negative ? -v : v;
  ++p;
  if (!parse_int(s, p, v) || v < 1 || v > 12 || p >= s.size() || s[p] != '-')
    throw bad("expected YYYY-MM-DD");
  r.m = static_cast<int>(v);
  ++p;
  if (!parse_int(s, p, v) || v < 1 || v > 31) throw bad("expected YYYY-MM-DD");
  r.d = static_cast<int>(v);
  double sod = 0.0;
  if (p < s.size() && (s[p] == 'T' || s[p] == 't' || s[p] == ' ')) {
    std::size_t q = p + 1;
    while (q < s.size() && s[q] == ' ') ++q;
    long long hh = 0, mm = 0;
    double ss = 0.0;
    if (q < s.size() && std::isdigit(static_cast<unsigned char>(s[q]))) {
      if (!parse_int(s, q, hh) || hh > 24) throw bad("bad hour");
      if (q < s.size() && s[q] == ':') {
        ++q;
        if (!parse_int(s, q, mm) || mm > 59) throw bad("bad minute");
        if (q < s.size() && s[q] == ':') {
          ++q;
          const std::size_t q0 = q;
          while (q < s.size() && (std::isdigit(static_cast<unsigned char>(s[q])) || s[q] == '.')) ++q;
          if (q == q0) throw bad("bad second");
          try {
            ss = std::stod(s.substr(q0, q - q0));
          } catch (const std::exception&) {
            throw bad("bad second");
          }
          if (!(ss >= 0.0 && ss < 61.0)) throw bad("bad second");
        }
      }
      sod = static_cast<double>(hh * 3600 + mm * 60) + ss;
      p = q;
    }
  }
  // Optional time zone.
  while (p < s.size() && s[p] == ' ') ++p;
  if (p < s.size()) {
    const std::string rest = s.substr(p);
    const std::string lr = lower(rest);
    if (lr == "z" || lr == "utc" || lr == "gmt") {
      // UTC
    } else if (rest[0] == '+' || rest[0] == '-') {
      const double sign = rest[0] == '-' ? -1.0 : 1.0;
      std::size_t q = 1;
      long long a = 0, b = 0;
      const std::size_t q0 = q;
      if (!parse_int(rest, q, a)) throw bad("bad time-zone offset");
      if (q < rest.size() && rest[q] == ':') {
        ++q;
        if (!parse_int(rest, q, b)) throw bad("bad time-zone offset");
      } else if (q - q0 > 2) {  // "+0530"
        b = a % 100;
        a /= 100;
      }
      if (q != rest.size() || a > 14 || b > 59) throw bad("bad time-zone offset");
      // Local time = UTC + offset, so UTC = local - offset.
      sod -= sign * static_cast<double>(a * 3600 + b * 60);
    } else {
      throw bad("unexpected text after the date");
    }
  }
  r.seconds_of_day = sod;
  return r;
}

// Seconds per unit of a CF time unit; months and years are refused (CF 4.4:
// their UDUNITS definitions are not calendar months or years).
double time_unit_seconds(const std::string& unit) {
  const std::string u = lower(unit);
  if (u == "second" || u == "seconds" || u == "s" || u == "sec" || u == "secs") return 1.0;
  if (u == "minute" || u == "minutes" || u == "min" || u == "mins") return 60.0;
  if (u == "hour" || u == "hours" || u == "h" || u == "hr" || u == "hrs") return 3600.0;
  if (u == "day" || u == "days" || u == "d") return 86400.0;
  if (u == "month" || u == "months" || u == "year" || u == "years" || u == "yr" || u == "a" ||
      u == "common_year" || u == "common_years")
    throw std::invalid_argument("time unit \"" + unit +
                                "\" is ambiguous (CF 4.4 advises against months and years); use "
                                "days, hours, minutes or seconds");
  throw std::invalid_argument("time unit \"" + unit +
                              "\" is not one of seconds, minutes, hours or days");
}

// ---- truncation check for the classic formats ----------------------------------
// netCDF-C reads past the end of a truncated CDF-1/2/5 file without an error
// (its I/O layer zero-fills short reads), so the reader compares the file size
// with the data extent that the header describes. Header grammar: "The NetCDF
// Classic Format Specification" (NUG) and the CDF-5 format specification
// (PnetCDF): magic "CDF" v, numrecs, dim_list, gatt_list, var_list; counts
// (NON_NEG) are 4 bytes in CDF-1/2 and 8 bytes in CDF-5; begin offsets are 4
// bytes in CDF-1 and 8 bytes otherwise; all big-endian.

class HeaderStream {
public:
  explicit HeaderStream(std::FILE* f) : f_(f) {}
  bool ok() const { return ok_; }
  unsigned long long uint(int bytes) {
    unsigned long long v = 0;
    for (int k = 0; k < bytes; ++k) {
      const int c = std::fgetc(f_);
      if (c == EOF) {
        ok_ = false;
        return 0;
      }
      v = (v << 8) | static_cast<unsigned long long>(c);
    }
    return v;
  }
  void skip(unsigned long long bytes) {
    if (!ok_ || bytes > (1ULL << 40) ||
        std::fseek(f_, static_cast<long>(bytes), SEEK_CUR) != 0)
      ok_ = false;
  }
  static unsigned long long pad4(unsigned long long n) { return (n + 3) / 4 * 4; }

private:
  std::FILE* f_;
  bool ok_ = true;
};

std::size_t external_size(unsigned long long type) {
  switch (type) {
    case NC_BYTE: case NC_CHAR: case NC_UBYTE: return 1;
    case NC_SHORT: case NC_USHORT: return 2;
    case NC_INT: case NC_UINT: case NC_FLOAT: return 4;
    case NC_DOUBLE: case NC_INT64: case NC_UINT64: return 8;
    default: return 0;
  }
}

// Returns the smallest file size (bytes) that holds every value the header of
// a classic-format file FILE (positioned at its start) describes, or 0 when it
// cannot tell (streamed file, unparsable header: then netCDF's own checks are
// all there is).
unsigned long long classic_min_size(std::FILE* file, int format) {
  if (!file) return 0;
  HeaderStream in(file);
  const int count = format == NC_FORMAT_CDF5 ? 8 : 4;
  const int offset = format == NC_FORMAT_CLASSIC ? 4 : 8;
  in.skip(4);  // "CDF" + version
  const unsigned long long numrecs = in.uint(count);
  if (count == 4 && numrecs == 0xFFFFFFFFULL) return 0;  // streaming: numrecs from the size
  const auto name = [&] { in.skip(HeaderStream::pad4(in.uint(count))); };
  const auto attributes = [&] {
    in.uint(4);  // NC_ATTRIBUTE or ABSENT
    const unsigned long long n = in.uint(count);
    for (unsigned long long a = 0; a < n && in.ok(); ++a) {
      name();
      const std::size_t size = external_size(in.uint(4));
      const unsigned long long nelems = in.uint(count);
      if (size == 0) return false;
      in.skip(HeaderStream::pad4(nelems * size));
    }
    return in.ok();
  };
  in.uint(4);  // NC_DIMENSION or ABSENT
  const unsigned long long ndims = in.uint(count);
  if (!in.ok() || ndims > 100000) return 0;
  std::vector<unsigned long long> dim_len(ndims);
  for (auto& len : dim_len) {
    name();
    len = in.uint(count);
  }
  if (!attributes()) return 0;
  in.uint(4);  // NC_VARIABLE or ABSENT
  const unsigned long long nvars = in.uint(count);
  if (!in.ok() || nvars > 1000000) return 0;
  // Per variable: begin offset, unpadded bytes per record (or in all), record?
  struct Extent {
    unsigned long long begin, bytes;
    bool record;
  };
  std::vector<Extent> extents;
  for (unsigned long long v = 0; v < nvars && in.ok(); ++v) {
    name();
    const unsigned long long nd = in.uint(count);
    if (nd > 1024) return 0;
    bool record = false;
    unsigned long long product = 1;
    for (unsigned long long k = 0; k < nd; ++k) {
      const unsigned long long id = in.uint(count);
      if (id >= ndims) return 0;
      if (dim_len[id] == 0 && k == 0) {
        record = true;
      } else {
        product *= dim_len[id];
      }
    }
    if (!attributes()) return 0;
    const std::size_t size = external_size(in.uint(4));
    in.uint(count);  // vsize (not trusted: saturates for > 4 GiB variables)
    const unsigned long long begin = in.uint(offset);
    if (size == 0) return 0;
    extents.push_back({begin, product * size, record});
  }
  if (!in.ok()) return 0;
  // Record size as netCDF-C lays it out: each record variable padded to 4
  // bytes, except when there is exactly one record variable (then unpadded).
  unsigned long long recsize = 0, nrecvars = 0;
  for (const auto& e : extents)
    if (e.record) {
      recsize += HeaderStream::pad4(e.bytes);
      ++nrecvars;
    }
  if (nrecvars == 1)
    for (const auto& e : extents)
      if (e.record) recsize = e.bytes;
  // Smallest size that holds the last value of every variable (padding after
  // it is not required).
  unsigned long long need = 0;
  for (const auto& e : extents) {
    if (e.bytes == 0 || (e.record && numrecs == 0)) continue;
    const unsigned long long end =
        e.record ? e.begin + (numrecs - 1) * recsize + e.bytes : e.begin + e.bytes;
    need = std::max(need, end);
  }
  return need;
}

// ---- header check before netCDF-C parses a classic file -------------------------
// netCDF-C 4.9.0 trusts the lengths in a classic header: a CDF-5 name length
// of 2^64 - 1 crashes it (memcpy with a negative size, also in ncdump; found
// by fuzz/fuzz_metadata), and huge lengths make it allocate gigabytes before
// it notices the file is short. So the reader walks the header first (same
// grammar as classic_min_size) and refuses one that is not well formed:
// unknown tags or types, names longer than NC_MAX_NAME, counts or lengths
// that do not fit in the bytes that follow, dimension ids out of range.

class BoundedHeader {
public:
  BoundedHeader(std::FILE* f, unsigned long long size) : f_(f), left_(size) {}
  // Reads a big-endian unsigned of BYTES bytes; false past the end.
  bool uint(int bytes, unsigned long long& v) {
    v = 0;
    if (left_ < static_cast<unsigned long long>(bytes)) return false;
    for (int k = 0; k < bytes; ++k) {
      const int c = std::fgetc(f_);
      if (c == EOF) return false;
      v = (v << 8) | static_cast<unsigned long long>(c);
    }
    left_ -= static_cast<unsigned long long>(bytes);
    return true;
  }
  bool skip(unsigned long long bytes) {
    if (bytes > left_ || bytes > (1ULL << 62) ||
        std::fseek(f_, static_cast<long>(bytes), SEEK_CUR) != 0)
      return false;
    left_ -= bytes;
    return true;
  }
  [[nodiscard]] unsigned long long left() const { return left_; }

private:
  std::FILE* f_;
  unsigned long long left_;
};

// Returns "" when the classic header of FILE (SIZE bytes, at its start, magic
// "CDF" + VERSION 1, 2 or 5) is well formed, else what is wrong with it.
std::string classic_header_problem(std::FILE* file, unsigned long long size) {
  BoundedHeader in(file, size);
  unsigned long long magic = 0, v = 0;
  if (!in.uint(4, magic)) return "shorter than its magic number";
  const unsigned long long version = magic & 0xff;
  const int count = version == 5 ? 8 : 4;
  const int offset = version == 1 ? 4 : 8;
  const unsigned long long max_type = version == 5 ? NC_UINT64 : NC_DOUBLE;
  if (!in.uint(count, v)) return "ends in numrecs";
  const auto name = [&](const char* what) -> std::string {
    unsigned long long n = 0;
    if (!in.uint(count, n)) return std::string("ends in a ") + what + " name";
    if (n == 0 || n > NC_MAX_NAME)
      return std::string("a ") + what + " name has length " + std::to_string(n);
    // No NUL and no '/' in a name (netCDF-C's API never writes them; a NUL
    // would make the name "" for every later lookup).
    for (unsigned long long k = 0; k < n; ++k) {
      unsigned long long c = 0;
      if (!in.uint(1, c)) return std::string("a ") + what + " name runs past the end";
      if (c == 0 || c == '/') return std::string("a ") + what + " name holds a NUL or '/' byte";
    }
    if (!in.skip(HeaderStream::pad4(n) - n))
      return std::string("a ") + what + " name runs past the end";
    return "";
  };
  // A list: ABSENT (0, 0) or TAG followed by a count of items of at least
  // MIN_BYTES bytes each.
  const auto list = [&](unsigned long long tag, unsigned long long min_bytes, const char* what,
                        unsigned long long& n) -> std::string {
    unsigned long long t = 0;
    if (!in.uint(4, t) || !in.uint(count, n)) return std::string("ends in the ") + what + " list";
    if (t == 0 && n == 0) return "";
    if (t != tag) return std::string("bad tag of the ") + what + " list";
    if (n > in.left() / min_bytes)
      return std::string("the ") + what + " list claims " + std::to_string(n) + " entries";
    return "";
  };
  const auto attributes = [&](const char* where) -> std::string {
    unsigned long long n = 0;
    std::string p = list(0x0C, 12, where, n);
    for (unsigned long long a = 0; p.empty() && a < n; ++a) {
      p = name("attribute");
      unsigned long long type = 0, nelems = 0;
      if (p.empty() && (!in.uint(4, type) || !in.uint(count, nelems))) p = "ends in an attribute";
      const std::size_t bytes = p.empty() ? external_size(type) : 0;
      if (p.empty() && (type == 0 || type > max_type || bytes == 0))
        p = "an attribute has type " + std::to_string(type);
      if (p.empty() && nelems > in.left() / bytes) p = "an attribute's values run past the end";
      if (p.empty() && !in.skip(HeaderStream::pad4(nelems * bytes)))
        p = "an attribute's values run past the end";
    }
    return p;
  };
  unsigned long long ndims = 0, nvars = 0;
  std::string p = list(0x0A, 8, "dimension", ndims);
  unsigned long long records = 0;
  for (unsigned long long d = 0; p.empty() && d < ndims; ++d) {
    p = name("dimension");
    if (p.empty() && !in.uint(count, v)) p = "ends in a dimension length";
    if (p.empty() && v == 0 && ++records > 1) p = "more than one unlimited dimension";
  }
  if (p.empty()) p = attributes("global attribute");
  if (p.empty()) p = list(0x0B, 16, "variable", nvars);
  for (unsigned long long k = 0; p.empty() && k < nvars; ++k) {
    p = name("variable");
    unsigned long long nd = 0;
    if (p.empty() && !in.uint(count, nd)) p = "ends in a variable";
    if (p.empty() && (nd > NC_MAX_VAR_DIMS || nd > in.left() / static_cast<unsigned>(count)))
      p = "a variable has " + std::to_string(nd) + " dimensions";
    for (unsigned long long j = 0; p.empty() && j < nd; ++j)
      if (!in.uint(count, v) || v >= ndims) p = "a variable names a dimension that does not exist";
    if (p.empty()) p = attributes("variable attribute");
    unsigned long long type = 0;
    if (p.empty() && !in.uint(4, type)) p = "ends in a variable";
    if (p.empty() && (type == 0 || type > max_type || external_size(type) == 0))
      p = "a variable has type " + std::to_string(type);
    if (p.empty() && (!in.uint(count, v) || !in.uint(offset, v))) p = "ends in a variable";
  }
  return p;
}

// ---- the height-variable layout ---------------------------------------------

enum class DimRole { time, lat, lon, single };

struct VarSummary {
  int id = -1;
  std::string name;
  nc_type type = NC_NAT;
  std::vector<int> dims;
  std::string standard_name;
};

}  // namespace

// ---- CivilTime ------------------------------------------------------------------

std::string CivilTime::iso() const {
  int y = year, mo = month, d = day, h = hour, mi = minute;
  double sec = std::round(second);
  if (sec >= 60.0) {
    // Carry into minutes and hours; a carry into the next day would need the
    // calendar, so within half a second before midnight the seconds are cut.
    if (mi < 59) {
      sec = 0.0;
      ++mi;
    } else if (h < 23) {
      sec = 0.0;
      mi = 0;
      ++h;
    } else {
      sec = 59.0;
    }
  }
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, "%s%04d-%02d-%02dT%02d:%02d:%02dZ", y < 0 ? "-" : "",
                y < 0 ? -y : y, mo, d, h, mi, static_cast<int>(sec));
  return buffer;
}

CivilTime decode_cf_time(double value, const std::string& units, const std::string& calendar) {
  const Calendar cal = parse_calendar(calendar);
  if (!std::isfinite(value)) throw std::invalid_argument("time value is not finite");
  const std::string u = trim(units);
  const std::string lu = lower(u);
  const auto since = lu.find(" since ");
  if (since == std::string::npos)
    throw std::invalid_argument("time units \"" + units + "\" are not \"<unit> since <date>\"");
  const double unit_seconds = time_unit_seconds(trim(u.substr(0, since)));
  RefTime ref = parse_reference(u.substr(since + 7));

  if (historical_years(cal)) {
    if (ref.y == 0)
      throw std::invalid_argument("reference date has year 0, which does not exist in the " +
                                  lower(trim(calendar.empty() ? "standard" : calendar)) +
                                  " calendar");
    if (ref.y < 0) ref.y += 1;  // historical -> astronomical
  }
  if (ref.d > days_in_month(cal, ref.y, ref.m))
    throw std::invalid_argument("reference date \"" + trim(u.substr(since + 7)) +
                                "\" does not exist in this calendar");
  long long day = to_day(cal, ref.y, ref.m, ref.d);

  // Split the offset into whole days and seconds without losing integers:
  // for day units the fractional day is exact; for the others value * unit is
  // exact while it stays below 2^53 s.
  double whole_days = 0.0, seconds = 0.0;
  if (unit_seconds == 86400.0) {
    whole_days = std::floor(value);
    seconds = (value - whole_days) * 86400.0;
  } else {
    const double total = value * unit_seconds;
    whole_days = std::floor(total / 86400.0);
    seconds = total - whole_days * 86400.0;
  }
  if (std::fabs(whole_days) > 1e12) throw std::invalid_argument("time value out of range");
  seconds += ref.seconds_of_day;
  // Round to microseconds so that 1/3 h style values do not print as xx:59:59.
  seconds = std::round(seconds * 1e6) / 1e6;
  const double extra = std::floor(seconds / 86400.0);
  seconds -= extra * 86400.0;
  day += static_cast<long long>(whole_days) + static_cast<long long>(extra);

  const Ymd ymd = from_day(cal, day);
  CivilTime out;
  long long year = ymd.y;
  if (historical_years(cal) && year <= 0) year -= 1;  // astronomical -> historical
  if (year < std::numeric_limits<int>::min() || year > std::numeric_limits<int>::max())
    throw std::invalid_argument("time value out of range");
  out.year = static_cast<int>(year);
  out.month = ymd.m;
  out.day = ymd.d;
  const long long whole = static_cast<long long>(std::floor(seconds));
  out.hour = static_cast<int>(whole / 3600);
  out.minute = static_cast<int>((whole % 3600) / 60);
  out.second = seconds - static_cast<double>(whole - whole % 60);
  return out;
}

// ---- Reader -----------------------------------------------------------------------

struct Reader::Impl {
  int ncid = -1;
  int varid = -1;
  HeightInfo info;
  std::vector<DimRole> roles;  // per dimension of the height variable
  // Unpacking, resolved once (see the notation block at the top).
  double unsigned_wrap = 0.0;  // 2^bits when _Unsigned = "true" on signed storage, else 0
  bool has_fill = false;
  double fill = 0.0;
  std::vector<double> missing;
  double vmin = -std::numeric_limits<double>::infinity();
  double vmax = std::numeric_limits<double>::infinity();
  // Raw chunk reads (chunkio.hpp), when the layout allows; else nc_get_vara.
  std::unique_ptr<chunkio::RawInput> raw;
  std::string read_path;
  bool cache_sized = false;  // nc_get_vara path: chunk cache set for the band height
  bool horizontal = false;   // ReaderOptions::horizontal_grids
  // In memory (Reader::from_memory): the file's bytes, alive until nc_close.
  std::vector<char> memory;
  bool in_memory = false;
  // The file as opened (size, modification time), to notice in-place changes.
  struct stat opened {};
  bool watched = false;
  bool data_checked = false;  // the no-data probe ran (first fetch)

  ~Impl() {
    raw.reset();  // HDF5 handle first, then netCDF's
    if (ncid >= 0) close_unless_poisoned(ncid);
  }

  [[noreturn]] void fail(const std::string& variable, const std::string& problem) const {
    throw InputError(input_message(info.path, printable(variable), printable(problem)));
  }
  void check(int status, const std::string& variable, const std::string& what) const {
    if (status != NC_NOERR) fail(variable, what + ": " + nc_message(status));
  }

  void open(const std::string& path);
  void open_memory(const std::string& name, const void* data, std::size_t size);
  void after_open(int status, std::FILE* header, unsigned long long size, bool size_known);
  void check_classic_header(std::FILE* file, unsigned long long size) const;
  void detect(const ReaderOptions& options);
  void require_values(double count, double copies, const std::string& variable,
                      const std::string& what) const;
  void check_unchanged() const;
  void check_has_data();
  std::vector<VarSummary> list_variables() const;
  int choose_variable(const std::vector<VarSummary>& vars, const ReaderOptions& options);
  void resolve_kind(const VarSummary& v);
  void resolve_layout(const VarSummary& v, const std::vector<VarSummary>& vars);
  bool resolve_plane(const VarSummary& v, const std::vector<VarSummary>& vars);
  AuxVar read_aux(const VarSummary& c) const;
  double packing_number(const VarSummary& c, const char* name, double absent) const;
  CoordVar read_coordinate(const VarSummary& c, Axis axis) const;
  void resolve_units(const ReaderOptions& options);
  void resolve_packing();
  void open_raw(const ReaderOptions& options);
  void size_chunk_cache(std::size_t nrows);
  void unpack(double* v, std::size_t n) const;
  std::string dims_text(const std::vector<int>& dims) const;
  std::size_t dim_length(int dim) const;
  std::string dim_name(int dim) const;
};

// Refuses a classic file (magic "CDF" 1, 2 or 5) whose header is not well
// formed, before netCDF-C parses it (see classic_header_problem).
void Reader::Impl::check_classic_header(std::FILE* file, unsigned long long size) const {
  if (!file) return;
  unsigned char magic[4] = {0, 0, 0, 0};
  const bool classic = std::fread(magic, 1, 4, file) == 4 && magic[0] == 'C' && magic[1] == 'D' &&
                       magic[2] == 'F' && (magic[3] == 1 || magic[3] == 2 || magic[3] == 5);
  std::rewind(file);
  if (!classic) return;
  const std::string problem = classic_header_problem(file, size);
  std::rewind(file);
  if (!problem.empty())
    fail("", "cannot be opened as netCDF (malformed classic header: " + problem + ")");
}

void Reader::Impl::open(const std::string& path) {
  info.path = path;
  {
    struct stat st {};
    std::unique_ptr<std::FILE, int (*)(std::FILE*)> file(
        ::stat(path.c_str(), &st) == 0 && S_ISREG(st.st_mode) ? std::fopen(path.c_str(), "rb")
                                                              : nullptr,
        &std::fclose);
    check_classic_header(file.get(), static_cast<unsigned long long>(st.st_size));
  }
  int id = -1;
  const int status = nc_open(path.c_str(), NC_NOWRITE, &id);
  if (status == NC_NOERR) {
    ncid = id;
    watched = ::stat(path.c_str(), &opened) == 0;
  }
  std::unique_ptr<std::FILE, int (*)(std::FILE*)> file(
      status == NC_NOERR ? std::fopen(path.c_str(), "rb") : nullptr, &std::fclose);
  std::error_code ec;
  const auto have = status == NC_NOERR ? std::filesystem::file_size(path, ec) : 0;
  after_open(status, file.get(), have, !ec);
}

void Reader::Impl::open_memory(const std::string& name, const void* data, std::size_t size) {
  info.path = name;
  in_memory = true;
  if (size == 0 || data == nullptr) fail("", "cannot be opened as netCDF (no bytes)");
  memory.assign(static_cast<const char*>(data), static_cast<const char*>(data) + size);
  {
    std::unique_ptr<std::FILE, int (*)(std::FILE*)> file(::fmemopen(memory.data(), size, "rb"),
                                                         &std::fclose);
    check_classic_header(file.get(), size);
  }
  int id = -1;
  const int status = nc_open_mem(name.c_str(), NC_NOWRITE, size, memory.data(), &id);
  if (status == NC_NOERR) ncid = id;
  std::unique_ptr<std::FILE, int (*)(std::FILE*)> file(
      status == NC_NOERR ? ::fmemopen(memory.data(), size, "rb") : nullptr, &std::fclose);
  after_open(status, file.get(), size, true);
}

// The checks after nc_open/nc_open_mem returned STATUS: the format, and for
// the classic formats the size (SIZE bytes when SIZE_KNOWN) against what the
// header (read from HEADER) describes.
void Reader::Impl::after_open(int status, std::FILE* header, unsigned long long size,
                              bool size_known) {
  if (status != NC_NOERR)
    fail("", "cannot be opened as netCDF (" + nc_message(status) + ")");
  int format = 0;
  check(nc_inq_format(ncid, &format), "", "cannot read the file format");
  switch (format) {
    case NC_FORMAT_CLASSIC: info.format = "classic"; break;
    case NC_FORMAT_64BIT_OFFSET: info.format = "64-bit offset"; break;
    case NC_FORMAT_CDF5: info.format = "CDF5"; break;
    case NC_FORMAT_NETCDF4: info.format = "netCDF-4"; break;
    case NC_FORMAT_NETCDF4_CLASSIC: info.format = "netCDF-4 classic model"; break;
    default: info.format = "unknown"; break;
  }
  if (format == NC_FORMAT_CLASSIC || format == NC_FORMAT_64BIT_OFFSET || format == NC_FORMAT_CDF5) {
    const unsigned long long need = classic_min_size(header, format);
    if (size_known && need > 0 && size < need)
      fail("", "file is truncated (" + std::to_string(size) + " bytes; its header describes " +
                   std::to_string(need) + ")");
  }
  info.global_attrs = copy_attributes(ncid, NC_GLOBAL);
}

// Refuses (resources.hpp) before COUNT values of VARIABLE are held as
// doubles COPIES times over.
void Reader::Impl::require_values(double count, double copies, const std::string& variable,
                                  const std::string& what) const {
  try {
    require_memory(count * 8.0 * copies, what, info.path, variable,
                   "the declared dimensions are implausible or the machine too small");
  } catch (const InputError& e) {
    throw InputError(printable(e.what()));
  }
}

// Throws when the file on disk was modified in place since it was opened:
// same file (device, inode) with another size or modification time. A file
// replaced by rename is another inode, and the one opened is still read
// whole; a deleted one too.
void Reader::Impl::check_unchanged() const {
  if (!watched) return;
  struct stat now {};
  if (::stat(info.path.c_str(), &now) != 0) return;
  if (now.st_dev != opened.st_dev || now.st_ino != opened.st_ino) return;
  if (now.st_size != opened.st_size || now.st_mtim.tv_sec != opened.st_mtim.tv_sec ||
      now.st_mtim.tv_nsec != opened.st_mtim.tv_nsec)
    fail(info.variable,
         "the file changed while it was being read (" +
             (now.st_size != opened.st_size
                  ? "its size went from " + std::to_string(opened.st_size) + " to " +
                        std::to_string(now.st_size) + " bytes"
                  : std::string("its modification time changed")) +
             "); values read may be torn, so the input is refused: rerun once the file is "
             "complete (replace inputs by rename, not in place)");
}

// netCDF-4: refuses a height variable with no stored data at all (HDF5
// storage size 0: no chunk was ever written), whose every cell would be
// missing; declared grids of any size are refused at once instead of being
// read as fill. Any HDF5 failure leaves the question open (no refusal).
void Reader::Impl::check_has_data() {
  data_checked = true;
  if (in_memory || (info.format != "netCDF-4" && info.format != "netCDF-4 classic model")) return;
  hsize_t stored = 1;
  bool known = false;
  H5E_BEGIN_TRY {
    const hid_t file = H5Fopen(info.path.c_str(), H5F_ACC_RDONLY, H5P_DEFAULT);
    if (file >= 0) {
      const hid_t ds = H5Dopen2(file, info.variable.c_str(), H5P_DEFAULT);
      if (ds >= 0) {
        stored = H5Dget_storage_size(ds);
        known = true;
        H5Dclose(ds);
      }
      H5Fclose(file);
    }
  }
  H5E_END_TRY;
  if (known && stored == 0)
    fail(info.variable,
         "holds no data: none of its " + std::to_string(info.nt) + " x " +
             std::to_string(info.ny) + " x " + std::to_string(info.nx) +
             " declared values was ever written (every cell would be missing)");
}

std::size_t Reader::Impl::dim_length(int dim) const {
  std::size_t n = 0;
  check(nc_inq_dimlen(ncid, dim, &n), "", "cannot read a dimension");
  return n;
}

std::string Reader::Impl::dim_name(int dim) const {
  char name[NC_MAX_NAME + 1] = {0};
  check(nc_inq_dimname(ncid, dim, name), "", "cannot read a dimension");
  return name;
}

std::string Reader::Impl::dims_text(const std::vector<int>& dims) const {
  std::vector<std::string> parts;
  for (int d : dims) parts.push_back(dim_name(d) + "=" + std::to_string(dim_length(d)));
  return "(" + join(parts, ", ") + ")";
}

std::vector<VarSummary> Reader::Impl::list_variables() const {
  int nvars = 0;
  check(nc_inq_nvars(ncid, &nvars), "", "cannot list variables");
  std::vector<VarSummary> out;
  for (int v = 0; v < nvars; ++v) {
    VarSummary s;
    s.id = v;
    char name[NC_MAX_NAME + 1] = {0};
    int ndims = 0;
    check(nc_inq_var(ncid, v, name, &s.type, &ndims, nullptr, nullptr), "", "cannot read a variable");
    s.name = name;
    s.dims.resize(ndims);
    if (ndims) check(nc_inq_vardimid(ncid, v, s.dims.data()), s.name, "cannot read its dimensions");
    s.standard_name = trim(text_att(ncid, v, "standard_name").value_or(""));
    out.push_back(std::move(s));
  }
  return out;
}

int Reader::Impl::choose_variable(const std::vector<VarSummary>& vars, const ReaderOptions& options) {
  if (!options.variable.empty()) {
    for (const auto& v : vars) {
      if (v.name != options.variable) continue;
      if (classify_height_name(v.standard_name) == HeightName::ellipsoid)
        fail(v.name, ellipsoid_refusal);
      info.chosen_because = "--variable";
      return v.id;
    }
    std::vector<std::string> names;
    for (const auto& v : vars) names.push_back(v.name);
    fail(options.variable, "not found in the file (variables: " +
                               (names.empty() ? std::string("none") : join(names, ", ")) + ")");
  }

  std::vector<const VarSummary*> heights, ellipsoidal;
  for (const auto& v : vars) {
    const HeightName h = classify_height_name(v.standard_name);
    if (h == HeightName::absolute || h == HeightName::anomaly) heights.push_back(&v);
    if (h == HeightName::ellipsoid) ellipsoidal.push_back(&v);
  }
  if (heights.size() == 1) {
    info.chosen_because = "standard_name " + heights[0]->standard_name;
    return heights[0]->id;
  }
  if (heights.size() > 1) {
    std::vector<std::string> names;
    for (const auto* v : heights) names.push_back(v->name + " (" + v->standard_name + ")");
    fail("", "several variables have a CF sea-surface-height standard_name: " + join(names, ", ") +
                 "; choose one with --variable");
  }
  if (!ellipsoidal.empty()) fail(ellipsoidal[0]->name, ellipsoid_refusal);

  // No CF height name: list numeric variables on latitude/longitude dimensions.
  std::vector<int> lat_dims, lon_dims;
  for (const auto& v : vars) {
    if (v.dims.size() != 1) continue;
    const Axis a = classify_coordinate(ncid, v.id);
    if (a == Axis::lat) lat_dims.push_back(v.dims[0]);
    if (a == Axis::lon) lon_dims.push_back(v.dims[0]);
  }
  const auto has = [](const std::vector<int>& set, const std::vector<int>& dims) {
    return std::any_of(dims.begin(), dims.end(), [&](int d) {
      return std::find(set.begin(), set.end(), d) != set.end();
    });
  };
  std::vector<std::string> candidates;
  for (const auto& v : vars) {
    if (v.dims.size() < 2 || !is_numeric_type(v.type)) continue;
    if (!has(lat_dims, v.dims) || !has(lon_dims, v.dims)) continue;
    candidates.push_back(v.standard_name.empty() ? v.name
                                                 : v.name + " (" + v.standard_name + ")");
  }
  const std::string names =
      "sea_surface_height_above_geoid, sea_surface_height_above_geopotential_datum, "
      "sea_surface_height_above_mean_sea_level, sea_surface_height_above_sea_level, "
      "sea_surface_height";
  if (candidates.empty())
    fail("", "no height variable: no variable has a CF sea-surface-height standard_name (" + names +
                 ") and no numeric variable lies on latitude/longitude dimensions");
  fail("", "no variable has a CF sea-surface-height standard_name (" + names +
               "); candidates on latitude/longitude dimensions: " + join(candidates, ", ") +
               "; choose one with --variable");
}

void Reader::Impl::resolve_kind(const VarSummary& v) {
  info.standard_name = v.standard_name;
  info.long_name = trim(text_att(ncid, v.id, "long_name").value_or(""));
  const HeightName h = classify_height_name(v.standard_name);
  if (h == HeightName::absolute) {
    info.kind = HeightKind::absolute;
    info.kind_reason = "standard_name " + v.standard_name + " (height above the geoid)";
    return;
  }
  if (h == HeightName::anomaly) {
    info.kind = HeightKind::anomaly;
    info.kind_reason = "standard_name " + v.standard_name + " (height above a mean sea level)";
    return;
  }
  // Chosen by --variable without a CF height name: look for "anomaly"/"sla".
  const auto says_anomaly = [](const std::string& text) {
    const std::string t = lower(text);
    if (t.find("anomal") != std::string::npos) return true;
    std::string token;
    for (std::size_t k = 0; k <= t.size(); ++k) {
      if (k < t.size() && std::isalnum(static_cast<unsigned char>(t[k]))) {
        token += t[k];
      } else {
        if (token == "sla") return true;
        token.clear();
      }
    }
    return false;
  };
  if (says_anomaly(v.name)) {
    info.kind = HeightKind::anomaly;
    info.kind_reason = "variable name " + v.name + " says anomaly/sla";
  } else if (says_anomaly(info.long_name)) {
    info.kind = HeightKind::anomaly;
    info.kind_reason = "long_name \"" + info.long_name + "\" says anomaly/sla";
  } else {
    info.kind = HeightKind::absolute;
    info.kind_reason = "no CF height standard_name and no anomaly/sla in name or long_name: "
                       "assumed absolute";
  }
}

CoordVar Reader::Impl::read_coordinate(const VarSummary& c, Axis axis) const {
  CoordVar out;
  out.name = c.name;
  out.dim = dim_name(c.dims[0]);
  out.nc_type = c.type;
  out.attrs = copy_attributes(ncid, c.id);
  const std::size_t n = dim_length(c.dims[0]);
  if (n == 0) fail(c.name, "dimension " + out.dim + " is empty");
  if (!is_numeric_type(c.type)) fail(c.name, "coordinate variable is not numeric");
  // Held about 4 times over: here, in the grid (degrees and radians), in the output.
  require_values(static_cast<double>(n), 4.0, c.name,
                 "coordinate " + c.name + " of " + std::to_string(n) + " declared values");
  out.values.resize(n);
  check(nc_get_var_double(ncid, c.id, out.values.data()), c.name, "cannot read coordinate values");

  // Values equal to _FillValue/missing_value are missing coordinates (checked
  // before unpacking, in stored units).
  std::vector<double> fills;
  for (const char* name : {"_FillValue", "missing_value"})
    if (auto a = number_att(ncid, c.id, name)) fills.insert(fills.end(), a->begin(), a->end());
  for (double v : out.values)
    if (std::find(fills.begin(), fills.end(), v) != fills.end())
      fail(c.name, "coordinate contains missing values");

  const double sf = packing_number(c, "scale_factor", 1.0);
  const double ao = packing_number(c, "add_offset", 0.0);
  if (sf != 1.0 || ao != 0.0)
    for (double& v : out.values) v = v * sf + ao;

  for (std::size_t k = 0; k < n; ++k)
    if (!std::isfinite(out.values[k]))
      fail(c.name, "coordinate value " + std::to_string(k) + " is not finite");
  if (n >= 2) {
    const bool up = out.values[1] > out.values[0];
    for (std::size_t k = 1; k < n; ++k) {
      const bool ok = up ? out.values[k] > out.values[k - 1] : out.values[k] < out.values[k - 1];
      if (!ok)
        fail(c.name, "coordinate is not strictly monotonic (index " + std::to_string(k - 1) +
                         " and " + std::to_string(k) + ")");
    }
  }
  if (axis == Axis::lat)
    for (double v : out.values)
      if (v < -90.0 || v > 90.0) fail(c.name, "latitude outside [-90, 90] degrees");
  return out;
}

void Reader::Impl::resolve_layout(const VarSummary& v, const std::vector<VarSummary>& vars) {
  // The coordinate of each dimension: the variable named like the dimension
  // (CF coordinate variable) when it is a recognised axis, else any other 1-D
  // variable on that dimension that is.
  const std::size_t nd = v.dims.size();
  std::vector<Axis> axes(nd, Axis::none);
  std::vector<const VarSummary*> coords(nd, nullptr);
  for (std::size_t k = 0; k < nd; ++k) {
    const std::string dname = dim_name(v.dims[k]);
    const VarSummary* best = nullptr;
    Axis best_axis = Axis::none;
    for (const auto& c : vars) {
      if (c.dims.size() != 1 || c.dims[0] != v.dims[k] || c.id == v.id) continue;
      const Axis a = classify_coordinate(ncid, c.id);
      if (a == Axis::none) continue;
      if (!best || c.name == dname) {
        best = &c;
        best_axis = a;
      }
      if (c.name == dname) break;
    }
    coords[k] = best;
    axes[k] = best_axis;
  }

  const std::string layout = dims_text(v.dims);
  const std::string expected =
      "expected (lat, lon) or (time, lat, lon), other dimensions only of size 1";
  const auto find_axis = [&](Axis a) {
    std::vector<std::size_t> at;
    for (std::size_t k = 0; k < nd; ++k)
      if (axes[k] == a) at.push_back(k);
    return at;
  };
  const auto lat_at = find_axis(Axis::lat);
  const auto lon_at = find_axis(Axis::lon);
  // Projected x/y or 2-D latitude/longitude (docs/projected.md), when asked for.
  const bool plane = horizontal && (lat_at.empty() || lon_at.empty()) && resolve_plane(v, vars);
  if (!plane && lat_at.empty())
    fail(v.name, "no latitude coordinate among its dimensions " + layout +
                     " (a 1-D variable with units degrees_north, standard_name latitude or axis Y)");
  if (!plane && lon_at.empty())
    fail(v.name, "no longitude coordinate among its dimensions " + layout +
                     " (a 1-D variable with units degrees_east, standard_name longitude or axis X)");
  if (!plane && (lat_at.size() > 1 || lon_at.size() > 1))
    fail(v.name, "several latitude or longitude dimensions " + layout + "; " + expected);
  if (!plane && (nd < 2 || lon_at[0] != nd - 1 || lat_at[0] != nd - 2))
    fail(v.name, "unsupported dimension order " + layout + ": latitude is " +
                     dim_name(v.dims[lat_at[0]]) + ", longitude is " + dim_name(v.dims[lon_at[0]]) +
                     "; " + expected);

  roles.assign(nd, DimRole::single);
  roles[nd - 2] = DimRole::lat;
  roles[nd - 1] = DimRole::lon;
  int time_k = -1;
  for (std::size_t k = 0; k + 2 < nd; ++k) {
    const std::size_t len = dim_length(v.dims[k]);
    if (axes[k] == Axis::time && time_k < 0) {
      time_k = static_cast<int>(k);
      roles[k] = DimRole::time;
    } else if (len != 1) {
      fail(v.name, "unsupported dimensions " + layout + ": " + dim_name(v.dims[k]) +
                       " has size " + std::to_string(len) +
                       (axes[k] == Axis::time ? " (a second time dimension)"
                                              : " and is not time (no coordinate variable with "
                                                "standard_name time, axis T or units \"<unit> "
                                                "since <date>\")") +
                       "; " + expected);
    }
  }

  if (!plane) {
    info.lat = read_coordinate(*coords[nd - 2], Axis::lat);
    info.lon = read_coordinate(*coords[nd - 1], Axis::lon);
  }
  info.ny = info.lat.values.size();
  info.nx = info.lon.values.size();
  info.nt = 1;
  if (time_k >= 0) {
    const VarSummary& tc = *coords[static_cast<std::size_t>(time_k)];
    if (dim_length(tc.dims[0]) == 0)
      fail(tc.name, "time dimension " + dim_name(tc.dims[0]) + " is empty (no time steps)");
    info.time = read_coordinate(tc, Axis::time);
    info.nt = info.time->values.size();
    const auto cal = text_att(ncid, tc.id, "calendar");
    info.calendar = cal ? lower(trim(*cal)) : "standard";
    if (info.calendar.empty()) info.calendar = "standard";
  }
}

// scale_factor or add_offset of a coordinate [CF 8.1]: ABSENT when missing;
// refused when not one finite number (a text or empty attribute, NaN).
double Reader::Impl::packing_number(const VarSummary& c, const char* name, double absent) const {
  bool bad = false;
  const auto a = number_att(ncid, c.id, name, &bad);
  if (!a) return absent;
  if (bad || a->empty() || !std::isfinite(a->front()))
    fail(c.name, std::string("attribute ") + name + " is not a finite number");
  return a->front();
}

// ---- projected and curvilinear grids (reader.hpp; docs/projected.md) -----------------

AuxVar Reader::Impl::read_aux(const VarSummary& c) const {
  AuxVar a;
  a.name = c.name;
  a.nc_type = c.type;
  a.attrs = copy_attributes(ncid, c.id);
  if (!is_numeric_type(c.type)) fail(c.name, "is not numeric");
  double declared = 1.0;  // as a double first: the product of dimensions may exceed 2^64
  for (int d : c.dims) declared *= static_cast<double>(dim_length(d));
  // Held about 3 times over: here, in the grid's node positions, in the output.
  require_values(declared, 3.0, c.name, "2-D coordinate " + c.name + " " + dims_text(c.dims));
  std::size_t n = 1;
  for (int d : c.dims) n *= dim_length(d);
  a.values.resize(n);
  if (n > 0)
    check(nc_get_var_double(ncid, c.id, a.values.data()), c.name, "cannot read its values");
  // _FillValue/missing_value (stored units) are missing; then unpack [CF 8.1].
  std::vector<double> fills;
  for (const char* name : {"_FillValue", "missing_value"})
    if (auto f = number_att(ncid, c.id, name)) fills.insert(fills.end(), f->begin(), f->end());
  const double sf = packing_number(c, "scale_factor", 1.0);
  const double ao = packing_number(c, "add_offset", 0.0);
  for (double& x : a.values) {
    if (std::find(fills.begin(), fills.end(), x) != fills.end() || !std::isfinite(x))
      x = std::numeric_limits<double>::quiet_NaN();
    else
      x = x * sf + ao;
  }
  return a;
}

bool Reader::Impl::resolve_plane(const VarSummary& v, const std::vector<VarSummary>& vars) {
  const std::size_t nd = v.dims.size();
  if (nd < 2) return false;
  const int yd = v.dims[nd - 2], xd = v.dims[nd - 1];
  // 1-D projection coordinates [CF Appendix F]: standard_name
  // projection_x/y_coordinate, or axis X/Y with a length unit.
  const auto projection_axis = [&](const VarSummary& c, const char* which) {
    const std::string sn = trim(text_att(ncid, c.id, "standard_name").value_or(""));
    if (sn == std::string("projection_") + which + "_coordinate") return true;
    const std::string ax = lower(trim(text_att(ncid, c.id, "axis").value_or("")));
    double scale = 0, offset = 0;
    return ax == which && length_to_metres(text_att(ncid, c.id, "units").value_or(""), scale,
                                           offset) == UnitStatus::ok;
  };
  const VarSummary* xc = nullptr;
  const VarSummary* yc = nullptr;
  for (const auto& c : vars) {
    if (c.dims.size() != 1 || c.id == v.id || !is_numeric_type(c.type)) continue;
    if (c.dims[0] == xd && projection_axis(c, "x") && (!xc || c.name == dim_name(xd))) xc = &c;
    if (c.dims[0] == yd && projection_axis(c, "y") && (!yc || c.name == dim_name(yd))) yc = &c;
  }
  // 2-D latitude/longitude on (rows, columns) named by the coordinates attribute [CF 5.2].
  const VarSummary* la = nullptr;
  const VarSummary* lo = nullptr;
  {
    std::istringstream names(text_att(ncid, v.id, "coordinates").value_or(""));
    for (std::string name; names >> name;)
      for (const auto& c : vars) {
        if (c.name != name || c.dims.size() != 2 || c.dims[0] != yd || c.dims[1] != xd) continue;
        const Axis a = classify_coordinate(ncid, c.id);
        if (a == Axis::lat && !la) la = &c;
        if (a == Axis::lon && !lo) lo = &c;
      }
  }
  // grid_mapping: "crs", or the CF 1.7 extended form "crs: x y [crs2: lat lon]"
  // (the mapping that lists the x coordinate, else the first) [CF 5.6].
  std::string gm_name;
  {
    std::istringstream tokens(text_att(ncid, v.id, "grid_mapping").value_or(""));
    std::string tok, current, first;
    while (tokens >> tok) {
      if (tok.back() == ':') {
        current = tok.substr(0, tok.size() - 1);
        if (first.empty()) first = current;
      } else if (current.empty()) {
        gm_name = tok;  // simple form
      } else if (xc && tok == xc->name && gm_name.empty()) {
        gm_name = current;
      }
    }
    if (gm_name.empty()) gm_name = first;
  }
  const bool xy = xc != nullptr && yc != nullptr;
  const auto read_2d = [&] {
    if (la && lo) {
      info.lat2d = read_aux(*la);
      info.lon2d = read_aux(*lo);
    }
  };
  if (xy && !gm_name.empty()) {
    const VarSummary* gm = nullptr;
    for (const auto& c : vars)
      if (c.name == gm_name) gm = &c;
    if (!gm)
      fail(v.name, "grid_mapping names \"" + gm_name + "\", which is not a variable in the file");
    double sx = 0, sy = 0, offset = 0;
    const std::string ux = text_att(ncid, xc->id, "units").value_or("");
    const std::string uy = text_att(ncid, yc->id, "units").value_or("");
    if (length_to_metres(ux, sx, offset) != UnitStatus::ok || offset != 0.0)
      fail(xc->name, "projection x coordinate has units \"" + ux + "\", not a length");
    if (length_to_metres(uy, sy, offset) != UnitStatus::ok || offset != 0.0)
      fail(yc->name, "projection y coordinate has units \"" + uy + "\", not a length");
    if (std::fabs(sx - sy) > 1e-12 * sx)
      fail(yc->name, "projection x and y have different units (\"" + ux + "\", \"" + uy + "\")");
    info.lon = read_coordinate(*xc, Axis::none);
    info.lat = read_coordinate(*yc, Axis::none);
    for (double x : info.lon.values) info.x_m.push_back(x * sx);
    for (double y : info.lat.values) info.y_m.push_back(y * sy);
    AuxVar g;
    g.name = gm->name;
    g.nc_type = gm->type;
    g.attrs = copy_attributes(ncid, gm->id);
    info.grid_mapping.variable = gm->name;
    info.grid_mapping.unit_m = sx;
    for (const Attribute& a : g.attrs) {
      if (a.nc_type == NC_CHAR || a.nc_type == NC_STRING)
        info.grid_mapping.texts[a.name] = a.text;
      else
        info.grid_mapping.numbers[a.name] = a.values;
    }
    info.grid_mapping_var = std::move(g);
    read_2d();
    info.grid_kind = GridKind::projected;
  } else if (la && lo) {
    // Row and column coordinates: a 1-D numeric variable named like the
    // dimension when there is one, else the dimension alone.
    const auto dimension_coordinate = [&](int dim) {
      for (const auto& c : vars)
        if (c.dims.size() == 1 && c.dims[0] == dim && c.name == dim_name(dim) &&
            is_numeric_type(c.type))
          return read_coordinate(c, Axis::none);
      CoordVar cv;
      cv.dim = dim_name(dim);
      cv.nc_type = NC_INT;
      require_values(static_cast<double>(dim_length(dim)), 4.0, v.name,
                     "index coordinate of dimension " + cv.dim + " " + dims_text({dim}));
      cv.values.resize(dim_length(dim));
      for (std::size_t k = 0; k < cv.values.size(); ++k) cv.values[k] = static_cast<double>(k);
      return cv;
    };
    info.lat = dimension_coordinate(yd);
    info.lon = dimension_coordinate(xd);
    read_2d();
    info.grid_kind = GridKind::curvilinear;
  } else if (xy) {
    fail(v.name, "has projection x/y coordinates (" + xc->name + ", " + yc->name +
                     ") but no grid_mapping attribute naming a CF grid mapping variable and no "
                     "2-D latitude/longitude in a coordinates attribute");
  } else {
    return false;
  }
  if (info.lat.values.size() < 2 || info.lon.values.size() < 2)
    fail(v.name, "the grid has fewer than 2 rows or columns");
  return true;
}

void Reader::Impl::resolve_units(const ReaderOptions& options) {
  const std::string& var = info.variable;
  if (!options.units.empty()) {
    info.units = trim(options.units);
    info.units_overridden = true;
  } else {
    info.units = trim(text_att(ncid, varid, "units").value_or(""));
    if (info.units.empty())
      fail(var, "has no units attribute; give the height units with --units (e.g. --units m)");
  }
  const std::string source = info.units_overridden ? "--units \"" : "units \"";
  switch (length_to_metres(info.units, info.to_metres_scale, info.to_metres_offset)) {
    case UnitStatus::ok:
      return;
    case UnitStatus::no_database:
      fail(var, "the UDUNITS-2 unit database could not be read (check UDUNITS2_XML_PATH)");
    case UnitStatus::unparsable:
      fail(var, source + info.units + "\" not understood by UDUNITS-2; give the height units with "
                                      "--units (e.g. --units m)");
    case UnitStatus::not_length:
      fail(var, source + info.units + "\" are not a length; give the height units with --units "
                                      "(e.g. --units m)");
  }
}

void Reader::Impl::resolve_packing() {
  const std::string& var = info.variable;
  const nc_type type = info.storage_type;
  bool bad = false;

  const auto single = [&](const char* name) -> std::optional<double> {
    auto a = number_att(ncid, varid, name, &bad);
    if (bad) fail(var, std::string("attribute ") + name + " is not numeric");
    if (!a) return std::nullopt;
    return a->at(0);
  };
  const auto sf = single("scale_factor");
  const auto ao = single("add_offset");
  info.packed = sf.has_value() || ao.has_value();
  info.scale_factor = sf.value_or(1.0);
  info.add_offset = ao.value_or(0.0);
  if (!std::isfinite(info.scale_factor) || !std::isfinite(info.add_offset) ||
      info.scale_factor == 0.0)
    fail(var, "scale_factor/add_offset are not finite and non-zero");

  // _Unsigned = "true" on signed integer storage (netCDF-3 convention for
  // unsigned data, NUG "Attribute Conventions").
  const std::string uns = lower(trim(text_att(ncid, varid, "_Unsigned").value_or("")));
  const bool unsigned_data = uns == "true" && is_signed_integer_type(type);
  unsigned_wrap = unsigned_data ? std::ldexp(1.0, type_bits(type)) : 0.0;

  // Attribute values of the storage type follow the data's reinterpretation;
  // float storage compares at float precision (a double attribute such as
  // 0.1 would otherwise never equal the stored 0.1f).
  const auto to_raw = [&](double v, nc_type att_type) {
    if (unsigned_data && att_type == type && v < 0) v += unsigned_wrap;
    if (type == NC_FLOAT && std::isfinite(v) && std::fabs(v) <= std::numeric_limits<float>::max())
      v = static_cast<double>(static_cast<float>(v));
    return v;
  };

  nc_type att_type = NC_NAT;
  const auto fill_att = number_att(ncid, varid, "_FillValue", &bad, &att_type);
  if (bad) fail(var, "attribute _FillValue is not numeric");
  if (fill_att) {
    has_fill = true;
    fill = to_raw(fill_att->at(0), att_type);
  } else {
    // netCDF default fill of the type (netcdf.h); not for byte types, whose
    // whole range is usually data (netCDF4-python does the same).
    has_fill = true;
    switch (type) {
      case NC_SHORT: fill = NC_FILL_SHORT; break;
      case NC_USHORT: fill = NC_FILL_USHORT; break;
      case NC_INT: fill = NC_FILL_INT; break;
      case NC_UINT: fill = NC_FILL_UINT; break;
      case NC_INT64: fill = static_cast<double>(NC_FILL_INT64); break;
      case NC_UINT64: fill = static_cast<double>(NC_FILL_UINT64); break;
      case NC_FLOAT: fill = static_cast<double>(NC_FILL_FLOAT); break;
      case NC_DOUBLE: fill = NC_FILL_DOUBLE; break;
      default: has_fill = false; break;
    }
    if (has_fill && unsigned_data && fill < 0) fill += unsigned_wrap;
  }
  if (has_fill) info.fill_value = fill;

  auto mv = number_att(ncid, varid, "missing_value", &bad, &att_type);
  if (bad) fail(var, "attribute missing_value is not numeric");
  if (mv)
    for (double v : *mv) missing.push_back(to_raw(v, att_type));
  info.missing_values = missing;

  auto range = number_att(ncid, varid, "valid_range", &bad, &att_type);
  if (bad) fail(var, "attribute valid_range is not numeric");
  if (range) {
    if (range->size() != 2) fail(var, "attribute valid_range does not have two values");
    vmin = to_raw((*range)[0], att_type);
    vmax = to_raw((*range)[1], att_type);
  } else {
    if (auto a = number_att(ncid, varid, "valid_min", &bad, &att_type)) {
      if (bad) fail(var, "attribute valid_min is not numeric");
      vmin = to_raw(a->at(0), att_type);
    }
    if (auto a = number_att(ncid, varid, "valid_max", &bad, &att_type)) {
      if (bad) fail(var, "attribute valid_max is not numeric");
      vmax = to_raw(a->at(0), att_type);
    }
  }
  if (std::isfinite(vmin)) info.valid_min = vmin;
  if (std::isfinite(vmax)) info.valid_max = vmax;
  if (vmin > vmax) fail(var, "valid minimum exceeds valid maximum");
}

// ---- raw chunk path and the unpacking of values ---------------------------------------

namespace {

/// chunkio element type of a netCDF numeric type.
bool element_of(nc_type t, chunkio::ElementType& e) {
  switch (t) {
    case NC_BYTE: e = chunkio::ElementType::i8; return true;
    case NC_UBYTE: e = chunkio::ElementType::u8; return true;
    case NC_SHORT: e = chunkio::ElementType::i16; return true;
    case NC_USHORT: e = chunkio::ElementType::u16; return true;
    case NC_INT: e = chunkio::ElementType::i32; return true;
    case NC_UINT: e = chunkio::ElementType::u32; return true;
    case NC_INT64: e = chunkio::ElementType::i64; return true;
    case NC_UINT64: e = chunkio::ElementType::u64; return true;
    case NC_FLOAT: e = chunkio::ElementType::f32; return true;
    case NC_DOUBLE: e = chunkio::ElementType::f64; return true;
    default: return false;
  }
}

/// Largest decoded input chunk read raw (bytes); larger chunks go through
/// netCDF-C, which streams them through HDF5 instead of holding them.
/// Rule of thumb (common practice, no source): far above the 1-16 MiB that
/// producers use, well below the memory of the machines this runs on.
constexpr std::size_t max_raw_chunk_bytes = std::size_t{256} << 20;

}  // namespace

void Reader::Impl::open_raw(const ReaderOptions& options) {
  if (!options.raw_chunks) {
    read_path = "netCDF-C (raw chunk reads switched off)";
    return;
  }
  if (info.format != "netCDF-4" && info.format != "netCDF-4 classic model") {
    read_path = "netCDF-C (" + info.format + " file)";
    return;
  }
  std::string why;
  auto r = chunkio::RawInput::open(info.path, info.variable, max_raw_chunk_bytes, why);
  if (r) {
    // The HDF5 view must be the netCDF view: same rank, extents and type.
    const chunkio::ChunkFormat& f = r->format();
    chunkio::ElementType want{};
    if (!element_of(info.storage_type, want) || want != f.type) {
      why = "stored type differs from the netCDF type";
    } else if (f.dims.size() != roles.size()) {
      why = "rank differs from the netCDF variable";
    } else {
      const std::size_t nd = roles.size();
      if (f.dims[nd - 2] != info.ny || f.dims[nd - 1] != info.nx) why = "extent differs from netCDF";
    }
    if (why.empty()) {
      raw = std::move(r);
      read_path = "raw chunks (";
      read_path += f.shuffle ? (f.deflate ? "shuffle+deflate" : "shuffle") : (f.deflate ? "deflate" : "no filter");
      read_path += f.swap ? ", byte-swapped)" : ")";
      return;
    }
  }
  read_path = "netCDF-C (" + why + ")";
}

void Reader::Impl::size_chunk_cache(std::size_t nrows) {
  // nc_get_vara path: an HDF5 chunk cache that holds every chunk of one band
  // plus one chunk row (the halo shared with the next band), instead of
  // netCDF-C's default, so each chunk is decompressed once per pass.
  cache_sized = true;
  if (info.format != "netCDF-4" && info.format != "netCDF-4 classic model") return;
  int storage = 0;
  std::vector<std::size_t> chunk(roles.size(), 0);
  if (nc_inq_var_chunking(ncid, varid, &storage, chunk.data()) != NC_NOERR || storage != NC_CHUNKED)
    return;
  std::size_t type_size = 0;
  if (nc_inq_type(ncid, info.storage_type, nullptr, &type_size) != NC_NOERR) return;
  const std::size_t nd = roles.size(), cr = std::max<std::size_t>(chunk[nd - 2], 1),
                    cc = std::max<std::size_t>(chunk[nd - 1], 1);
  std::size_t chunk_bytes = type_size;
  for (std::size_t c : chunk) chunk_bytes *= std::max<std::size_t>(c, 1);
  const std::size_t n = ((nrows + cr - 1) / cr + 1) * ((info.nx + cc - 1) / cc);
  const std::size_t bytes = std::min<std::size_t>(n * chunk_bytes, std::size_t{1} << 30);
  nc_set_var_chunk_cache(ncid, varid, bytes, std::max<std::size_t>(4 * n + 1, 521), 0.75f);
}

void Reader::Impl::unpack(double* values, std::size_t n) const {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double sf = info.scale_factor, ao = info.add_offset;
  const double sc = info.to_metres_scale, of = info.to_metres_offset;
  const double wrap = unsigned_wrap;
  const double lo = vmin, hi = vmax;
  for (std::size_t k = 0; k < n; ++k) {
    double raw_value = values[k];
    if (wrap != 0.0 && raw_value < 0.0) raw_value += wrap;
    // NaN-safe: !(lo <= raw && raw <= hi) is true for NaN.
    bool gone = !std::isfinite(raw_value) || !(lo <= raw_value && raw_value <= hi) ||
                (has_fill && raw_value == fill);
    for (double mv : missing) gone = gone || raw_value == mv;
    values[k] = gone ? nan : (raw_value * sf + ao) * sc + of;  // [CF 8.1] unpack, then UDUNITS to metres
  }
}

// ---- FetchedRows ------------------------------------------------------------------

struct FetchedRows::Impl {
  std::size_t t = 0, j0 = 0, nrows = 0, nx = 0;
  bool is_raw = false;
  chunkio::RawRows raw;       // raw path
  std::vector<double> plain;  // nc_get_vara path: stored values as doubles
  std::string path, variable;
};

FetchedRows::FetchedRows() : impl_(std::make_unique<Impl>()) {}
FetchedRows::~FetchedRows() = default;
FetchedRows::FetchedRows(FetchedRows&&) noexcept = default;
FetchedRows& FetchedRows::operator=(FetchedRows&&) noexcept = default;

std::size_t FetchedRows::tasks() const { return impl_ && impl_->is_raw ? impl_->raw.tasks() : 0; }
std::size_t FetchedRows::rows() const { return impl_ ? impl_->nrows : 0; }
std::size_t FetchedRows::first_row() const { return impl_ ? impl_->j0 : 0; }

void FetchedRows::run_task(std::size_t k) const {
  const Impl& m = *impl_;
  try {
    m.raw.run_task(k);
  } catch (const std::exception& e) {
    throw InputError(input_message(m.path, m.variable,
                                   "cannot decode rows " + std::to_string(m.j0) + ".." +
                                       std::to_string(m.j0 + m.nrows - 1) + " of time step " +
                                       std::to_string(m.t) + " (" + e.what() + ")"));
  }
}

// ---- Reader -------------------------------------------------------------------------

void Reader::Impl::detect(const ReaderOptions& options) {
  const auto vars = list_variables();
  varid = choose_variable(vars, options);
  const VarSummary& v = vars[static_cast<std::size_t>(varid)];
  info.variable = v.name;
  info.storage_type = v.type;
  if (!is_numeric_type(v.type)) fail(v.name, "is not a numeric variable");
  resolve_kind(v);
  horizontal = options.horizontal_grids;
  resolve_layout(v, vars);
  resolve_units(options);
  resolve_packing();
  info.variable_attrs = copy_attributes(ncid, varid);
  if (in_memory)
    read_path = "netCDF-C (in memory)";
  else
    open_raw(options);
}

Reader::Reader() : impl_(std::make_unique<Impl>()) {}

Reader::Reader(const std::string& path, const ReaderOptions& options)
    : impl_(std::make_unique<Impl>()) {
  impl_->open(path);
  impl_->detect(options);
}

Reader Reader::from_memory(const std::string& name, const void* data, std::size_t size,
                           const ReaderOptions& options) {
  Reader r;
  r.impl_->open_memory(name, data, size);
  r.impl_->detect(options);
  return r;
}

Reader::~Reader() = default;
Reader::Reader(Reader&&) noexcept = default;
Reader& Reader::operator=(Reader&&) noexcept = default;

const HeightInfo& Reader::info() const { return impl_->info; }

const std::string& Reader::read_path() const { return impl_->read_path; }

void Reader::fetch_rows(std::size_t t, std::size_t j0, std::size_t nrows, FetchedRows& out) {
  Impl& m = *impl_;
  const HeightInfo& info = m.info;
  if (t >= info.nt || j0 > info.ny || nrows > info.ny - j0)
    throw std::out_of_range("Reader::fetch_rows: time step or rows outside the grid");
  if (!out.impl_) out.impl_ = std::make_unique<FetchedRows::Impl>();
  FetchedRows::Impl& f = *out.impl_;
  f.t = t;
  f.j0 = j0;
  f.nrows = nrows;
  f.nx = info.nx;
  f.path = info.path;
  f.variable = info.variable;
  f.is_raw = m.raw != nullptr;
  f.plain.clear();
  const auto failed = [&](const std::string& why) {
    m.fail(info.variable, "cannot read rows " + std::to_string(j0) + ".." +
                              std::to_string(j0 + nrows - 1) + " of time step " +
                              std::to_string(t) + " (" + why + ")");
  };
  if (nrows == 0) {
    f.is_raw = false;
    return;
  }
  if (!m.data_checked) m.check_has_data();

  const std::size_t nd = m.roles.size();
  std::vector<std::size_t> start(nd, 0), count(nd, 1);
  for (std::size_t k = 0; k < nd; ++k) {
    switch (m.roles[k]) {
      case DimRole::time: start[k] = t; break;
      case DimRole::lat: start[k] = j0; count[k] = nrows; break;
      case DimRole::lon: count[k] = info.nx; break;
      case DimRole::single: break;
    }
  }
  if (f.is_raw) {
    // lat and lon are the last two dimensions (resolve_layout); the leading
    // ones (time, size-1) are fixed indices.
    try {
      m.raw->fetch(std::vector<std::size_t>(start.begin(), start.end() - 2), j0, nrows, f.raw);
    } catch (const std::exception& e) {
      m.check_unchanged();  // a file cut short while read: say so
      failed(e.what());
    }
    m.check_unchanged();
    return;
  }
  if (!m.cache_sized) m.size_chunk_cache(nrows);
  // The hyperslab is row-major nrows x nx, the layout of Field.
  f.plain.resize(nrows * info.nx);
  const int status = nc_get_vara_double(m.ncid, m.varid, start.data(), count.data(), f.plain.data());
  // After the read: any change before or during it shows in the size or the
  // modification time (netCDF-C zero-fills reads past a classic file's end).
  m.check_unchanged();
  if (status != NC_NOERR) failed(nc_message(status));
}

void Reader::unpack_rows(const FetchedRows& in, std::size_t r0, std::size_t r1, Field& out) const {
  const Impl& m = *impl_;
  const FetchedRows::Impl& f = *in.impl_;
  if (r0 > r1 || r1 > f.nrows || out.ny != f.nrows || out.nx != f.nx)
    throw std::logic_error("Reader::unpack_rows: rows outside the fetched band");
  for (std::size_t r = r0; r < r1; ++r) {
    double* row = out.row(r);
    if (f.is_raw)
      f.raw.row_as_double(r, row);
    else
      std::copy(f.plain.begin() + static_cast<std::ptrdiff_t>(r * f.nx),
                f.plain.begin() + static_cast<std::ptrdiff_t>((r + 1) * f.nx), row);
    m.unpack(row, f.nx);
  }
}

void Reader::read_rows(std::size_t t, std::size_t j0, std::size_t nrows, Field& out) {
  FetchedRows fetched;
  fetch_rows(t, j0, nrows, fetched);
  out.ny = nrows;
  out.nx = impl_->info.nx;
  out.data.assign(nrows * out.nx, 0.0);
  if (nrows == 0) return;
  // Decompress the fetched chunks on every OpenMP thread; no netCDF call here.
  const auto tasks = static_cast<long>(fetched.tasks());
  std::exception_ptr error;
#pragma omp parallel for schedule(dynamic, 1) if (tasks > 1)
  for (long k = 0; k < tasks; ++k) {
    try {
      fetched.run_task(static_cast<std::size_t>(k));
    } catch (...) {
#pragma omp critical(seatilt_reader_error)
      if (!error) error = std::current_exception();
    }
  }
  if (error) std::rethrow_exception(error);
  const auto rows = static_cast<long>(nrows);
#pragma omp parallel for schedule(static) if (nrows * out.nx > 65536)
  for (long r = 0; r < rows; ++r)
    unpack_rows(fetched, static_cast<std::size_t>(r), static_cast<std::size_t>(r) + 1, out);
}

CivilTime Reader::date(std::size_t t) const {
  const Impl& m = *impl_;
  if (!m.info.time) m.fail(m.info.variable, "has no time dimension");
  const CoordVar& tc = *m.info.time;
  if (t >= tc.values.size()) throw std::out_of_range("Reader::date: time step outside the axis");
  std::string units;
  for (const auto& a : tc.attrs)
    if (a.name == "units") units = a.text;
  try {
    return decode_cf_time(tc.values[t], units, m.info.calendar);
  } catch (const std::invalid_argument& e) {
    m.fail(tc.name, e.what());
  }
}

}  // namespace seatilt
