// fuzz_line — libFuzzer target: the section line parser of `section --line`
// (section.hpp parse_section_line) and the section-name check on arbitrary
// bytes; a parsed line is then followed along WGS84 geodesics at a spacing
// that keeps it to about a thousand samples.
//
// Contract checked: only seatilt::UsageError may escape; a parsed line has
// 2..max_section_vertices points, finite, longitudes in [-360, 360],
// latitudes in [-90, 90], no point equal to the one before it; the message
// of a refusal is one line of printable text.
#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <string>

#include "seatilt/error.hpp"
#include "seatilt/section.hpp"

namespace {

[[noreturn]] void finding(const char* what) {
  std::fprintf(stderr, "fuzz_line: contract broken: %s\n", what);
  std::abort();
}
#define EXPECT(c)          \
  do {                     \
    if (!(c)) finding(#c); \
  } while (0)

void expect_printable(const seatilt::UsageError& e) {
  for (const char* p = e.what(); *p; ++p) {
    const auto c = static_cast<unsigned char>(*p);
    EXPECT(c >= 0x20 && c < 0x7f);
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  try {
    seatilt::check_section_name(text, "--name");
    EXPECT(!text.empty() && text.size() <= 100);
  } catch (const seatilt::UsageError& e) {
    expect_printable(e);
  }
  std::vector<seatilt::GeoPoint> points;
  try {
    points = seatilt::parse_section_line(text, "--line");
  } catch (const seatilt::UsageError& e) {
    expect_printable(e);
    return 0;
  }
  EXPECT(points.size() >= 2 && points.size() <= seatilt::max_section_vertices);
  for (std::size_t k = 0; k < points.size(); ++k) {
    const seatilt::GeoPoint& p = points[k];
    EXPECT(std::isfinite(p.lon_deg) && p.lon_deg >= -360.0 && p.lon_deg <= 360.0);
    EXPECT(std::isfinite(p.lat_deg) && p.lat_deg >= -90.0 && p.lat_deg <= 90.0);
    if (k) EXPECT(p.lon_deg != points[k - 1].lon_deg || p.lat_deg != points[k - 1].lat_deg);
  }
  const double length = seatilt::section_length_m(points, seatilt::EarthModel::wgs84);
  EXPECT(std::isfinite(length) && length >= 0.0);
  try {
    const double spacing = std::max(length / 1000.0, 1.0);
    const seatilt::SectionPath path =
        seatilt::sample_geodesic_path(points, seatilt::EarthModel::wgs84, spacing, "--line");
    EXPECT(path.lat_deg.size() == path.s_m.size() && path.lat_deg.size() >= 2);
    EXPECT(path.seg_length_m.size() + 1 == path.lat_deg.size());
    for (double s : path.seg_length_m) EXPECT(std::isfinite(s) && s >= 0.0);
  } catch (const seatilt::UsageError& e) {
    expect_printable(e);
  }
  return 0;
}
