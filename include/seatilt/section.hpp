// seatilt/section.hpp — geostrophic transport across a polyline (a section).
//
// Owns: parsing section lines ("LON LAT, LON LAT, ...") and section files
// (TOML), following a polyline along geodesics and sampling it, land-aware
// bilinear interpolation of the height onto the samples, the cross-section
// geostrophic velocity and its integral (transport per unit depth), the
// flags that exclude segments (missing height, outside the grid, equatorial
// band), the `section` run over inputs and time steps, and its two outputs:
// CSV (DESIGN.md "Other outputs") and a CF discrete-sampling-geometry netCDF
// (featureType timeSeries, one station per section). Does not own reading
// netCDF inputs (reader.hpp) or the earth constants (grid.hpp).
//
// Method
//  Path. Each leg between consecutive vertices is the geodesic on the earth
//  model (WGS84 ellipsoid, or the sphere of radius R1) solved by Karney's
//  algorithm [1] through PROJ's geodesic API; a leg of length L is cut into
//  n = ceil(L / spacing) equal segments (samples at the leg's vertices and at
//  k L / n). The section length is the sum of the leg lengths.
//  Height at a sample: bilinear in (latitude, unwrapped longitude) degrees
//  between the 4 surrounding grid nodes; the sample is missing when any of
//  the 4 is missing (no fill ever enters a difference) or when it lies
//  outside the grid.
//  Velocity. Geostrophic balance f k x u = -g grad(eta) [2] ch. 10 gives
//  u = (g/f) k x grad(eta). With t the unit tangent (walking from the first
//  point to the last) and n = k x t the unit normal to the LEFT,
//     v_n = u . n = (g/f) (k x grad eta) . (k x t) = (g/f) d(eta)/ds   (m s-1)
//  so the normal velocity needs only the along-section derivative of the
//  height. Sign: positive = to the left of the walking direction (DESIGN.md);
//  e.g. walking east in the northern hemisphere with the height rising to
//  the east, v_n > 0 is northward (high height on the flow's right).
//  Transport per unit depth (m2 s-1):
//     T = integral v_n ds = integral (g/f) d(eta)
//       = sum over usable segments k of (g_k / f_k) (eta_{k+1} - eta_k),
//  f_k = 2 Omega sin(lat) and g_k at the segment's geodesic midpoint
//  (midpoint rule, O(ds^2)). With constant f and g and no excluded segment
//  T = (g/f) (eta_end - eta_start) exactly (the sum telescopes).
//  A segment is excluded (contributes neither transport nor included
//  length) when a sample at either end is missing, or when it touches the
//  equatorial band: |lat| < band at either end or at the midpoint, or its
//  ends lie on opposite sides of the equator (f changes sign), or f = 0.
//  mean normal velocity = T / (included length); excluded fraction =
//  (excluded length) / (section length).
//  Volume transport (--depth H): T H (m3 s-1) and T H / 1e6 (Sv), assuming
//  the surface geostrophic velocity holds unchanged over the depth H
//  (equivalent-barotropic assumption; real currents are mostly baroclinic
//  and weaken with depth, so T H is an upper-bound style estimate, not a
//  measured transport).
//
// References
//  [1] C. F. F. Karney (2013), Algorithms for geodesics, J. Geodesy 87,
//      43-55, doi:10.1007/s00190-012-0578-z (PROJ geodesic.h implements it).
//  [2] R. H. Stewart, Introduction to Physical Oceanography, ch. 10
//      (geostrophic balance, surface geostrophic currents).
//  [3] CF Conventions 1.12, ch. 9 and appendix H.2 (discrete sampling
//      geometries, featureType timeSeries, orthogonal multidimensional
//      representation); CF standard name ocean_volume_transport_across_line.
//
// Accuracy: geodesic lengths and positions to ~15 nm (PROJ/Karney [1]);
// bilinear interpolation is exact for heights linear in latitude and
// longitude; the midpoint rule in f along a meridian has relative error
// (ds/R)^2 (1 + cos^2 lat) / (24 sin^2 lat) per segment: for ds = 10 km
// about 3e-7 at 45 deg, 7e-6 at 10 deg, 3e-5 at 5 deg (computed).
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "seatilt/grid.hpp"
#include "seatilt/reader.hpp"

