// seatilt/thermal.hpp — geostrophic currents at depth: thermal wind from
// hydrography, referenced to the altimetric surface velocity or to a level
// of no motion.
//
// Owns: reading gridded hydrography (3-D temperature and salinity, or in-situ
// density, on depth or pressure levels) from CF netCDF; density anomaly by
// TEOS-10 (teos10.hpp); the vertical shear of the geostrophic velocity from
// horizontal density gradients on the sphere or ellipsoid; its trapezoidal
// integration down every water column from the reference; the bilinear
// transfer of the surface velocity from the height grid to the hydrography
// grid; the cross-section velocity and full-depth transport along a line;
// the `profile` run (hydrography + heights -> CF netCDF on
// (time, level, lat, lon)) with its own 4-D writer (temporary file + rename,
// as writer.hpp does for 2-D outputs). Does not own the surface geostrophic
// velocity itself (kernel.hpp), finite-difference stencils (kernel.hpp),
// geodesic sampling of a line (section.hpp) or the earth constants (grid.hpp).
//
// Method
//  Thermal wind, Boussinesq, z positive up, u east, v north ([1] ch. 2,
//  [2] ch. 10; chapters from memory), from f v = (1/rho0) dp/dx,
//  f u = -(1/rho0) dp/dy and the hydrostatic dp/dz = -rho g:
//    du/dz =  (g / (rho0 f)) d(rho)/dy,  d/dy = (1/M) d/dphi          (s-1)
//    dv/dz = -(g / (rho0 f)) d(rho)/dx,  d/dx = (1/(N cos phi)) d/dlambda
//  f = 2 Omega sin(phi), M, N the radii of curvature (grid.hpp), g the
//  gravity model of kernel.hpp, rho0 = 1025 kg m-3 by default (a common
//  Boussinesq reference density; common practice, no source). Horizontal
//  derivatives: the stencil ladder of kernel.hpp on each level.
//  Density: rho' = rho(SA, CT, p) - rho(SSO, 0 degC, p) (kg m-3), the in-situ
//  density minus that of the standard ocean at the same pressure (the
//  density analogue of the specific volume anomaly of [3] section 3.7).
//  The subtracted part depends on p only, so along a pressure level it has
//  no gradient at all, and along a depth level it removes the spurious
//  gradient of p(z, lat) through gravity (a resting standard ocean gives
//  zero shear; without it, -0.9 mm s-1 at 2000 m at 30 N, computed with
//  python3-gsw).
//  Pressure of a depth level: p = teos10::p_from_z(-depth, lat); height of a
//  pressure level: z = teos10::z_from_p(p, lat) (per row).
//  On depth levels the gradient is taken along constant z; on pressure levels
//  along isobars, for which the same formula holds exactly with rho in place
//  of rho0 (f dv/dp = -d(1/rho)/dx at constant p, dp = -rho g dz); seatilt
//  keeps rho0 for both (relative error |rho/rho0 - 1| < 3 %).
//  Integration (trapezoidal rule, exact for shear linear in z between
//  levels): with levels z_0 > z_1 > ... (z_0 <= 0 the shallowest),
//    I(z) = int_0^z s dz',  s = s_0 between the sea surface and z_0,
//    I(z_{k+1}) = I(z_k) + (s_k + s_{k+1}) (z_{k+1} - z_k) / 2,
//  and between levels with s interpolated linearly. Reference:
//    surface:            u(z) = u_s + I(z),  u_s the geostrophic surface
//                        velocity from the heights (kernel.hpp, equator mask);
//    no-motion at z_r:   u(z) = I(z) - I(z_r)  (u(z_r) = 0).
//  A column ends at its first level without density (the sea floor) or
//  without a usable horizontal gradient; everything below is fill.
//
// References
//  [1] G. K. Vallis (2017), Atmospheric and Oceanic Fluid Dynamics, 2nd ed.,
//      Cambridge University Press (thermal wind, Boussinesq equations).
//  [2] R. H. Stewart, Introduction to Physical Oceanography, ch. 10
//      (geostrophic currents at depth from hydrography, reference levels).
//  [3] IOC, SCOR and IAPSO (2010), TEOS-10 manual (see teos10.hpp).
//  [4] CF Conventions 1.12: 4.3 (vertical coordinate: axis Z, positive,
//      pressure units), 2.5.1 (missing data), 8.1 (packed data).
//
// Accuracy: shear exact for density linear in latitude or longitude (any
// stencil; tested); otherwise the stencil's truncation error (kernel.hpp).
// Integration exact for shear linear in z between levels (tested).
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "seatilt/grid.hpp"
#include "seatilt/kernel.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/section.hpp"

