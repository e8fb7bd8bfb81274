// seatilt/climatology.hpp — streaming, mergeable current statistics by period.
//
// Owns: per-cell moment accumulators of the geostrophic velocity (count, mean
// u, v, speed and vorticity, second moments of u and v, u-v co-moment) for
// P periods (whole record, 12 months or 4 seasons), their exact pairwise merge,
// the statistics derived from them (variances, covariance, eddy kinetic
// energy, principal axes of the velocity variance), month and season
// assignment in every CF calendar, the partial-state file that `merge`
// combines, the CF climatology output, and the reduction of states over MPI
// ranks. Does not own the geostrophic kernel (kernel.hpp, diagnostics.hpp,
// called here band by band) or input decoding (reader.hpp).
//
// Method. For each cell and period, with n samples x_k = (u_k, v_k):
//   Welford update [1] for sample x (one pass, numerically stable):
//     n += 1;  du = u - mu;  mu += du / n;  dv = v - mv;  mv += dv / n
//     M2u += du (u - mu);  M2v += dv (v - mv);  Cuv += du (v - mv)     [1], [3] Eq. 3.1
//     ms  += (|x| - ms) / n            (mean speed, |x| = sqrt(u^2 + v^2))
//   Pairwise merge of states a, b [2] (exact in real arithmetic: the result
//   equals one pass over the union, in any order and grouping):
//     n = na + nb;  d = mb - ma;  m = ma + d nb / n;  M2 = M2a + M2b + d^2 na nb / n
//     C = Ca + Cb + du dv na nb / n                                     [2] Eq. 2.1, [3] Eq. 3.4
//   Statistics (population moments, divided by n):
//     u_var = M2u / n,  v_var = M2v / n,  uv_cov = Cuv / n               (m2 s-2)
//     eke = (u_var + v_var) / 2  (eddy kinetic energy about the period mean)
//   Principal axes of the velocity variance [4]: the eigenvalues of
//   [[u_var, uv_cov], [uv_cov, v_var]],
//     lambda1,2 = (u_var + v_var)/2 +- sqrt(((u_var - v_var)/2)^2 + uv_cov^2)
//     major std = sqrt(lambda1), minor std = sqrt(max(lambda2, 0))      (m s-1)
//     theta = 0.5 atan2(2 uv_cov, u_var - v_var)                         (degrees)
//   theta is the orientation of the major axis, counter-clockwise from east,
//   in (-90, 90]; undefined (NaN) when the variance is isotropic.
//   Vorticity has its own count: a cell can have u, v but no vorticity (no
//   usable stencil, kernel.hpp).
//
// Periods and calendars. A sample belongs to the period of its calendar date
// (decode_cf_time, reader.hpp): month 1..12, or season DJF (December, January,
// February), MAM, JJA, SON. Every CF calendar seatilt reads is supported:
// standard/gregorian, proleptic_gregorian, julian, noleap/365_day,
// all_leap/366_day, 360_day. Climatology bounds follow CF 1.12 section 7.4 [5]:
// for month m the interval runs from year0-m-01 to year1-(m+1)-01 where year0,
// year1 are the first and last years with a sample of month m; DJF runs from
// December 1 of the first December's year to March 1 after the last winter.
//
// Memory: per period and cell 2 counts (4 bytes each) and 7 doubles, 64 bytes;
// a 1/4-degree global grid (1440 x 720) holds 66 MB per period (0.8 GB for 12
// months), whatever the number of input files. Inputs are streamed in row
// bands (tiling.hpp budget).
//
// References
//  [1] B. P. Welford (1962), Note on a method for calculating corrected sums
//      of squares and products, Technometrics 4(3), 419-420.
//  [2] T. F. Chan, G. H. Golub & R. J. LeVeque (1979), Updating formulae and a
//      pairwise algorithm for computing sample variances, Stanford report
//      STAN-CS-79-773; (1983) Algorithms for computing the sample variance:
//      analysis and recommendations, The American Statistician 37(3), 242-247.
//  [3] P. Pebay (2008), Formulas for robust, one-pass parallel computation of
//      covariances and arbitrary-order statistical moments, Sandia report
//      SAND2008-6212 (co-moment update and merge).
//  [4] W. J. Emery & R. E. Thomson (2001), Data Analysis Methods in Physical
//      Oceanography, 2nd ed., Elsevier, principal-axis (variance ellipse)
//      analysis of current records (section number from memory: 4.3).
//  [5] CF Conventions 1.12, section 7.4 (climatological statistics) and
//      7.3 (cell_methods), 7.1 (bounds).
//
// Accuracy: the Welford update's relative error grows like n * eps times the
// condition number kappa = sqrt(1 + mean^2/variance) [2] (eps = 2.2e-16);
// merged and one-pass results agree to ~1e-13 relative for 10^4 samples with
// kappa ~ 10 (tested to 1e-12). Outputs are float32 (about 6e-8 relative).
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "seatilt/kernel.hpp"
#include "seatilt/parallel.hpp"
#include "seatilt/reader.hpp"

