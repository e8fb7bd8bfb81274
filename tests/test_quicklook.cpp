// Tests for seatilt/quicklook.hpp. Inputs are small netCDF files written here
// with the netCDF-C API; every PNG is decoded again with Cairo's own PNG
// reader (cairo_image_surface_create_from_png, libpng underneath) and its
// pixels compared with the published colour-map values:
//  - viridis entries 0, 128, 255 = #440154, #21918C, #FDE725 (matplotlib
//    _cm_listed.py _viridis_data x 255, rounded; the same hex codes are listed
//    at https://bids.github.io/colormap/);
//  - ColorBrewer RdBu 11-class end and middle colours #67001F, #F7F7F7,
//    #053061 (colorbrewer2.org);
//  - percentiles against numpy 1.24 numpy.percentile (default "linear"
//    method), values computed with Debian's numpy at development time.
#include <cairo.h>
#include <doctest/doctest.h>
#include <netcdf.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <string>
#include <vector>

#include "seatilt/error.hpp"
#include "seatilt/quicklook.hpp"

namespace fs = std::filesystem;
using seatilt::ColourScale;
using seatilt::InputError;
using seatilt::MapData;
using seatilt::MapRequest;
using seatilt::OutputError;
using seatilt::QuicklookOptions;
using seatilt::QuicklookResult;
using seatilt::Rgb8;
using seatilt::UsageError;

namespace {

const double missing = std::numeric_limits<double>::quiet_NaN();

struct TempDir {
  fs::path dir;
  TempDir() {
    std::string templ = (fs::temp_directory_path() / "seatilt-quicklook-XXXXXX").string();
    REQUIRE(::mkdtemp(templ.data()) != nullptr);
    dir = templ;
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(dir, ec);
  }
  [[nodiscard]] std::string file(const std::string& name) const { return (dir / name).string(); }
  [[nodiscard]] std::vector<std::string> entries() const {
    std::vector<std::string> names;
    for (const auto& e : fs::directory_iterator(dir)) names.push_back(e.path().filename().string());
    return names;
  }
};

/// A decoded PNG (Cairo's reader).
struct Png {
  int width = 0, height = 0;
  std::vector<std::uint32_t> pixels;  // 0xAARRGGBB / 0x00RRGGBB as Cairo stores them
  [[nodiscard]] Rgb8 at(int x, int y) const {
    const std::uint32_t p = pixels[static_cast<std::size_t>(y) * width + x];
    return {static_cast<std::uint8_t>(p >> 16), static_cast<std::uint8_t>(p >> 8),
            static_cast<std::uint8_t>(p)};
  }
};

Png decode(const std::string& path) {
  cairo_surface_t* s = cairo_image_surface_create_from_png(path.c_str());
  REQUIRE(cairo_surface_status(s) == CAIRO_STATUS_SUCCESS);
  const cairo_format_t f = cairo_image_surface_get_format(s);
  REQUIRE((f == CAIRO_FORMAT_RGB24 || f == CAIRO_FORMAT_ARGB32));
  Png png;
  png.width = cairo_image_surface_get_width(s);
  png.height = cairo_image_surface_get_height(s);
  const int stride = cairo_image_surface_get_stride(s);
  const unsigned char* data = cairo_image_surface_get_data(s);
  png.pixels.resize(static_cast<std::size_t>(png.width) * png.height);
  for (int y = 0; y < png.height; ++y)
    std::memcpy(&png.pixels[static_cast<std::size_t>(y) * png.width],
                data + static_cast<std::ptrdiff_t>(y) * stride,
                4 * static_cast<std::size_t>(png.width));
  cairo_surface_destroy(s);
  return png;
}

/// The most common colour of the 3 x 3 pixels around (LON, LAT): a 1-pixel
/// graticule line through the point cannot change it.
Rgb8 colour_near(const Png& png, const QuicklookResult& r, double lon, double lat) {
  int px = 0, py = 0;
  seatilt::lonlat_to_pixel(r, lon, lat, px, py);
  REQUIRE(px > r.map.x);
  REQUIRE(px < r.map.x + r.map.width - 1);
  REQUIRE(py > r.map.y);
  REQUIRE(py < r.map.y + r.map.height - 1);
  std::vector<Rgb8> seen;
  std::vector<int> count;
  for (int dy = -1; dy <= 1; ++dy)
    for (int dx = -1; dx <= 1; ++dx) {
      const Rgb8 c = png.at(px + dx, py + dy);
      const auto it = std::find(seen.begin(), seen.end(), c);
      if (it == seen.end()) {
        seen.push_back(c);
        count.push_back(1);
      } else {
        ++count[static_cast<std::size_t>(it - seen.begin())];
      }
    }
  return seen[static_cast<std::size_t>(std::max_element(count.begin(), count.end()) -
                                       count.begin())];
}

std::string text(const Rgb8& c) {
  return std::to_string(c.r) + "," + std::to_string(c.g) + "," + std::to_string(c.b);
}

void check(int status) { REQUIRE_MESSAGE(status == NC_NOERR, nc_strerror(status)); }

void put_text(int ncid, int varid, const char* name, const std::string& value) {
  check(nc_put_att_text(ncid, varid, name, value.size(), value.c_str()));
}

/// A variable to write: values (nt x ny x nx, NaN -> _FillValue), attributes.
struct VarSpec {
  std::string name;
  std::vector<double> values;
  std::vector<std::pair<std::string, std::string>> attrs;
  bool flags = false;  ///< add flag_masks
  nc_type type = NC_FLOAT;
  double scale_factor = 0.0;  ///< > 0: packed short
};

/// Writes a CF file with coordinates LAT, LON (degrees), NT time steps
/// ("days since 2026-03-14", standard calendar) and VARS on (time, lat, lon).
void write_file(const std::string& path, const std::vector<double>& lat,
                const std::vector<double>& lon, std::size_t nt, const std::vector<VarSpec>& vars) {
  int ncid = -1;
  check(nc_create(path.c_str(), NC_NETCDF4 | NC_CLOBBER, &ncid));
  int dt = -1, dy = -1, dx = -1;
  check(nc_def_dim(ncid, "time", NC_UNLIMITED, &dt));
  check(nc_def_dim(ncid, "latitude", lat.size(), &dy));
  check(nc_def_dim(ncid, "longitude", lon.size(), &dx));
  int vt = -1, vy = -1, vx = -1;
  check(nc_def_var(ncid, "time", NC_DOUBLE, 1, &dt, &vt));
  put_text(ncid, vt, "units", "days since 2026-03-14");
  put_text(ncid, vt, "calendar", "standard");
  check(nc_def_var(ncid, "latitude", NC_DOUBLE, 1, &dy, &vy));
  put_text(ncid, vy, "units", "degrees_north");
  check(nc_def_var(ncid, "longitude", NC_DOUBLE, 1, &dx, &vx));
  put_text(ncid, vx, "units", "degrees_east");
  std::vector<int> ids;
  const int dims[3] = {dt, dy, dx};
  for (const VarSpec& v : vars) {
    int id = -1;
    const bool packed = v.scale_factor > 0.0;
    check(nc_def_var(ncid, v.name.c_str(), packed ? NC_SHORT : v.type, 3, dims, &id));
    if (packed) {
      const short fill = -32767;
      check(nc_put_att_short(ncid, id, "_FillValue", NC_SHORT, 1, &fill));
      check(nc_put_att_double(ncid, id, "scale_factor", NC_DOUBLE, 1, &v.scale_factor));
    } else {
      const float fill = 9.96921e36f;
      check(nc_put_att_float(ncid, id, "_FillValue", NC_FLOAT, 1, &fill));
    }
    for (const auto& [k, val] : v.attrs) put_text(ncid, id, k.c_str(), val);
    if (v.flags) {
      const signed char masks[2] = {1, 2};
      check(nc_put_att_schar(ncid, id, "flag_masks", NC_BYTE, 2, masks));
    }
    ids.push_back(id);
  }
  check(nc_enddef(ncid));
  std::vector<double> days(nt);
  for (std::size_t t = 0; t < nt; ++t) days[t] = static_cast<double>(t);
  const std::size_t start0 = 0, count_t = nt;
  check(nc_put_vara_double(ncid, vt, &start0, &count_t, days.data()));
  check(nc_put_var_double(ncid, vy, lat.data()));
  check(nc_put_var_double(ncid, vx, lon.data()));
  for (std::size_t k = 0; k < vars.size(); ++k) {
    const VarSpec& v = vars[k];
    const std::size_t start[3] = {0, 0, 0}, count[3] = {nt, lat.size(), lon.size()};
    if (v.scale_factor > 0.0) {
      std::vector<short> raw(v.values.size());
      for (std::size_t q = 0; q < raw.size(); ++q)
        raw[q] = std::isnan(v.values[q])
                     ? short{-32767}
                     : static_cast<short>(std::lround(v.values[q] / v.scale_factor));
      check(nc_put_vara_short(ncid, ids[k], start, count, raw.data()));
    } else {
      std::vector<float> raw(v.values.size());
      for (std::size_t q = 0; q < raw.size(); ++q)
        raw[q] = std::isnan(v.values[q]) ? 9.96921e36f : static_cast<float>(v.values[q]);
      check(nc_put_vara_float(ncid, ids[k], start, count, raw.data()));
    }
  }
  check(nc_close(ncid));
}

std::vector<double> axis(double first, double last, double step) {
  std::vector<double> a;
  const long n = std::lround((last - first) / step);
  for (long k = 0; k <= n; ++k) a.push_back(first + step * static_cast<double>(k));
  return a;
}

/// Field (nt = 1) from a function of (lat, lon); NaN inside the land box.
std::vector<double> field_of(const std::vector<double>& lat, const std::vector<double>& lon,
                             double (*f)(double, double), bool land = true) {
  std::vector<double> v;
  for (double la : lat)
    for (double lo : lon) {
      // Land: 20..30 N, 40..60 E (a block of fill).
      const double l = std::fmod(lo + 360.0, 360.0);
      v.push_back(land && la >= 20.0 && la <= 30.0 && l >= 40.0 && l <= 60.0 ? missing : f(la, lo));
    }
  return v;
}

double north_positive(double lat, double) { return 1e-6 * lat; }  // s-1, zero on the equator

MapRequest field_request(const std::string& field) {
  MapRequest r;
  r.field = field;
  return r;
}

}  // namespace