namespace seatilt {

// ---- options ------------------------------------------------------------------

/// Where the velocity profile is anchored.
struct ThermalReference {
  enum Kind { surface, no_motion } kind = surface;
  /// Level of no motion: depth (m, >= 0) for depth-level input, sea pressure
  /// (dbar) for pressure-level input. Unused for surface.
  double level = 0.0;
};

/// Parses "surface" or "no-motion:LEVEL" (LEVEL a number >= 0, m or dbar as
/// the input's vertical coordinate). Throws UsageError naming --reference.
ThermalReference parse_reference(const std::string& text);

/// Parses a comma list of output levels (numbers >= 0: depth in m, or sea
/// pressure in dbar, as the input's vertical coordinate), strictly increasing
/// or strictly decreasing, at most 10000. "" or "all" gives an empty list
/// (the input's own levels). Throws UsageError naming --levels.
std::vector<double> parse_levels(const std::string& text);

/// Options of the thermal-wind computation, resolved once per run.
struct ThermalOptions {
  int order = 2;                                ///< horizontal stencil order 2, 4, 6 (kernel.hpp)
  CoastMethod coast = CoastMethod::one_sided;   ///< next to missing cells (coasts, sea floor)
  EarthModel earth = EarthModel::wgs84;
  GravityModel gravity = GravityModel::standard;
  double gravity_value = earth::standard_gravity;  ///< m s-2, with GravityModel::constant
  double equator_band_deg = 5.0;                ///< |lat| < band is masked (0..30)
  double rho0 = 1025.0;                         ///< Boussinesq reference density (kg m-3), 900..1100
};

/// Checks options; throws UsageError naming the option.
void validate(const ThermalOptions& options);

/// Quality flag bits of the `profile` output (CF flag_masks, NC_UBYTE);
/// values shared with the `currents` flag where the meaning is the same.
namespace profile_quality {
inline constexpr std::uint8_t one_sided = 1;         ///< a shortened/one-sided difference entered the value
inline constexpr std::uint8_t missing_density = 8;   ///< no density here (land, below the sea floor)
inline constexpr std::uint8_t masked_equator = 16;   ///< inside the equatorial band (or f = 0)
inline constexpr std::uint8_t masked_pole = 32;      ///< at a pole
inline constexpr std::uint8_t no_gradient = 64;      ///< density, but no usable horizontal gradient here or above
inline constexpr std::uint8_t no_reference = 128;    ///< no surface velocity, or the no-motion level is below the column
inline constexpr std::uint8_t masked_any =
    missing_density | masked_equator | masked_pole | no_gradient | no_reference;
inline constexpr const char* meanings =
    "one_sided_difference missing_density masked_equator_band masked_pole "
    "no_density_gradient no_reference";
}  // namespace profile_quality

// ---- numerics ---------------------------------------------------------------------

/// Vertical shear of the geostrophic velocity from the horizontal gradient of
/// density on one level of a lat-lon grid (formula in the header block).
class ShearKernel {
public:
  /// Prepares per-row terms (f, g, M, N cos phi, mask) once. Throws
  /// UsageError for invalid options.
  ShearKernel(const Grid& grid, const ThermalOptions& options);

  /// Rows of density needed above and below the output rows.
  [[nodiscard]] std::size_t halo_rows() const;