namespace seatilt {

/// How samples are grouped.
enum class ClimatologyPeriod {
  all,     ///< one period: the whole record
  month,   ///< 12 periods, January = 0
  season,  ///< 4 periods: DJF = 0, MAM = 1, JJA = 2, SON = 3
};

/// Parses "all", "month", "season"; throws UsageError naming --by otherwise.
ClimatologyPeriod parse_climatology_period(const std::string& text);
/// Returns "all", "month" or "season".
const char* to_string(ClimatologyPeriod period);
/// Returns the number of periods: 1, 12 or 4.
std::size_t period_count(ClimatologyPeriod period);
/// Returns the period index of calendar month MONTH (1..12): all -> 0;
/// month -> MONTH - 1; season -> DJF 0, MAM 1, JJA 2, SON 3. Throws
/// std::invalid_argument for a month outside 1..12.
std::size_t period_index(ClimatologyPeriod period, int month);
/// Returns a label: "all", "January".."December", "DJF", "MAM", "JJA", "SON".
std::string period_label(ClimatologyPeriod period, std::size_t index);

/// A calendar date (day resolution), ordered by (year, month, day).
struct Ymd {
  int year = 0, month = 1, day = 1;
  friend bool operator<(const Ymd& a, const Ymd& b) {
    if (a.year != b.year) return a.year < b.year;
    if (a.month != b.month) return a.month < b.month;
    return a.day < b.day;
  }
  friend bool operator==(const Ymd& a, const Ymd& b) {
    return a.year == b.year && a.month == b.month && a.day == b.day;
  }
  /// Formats as "YYYY-MM-DD".
  [[nodiscard]] std::string iso() const;
};

/// Parses "YYYY-MM-DD" (month 1..12, day 1..31; the calendar is checked
/// later); throws UsageError naming OPTION.
Ymd parse_ymd(const std::string& text, const std::string& option);

/// Returns the canonical CF name of CALENDAR: standard (also "gregorian" and
/// ""), proleptic_gregorian, julian, noleap (also 365_day), all_leap (also
/// 366_day), 360_day; case-insensitive. Throws std::invalid_argument otherwise.
std::string canonical_calendar(const std::string& calendar);

/// Returns a day number of DATE on CALENDAR (canonical name): consecutive
/// days differ by 1, so differences count days between dates. standard is
/// Julian up to 1582-10-04 and Gregorian from 1582-10-15 (CF 4.4.1). Throws
/// std::invalid_argument for a date that does not exist in the calendar
/// (02-30, 02-29 of a common year, 1582-10-10 standard) or a year < 1 in
/// standard/julian.
long long calendar_day_number(const std::string& calendar, const Ymd& date);

/// Accumulated moments per cell for P periods of a grid of C cells; index
/// p * C + c. Counts are exact integers; means and sums in double.
struct MomentGrid {
  std::size_t periods = 0, cells = 0;
  std::vector<std::uint32_t> count;            ///< samples with finite u and v
  std::vector<double> mean_u, mean_v;          ///< m s-1
  std::vector<double> mean_speed;              ///< m s-1, mean of sqrt(u^2 + v^2)
  std::vector<double> m2_u, m2_v;              ///< sums of squared deviations, m2 s-2
  std::vector<double> comoment_uv;             ///< sum of products of deviations, m2 s-2
  std::vector<std::uint32_t> count_vorticity;  ///< samples with finite vorticity
  std::vector<double> mean_vorticity;          ///< s-1