namespace seatilt {

/// A vertex of a section line (degrees east, degrees north).
struct GeoPoint {
  double lon_deg = 0.0;
  double lat_deg = 0.0;
};

/// A named section line.
struct SectionLine {
  std::string name;              ///< unique; printable, 1..100 characters
  std::vector<GeoPoint> points;  ///< >= 2 vertices, consecutive ones distinct
};

/// Most vertices one line may have.
inline constexpr std::size_t max_section_vertices = 10000;
/// Most samples one section may have (all legs together).
inline constexpr std::size_t max_section_samples = 2000000;

/// Parses "LON LAT, LON LAT, ..." into vertices: points separated by commas,
/// the two numbers of a point by blanks (spaces or tabs); blanks around the
/// points are ignored. Numbers are plain decimals ("-12.5", "1e-3"; no
/// "nan"/"inf"/hexadecimal). Longitudes in [-360, 360], latitudes in
/// [-90, 90]; 2..max_section_vertices points; consecutive points must
/// differ. Never crashes on any byte sequence. Throws UsageError
/// "CONTEXT: PROBLEM in 'OFFENDING TEXT'" (the text cut to 60 characters,
/// control and non-ASCII bytes shown as '?').
std::vector<GeoPoint> parse_section_line(const std::string& text, const std::string& context);

/// Checks a section name (1..100 printable characters, no control bytes);
/// throws UsageError "CONTEXT: ..." otherwise.
void check_section_name(const std::string& name, const std::string& context);

/// Reads named sections from a TOML file of the form
///   [[section]]
///   name = "strait east"
///   line = "LON LAT, LON LAT, ..."
/// Every table needs both keys (strings); other keys, other top-level keys
/// and duplicate names are refused. Throws UsageError "PATH: ..." (exit 2,
/// job-file error) for an unreadable file, TOML syntax (with line and
/// column), a bad line or name, or no [[section]] at all.
std::vector<SectionLine> read_section_file(const std::string& path);

/// Options of a section computation, resolved once per run.
struct SectionOptions {
  double spacing_m = 0.0;         ///< sample spacing (m), 0 = about the grid spacing
  double depth_m = 0.0;           ///< depth for volume transport (m), 0 = none
  double equator_band_deg = 5.0;  ///< half-width of the excluded band (degrees), 0..30
  EarthModel earth = EarthModel::wgs84;
  GravityModel gravity = GravityModel::standard;
  double gravity_value = earth::standard_gravity;  ///< m s-2, with GravityModel::constant
};

/// Checks options; throws UsageError naming the option: spacing_m 0 or in
/// (0, 1e7], finite; depth_m 0 or in (0, 12000]; band 0..30; gravity value
/// 0.1..100 m s-2.
void validate(const SectionOptions& options);

/// A polyline sampled along geodesics.
struct SectionPath {
  std::vector<double> lat_deg, lon_deg;  ///< samples (n + 1), lon in [-180, 180]
  std::vector<double> s_m;               ///< distance of each sample from the start (m)
  std::vector<double> seg_length_m;      ///< n segment lengths (m)
  std::vector<double> mid_lat_deg;       ///< latitude of each segment's geodesic midpoint
  double length_m = 0.0;                 ///< sum of the geodesic leg lengths (m)
  GeoPoint midpoint;                     ///< point at half the length (for the netCDF station)
};

/// Follows POINTS along geodesics of MODEL (WGS84 ellipsoid or R1 sphere)
/// and samples every leg at SPACING_M (> 0) or finer. Throws UsageError
/// when consecutive points coincide or when more than max_section_samples
/// samples would be needed (the message names CONTEXT and suggests a larger
/// spacing).
SectionPath sample_geodesic_path(const std::vector<GeoPoint>& points, EarthModel model,
                                 double spacing_m, const std::string& context);

/// Returns the length (m) of the polyline POINTS along geodesics of MODEL
/// (sum of the legs' inverse-problem distances [1]); 0 for fewer than 2 points.
double section_length_m(const std::vector<GeoPoint>& points, EarthModel model);

/// Transport of one section at one time step.
struct SectionResult {
  double length_m = 0.0;                 ///< geodesic length of the whole section (m)
  double included_length_m = 0.0;        ///< length of the usable segments (m)
  double transport_per_depth_m2s = 0.0;  ///< T = sum (g/f) d(eta) (m2 s-1); NaN if nothing usable
  double mean_normal_velocity_ms = 0.0;  ///< T / included length (m s-1); NaN if nothing usable
  double excluded_fraction = 0.0;        ///< excluded length / length (1), 0..1
};

/// Integrates T = sum_k G_OVER_F[k] (ETA[k+1] - ETA[k]) over segments whose
/// G_OVER_F is finite and whose two heights are finite; the others count as
/// excluded. ETA (m) has one more element than SEG_LENGTH_M (m) and
/// G_OVER_F (m s). Throws std::invalid_argument on mismatched sizes.
SectionResult integrate_transport(const std::vector<double>& eta,
                                  const std::vector<double>& seg_length_m,
                                  const std::vector<double>& g_over_f);

/// Samples one section on one grid: geodesic path, interpolation weights,
/// f and g at the segment midpoints, equatorial exclusion. Immutable.
class SectionSampler {
 public:
  /// Prepares LINE on GRID. SPACING from OPTIONS, or else default_spacing_m()
  /// widened where needed to keep the section below max_section_samples / 2
  /// samples (a 20000 km line on a 1/12 degree grid).
  /// Throws std::invalid_argument (no file name; the caller adds it) when a
  /// vertex lies outside the grid; UsageError as sample_geodesic_path.
  /// Samples between vertices that fall outside the grid (a geodesic bowing
  /// out of a regional grid, the strip beyond the last row) are missing.
  SectionSampler(const Grid& grid, const SectionLine& line, const SectionOptions& options);

