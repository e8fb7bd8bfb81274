#include <doctest/doctest.h>
#include <unistd.h>

#include <GeographicLib/Geodesic.hpp>
#include <GeographicLib/GeodesicLine.hpp>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <functional>
#include <limits>
#include <random>
#include <stdexcept>
#include <string>
#include <vector>

#include "seatilt/error.hpp"
#include "seatilt/section.hpp"

using namespace seatilt;

namespace {

constexpr double pi = 3.14159265358979323846;
constexpr double d2r = pi / 180.0;
const double nan_v = std::numeric_limits<double>::quiet_NaN();

std::vector<double> axis(double a, double b, double step) {
  std::vector<double> v;
  const int n = static_cast<int>(std::lround((b - a) / step));
  for (int k = 0; k <= n; ++k) v.push_back(a + k * step);
  return v;
}

/// Heights ETA(lat, lon) (m, NaN = land) on GRID.
Field make_field(const Grid& grid, const std::function<double(double, double)>& eta) {
  Field f(grid.ny(), grid.nx());
  for (std::size_t j = 0; j < grid.ny(); ++j)
    for (std::size_t i = 0; i < grid.nx(); ++i)
      f.at(j, i) = eta(grid.lat_deg()[j], grid.lon_deg()[i]);
  return f;
}

SectionLine make_line(const std::string& text, const std::string& name = "test") {
  SectionLine l;
  l.name = name;
  l.points = parse_section_line(text, "--line");
  return l;
}

std::string usage_message(const std::function<void()>& f) {
  try {
    f();
  } catch (const UsageError& e) {
    return e.what();
  }
  return "(no UsageError)";
}

/// Writes TEXT to a fresh temporary file and returns its path.
std::string temp_file(const std::string& text) {
  char name[] = "/tmp/seatilt-test-section-XXXXXX";
  const int fd = ::mkstemp(name);
  REQUIRE(fd >= 0);
  ::close(fd);
  std::ofstream(name) << text;
  return name;
}

}  // namespace

// ---- parsing ---------------------------------------------------------------------

TEST_CASE("section lines parse points separated by commas, numbers by blanks") {
  auto p = parse_section_line("10 20, 30.5 -40", "--line");
  REQUIRE(p.size() == 2);
  CHECK(p[0].lon_deg == 10.0);
  CHECK(p[0].lat_deg == 20.0);
  CHECK(p[1].lon_deg == 30.5);
  CHECK(p[1].lat_deg == -40.0);
  p = parse_section_line("  -5\t+1.5e1 ,\n 355 -90,0 90  ", "x");
  REQUIRE(p.size() == 3);
  CHECK(p[0].lat_deg == 15.0);
  CHECK(p[1].lon_deg == 355.0);
  CHECK(p[2].lat_deg == 90.0);
}

TEST_CASE("bad section lines give a UsageError quoting the offending text") {
  struct Case {
    std::string text, expect;
  };
  // Inputs that a parser typically breaks on (kept as regression cases).
  const std::vector<Case> cases = {
      {"", "no points"},
      {"   ", "no points"},
      {"10 20", "at least 2 points"},
      {"10 20,", "point 2 is empty"},
      {",10 20, 30 40", "point 1 is empty"},
      {"10 20,, 30 40", "point 2 is empty"},
      {"10, 30 40", "expected 'LON LAT'"},
      {"10 20 30, 30 40", "expected 'LON LAT'"},
      {"ten 20, 30 40", "longitude is not a number in 'ten 20'"},
      {"10 2o, 30 40", "latitude is not a number"},
      {"nan 20, 30 40", "not a number"},
      {"inf 20, 30 40", "not a number"},
      {"10 1e999, 30 40", "not a number"},
      {"0x10 20, 30 40", "not a number"},
      {"10 20; 30 40", "expected 'LON LAT'"},
      {"10 95, 30 40", "latitude outside [-90, 90] in '10 95'"},
      {"10 20, 400 40", "point 2: longitude outside [-360, 360]"},
      {"10 20, 10 20", "point 2 repeats the point before it"},
      {"1-2 3, 4 5", "not a number"},
      {"1e 3, 4 5", "not a number"},
      {std::string("10\0 20, 30 40", 13), "longitude is not a number in '10? 20'"},
  };
  for (const Case& c : cases) {
    CAPTURE(c.text);
    const std::string m = usage_message([&] { (void)parse_section_line(c.text, "--line"); });
    CHECK(m.rfind("--line: ", 0) == 0);
    CHECK(m.find(c.expect) != std::string::npos);
    CHECK(m.find('\n') == std::string::npos);
  }
  // The quoted text is cut and made printable.
  const std::string m = usage_message(
      [&] { (void)parse_section_line(std::string(500, 'x') + "\x01 1, 2 3", "--line"); });
  CHECK(m.size() < 200);
}