TEST_CASE("colour maps: published end and centre colours") {
  // viridis #440154, #21918C, #FDE725 (entries 0, 128, 255)
  CHECK(seatilt::colour_at(ColourScale::sequential, 0.0) == Rgb8{68, 1, 84});
  CHECK(seatilt::colour_at(ColourScale::sequential, 0.5) == Rgb8{33, 145, 140});
  CHECK(seatilt::colour_at(ColourScale::sequential, 1.0) == Rgb8{253, 231, 37});
  CHECK(seatilt::colour_at(ColourScale::sequential, 1.7) == Rgb8{253, 231, 37});  // clamped
  // RdBu reversed: negative blue #053061, zero #F7F7F7, positive red #67001F
  CHECK(seatilt::colour_at(ColourScale::diverging, 0.0) == Rgb8{5, 48, 97});
  CHECK(seatilt::colour_at(ColourScale::diverging, 0.5) == Rgb8{247, 247, 247});
  CHECK(seatilt::colour_at(ColourScale::diverging, 1.0) == Rgb8{103, 0, 31});
  CHECK(seatilt::colour_at(ColourScale::diverging, -3.0) == Rgb8{5, 48, 97});
  // halfway between control points 5 (#F7F7F7) and 6 (#FDDBC7): rounded mean
  CHECK(seatilt::colour_at(ColourScale::diverging, 0.55) == Rgb8{250, 233, 223});
  CHECK(seatilt::colour_at(ColourScale::diverging, missing) == seatilt::no_data_colour());
  CHECK(seatilt::no_data_colour() == Rgb8{153, 153, 153});
  // The sequential map is monotonic in lightness: sum of channels rises
  // between the ends (viridis is built to be, [2]).
  int last = -1;
  for (int k = 0; k <= 16; ++k) {
    const Rgb8 c = seatilt::colour_at(ColourScale::sequential, k / 16.0);
    const int g = c.g;  // viridis green rises monotonically from 1 to 231
    CHECK(g > last);
    last = g;
  }
}