  /// Computes du/dz, dv/dz (s-1, NaN where undefined) and FLAGS
  /// (profile_quality bits: missing_density, masked_equator, masked_pole,
  /// no_gradient, one_sided) for global rows [j0, j0 + n) from the density
  /// (anomaly) RHO (kg m-3, NaN missing) of ONE level holding global rows
  /// [b0, b0 + rho.ny), which must cover the halo within the grid
  /// (std::logic_error otherwise). DU_DZ, DV_DZ become n x nx, FLAGS n * nx.
  /// Only gradients enter, so any density offset constant on the level
  /// cancels. Rows run in parallel (OpenMP); results do not depend on the
  /// thread count.
  void compute(const Field& rho, std::size_t b0, std::size_t j0, std::size_t n, Field& du_dz,
               Field& dv_dz, std::vector<std::uint8_t>& flags) const;

private:
  struct Row {
    double coef_y, coef_x;  // g/(rho0 f M), -g/(rho0 f N cos phi)
    std::uint8_t mask;      // masked_equator, masked_pole or 0
  };
  const Grid& grid_;
  Differentiator diff_;
  std::vector<Row> rows_;
};

/// Returns I(ZO) = int_0^ZO s dz (m s-1) for one column by the trapezoidal
/// rule: Z (m, positive up, strictly decreasing, Z[0] <= 0) and S (s-1) at
/// the N usable levels; s = S[0] between the sea surface and Z[0]; linear
/// between levels. ZO must lie in [Z[N-1], 0]; otherwise (or N = 0) NaN.
double shear_integral(const double* z, const double* s, std::size_t n, double zo);

/// Bilinear transfer of a field from one lat-lon grid to another (latitude
/// and unwrapped longitude in degrees). A target on a source node takes
/// that node's value exactly; a target with any needed corner missing, or
/// outside the source grid, is NaN. A periodic source wraps.
class GridTransfer {
public:
  GridTransfer(const Grid& from, const Grid& to);
  /// True when both grids have the same nodes (within 1e-9 degree) in the same order.
  [[nodiscard]] bool identity() const { return identity_; }
  /// Interpolates SRC (from-grid, ny x nx) to DST (to-grid), and ORs the
  /// FLAGS (from-grid, ny * nx) of the corners used into DST_FLAGS.
  void apply(const Field& src, const std::vector<std::uint8_t>& flags, Field& dst,
             std::vector<std::uint8_t>& dst_flags) const;

private:
  struct Weight {
    std::size_t a = 0, b = 0;
    double w = 0.0;  // weight of b; 0 on a node
    bool inside = false;
  };
  std::vector<Weight> rows_, cols_;
  std::size_t from_nx_ = 0;
  bool identity_ = false;
};

// ---- hydrography input --------------------------------------------------------------

/// How the vertical coordinate is given.
enum class VerticalKind { depth, pressure };
enum class TemperatureKind { conservative, potential };
enum class SalinityKind { absolute, reference, practical };

/// Which 3-D field to read.
enum class HydroField { temperature, salinity, density };

/// Variable overrides for the hydrography file (empty = detect by standard_name).
struct HydroOptions {
  std::string temperature, salinity, density;
};

/// Everything found out about a hydrography file before reading data.
struct HydroInfo {
  std::string path, format;
  bool from_density = false;  ///< in-situ density given (else temperature + salinity)
  std::string temperature, salinity, density;   ///< variable names ("" when unused)
  TemperatureKind temperature_kind = TemperatureKind::conservative;
  SalinityKind salinity_kind = SalinityKind::absolute;
  std::string temperature_reason, salinity_reason, density_reason;  ///< why chosen and how read
  std::string temperature_units, salinity_units, density_units;     ///< as found
  CoordVar lat, lon, vertical;
  std::optional<CoordVar> time;
  std::string calendar;
  VerticalKind vertical_kind = VerticalKind::depth;
  std::string vertical_reason;   ///< how direction and units were decided
  double vertical_sign = 1.0;    ///< +1 positive down, -1 positive up (heights)
  double vertical_scale = 1.0, vertical_offset = 0.0;  ///< m or dbar = raw * scale + offset (before the sign)
  std::vector<double> levels;    ///< depth (m) or sea pressure (dbar), >= 0, file order
  std::vector<std::size_t> order;  ///< file indices by increasing depth/pressure
  std::size_t nt = 1, nz = 0, ny = 0, nx = 0;
  std::vector<Attribute> global_attrs;
};

/// Reads 3-D hydrography from one netCDF file. Move-only.
///
/// Detection (CF standard_name; --temperature/--salinity/--density-variable
/// override, the chosen variable must still carry one of these names):
///   temperature: sea_water_conservative_temperature (CT), else
///                sea_water_potential_temperature (pt -> CT by ct_from_pt);
///                sea_water_temperature (in situ) is refused.
///   salinity:    sea_water_absolute_salinity (SA), else
///                sea_water_reference_salinity (SR, used as SA), else
///                sea_water_practical_salinity or sea_water_salinity
///                (taken as PSS-78; SA = SR = uPS SP, teos10.hpp);
///   density:     sea_water_density (in situ), used when temperature or
///                salinity is missing; potential density names are refused.
/// Units (UDUNITS-2): temperature to degC, absolute/reference salinity to
/// g/kg, density to kg m-3; practical salinity accepts "1", "psu", "pss-78",
/// "0.001", "1e-3" or none. The vertical coordinate is the one dimension of
/// the variable besides latitude, longitude and time; its coordinate
/// variable needs length units (-> m) or pressure units (-> dbar).
/// Direction: positive="down"/"up" [4]; pressure units are down; without
/// the attribute, standard_name depth -> down, height/altitude -> up, else
/// by sign of the values (all >= 0 down, all <= 0 up). Layouts (Z, Y, X) and
/// (T, Z, Y, X) (leading size-1 dimensions dropped); the same for every
/// variable used.
class HydroReader {
public:
  /// Opens PATH and detects everything. Throws InputError ("PATH: variable
  /// V: problem") for an unreadable file, no usable variables, refused
  /// kinds, bad units, bad or missing coordinates, unsupported layouts,
  /// levels above the sea surface or not strictly monotonic.
  HydroReader(const std::string& path, const HydroOptions& options);
  ~HydroReader();
  HydroReader(HydroReader&&) noexcept;
  HydroReader& operator=(HydroReader&&) noexcept;
  HydroReader(const HydroReader&) = delete;
  HydroReader& operator=(const HydroReader&) = delete;