TEST_CASE("the line parser survives random bytes (deterministic fuzz)") {
  std::mt19937 rng(20260314);
  const std::string alphabet = "0123456789 ,.-+eE\t\nnaif\x01\xff;x";
  std::uniform_int_distribution<int> len(0, 40), any(0, 255);
  std::uniform_int_distribution<std::size_t> pick(0, alphabet.size() - 1);
  int accepted = 0;
  std::uniform_real_distribution<double> coord(-100, 100);
  for (int n = 0; n < 30000; ++n) {
    std::string s;
    if (n % 3 == 2) {
      // A valid line with one byte replaced (mutation fuzzing).
      char buf[96];
      std::snprintf(buf, sizeof buf, "%.3f %.3f, %.3f %.3f", coord(rng), coord(rng) * 0.8,
                    coord(rng), coord(rng) * 0.8);
      s = buf;
      if (n % 2) s[static_cast<std::size_t>(len(rng)) % s.size()] = static_cast<char>(any(rng));
    } else {
      const int l = len(rng);
      for (int k = 0; k < l; ++k) s += n % 3 ? alphabet[pick(rng)] : static_cast<char>(any(rng));
    }
    try {
      const auto p = parse_section_line(s, "--line");
      CHECK(p.size() >= 2);
      ++accepted;
    } catch (const UsageError&) {
    }
  }
  CHECK(accepted > 1000);  // the mutated valid lines are mostly still valid
  // Too many vertices: refused, not allocated without bound.
  std::string many;
  for (std::size_t k = 0; k <= max_section_vertices; ++k)
    many += (k ? ", " : "") + std::to_string(k % 2) + " " + std::to_string(k % 3);
  CHECK(usage_message([&] { (void)parse_section_line(many, "--line"); }).find("more than") !=
        std::string::npos);
}

TEST_CASE("section names") {
  CHECK_NOTHROW(check_section_name("strait east", "x"));
  CHECK_NOTHROW(check_section_name("Passage \xc3\xa9", "x"));  // UTF-8 is fine
  CHECK_THROWS_AS(check_section_name("", "x"), UsageError);
  CHECK_THROWS_AS(check_section_name("  ", "x"), UsageError);
  CHECK_THROWS_AS(check_section_name("a\nb", "x"), UsageError);
  CHECK_THROWS_AS(check_section_name(std::string(101, 'a'), "x"), UsageError);
}

TEST_CASE("section files: [[section]] tables with name and line") {
  const std::string ok = temp_file(
      "# invented straits of the Tessaline Sea\n"
      "[[section]]\nname = \"north gate\"\nline = \"-40 45, -35 46\"\n\n"
      "[[section]]\nname = \"south gate\"\nline = '''-40 30,\n -38 31, -36 30'''\n");
  const auto s = read_section_file(ok);
  REQUIRE(s.size() == 2);
  CHECK(s[0].name == "north gate");
  CHECK(s[0].points.size() == 2);
  CHECK(s[1].points.size() == 3);
  CHECK(s[1].points[1].lon_deg == -38.0);
  std::remove(ok.c_str());

  struct Case {
    std::string text, expect;
  };
  const std::vector<Case> bad = {
      {"[[section]]\nline = \"1 2, 3 4\"\n", "needs name"},
      {"[[section]]\nname = \"a\"\n", "needs line"},
      {"[[section]]\nname = 3\nline = \"1 2, 3 4\"\n", "needs name"},
      {"[[section]]\nname = \"a\"\nline = \"1 2, 3 4\"\ndepth = 3\n", "unknown key 'depth'"},
      {"title = \"x\"\n[[section]]\nname = \"a\"\nline = \"1 2, 3 4\"\n", "unknown key 'title'"},
      {"[[section]]\nname = \"a\"\nline = \"1 2, 3 4\"\n[[section]]\nname = \"a\"\nline = \"5 6, 7 "
       "8\"\n",
       "used twice"},
      {"[[section]]\nname = \"a\"\nline = \"1 2, 3 99\"\n", "latitude outside"},
      {"[[section]\nname = \"a\"\n", ":1:"},
      {"", "no [[section]]"},
      {"[section]\nname = \"a\"\n", "[[section]] tables"},
  };
  for (const Case& c : bad) {
    CAPTURE(c.text);
    const std::string p = temp_file(c.text);
    const std::string m = usage_message([&] { (void)read_section_file(p); });
    CHECK(m.find(c.expect) != std::string::npos);
    CHECK(m.rfind(p, 0) == 0);  // names the file
    std::remove(p.c_str());
  }
  CHECK(usage_message([] {
          (void)read_section_file("/nonexistent/sections.toml");
        }).find("cannot read") != std::string::npos);
}