  MomentGrid() = default;
  /// Zero moments for PERIODS x CELLS.
  MomentGrid(std::size_t periods, std::size_t cells);

  /// Adds one sample of N cells starting at cell C0 of period P (Welford [1]).
  /// U, V (m s-1) and VORTICITY (s-1) point to N values; a cell counts when u
  /// and v are both finite; vorticity is counted separately when finite.
  /// VORTICITY may be null. Cells are independent (OpenMP over cells).
  /// Throws std::out_of_range when the cells or period are outside the grid
  /// and std::overflow_error when a count would exceed 2^32 - 1.
  void add(std::size_t p, std::size_t c0, std::size_t n, const double* u, const double* v,
           const double* vorticity);

  /// Merges OTHER into this (Chan et al. [2] pairwise update). Throws
  /// std::invalid_argument when the shapes differ.
  void merge(const MomentGrid& other);
};

/// The statistics of one cell and period (population moments). NaN where
/// undefined (no sample; direction of isotropic variance).
struct CellStatistics {
  std::uint32_t count = 0;
  double u_mean, v_mean, speed_mean;  ///< m s-1
  double u_var, v_var, uv_cov, eke;   ///< m2 s-2
  double major_std, minor_std;        ///< m s-1
  double major_direction_deg;         ///< degrees counter-clockwise from east, (-90, 90]
  double vorticity_mean;              ///< s-1
};

/// Returns the statistics at index I (p * cells + c) of MOMENTS.
CellStatistics cell_statistics(const MomentGrid& moments, std::size_t i);

/// Principal axes of a 2x2 velocity covariance (see the top of this file).
struct PrincipalAxes {
  double major_std, minor_std;  ///< m s-1
  double direction_deg;  ///< major axis, counter-clockwise from east, (-90, 90]; NaN if isotropic
};
/// Returns the principal axes of [[U_VAR, UV_COV], [UV_COV, V_VAR]] (m2 s-2).
/// The variance counts as isotropic (direction NaN) when the eigenvalue
/// difference is at most 1e-12 of their sum, or both are zero.
PrincipalAxes principal_axes(double u_var, double v_var, double uv_cov);

/// Bookkeeping of one period: how many time steps fell into it, and the
/// first and last dates seen (for the climatology bounds).
struct PeriodRecord {
  std::uint64_t steps = 0;
  std::optional<Ymd> first, last;
};

/// The whole accumulator state of a climatology run, as written by
/// write_partial and combined by merge. An empty state (no input yet) has
/// inputs == 0 and no grid.
struct ClimatologyState {
  ClimatologyPeriod period = ClimatologyPeriod::all;
  std::string calendar;  ///< canonical CF calendar of every input
  HeightKind kind = HeightKind::absolute;
  /// Geostrophy settings the velocities came from, as the global attributes
  /// of a `currents` output (geostrophy_stencil_order, ..._equator_method,
  /// ..._equator_band_deg, ..._coast_method, ..._earth_model, ..._gravity).
  std::vector<Attribute> settings;
  CoordVar lat, lon;                  ///< grid of the first input (values and attributes)
  std::vector<PeriodRecord> records;  ///< one per period
  MomentGrid moments;
  std::uint64_t inputs = 0;  ///< files accumulated (over all partials)
  std::string first_input;   ///< the first of them (for messages)

  [[nodiscard]] bool empty() const { return inputs == 0; }