TEST_CASE("percentile and robust range follow numpy's linear method") {
  CHECK(seatilt::percentile({1, 2, 3, 4}, 25) == doctest::Approx(1.75));           // numpy: 1.75
  CHECK(seatilt::percentile({15, 20, 35, 40, 50}, 40) == doctest::Approx(29.0));   // numpy: 29.0
  CHECK(seatilt::percentile({3.0, -1.0, 7.0, 2.0}, 2) == doctest::Approx(-0.82));  // numpy: -0.82
  CHECK(seatilt::percentile({3.0, -1.0, 7.0, 2.0}, 98) == doctest::Approx(6.76));  // numpy: 6.76
  CHECK(seatilt::percentile({5.0}, 50) == 5.0);
  CHECK_THROWS_AS(seatilt::percentile({}, 50), std::invalid_argument);
  CHECK_THROWS_AS(seatilt::percentile({1.0}, 101), std::invalid_argument);

  std::vector<double> v;
  for (int k = 0; k <= 100; ++k) v.push_back(k);
  v.push_back(missing);
  auto r = seatilt::robust_range(v, ColourScale::sequential);  // numpy: 2.0, 98.0
  CHECK(r.low == doctest::Approx(2.0));
  CHECK(r.high == doctest::Approx(98.0));
  r = seatilt::robust_range(v, ColourScale::diverging);
  CHECK(r.low == doctest::Approx(-98.0));
  CHECK(r.high == doctest::Approx(98.0));
  r = seatilt::robust_range({3.0, 3.0}, ColourScale::sequential);
  CHECK(r.low < 3.0);
  CHECK(r.high > 3.0);
  r = seatilt::robust_range({0.0, 0.0}, ColourScale::diverging);
  CHECK(r.low == -1.0);
  CHECK(r.high == 1.0);
  CHECK_THROWS_AS(seatilt::robust_range({missing}, ColourScale::sequential), std::invalid_argument);
}

TEST_CASE("region and range parsing") {
  auto r = seatilt::parse_region("-60,-30,25,50");
  CHECK(r.lon0 == -60.0);
  CHECK(r.lon1 == -30.0);
  CHECK(r.lat0 == 25.0);
  CHECK(r.lat1 == 50.0);
  r = seatilt::parse_region("170,-170,-10,10");  // across the seam: 170..190
  CHECK(r.lon0 == 170.0);
  CHECK(r.lon1 == 190.0);
  r = seatilt::parse_region("350, 10, 0, 5");
  CHECK(r.lon1 == 370.0);
  r = seatilt::parse_region("0,360,-90,90");
  CHECK(r.lon1 - r.lon0 == 360.0);
  for (const char* bad : {"", "1,2,3", "1,2,3,4,5", "a,2,3,4", "0,0,0,1", "0,10,20,10",
                          "0,10,-95,10", "0,10,0,91", "0,400,0,1", "-360,360,0,1", "0,10,nan,1"})
    CHECK_THROWS_AS(seatilt::parse_region(bad), UsageError);
  const auto v = seatilt::parse_range("-2e-5, 2e-5");
  CHECK(v.low == -2e-5);
  CHECK(v.high == 2e-5);
  for (const char* bad : {"", "1", "2,1", "1,1", "1,x", "1,2,3", "inf,1"})
    CHECK_THROWS_AS(seatilt::parse_range(bad), UsageError);
}

TEST_CASE("signed field: descending latitude, 0..360 global grid, land, zero, colour bar") {
  TempDir tmp;
  const auto lat = axis(60.0, -60.0, -5.0);  // descending, includes 0
  const auto lon = axis(0.0, 358.0, 2.0);    // global periodic
  const std::string in = tmp.file("signed.nc");
  write_file(in, lat, lon, 1,
             {{"vorticity",
               field_of(lat, lon, north_positive),
               {{"long_name", "relative vorticity"}, {"units", "s-1"}}}});
  MapRequest req;
  req.field = "vorticity";
  const MapData map = seatilt::read_map_data(in, req);
  CHECK(map.variable == "vorticity");
  CHECK(map.scale == ColourScale::diverging);  // a signed field by name
  CHECK(map.units == "s-1");
  CHECK(map.long_name == "relative vorticity");
  CHECK(map.date == "2026-03-14T00:00:00Z");
  CHECK(std::isnan(map.values.at(8, 25)));  // 20 N, 50 E: land

  QuicklookOptions o;
  o.width_px = 800;
  const std::string out = tmp.file("signed.png");
  const QuicklookResult r = seatilt::write_quicklook(map, o, out);
  const Png png = decode(out);
  CHECK(png.width == 800);
  CHECK(png.height == r.height_px);
  CHECK(r.map.x + r.map.width <= png.width);
  CHECK(r.colour_bar.y + r.colour_bar.height <= png.height);
  // Symmetric 2nd..98th percentile range: the 98th percentile of 1e-6 lat on
  // this grid lies between its two largest values, 55e-6 and 60e-6.
  CHECK(r.range.low == doctest::Approx(-r.range.high));
  CHECK(r.range.high > 50e-6);
  CHECK(r.range.high <= 60e-6 + 1e-12);

  // Land (fill) is the neutral grey; the equator row (value 0) the centre colour.
  CHECK(text(colour_near(png, r, 50.0, 25.0)) == text(seatilt::no_data_colour()));
  CHECK(text(colour_near(png, r, 200.0, 0.0)) == text(Rgb8{247, 247, 247}));
  // Positive north is red (r > b), negative south is blue (b > r).
  for (double lo : {10.0, 100.0, 200.0, 300.0}) {
    const Rgb8 n = colour_near(png, r, lo, 45.3), s = colour_near(png, r, lo, -45.3);
    CHECK(n.r > n.b + 40);
    CHECK(s.b > s.r + 40);
  }
  // A cell's colour is colour_at of its value's fraction of the range.
  const double v = 1e-6 * -35.0;
  CHECK(text(colour_near(png, r, 123.0, -34.0)) ==
        text(seatilt::colour_at(ColourScale::diverging,
                                (v - r.range.low) / (r.range.high - r.range.low))));
  // Colour bar: the gradient of the diverging map, its centre the centre colour.
  const auto& bar = r.colour_bar;
  CHECK(bar.width > 100);
  CHECK(bar.height > 5);
  for (int c : {0, bar.width / 4, bar.width / 2, bar.width - 1}) {
    const Rgb8 want = seatilt::colour_at(ColourScale::diverging, (c + 0.5) / bar.width);
    CHECK(text(png.at(bar.x + c, bar.y + bar.height / 2)) == text(want));
  }
  // Outside the map and bar the page is white.
  CHECK(text(png.at(2, png.height - 2)) == "255,255,255");
  // Nothing but the PNG in the folder (temporary file renamed).
  CHECK(tmp.entries().size() == 2);
}