TEST_CASE("options are range-checked") {
  SectionOptions o;
  CHECK_NOTHROW(validate(o));
  o.spacing_m = -1;
  CHECK_THROWS_AS(validate(o), UsageError);
  o = {};
  o.depth_m = std::numeric_limits<double>::infinity();
  CHECK_THROWS_AS(validate(o), UsageError);
  o = {};
  o.equator_band_deg = 31;
  CHECK_THROWS_AS(validate(o), UsageError);
  o = {};
  o.gravity = GravityModel::constant;
  o.gravity_value = 0;
  CHECK_THROWS_AS(validate(o), UsageError);
}

// ---- integration ------------------------------------------------------------------

TEST_CASE("constant f: the transport telescopes to (g/f)(eta_end - eta_start)") {
  std::mt19937 rng(7);
  std::uniform_real_distribution<double> u(-0.5, 0.5);
  std::vector<double> eta(201), len(200, 2500.0);
  for (double& e : eta) e = u(rng);
  const double g = 9.80665, f = coriolis(40.0);
  const std::vector<double> gf(200, g / f);
  const SectionResult r = integrate_transport(eta, len, gf);
  // T = sum (g/f)(eta_{k+1} - eta_k) = (g/f)(eta_n - eta_0) exactly (telescoping sum)
  CHECK(r.transport_per_depth_m2s ==
        doctest::Approx(g / f * (eta.back() - eta.front())).epsilon(1e-12));
  CHECK(r.length_m == doctest::Approx(500e3));
  CHECK(r.excluded_fraction == 0.0);
  CHECK(r.mean_normal_velocity_ms == doctest::Approx(r.transport_per_depth_m2s / 500e3));

  // A missing sample removes its two segments; an excluded segment (NaN g/f) its own.
  eta[50] = nan_v;
  std::vector<double> gf2 = gf;
  gf2[120] = nan_v;
  const SectionResult m = integrate_transport(eta, len, gf2);
  CHECK(m.excluded_fraction == doctest::Approx(3.0 / 200.0));
  CHECK(m.included_length_m == doctest::Approx(197 * 2500.0));
  const double expect = g / f * ((eta[49] - eta[0]) + (eta[120] - eta[51]) + (eta[200] - eta[121]));
  CHECK(m.transport_per_depth_m2s == doctest::Approx(expect).epsilon(1e-12));

  // Everything excluded: NaN transport, fraction 1.
  const SectionResult none = integrate_transport(eta, len, std::vector<double>(200, nan_v));
  CHECK(std::isnan(none.transport_per_depth_m2s));
  CHECK(std::isnan(none.mean_normal_velocity_ms));
  CHECK(none.excluded_fraction == 1.0);
  CHECK_THROWS_AS((void)integrate_transport(eta, len, std::vector<double>(3)),
                  std::invalid_argument);
}

// ---- geodesic path ------------------------------------------------------------------