  [[nodiscard]] const HydroInfo& info() const;

  /// Reads rows [j0, j0 + n) of time step T of WHICH for every level in
  /// increasing depth order: OUT[k] (n x nx) holds level info().order[k], in
  /// degC, g/kg, PSS-78 or kg m-3, NaN where missing. Throws InputError on a
  /// read failure or when WHICH is not available; std::out_of_range for a
  /// bad T or rows.
  void read_levels(HydroField which, std::size_t t, std::size_t j0, std::size_t n,
                   std::vector<Field>& out);

  /// Returns the calendar date of step T (InputError without time or when
  /// undecodable).
  [[nodiscard]] CivilTime date(std::size_t t) const;

private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

/// Returns in-situ density (kg m-3) from temperature T and salinity S of the
/// given kinds at sea pressure P (dbar) by TEOS-10 (teos10.hpp): SA = S, or
/// uPS S for practical salinity; CT = T, or ct_from_pt(SA, T). NaN in, NaN out.
double in_situ_density(double t, double s, TemperatureKind tk, SalinityKind sk, double p);

// ---- sections ---------------------------------------------------------------------------

/// Cross-section velocity and transport of one section at one time step.
struct SectionProfile {
  std::vector<double> normal_velocity;      ///< [k * nseg + s] (m s-1), NaN where not usable
  std::vector<double> transport_per_depth;  ///< per level: sum of v_n ds over usable segments (m2 s-1)
  double transport = 0.0;                   ///< full-depth volume transport (m3 s-1)
  double excluded_fraction = 0.0;           ///< share of the length without a usable top level
};

/// Integrates one section. NSEG segments of length SEG_LENGTH (m) walked in
/// direction AZIMUTH_DEG (degrees clockwise from north); U, V (m s-1) at the
/// NSEG + 1 samples for each of NLEV levels, [k * (nseg + 1) + sample], NaN
/// missing; Z the level heights at each segment, [k * nseg + s] (m, up,
/// strictly decreasing with k, Z <= 0); U_TOP, V_TOP the surface velocity at
/// the samples (empty when there is none).
///   v_n = -u cos(az) + v sin(az)   (positive to the LEFT of the walking
///   direction, DESIGN.md), with u, v the mean of the segment's two samples;
///   a segment is usable at a level when both samples are;
///   transport per depth T_k = sum_s v_n ds                       (m2 s-1)
///   full depth: sum_s ds int v_n dz, from the surface (trapezoid to the
///   surface velocity, or v_n of the top level held up to the surface
///   without one) down the trapezoid over the segment's usable levels,
///   stopping at its first unusable level (the sea floor)       (m3 s-1).
/// Throws std::invalid_argument on inconsistent sizes.
SectionProfile section_profile(std::size_t nseg, std::size_t nlev, const std::vector<double>& seg_length,
                               const std::vector<double>& azimuth_deg, const std::vector<double>& u,
                               const std::vector<double>& v, const std::vector<double>& z,
                               const std::vector<double>& u_top, const std::vector<double>& v_top);

// ---- the `profile` run ---------------------------------------------------------------

/// Names of the optional 4-D output fields ("u", "v" and "quality" always).
const std::vector<std::string>& profile_field_names();

/// Parses a comma list of output fields ("" or "all" = every field); u, v
/// and quality are always written. Throws UsageError naming --fields.
std::vector<std::string> parse_profile_fields(const std::string& list);

/// One `profile` run.
struct ProfileJob {
  std::string heights;      ///< height file; "" only with a no-motion reference
  std::string hydrography;  ///< temperature/salinity or density file
  std::string output;
  ReaderOptions height_reader;
  HydroOptions hydro;
  ThermalOptions options;
  ThermalReference reference;
  std::vector<double> levels;       ///< output levels (m or dbar); empty = the input's
  std::vector<std::string> fields;  ///< from parse_profile_fields
  int deflate = 1;                  ///< 0..9
  bool force = false;
  std::string command_line;
  std::size_t memory_bytes = std::size_t{256} << 20;
  std::size_t band_rows = 0;        ///< 0 = from memory_bytes
  /// A section for the cross-section velocity and the full-depth transport
  /// (needs the input's own levels: refused together with LEVELS).
  std::optional<SectionLine> section;
  double section_spacing_m = 0.0;   ///< sample spacing (m); 0 = about the grid spacing
};

/// What a run did.
struct ProfileSummary {
  std::size_t steps = 0, levels = 0, cells = 0, valid = 0, band_rows = 0;
  std::vector<double> section_transport;  ///< full-depth transport per step (m3 s-1), with a section
};

/// Runs one job: reads the hydrography (and heights), computes u(z), v(z)
/// and writes OUTPUT atomically (nothing at OUTPUT on failure). Output
/// layout: dimensions (time, level, lat, lon) named as in the inputs (time
/// only when an input has it; the unlimited dimension), coordinates copied
/// (the vertical one with the requested levels, in the input's units and
/// sign); float32 u, v (+ density, du_dz, dv_dz) with _FillValue, NC_UBYTE
/// quality; with heights also 2-D (time, lat, lon) u_surface, v_surface.
/// Time steps: a hydrography with one step serves every height step, one
/// height step serves every hydrography step; equal step counts pair step by
/// step (dates must agree); otherwise InputError.
/// With a section: dimension section_distance (segments), coordinates
/// section_distance (m, midpoints), section_lat, section_lon; variables
/// section_normal_velocity (time, level, section_distance),
/// section_transport_per_depth (time, level) and section_transport (time,
/// m3 s-1, CF ocean_volume_transport_across_line), see section_profile().
/// Throws InputError (exit 3) for bad inputs, a height anomaly with the
/// surface reference (it lacks the mean circulation), grids that do not
/// overlap, levels outside the input's range; OutputError (exit 4);
/// UsageError (exit 2) for bad options.
ProfileSummary run_profile(const ProfileJob& job);

}  // namespace seatilt