  /// Merges OTHER into this. An empty side is the identity (an empty this
  /// takes OTHER over: pass it with std::move to avoid copying the arrays).
  /// Throws InputError naming OTHER_NAME and THIS_NAME (default: the first
  /// inputs) when the period kind, calendar, height kind, settings or grid
  /// (coordinate values, 1e-4 degree tolerance) differ.
  void merge(ClimatologyState other, const std::string& other_name = "",
             const std::string& this_name = "");
};

/// Options of the accumulation.
struct ClimatologyJob {
  ReaderOptions reader;     ///< for height inputs (--variable, --units)
  CurrentsOptions options;  ///< for height inputs
  ClimatologyPeriod period = ClimatologyPeriod::all;
  std::optional<Ymd> from, to;            ///< inclusive date selection
  std::size_t memory_bytes = 256u << 20;  ///< row-band budget for height inputs
};

/// What an input is.
enum class ClimatologyInput {
  height,    ///< sea-surface height: currents computed on the fly
  currents,  ///< a seatilt `currents` output (u, v with the geostrophic
             ///< standard names, or a geostrophy_stencil_order attribute)
};

/// Returns what PATH holds (height when it cannot be opened: the Reader then
/// reports why).
ClimatologyInput detect_climatology_input(const std::string& path);

/// Adds every selected time step of PATH to STATE (empty: takes the grid,
/// calendar and settings from PATH). Height inputs go through the geostrophic
/// and kinematics kernels in row bands with the job's options; currents
/// inputs are read (their vorticity computed with their own settings when
/// absent). Throws InputError for an unreadable input, a time step whose
/// heights (or velocities) are all missing, an input without a time
/// coordinate, an unknown calendar, or an input whose grid, calendar, height
/// kind or settings differ from STATE's; UsageError for bad options.
void accumulate(const std::string& path, const ClimatologyJob& job, ClimatologyState& state);

/// How to write the final statistics.
struct ClimatologyOutputOptions {
  std::string path;
  double min_valid = 0.0;  ///< 0..1: mask cells whose count / steps is below this
  int deflate = 1;         ///< 0..9
  bool force = false;
  std::string command_line;  ///< for history
};

/// Checks that PATH can be created (folder exists and is writable, PATH is
/// not a folder, and absent unless FORCE). Throws OutputError.
void check_output_target(const std::string& path, bool force);

/// Writes the CF climatology of STATE (see docs/climatology.md for the
/// layout). Throws InputError when STATE holds no sample; OutputError when
/// the file cannot be written (nothing is left at the path); UsageError for
/// min_valid outside 0..1 or deflate outside 0..9.
void write_climatology(const ClimatologyState& state, const ClimatologyOutputOptions& out);

/// Writes STATE as a partial-state file (doubles, exact). Throws like
/// write_climatology (an empty state cannot be written).
void write_partial(const ClimatologyState& state, const ClimatologyOutputOptions& out);

/// Returns true when PATH is a seatilt partial-state file.
bool is_partial_file(const std::string& path);

/// Reads a partial-state file. Throws InputError when PATH is not one, was
/// written by an incompatible format version, or is damaged.
ClimatologyState read_partial(const std::string& path);

/// An error met while reducing states over ranks (code 0 = none).
struct ReduceFailure {
  int code = 0;         ///< exit code (ExitCode), 0 when the reduction succeeded
  std::string message;  ///< one line, as Error::what()
};

/// Collective over SESSION's ranks. Reduces every rank's STATE into rank 0's
/// along a binary tree (rank r receives from r + 1, r + 2, r + 4, ... and
/// merges with ClimatologyState::merge). On rank 0 STATE then holds the
/// result; on the other ranks it is left empty. Returns the first failure
/// (incompatible states), valid on rank 0; never throws seatilt errors, so
/// that every rank reaches the end of the collective. Serial sessions return
/// at once.
ReduceFailure reduce_states(const ParallelSession& session, ClimatologyState& state);

}  // namespace seatilt
