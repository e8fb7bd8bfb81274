#include "seatilt/grid.hpp"

#include <GeographicLib/Geodesic.hpp>
#include <doctest/doctest.h>

#include <cmath>
#include <stdexcept>

using namespace seatilt;

TEST_CASE("WGS84 and gravity constants match the published values") {
  // NIMA TR8350.2 3rd ed. (REFERENCES.md §4): b = 6356752.3142 m, e2 = 0.00669437999014
  CHECK(earth::wgs84_b == doctest::Approx(6356752.3142).epsilon(1e-10));  // published to 0.1 mm
  CHECK(earth::wgs84_e2 == doctest::Approx(0.00669437999014).epsilon(1e-12));
  // IUGG mean radius R1 = (2a + b)/3 = 6371008.7714 m (Moritz 2000)
  CHECK((2 * earth::wgs84_a + earth::wgs84_b) / 3 == doctest::Approx(earth::mean_radius).epsilon(1e-11));
  // Somigliana normal gravity (REFERENCES.md §4, computed): gamma(30) = 9.79324727,
  // gamma(45) = 9.80619777, gamma(60) = 9.81917695, gamma_p = 9.8321849378 m s-2
  CHECK(normal_gravity(30) == doctest::Approx(9.79324727).epsilon(1e-9));
  CHECK(normal_gravity(45) == doctest::Approx(9.80619777).epsilon(1e-9));
  CHECK(normal_gravity(60) == doctest::Approx(9.81917695).epsilon(1e-9));
  CHECK(normal_gravity(90) == doctest::Approx(9.8321849378).epsilon(1e-10));
  CHECK(normal_gravity(0) == doctest::Approx(9.7803253359).epsilon(1e-12));
}

TEST_CASE("Coriolis and beta parameters") {
  // f(30) = 7.292115e-5, f(45) = 1.031261e-4 s-1 (REFERENCES.md §5, computed)
  CHECK(coriolis(30) == doctest::Approx(7.292115e-5).epsilon(1e-12));
  CHECK(coriolis(45) == doctest::Approx(1.031261e-4).epsilon(1e-6));
  CHECK(coriolis(0) == 0.0);
  CHECK(coriolis(-30) == doctest::Approx(-7.292115e-5).epsilon(1e-12));
  // beta at the equator: 2.28916e-11 with R1, 2.30201e-11 with WGS84 M(0) (REFERENCES.md §2)
  CHECK(beta(EarthModel::sphere, 0) == doctest::Approx(2.28916e-11).epsilon(1e-5));
  CHECK(beta(EarthModel::wgs84, 0) == doctest::Approx(2.30201e-11).epsilon(1e-5));
}

TEST_CASE("sincosd reduces degrees exactly") {
  double s = 0, c = 0;
  sincosd(30, s, c);
  CHECK(s == 0.5);
  sincosd(180, s, c);
  CHECK(s == 0.0);
  CHECK(c == -1.0);
  sincosd(-90, s, c);
  CHECK(s == -1.0);
  CHECK(c == 0.0);
  sincosd(390, s, c);
  CHECK(s == 0.5);
}

TEST_CASE("Radii of curvature per degree (REFERENCES.md §4, computed)") {
  const double d = 3.14159265358979323846 / 180;
  // phi = 0: dy 110574.276 m, dx 111319.491 m per degree
  CHECK(meridional_radius(EarthModel::wgs84, 0) * d == doctest::Approx(110574.276).epsilon(1e-8));
  CHECK(prime_vertical_radius(EarthModel::wgs84, 0) * d == doctest::Approx(111319.491).epsilon(1e-8));
  // phi = 45: dy 111131.777 m, dx 78846.835 m; phi = 60: dx 55800.002 m
  CHECK(meridional_radius(EarthModel::wgs84, 45 * d) * d == doctest::Approx(111131.777).epsilon(1e-8));
  CHECK(prime_vertical_radius(EarthModel::wgs84, 45 * d) * std::cos(45 * d) * d ==
        doctest::Approx(78846.835).epsilon(1e-8));
  CHECK(prime_vertical_radius(EarthModel::wgs84, 60 * d) * 0.5 * d ==
        doctest::Approx(55800.002).epsilon(1e-8));
  CHECK(meridional_radius(EarthModel::sphere, 1.0) == earth::mean_radius);
}