TEST_CASE("section length and samples agree with GeographicLib") {
  const GeographicLib::Geodesic& wgs = GeographicLib::Geodesic::WGS84();
  // REFERENCES.md section 7 (GeographicLib 2.1.2, computed): (-30,0)->(29.9,179.8)
  // s12 = 19989832.827610 m; 1 degree on the equator 111319.490793 m; meridian
  // 0->1 degree 110574.388558 m.
  auto len = [](const std::string& text, EarthModel m, double spacing) {
    return sample_geodesic_path(parse_section_line(text, "t"), m, spacing, "t").length_m;
  };
  CHECK(len("0 -30, 179.8 29.9", EarthModel::wgs84, 50e3) ==
        doctest::Approx(19989832.827610).epsilon(1e-12));
  CHECK(len("0 0, 1 0", EarthModel::wgs84, 10e3) == doctest::Approx(111319.490793).epsilon(1e-11));
  CHECK(len("0 0, 0 1", EarthModel::wgs84, 10e3) == doctest::Approx(110574.388558).epsilon(1e-11));
  // Sphere of radius R1 = 6371008.7714 m (Moritz 2000): 1 degree = R1 pi/180 = 111195.0797 m.
  CHECK(len("0 0, 1 0", EarthModel::sphere, 10e3) ==
        doctest::Approx(earth::mean_radius * d2r).epsilon(1e-13));

  // A polyline of three legs: length = sum of GeographicLib inverse distances,
  // and every sample lies on GeographicLib's geodesic at its distance.
  const auto pts = parse_section_line("-40 30, -35 36.5, -28 37, -20.5 44", "t");
  const SectionPath p = sample_geodesic_path(pts, EarthModel::wgs84, 7000.0, "t");
  double total = 0;
  for (std::size_t k = 0; k + 1 < pts.size(); ++k) {
    double s12 = 0;
    wgs.Inverse(pts[k].lat_deg, pts[k].lon_deg, pts[k + 1].lat_deg, pts[k + 1].lon_deg, s12);
    total += s12;
  }
  CHECK(p.length_m == doctest::Approx(total).epsilon(1e-13));
  CHECK(section_length_m(pts, EarthModel::wgs84) == doctest::Approx(total).epsilon(1e-13));
  REQUIRE(p.lat_deg.size() == p.seg_length_m.size() + 1);
  double s_leg0 = 0, max_err = 0, sum = 0;
  std::size_t leg = 0;
  for (std::size_t k = 0; k < p.lat_deg.size(); ++k) {
    if (k > 0) sum += p.seg_length_m[k - 1];
    CHECK(p.s_m[k] == doctest::Approx(sum).epsilon(1e-12));
    // the leg this sample belongs to (vertices end a leg)
    double s_leg = 0;
    wgs.Inverse(pts[leg].lat_deg, pts[leg].lon_deg, pts[leg + 1].lat_deg, pts[leg + 1].lon_deg,
                s_leg);
    const GeographicLib::GeodesicLine line = wgs.InverseLine(
        pts[leg].lat_deg, pts[leg].lon_deg, pts[leg + 1].lat_deg, pts[leg + 1].lon_deg);
    double lat = 0, lon = 0;
    line.Position(p.s_m[k] - s_leg0, lat, lon);
    max_err = std::max({max_err, std::fabs(lat - p.lat_deg[k]),
                        std::fabs(std::remainder(lon - p.lon_deg[k], 360.0))});
    if (k > 0 && std::fabs(p.s_m[k] - (s_leg0 + s_leg)) < 1e-6 && leg + 2 < pts.size()) {
      s_leg0 += s_leg;
      ++leg;
    }
  }
  CHECK(max_err < 1e-9);  // degrees (~0.1 mm)
  for (double s : p.seg_length_m) CHECK(s <= 7000.0 + 1e-9);
  CHECK(p.mid_lat_deg.size() == p.seg_length_m.size());

  CHECK_THROWS_AS((void)sample_geodesic_path(parse_section_line("0 0, 360 0", "t"),
                                             EarthModel::wgs84, 1e3, "t"),
                  UsageError);  // the same place
  CHECK(usage_message([] {
          (void)sample_geodesic_path(parse_section_line("0 0, 179 0", "t"), EarthModel::wgs84, 1.0,
                                     "t");
        }).find("larger --spacing") != std::string::npos);
}

// ---- sampler: physics checks ----------------------------------------------------------