TEST_CASE(
    "height file through the Reader: units to metres, anomaly diverging, -180..180 seam region") {
  TempDir tmp;
  const auto lat = axis(-30.0, 30.0, 1.0);
  const auto lon = axis(-180.0, 179.0, 1.0);  // global, seam at +-180
  // 10 cm north of the equator, -10 cm south, 0 on it; packed short in cm.
  std::vector<double> cm;
  for (double la : lat)
    for (double lo : lon) cm.push_back(la > 0 ? 10.0 : la < 0 ? -10.0 : 0.0 * lo);
  const std::string in = tmp.file("sla.nc");
  write_file(in, lat, lon, 3,
             {{"sla",
               [&] {
                 std::vector<double> all;
                 for (int t = 0; t < 3; ++t) all.insert(all.end(), cm.begin(), cm.end());
                 return all;
               }(),
               {{"standard_name", "sea_surface_height_above_sea_level"},
                {"long_name", "sea level anomaly"},
                {"units", "cm"}},
               false,
               NC_FLOAT,
               0.01}});
  MapRequest req;
  req.time = 2;
  const MapData map = seatilt::read_map_data(in, req);  // detected by standard_name
  CHECK(map.variable == "sla");
  CHECK(map.units == "m");
  CHECK(map.scale == ColourScale::diverging);
  CHECK(map.time_steps == 3);
  CHECK(map.date == "2026-03-16T00:00:00Z");
  CHECK(map.values.at(50, 10) == doctest::Approx(0.10));  // 20 N: 10 cm = 0.1 m
  CHECK(map.values.at(10, 10) == doctest::Approx(-0.10));

  QuicklookOptions o;
  o.width_px = 600;
  o.region = seatilt::parse_region("170,-170,-20,20");  // across the seam
  const std::string out = tmp.file("seam.png");
  const QuicklookResult r = seatilt::write_quicklook(map, o, out);
  const Png png = decode(out);
  CHECK(png.width == 600);
  CHECK(r.region.lon0 == 170.0);
  CHECK(r.region.lon1 == 190.0);
  // Every map pixel has data (no grey gap at 180); north red, south blue.
  int grey = 0;
  for (int y = r.map.y; y < r.map.y + r.map.height; y += 7)
    for (int x = r.map.x; x < r.map.x + r.map.width; x += 7)
      grey += png.at(x, y) == seatilt::no_data_colour();
  CHECK(grey == 0);
  for (double lo : {171.3, 179.7, 180.3, -175.0, 189.6}) {
    CHECK(colour_near(png, r, lo, 10.4).r > colour_near(png, r, lo, 10.4).b);
    CHECK(colour_near(png, r, lo, -10.4).b > colour_near(png, r, lo, -10.4).r);
  }

  // An absolute height is drawn with the sequential map.
  const std::string abs_in = tmp.file("adt.nc");
  write_file(abs_in, lat, lon, 1,
             {{"adt", cm, {{"standard_name", "sea_surface_height_above_geoid"}, {"units", "cm"}}}});
  const MapData adt = seatilt::read_map_data(abs_in, MapRequest{});
  CHECK(adt.scale == ColourScale::sequential);
  CHECK(adt.long_name == "adt");  // no long_name: the variable name
}