TEST_CASE("Metric terms against GeographicLib geodesics between neighbouring nodes") {
  // GeographicLib (Karney 2013, J. Geod. 87, 43-55) on WGS84: for a small node
  // spacing h the meridian geodesic is M h and the east-west geodesic tends to
  // the parallel arc N cos(phi) h (their difference is O(h^3), < 1e-8 relative
  // at 0.01 degree).
  const GeographicLib::Geodesic& g = GeographicLib::Geodesic::WGS84();
  const double h = 0.01, d = 3.14159265358979323846 / 180;
  for (double lat : {-75.0, -40.0, -5.0, 0.0, 12.5, 35.0, 60.0, 82.0}) {
    double s_ns = 0, s_ew = 0;
    g.Inverse(lat - h / 2, 10.0, lat + h / 2, 10.0, s_ns);
    g.Inverse(lat, 10.0, lat, 10.0 + h, s_ew);
    const double m = meridional_radius(EarthModel::wgs84, lat * d) * h * d;
    double s = 0, c = 0;
    sincosd(lat, s, c);
    const double n = prime_vertical_radius(EarthModel::wgs84, lat * d) * c * h * d;
    CAPTURE(lat);
    CHECK(m == doctest::Approx(s_ns).epsilon(1e-8));
    CHECK(n == doctest::Approx(s_ew).epsilon(1e-8));
  }
}

TEST_CASE("Grid detects periodic global axes and unwraps the seam") {
  std::vector<double> lat{-10, 0, 10}, lon;
  for (int i = 0; i < 1440; ++i) lon.push_back(-180.0 + 0.25 * i + 0.125);
  Grid g(lat, lon);
  CHECK(g.periodic());
  CHECK(g.dlon_deg() == doctest::Approx(0.25));

  // A regional grid crossing the date line in 0..360 and -180..180 form.
  std::vector<double> lon2{178, 179, -180, -179, -178};
  Grid g2(lat, lon2);
  CHECK_FALSE(g2.periodic());
  CHECK(g2.lon_rad()[4] > g2.lon_rad()[3]);
  CHECK(g2.dlon_deg() == doctest::Approx(1.0));

  // Not periodic when one column short of closing (gap of two steps).
  std::vector<double> lon3;
  for (int i = 0; i < 359; ++i) lon3.push_back(i);
  CHECK_FALSE(Grid(lat, lon3).periodic());
}

TEST_CASE("Grid accepts descending latitude and rejects bad axes") {
  Grid g({10, 5, 0, -5}, {0, 1, 2});
  CHECK(g.lat_descending());
  CHECK_THROWS_AS(Grid({0, 5, 5, 10}, {0, 1}), std::invalid_argument);   // repeated latitude
  CHECK_THROWS_AS(Grid({0, 5, 3, 10}, {0, 1}), std::invalid_argument);   // non-monotonic
  CHECK_THROWS_AS(Grid({0, 95}, {0, 1}), std::invalid_argument);         // |lat| > 90
  CHECK_THROWS_AS(Grid({0, NAN}, {0, 1}), std::invalid_argument);        // non-finite
  CHECK_THROWS_AS(Grid({0}, {0, 1}), std::invalid_argument);             // one row
  CHECK_THROWS_AS(Grid({0, 1}, {0, 0}), std::invalid_argument);          // repeated longitude
  CHECK_THROWS_AS(Grid({0, 1}, {3, 2, 1}), std::invalid_argument);       // descending longitude
}