TEST_CASE("rule of thumb: 1 m drop over 500 km at 55 N") {
  // Common practice, no source: a 1 m sea-level drop across 500 km at about 55 deg
  // gives roughly 0.16 m/s, and over 4000 m depth roughly 3e8 m3/s. "Roughly" is
  // read as "rounds to the stated figure": 0.155..0.165 m/s and 2.5e8..3.5e8 m3/s.
  // Exact (computed): f(55) = 1.19467e-4 s-1, g/f = 82086.67 m s, v = 0.164173 m/s,
  // T H = 3.28347e8 m3/s with g0 = 9.80665 m s-2 and L = 500 km.
  const Grid grid(axis(50, 60, 0.1), axis(-30, -10, 0.1));
  const double dlon = 500e3 / (earth::mean_radius * std::cos(55 * d2r)) / d2r;  // 500 km on R1
  // eta falls by 1 m per dlon degrees eastward (linear in longitude: bilinear is exact).
  const Field eta = make_field(grid, [&](double, double lon) { return -(lon + 25.0) / dlon; });
  SectionOptions o;
  o.depth_m = 4000;
  char text[80];
  std::snprintf(text, sizeof text, "-25 55, %.12f 55", -25.0 + dlon);
  const SectionSampler s(grid, make_line(text), o);
  const SectionResult r = s.evaluate(eta);
  CHECK(r.length_m == doctest::Approx(500e3).epsilon(0.005));  // WGS84 geodesic vs R1 parallel
  CHECK(r.excluded_fraction == 0.0);
  // Walking east with the height falling to the east: the flow is to the right (south), negative.
  CHECK(r.mean_normal_velocity_ms < 0);
  const double v = -r.mean_normal_velocity_ms, q = -r.transport_per_depth_m2s * o.depth_m;
  CHECK(v >= 0.155);
  CHECK(v <= 0.165);
  CHECK(q >= 2.5e8);
  CHECK(q <= 3.5e8);
  // Exact: (g/f) * 1 m, f varying only through the geodesic's bulge (< 0.07 deg): 1e-3.
  const double gf = earth::standard_gravity / coriolis(55.0);
  CHECK(-r.transport_per_depth_m2s == doctest::Approx(gf * 1.0).epsilon(1e-3));
  CHECK(v == doctest::Approx(gf / r.length_m).epsilon(1e-3));
}

TEST_CASE("sign convention: positive to the left of the walking direction") {
  // Geostrophy (Stewart ch. 10): in the northern hemisphere the flow keeps high
  // height on its right. Height rising eastward -> northward flow (v = (g/f) deta/dx > 0),
  // which is to the LEFT when walking east: positive. Height rising northward ->
  // westward flow (u = -(g/f) deta/dy < 0), to the left when walking north: positive.
  // In the southern hemisphere f < 0 and both signs flip.
  const Grid grid(axis(-50, 50, 0.25), axis(-30, 30, 0.25));
  const Field east = make_field(grid, [](double, double lon) { return 0.01 * lon; });
  const Field north = make_field(grid, [](double lat, double) { return 0.01 * lat; });
  const SectionOptions o;
  auto t = [&](const char* line, const Field& f) {
    return SectionSampler(grid, make_line(line), o).evaluate(f).transport_per_depth_m2s;
  };
  const double walk_east = t("-5 40, 5 40", east);
  CHECK(walk_east > 0);
  CHECK(t("5 40, -5 40", east) == doctest::Approx(-walk_east).epsilon(1e-12));  // reversed line
  CHECK(t("-5 -40, 5 -40", east) < 0);  // southern hemisphere
  CHECK(t("0 30, 0 40", north) > 0);
  CHECK(t("0 40, 0 30", north) < 0);
  CHECK(t("0 -40, 0 -30", north) < 0);
  // Magnitude, walking east at 40 N across 10 degrees of longitude: eta rises 0.1 m,
  // f nearly constant (geodesic bulge ~0.4 deg): T ~ (g/f(40)) * 0.1 m within 1 %.
  CHECK(walk_east == doctest::Approx(earth::standard_gravity / coriolis(40.0) * 0.1).epsilon(0.01));
}