TEST_CASE("currents file: default speed, arrows, flags and errors") {
  TempDir tmp;
  const auto lat = axis(20.0, 40.0, 0.5);
  const auto lon = axis(170.0, 190.0, 0.5);  // regional, stored past 180 as 170..190
  std::vector<double> u, v, speed, quality;
  for (double la : lat)
    for (double lo : lon) {
      const double uu = 0.2 + 0.01 * (la - 20.0), vv = -0.1 + 0.0 * lo;
      u.push_back(uu);
      v.push_back(vv);
      speed.push_back(std::hypot(uu, vv));
      quality.push_back(0.0);
    }
  const std::string in = tmp.file("uv.nc");
  write_file(in, lat, lon, 1,
             {{"u", u, {{"units", "m s-1"}}},
              {"v", v, {{"units", "m s-1"}}},
              {"speed", speed, {{"units", "m s-1"}, {"long_name", "geostrophic surface speed"}}},
              {"quality", quality, {}, true}});
  MapRequest req;
  req.arrows = true;
  const MapData map = seatilt::read_map_data(in, req);
  CHECK(map.variable == "speed");
  CHECK(map.scale == ColourScale::sequential);
  CHECK(map.arrow_units == "m s-1");
  CHECK(map.u.ny == lat.size());
  QuicklookOptions o;
  o.arrows = true;
  const std::string out = tmp.file("uv.png");
  const QuicklookResult r = seatilt::write_quicklook(map, o, out);
  CHECK(r.arrow_count > 100);
  CHECK(r.arrow_reference ==
        doctest::Approx(0.5));  // nice number near the 99th percentile (~0.42 m s-1)
  CHECK(decode(out).width == 1000);
  CHECK(r.region.lon0 == doctest::Approx(169.75));
  CHECK(r.region.lon1 == doctest::Approx(190.25));

  // Output exists: refused (exit 4), the old file untouched; --force replaces it.
  { std::ofstream(tmp.file("old.png")) << "old"; }
  CHECK_THROWS_AS(seatilt::write_quicklook(map, o, tmp.file("old.png")), OutputError);
  {
    std::ifstream f(tmp.file("old.png"));
    std::string s;
    f >> s;
    CHECK(s == "old");
  }
  o.force = true;
  seatilt::write_quicklook(map, o, tmp.file("old.png"));
  CHECK(decode(tmp.file("old.png")).width == 1000);
  CHECK_THROWS_AS(seatilt::write_quicklook(map, o, in), OutputError);  // the input itself
  CHECK_THROWS_AS(seatilt::write_quicklook(map, o, tmp.file("no/such/folder.png")), OutputError);
  CHECK_THROWS_AS(seatilt::write_quicklook(map, o, tmp.dir.string()), OutputError);
  o.width_px = 100;
  CHECK_THROWS_AS(seatilt::write_quicklook(map, o, tmp.file("w.png")), UsageError);
  o.width_px = 1000;
  o.region = seatilt::parse_region("0,10,-10,0");  // far from the grid
  CHECK_THROWS_AS(seatilt::write_quicklook(map, o, tmp.file("r.png")), UsageError);
  o.region.reset();
  MapData no_arrows = map;
  no_arrows.u = {};
  CHECK_THROWS_AS(seatilt::write_quicklook(no_arrows, o, tmp.file("a.png")), UsageError);
  // Only the PNGs written, no temporary leftovers.
  std::vector<std::string> names = tmp.entries();
  std::sort(names.begin(), names.end());
  CHECK(names == std::vector<std::string>{"old.png", "uv.nc", "uv.png"});

  // Reading errors.
  MapRequest bad;
  bad.field = "quality";
  CHECK_THROWS_AS(seatilt::read_map_data(in, bad), UsageError);  // flag variable
  bad.field = "nothing";
  try {
    (void)seatilt::read_map_data(in, bad);
    FAIL("no error for a missing variable");
  } catch (const InputError& e) {
    const std::string m = e.what();
    CHECK(m.find("nothing") != std::string::npos);
    CHECK(m.find("speed") != std::string::npos);  // the drawable ones are listed
    CHECK(m.find("quality") == std::string::npos);
  }
  bad.field = "u";
  bad.time = 1;
  CHECK_THROWS_AS(seatilt::read_map_data(in, bad), UsageError);  // one step only
  CHECK_THROWS_AS(seatilt::read_map_data(tmp.file("missing.nc"), MapRequest{}), InputError);
  { std::ofstream(tmp.file("junk.nc")) << "not netCDF"; }
  CHECK_THROWS_AS(seatilt::read_map_data(tmp.file("junk.nc"), MapRequest{}), InputError);

  // A height file has no u and v for arrows.
  const std::string h = tmp.file("h.nc");
  write_file(
      h, lat, lon, 1,
      {{"zos", speed, {{"standard_name", "sea_surface_height_above_geoid"}, {"units", "m"}}}});
  MapRequest arrows;
  arrows.arrows = true;
  CHECK_THROWS_AS(seatilt::read_map_data(h, arrows), UsageError);
  // Every cell missing.
  const std::string empty = tmp.file("empty.nc");
  write_file(empty, lat, lon, 1,
             {{"speed", std::vector<double>(speed.size(), missing), {{"units", "m s-1"}}}});
  CHECK_THROWS_AS(seatilt::read_map_data(empty, MapRequest{}), InputError);
}

TEST_CASE("unknown variable: colour map from the sign of its values") {
  TempDir tmp;
  const auto lat = axis(0.0, 10.0, 1.0);
  const auto lon = axis(0.0, 10.0, 1.0);
  std::vector<double> pos, mixed;
  for (double la : lat)
    for (double lo : lon) {
      pos.push_back(1.0 + la + lo);
      mixed.push_back(la - 5.0 + 0.0 * lo);
    }
  const std::string in = tmp.file("x.nc");
  // A long_name with bytes that are not UTF-8 (Cairo's text API refuses
  // those and would stop drawing): replaced, the PNG is still written.
  write_file(in, lat, lon, 1,
             {{"thing", pos, {{"long_name", "bad \xff\xfe text \xc3"}}}, {"other", mixed, {}}});
  CHECK(seatilt::read_map_data(in, field_request("thing")).scale == ColourScale::sequential);
  CHECK(seatilt::read_map_data(in, field_request("other")).scale == ColourScale::diverging);
  // Given range: the colours use it.
  QuicklookOptions o;
  o.range = seatilt::parse_range("0,100");
  const MapData m = seatilt::read_map_data(in, field_request("thing"));
  const QuicklookResult r = seatilt::write_quicklook(m, o, tmp.file("x.png"));
  CHECK(!r.range_from_percentiles);
  CHECK(r.range.high == 100.0);
  const Png png = decode(tmp.file("x.png"));
  CHECK(m.long_name == "bad \xff\xfe text \xc3");
  // pixel <-> lon/lat: the centre of a pixel maps back to that pixel.
  for (int px : {r.map.x, r.map.x + 17, r.map.x + r.map.width - 1}) {
    double lo = 0, la = 0;
    seatilt::pixel_to_lonlat(r, px, r.map.y + 5, lo, la);
    int qx = 0, qy = 0;
    seatilt::lonlat_to_pixel(r, lo, la, qx, qy);
    CHECK(qx == px);
    CHECK(qy == r.map.y + 5);
  }
  double lo = 0, la = 0;
  seatilt::pixel_to_lonlat(r, 0, 0, lo, la);  // outside the map
  CHECK(std::isnan(lo));
  // cell (5 N, 5 E) = 11 -> t = 0.11 -> viridis entry floor(0.11 * 256) = 28
  CHECK(text(colour_near(png, r, 5.3, 5.3)) ==
        text(seatilt::colour_at(ColourScale::sequential, 0.11)));
}