  /// Grid rows (file order) that evaluate() reads, sorted, unique.
  [[nodiscard]] const std::vector<std::size_t>& rows() const { return rows_; }
  [[nodiscard]] const SectionPath& path() const { return path_; }
  [[nodiscard]] const SectionLine& line() const { return line_; }
  [[nodiscard]] double spacing_m() const { return spacing_m_; }

  /// Computes the transport from heights (m, NaN missing) of one time step:
  /// grid row j is BLOCK.row(SLOT[j]); SLOT must map every row of rows().
  /// Throws std::logic_error when it does not (a caller bug).
  [[nodiscard]] SectionResult evaluate(const Field& block,
                                       const std::vector<std::size_t>& slot) const;
  /// Same with a full grid of heights (ny x nx).
  [[nodiscard]] SectionResult evaluate(const Field& full) const;
  /// Heights interpolated at the samples (m, NaN missing), as evaluate() uses them.
  [[nodiscard]] std::vector<double> sample_heights(const Field& block,
                                                   const std::vector<std::size_t>& slot) const;

  /// Default spacing on GRID for a line through POINTS: the smaller of the
  /// latitude step and the longitude step at the vertices' mean |latitude|
  /// (not below a quarter of the latitude step), in metres on the R1 sphere.
  static double default_spacing_m(const Grid& grid, const std::vector<GeoPoint>& points);

 private:
  struct Stencil {
    bool inside = false;
    std::size_t ja = 0, jb = 0, ia = 0, ib = 0;  ///< rows/columns of the 4 nodes
    double wj = 0.0, wi = 0.0;                   ///< weights of jb and ib
  };
  SectionLine line_;
  double spacing_m_ = 0.0;
  SectionPath path_;
  std::vector<Stencil> stencils_;
  std::vector<double> g_over_f_;  ///< per segment (m s); NaN inside the equatorial band
  std::vector<std::size_t> rows_;
};

/// One `section` run: inputs, lines, options, output.
struct SectionJob {
  std::vector<std::string> inputs;  ///< height files, rows in this order
  std::string output;               ///< ends in .csv, or .nc / .nc4 (netCDF-4)
  ReaderOptions reader;
  std::vector<SectionLine> sections;
  SectionOptions options;
  bool force = false;        ///< overwrite an existing output
  std::string command_line;  ///< for the netCDF history
};

/// What a run did.
struct SectionSummary {
  std::size_t rows = 0;   ///< output rows (time steps x sections)
  std::size_t steps = 0;  ///< time steps over all inputs
  double min_excluded_fraction = 0.0, max_excluded_fraction = 0.0;
};

/// The caution on volume transport under the equivalent-barotropic assumption.
const char* section_transport_caution();

/// Runs JOB: checks options and the output, reads every input, computes
/// every section at every time step, writes the output through a temporary
/// file in the output's folder and renames it (nothing at the output path on
/// failure). CSV: header row and one row per time step and section (inputs
/// in the given order, steps in file order, sections in job order).
/// netCDF: rows sorted by time; needs a time coordinate in every input, the
/// same time units and calendar in all, and no repeated time.
/// Throws UsageError (options, no sections, unknown output extension),
/// InputError (unreadable input, vertex outside a grid, time problems),
/// OutputError (output exists without force, cannot write).
SectionSummary run_sections(const SectionJob& job);

}  // namespace seatilt