TEST_CASE("varying f along a meridian: closed form of the integral") {
  // eta = a (lat - 20) (lat in degrees) along the meridian 10 E from 20 N to 60 N:
  // T = int (g/f) d(eta) = (g a / (2 Omega)) (180/pi) ln(tan(lat2/2)/tan(lat1/2)).
  // A meridian is a geodesic on the ellipsoid too; bilinear is exact for eta linear
  // in latitude; the midpoint rule in f is O(ds^2): ~1e-7 relative at 5 km.
  const Grid grid(axis(15, 65, 0.5), axis(5, 15, 0.5));
  const double a = 0.02;  // m per degree
  const Field eta = make_field(grid, [&](double lat, double) { return a * (lat - 20); });
  const double expect = earth::standard_gravity * a / (2 * earth::omega) / d2r *
                        std::log(std::tan(30 * d2r) / std::tan(10 * d2r));
  for (EarthModel m : {EarthModel::wgs84, EarthModel::sphere}) {
    SectionOptions o;
    o.earth = m;
    o.spacing_m = 5e3;
    const SectionResult r = SectionSampler(grid, make_line("10 20, 10 60"), o).evaluate(eta);
    CHECK(r.transport_per_depth_m2s == doctest::Approx(expect).epsilon(1e-6));
    CHECK(r.excluded_fraction == 0.0);
  }
  // Gravity options reach the sum: a constant 10 m s-2 scales T by 10/g0.
  SectionOptions o;
  o.gravity = GravityModel::constant;
  o.gravity_value = 10.0;
  o.spacing_m = 5e3;
  const SectionResult r = SectionSampler(grid, make_line("10 20, 10 60"), o).evaluate(eta);
  CHECK(r.transport_per_depth_m2s ==
        doctest::Approx(expect * 10.0 / earth::standard_gravity).epsilon(1e-6));
}

TEST_CASE("a section crossing land: excluded share reported, the rest computed") {
  const Grid grid(axis(30, 40, 0.1), axis(-20, 0, 0.1));
  const double slope = 1e-6;  // eta rises 1 m per 1000 km eastward (about)
  auto sea = [&](double lat, double lon) {
    return slope * earth::mean_radius * std::cos(lat * d2r) * (lon + 10) * d2r;
  };
  const Field open = make_field(grid, sea);
  // An invented island: columns -12.05 .. -9.95 (lon -12 .. -10 inclusive) are land.
  const Field island = make_field(grid, [&](double lat, double lon) {
    return (lon > -12.05 && lon < -9.95) ? nan_v : sea(lat, lon);
  });
  const SectionSampler s(grid, make_line("-18 35, -2 35"), SectionOptions{});
  const SectionResult a = s.evaluate(open), b = s.evaluate(island);
  CHECK(a.excluded_fraction == 0.0);
  // Land spans 2 degrees of the 16; samples next to it are refused too (any of
  // their 4 nodes is land): up to one grid step (0.1 deg) more on each side,
  // plus one segment on each side.
  const double cell = 0.1 / 16.0, seg = s.spacing_m() / b.length_m;
  CHECK(b.excluded_fraction >= 2.0 / 16.0 - 2 * seg);
  CHECK(b.excluded_fraction <= 2.0 / 16.0 + 2 * cell + 2 * seg);
  CHECK(std::isfinite(b.transport_per_depth_m2s));
  // Nearly uniform flow (varies ~1 % with the geodesic's bulge in f and cos(lat)):
  // the mean normal velocity over the wet part matches the open one.
  CHECK(b.mean_normal_velocity_ms == doctest::Approx(a.mean_normal_velocity_ms).epsilon(1e-2));
  CHECK(b.transport_per_depth_m2s < a.transport_per_depth_m2s);
  // Heights of samples on land are missing, the others are not.
  std::vector<std::size_t> slot(grid.ny());
  for (std::size_t j = 0; j < slot.size(); ++j) slot[j] = j;
  const auto h = s.sample_heights(island, slot);
  CHECK(std::isfinite(h.front()));
  CHECK(std::isfinite(h.back()));
  CHECK(std::isnan(h[h.size() / 2 - 1]));  // -10.x: on the island
}