// ---- projected and curvilinear grids -------------------------------------------------------

namespace {

// North polar stereographic grid of NSIDC's EPSG:3413 (central meridian
// 45 W, true scale at 70 N, WGS84): CF 1.12 Appendix F attributes.
constexpr double ps_lon0 = -45.0, ps_lat_ts = 70.0;
constexpr double wgs84_a = 6378137.0, wgs84_rf = 298.257223563;  // NIMA TR8350.2

/// Snyder (1987) eqs. 21-33, 21-34, 14-15, 15-9: distance from the pole
/// (m) of latitude LAT on the north polar stereographic projection with true
/// scale at ps_lat_ts on the WGS84 ellipsoid.
double polar_rho(double lat_deg) {
  const double f = 1.0 / wgs84_rf, e = std::sqrt(f * (2.0 - f));
  const double deg = 3.14159265358979323846 / 180.0;
  const auto t = [&](double phi) {
    return std::tan(0.25 * 3.14159265358979323846 - 0.5 * phi) /
           std::pow((1.0 - e * std::sin(phi)) / (1.0 + e * std::sin(phi)), 0.5 * e);
  };
  const double pc = ps_lat_ts * deg;
  const double mc = std::cos(pc) / std::sqrt(1.0 - e * e * std::sin(pc) * std::sin(pc));
  return wgs84_a * mc * t(lat_deg * deg) / t(pc);
}

/// Writes VARS (each ny x nx, one time step) on the polar stereographic grid
/// with 1-D X, Y (metres) and a grid mapping variable "crs".
void write_polar(const std::string& path, const std::vector<double>& x,
                 const std::vector<double>& y, const std::vector<VarSpec>& vars) {
  int ncid = -1;
  check(nc_create(path.c_str(), NC_NETCDF4 | NC_CLOBBER, &ncid));
  int dt = -1, dy = -1, dx = -1, vt = -1, vy = -1, vx = -1, crs = -1;
  check(nc_def_dim(ncid, "time", NC_UNLIMITED, &dt));
  check(nc_def_dim(ncid, "y", y.size(), &dy));
  check(nc_def_dim(ncid, "x", x.size(), &dx));
  check(nc_def_var(ncid, "time", NC_DOUBLE, 1, &dt, &vt));
  put_text(ncid, vt, "units", "days since 2031-01-01");
  check(nc_def_var(ncid, "y", NC_DOUBLE, 1, &dy, &vy));
  put_text(ncid, vy, "standard_name", "projection_y_coordinate");
  put_text(ncid, vy, "units", "m");
  check(nc_def_var(ncid, "x", NC_DOUBLE, 1, &dx, &vx));
  put_text(ncid, vx, "standard_name", "projection_x_coordinate");
  put_text(ncid, vx, "units", "m");
  check(nc_def_var(ncid, "crs", NC_INT, 0, nullptr, &crs));
  put_text(ncid, crs, "grid_mapping_name", "polar_stereographic");
  const auto number = [&](const char* name, double value) {
    check(nc_put_att_double(ncid, crs, name, NC_DOUBLE, 1, &value));
  };
  number("latitude_of_projection_origin", 90.0);
  number("straight_vertical_longitude_from_pole", ps_lon0);
  number("standard_parallel", ps_lat_ts);
  number("false_easting", 0.0);
  number("false_northing", 0.0);
  number("semi_major_axis", wgs84_a);
  number("inverse_flattening", wgs84_rf);
  const int dims[3] = {dt, dy, dx};
  std::vector<int> ids;
  for (const VarSpec& v : vars) {
    int id = -1;
    check(nc_def_var(ncid, v.name.c_str(), NC_FLOAT, 3, dims, &id));
    const float fill = 9.96921e36f;
    check(nc_put_att_float(ncid, id, "_FillValue", NC_FLOAT, 1, &fill));
    put_text(ncid, id, "grid_mapping", "crs");
    for (const auto& [k, val] : v.attrs) put_text(ncid, id, k.c_str(), val);
    ids.push_back(id);
  }
  check(nc_enddef(ncid));
  const double zero = 0.0;
  const std::size_t start0 = 0, one = 1;
  check(nc_put_vara_double(ncid, vt, &start0, &one, &zero));
  check(nc_put_var_double(ncid, vy, y.data()));
  check(nc_put_var_double(ncid, vx, x.data()));
  for (std::size_t k = 0; k < vars.size(); ++k) {
    std::vector<float> raw(vars[k].values.size());
    for (std::size_t q = 0; q < raw.size(); ++q)
      raw[q] = std::isnan(vars[k].values[q]) ? 9.96921e36f : static_cast<float>(vars[k].values[q]);
    const std::size_t start[3] = {0, 0, 0}, count[3] = {1, y.size(), x.size()};
    check(nc_put_vara_float(ncid, ids[k], start, count, raw.data()));
  }
  check(nc_close(ncid));
}

/// The most common colour of the 3 x 3 pixels around pixel (PX, PY).
Rgb8 colour_at_pixel(const Png& png, int px, int py) {
  std::vector<Rgb8> seen;
  std::vector<int> count;
  for (int dy = -1; dy <= 1; ++dy)
    for (int dx = -1; dx <= 1; ++dx) {
      const Rgb8 c = png.at(px + dx, py + dy);
      const auto it = std::find(seen.begin(), seen.end(), c);
      if (it == seen.end()) {
        seen.push_back(c);
        count.push_back(1);
      } else {
        ++count[static_cast<std::size_t>(it - seen.begin())];
      }
    }
  return seen[static_cast<std::size_t>(std::max_element(count.begin(), count.end()) -
                                       count.begin())];
}

}  // namespace

TEST_CASE("projected grid: drawn on its own grid, y up, land grey, arrows rotated to the grid") {
  TempDir tmp;
  // 41 x 41 nodes, 100 km apart, centred on the pole; y stored descending
  // (north of the pole first, as many files have it).
  std::vector<double> x, y;
  for (int k = -20; k <= 20; ++k) x.push_back(1e5 * k);
  for (int k = 20; k >= -20; --k) y.push_back(1e5 * k);
  std::vector<double> vort, u, v, speed;
  for (double yy : y)
    for (double xx : x) {
      const bool land = xx > 1.2e6 && yy > 1.2e6;        // a block of fill in one corner
      vort.push_back(land ? missing : 1e-6 * yy / 2e6);  // positive where y > 0
      u.push_back(land ? missing : 0.3);                 // an eastward jet
      v.push_back(land ? missing : 0.0);
      speed.push_back(land ? missing : 0.3);
    }
  const std::string in = tmp.file("arctic_uv.nc");
  write_polar(in, x, y,
              {{"vorticity", vort, {{"units", "s-1"}}},
               {"u", u, {{"units", "m s-1"}}},
               {"v", v, {{"units", "m s-1"}}},
               {"speed", speed, {{"units", "m s-1"}}}});
  MapRequest req;
  req.field = "vorticity";
  req.arrows = true;
  const MapData map = seatilt::read_map_data(in, req);
  CHECK(map.grid_kind == seatilt::GridKind::projected);
  REQUIRE(map.plane);
  CHECK(map.grid_name == "polar_stereographic");
  CHECK(map.lat_deg.empty());
  CHECK(map.values.ny == 41);
  CHECK(map.scale == ColourScale::diverging);

  QuicklookOptions o;
  o.width_px = 600;
  o.arrows = true;
  const std::string out = tmp.file("arctic.png");
  const QuicklookResult r = seatilt::write_quicklook(map, o, out);
  const Png png = decode(out);
  CHECK(png.width == 600);
  CHECK(png.height == r.height_px);
  CHECK(r.grid_kind == seatilt::GridKind::projected);
  // The window is the cells' extent: edges half a spacing beyond the nodes.
  CHECK(r.window.c0 == doctest::Approx(-2.05e6));
  CHECK(r.window.c1 == doctest::Approx(2.05e6));
  CHECK(r.window.r0 == doctest::Approx(-2.05e6));
  CHECK(r.window.r1 == doctest::Approx(2.05e6));
  CHECK(r.map.width == r.map.height);  // a square grid keeps its aspect
  CHECK(r.graticule_labels >= 4);
  // y up: positive (red) above the pole's row, negative (blue) below.
  for (double xx : {-1.5e6, -0.3e6, 0.8e6}) {
    int px = 0, py = 0;
    seatilt::grid_to_pixel(r, xx, 0.75e6, px, py);
    CHECK(py < r.map.y + r.map.height / 2);
    const Rgb8 n = colour_at_pixel(png, px, py);
    seatilt::grid_to_pixel(r, xx, -0.75e6, px, py);
    CHECK(py > r.map.y + r.map.height / 2);
    const Rgb8 s = colour_at_pixel(png, px, py);
    CHECK(n.r > n.b + 40);
    CHECK(s.b > s.r + 40);
  }
  // The land corner (x, y > 1200 km: top right) is grey (off the 90 E
  // meridian, which runs along its diagonal).
  int px = 0, py = 0;
  seatilt::grid_to_pixel(r, 1.55e6, 1.85e6, px, py);
  CHECK(px > r.map.x + r.map.width / 2);
  CHECK(text(colour_at_pixel(png, px, py)) == text(seatilt::no_data_colour()));
  double c = 0, rr = 0;
  seatilt::pixel_to_grid(r, px, py, c, rr);
  CHECK(c == doctest::Approx(1.55e6).epsilon(0.01));
  double lon = 0, lat = 0;
  seatilt::pixel_to_lonlat(r, px, py, lon, lat);  // not a lat/lon map
  CHECK(std::isnan(lon));

  // Arrows of a purely eastward flow point along the parallels: on north
  // polar stereographic x = rho sin(lon - lon0), y = -rho cos(lon - lon0)
  // (Snyder 1987 eqs. 21-30, 21-31), so east is (cos(lon - lon0),
  // sin(lon - lon0)) in x, y, i.e. (cos, -sin) on the page (y down).
  REQUIRE(r.arrows.size() > 50);
  CHECK(r.arrow_count == r.arrows.size());
  std::size_t checked = 0;
  for (const seatilt::DrawnArrow& a : r.arrows) {
    seatilt::pixel_to_grid(r, static_cast<int>(a.x), static_cast<int>(a.y), c, rr);
    const double nx_ = 1e5 * std::round(c / 1e5), ny_ = 1e5 * std::round(rr / 1e5);  // its node
    if (nx_ == 0.0 && ny_ == 0.0) continue;
    const double dl = std::atan2(nx_, -ny_);  // lon - lon0 (radians)
    CHECK(a.dx * std::cos(dl) - a.dy * std::sin(dl) > 0.9999);
    CHECK(a.speed == doctest::Approx(0.3));
    ++checked;
  }
  CHECK(checked == r.arrows.size());

  // --region on a projected grid: the rectangle of cells whose centres lie
  // in the box; north of 80 N = within polar_rho(80) of the pole.
  o.region = seatilt::parse_region("0,360,80,90");
  o.arrows = false;
  const QuicklookResult rg = seatilt::write_quicklook(map, o, tmp.file("north.png"));
  const double rho80 = polar_rho(80.0);  // about 1.1e6 m
  CHECK(rho80 > 1.0e6);
  CHECK(rho80 < 1.2e6);
  double lo = 1e300, hi = -1e300;
  for (double xx : x)
    for (double yy : y)
      if (std::hypot(xx, yy) <= rho80) {
        lo = std::min(lo, xx);
        hi = std::max(hi, xx);
      }
  CHECK(rg.window.c0 == doctest::Approx(lo - 5e4));
  CHECK(rg.window.c1 == doctest::Approx(hi + 5e4));
  CHECK(rg.window.r0 == doctest::Approx(lo - 5e4));  // symmetric about the pole
  CHECK(rg.window.r1 == doctest::Approx(hi + 5e4));
  CHECK(rg.region.lat1 > 89.9);  // the nodes drawn: up to the pole,
  CHECK(rg.region.lat0 < 80.0);  // down to the rectangle's corners
  CHECK(rg.region.lat0 > 75.0);
  o.region = seatilt::parse_region("0,10,0,10");  // far south of the grid
  CHECK_THROWS_AS(seatilt::write_quicklook(map, o, tmp.file("none.png")), UsageError);
  CHECK_FALSE(fs::exists(tmp.file("none.png")));

  // Heights on the grid go through the Reader (metres, as `currents` reads them).
  const std::string h = tmp.file("arctic_ssh.nc");
  std::vector<double> cm;
  for (double yy : y)
    for (double xx : x) cm.push_back(10.0 + 0.0 * xx + 1e-5 * yy);
  write_polar(
      h, x, y,
      {{"adt", cm, {{"standard_name", "sea_surface_height_above_geoid"}, {"units", "cm"}}}});
  const MapData hm = seatilt::read_map_data(h, MapRequest{});
  CHECK(hm.grid_kind == seatilt::GridKind::projected);
  CHECK(hm.units == "m");
  CHECK(hm.values.at(0, 20) == doctest::Approx(0.30).epsilon(1e-5));  // 10 + 20 cm at y = 2000 km
}