TEST_CASE("equatorial band: segments inside it or crossing the equator are excluded") {
  const Grid grid(axis(-20, 20, 0.25), axis(-10, 10, 0.25));
  const Field eta = make_field(grid, [](double lat, double) { return 0.01 * lat; });
  SectionOptions o;
  o.spacing_m = 10e3;
  const SectionSampler s(grid, make_line("0 -10, 0 10"), o);
  const SectionResult r = s.evaluate(eta);
  const double seg = o.spacing_m / r.length_m;
  CHECK(r.excluded_fraction == doctest::Approx(0.5).epsilon(2 * seg));  // |lat| < 5 of -10..10
  CHECK(std::isfinite(r.transport_per_depth_m2s));
  o.equator_band_deg = 0;  // only the segment(s) across the equator
  const SectionResult z = SectionSampler(grid, make_line("0 -10, 0 10"), o).evaluate(eta);
  CHECK(z.excluded_fraction > 0);
  CHECK(z.excluded_fraction <= 2 * seg + 1e-12);
  // Entirely inside the band: nothing usable.
  o.equator_band_deg = 15;
  const SectionResult n = SectionSampler(grid, make_line("0 -10, 0 10"), o).evaluate(eta);
  CHECK(n.excluded_fraction == 1.0);
  CHECK(std::isnan(n.transport_per_depth_m2s));
}

TEST_CASE("grid layouts: descending latitude and longitude conventions give the same result") {
  // The same nodes under different labels interpolate identically.
  auto eta = [](double lat, double lon) {
    return 0.3 * std::sin(2 * lon * d2r) * std::cos(3 * lat * d2r);
  };
  const auto lat = axis(20, 70, 1.0);
  std::vector<double> lat_desc(lat.rbegin(), lat.rend());
  std::vector<double> lon360 = axis(0, 359, 1.0), lon180 = axis(-180, 179, 1.0);
  const Grid g360(lat, lon360), g180(lat, lon180), gdesc(lat_desc, lon180);
  REQUIRE(g360.periodic());
  const SectionLine line = make_line("-20 40, 15 52.3, 30 45");  // crosses 0 E
  const SectionLine seam = make_line("170 40, -170 50");         // crosses 180 E
  const SectionOptions o;
  for (const SectionLine& l : {line, seam}) {
    const double a =
        SectionSampler(g360, l, o).evaluate(make_field(g360, eta)).transport_per_depth_m2s;
    const double b =
        SectionSampler(g180, l, o).evaluate(make_field(g180, eta)).transport_per_depth_m2s;
    const double c =
        SectionSampler(gdesc, l, o).evaluate(make_field(gdesc, eta)).transport_per_depth_m2s;
    CHECK(std::isfinite(a));
    CHECK(b == doctest::Approx(a).epsilon(1e-9));
    CHECK(c == doctest::Approx(a).epsilon(1e-9));
  }
}

TEST_CASE("vertices outside a regional grid are refused; bad block is a caller bug") {
  const Grid grid(axis(30, 40, 0.5), axis(-20, -10, 0.5));
  CHECK_THROWS_AS(SectionSampler(grid, make_line("-15 35, -15 45"), SectionOptions{}),
                  std::invalid_argument);
  CHECK_THROWS_AS(SectionSampler(grid, make_line("-25 35, -15 35"), SectionOptions{}),
                  std::invalid_argument);
  // Vertices on the grid's edge are inside.
  const SectionSampler edge(grid, make_line("-20 30, -10 40"), SectionOptions{});
  const Field eta(grid.ny(), grid.nx(), 0.0);
  CHECK(edge.evaluate(eta).excluded_fraction == 0.0);
  CHECK(!edge.rows().empty());
  CHECK_THROWS_AS((void)edge.evaluate(Field(2, grid.nx(), 0.0), {0, 1}), std::logic_error);
  // A long line on a fine grid: the default spacing widens to stay below the limit.
  const Grid fine(axis(-80, 80, 1.0 / 12), axis(-180, 180 - 1.0 / 12, 1.0 / 12));
  const SectionSampler longest(fine, make_line("0 -75, 0 75, 179 0, -90 -30"), SectionOptions{});
  CHECK(longest.path().lat_deg.size() <= max_section_samples / 2 + 4);
  // Default spacing is about the grid step: 0.5 deg of latitude on R1 = 55.6 km at most.
  CHECK(edge.spacing_m() <= 0.5 * d2r * earth::mean_radius + 1e-6);
  CHECK(edge.spacing_m() >= 0.25 * 0.5 * d2r * earth::mean_radius);
}