TEST_CASE("curvilinear grid: rows running south are drawn north up") {
  TempDir tmp;
  const std::size_t ny = 30, nx = 40;
  // 2-D latitude/longitude only (no coordinate variables), rows from north
  // to south, columns to the east with a shear.
  int ncid = -1;
  const std::string in = tmp.file("shelf.nc");
  check(nc_create(in.c_str(), NC_NETCDF4 | NC_CLOBBER, &ncid));
  int dy = -1, dx = -1, vla = -1, vlo = -1, vf = -1, vu = -1, vv = -1;
  check(nc_def_dim(ncid, "j", ny, &dy));
  check(nc_def_dim(ncid, "i", nx, &dx));
  const int dims[2] = {dy, dx};
  check(nc_def_var(ncid, "nav_lat", NC_DOUBLE, 2, dims, &vla));
  put_text(ncid, vla, "units", "degrees_north");
  check(nc_def_var(ncid, "nav_lon", NC_DOUBLE, 2, dims, &vlo));
  put_text(ncid, vlo, "units", "degrees_east");
  for (const auto& [name, id] :
       {std::pair<const char*, int*>{"anomaly", &vf}, {"u", &vu}, {"v", &vv}}) {
    check(nc_def_var(ncid, name, NC_DOUBLE, 2, dims, id));
    put_text(ncid, *id, "coordinates", "nav_lat nav_lon");
    put_text(ncid, *id, "units", name[0] == 'a' ? "m" : "m s-1");
  }
  check(nc_enddef(ncid));
  std::vector<double> la(ny * nx), lo(ny * nx), f(ny * nx), u(ny * nx, 0.0), v(ny * nx, 0.25);
  for (std::size_t j = 0; j < ny; ++j)
    for (std::size_t i = 0; i < nx; ++i) {
      la[j * nx + i] = 60.0 - 0.4 * static_cast<double>(j);
      lo[j * nx + i] = -20.0 + 0.5 * static_cast<double>(i) + 0.05 * static_cast<double>(j);
      f[j * nx + i] = la[j * nx + i] - 54.2;  // positive in the north
    }
  check(nc_put_var_double(ncid, vla, la.data()));
  check(nc_put_var_double(ncid, vlo, lo.data()));
  check(nc_put_var_double(ncid, vf, f.data()));
  check(nc_put_var_double(ncid, vu, u.data()));
  check(nc_put_var_double(ncid, vv, v.data()));
  check(nc_close(ncid));

  MapRequest req;
  req.field = "anomaly";
  req.arrows = true;
  const MapData map = seatilt::read_map_data(in, req);
  CHECK(map.grid_kind == seatilt::GridKind::curvilinear);
  CHECK(map.grid_name == "curvilinear");
  CHECK(map.scale == ColourScale::diverging);  // by the sign of its values
  QuicklookOptions o;
  o.width_px = 500;
  o.arrows = true;
  const QuicklookResult r = seatilt::write_quicklook(map, o, tmp.file("shelf.png"));
  const Png png = decode(tmp.file("shelf.png"));
  CHECK(png.width == 500);
  // Rows run south: the row coordinate is the negated index, row 0 on top.
  CHECK(r.window.r0 == doctest::Approx(-(ny - 0.5)));
  CHECK(r.window.r1 == doctest::Approx(0.5));
  CHECK(r.window.c0 == doctest::Approx(-0.5));
  int px = 0, py = 0;
  seatilt::grid_to_pixel(r, 20.0, -3.0, px, py);  // row 3: 58.8 N
  CHECK(py < r.map.y + r.map.height / 4);
  const Rgb8 north = colour_at_pixel(png, px, py);
  CHECK(north.r > north.b + 40);
  seatilt::grid_to_pixel(r, 20.0, -26.0, px, py);  // row 26: 49.6 N
  const Rgb8 south = colour_at_pixel(png, px, py);
  CHECK(south.b > south.r + 40);
  // A northward flow points up the page.
  REQUIRE(!r.arrows.empty());
  for (const seatilt::DrawnArrow& a : r.arrows) CHECK(a.dy < -0.95);
  CHECK(r.graticule_labels >= 2);
}
