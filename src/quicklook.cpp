// quicklook.cpp — PNG quick-look maps (see quicklook.hpp).
//
// Steps of a map:
//   1. read_map_data: the field of one time step (Reader for heights,
//      netCDF-C for everything else), optionally u and v;
//   2. write_quicklook: check the output path, lay out the page, look up the
//      grid cell under each map pixel, colour it, draw graticule, frame,
//      labels, colour bar, arrows and legend with Cairo, write the PNG to a
//      temporary sibling and rename it.
//
// Notation: ny, nx = rows (latitude) and columns (longitude) of the grid in
// file order; (px, py) = pixel column and row, origin top-left, y down;
// s = size scale of the page (width / 1000 px, at least 0.55); t = colour
// fraction 0..1 of the colour range [lo, hi]. Longitudes of a map run east
// from region.lon0 to region.lon1 and may exceed 180 or 360.
#include "seatilt/quicklook.hpp"

#include <cairo.h>
#include <fcntl.h>
#include <netcdf.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <memory>
#include <random>
#include <stdexcept>
#include <utility>

#include "seatilt/error.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/tiling.hpp"

namespace seatilt {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

// ---- colour maps ------------------------------------------------------------

/// viridis, 256 entries, sRGB 0..1. N. J. Smith, S. van der Walt, E. Firing
/// (2015), https://bids.github.io/colormap/, CC0 1.0 public-domain
/// dedication; values copied from matplotlib 3.6.3
/// lib/matplotlib/_cm_listed.py (_viridis_data), Debian python3-matplotlib
/// 3.6.3-1+b1.
constexpr double viridis[256][3] = {
    {0.267004, 0.004874, 0.329415}, {0.268510, 0.009605, 0.335427},  // 0, 1
    {0.269944, 0.014625, 0.341379}, {0.271305, 0.019942, 0.347269},  // 2, 3
    {0.272594, 0.025563, 0.353093}, {0.273809, 0.031497, 0.358853},  // 4, 5
    {0.274952, 0.037752, 0.364543}, {0.276022, 0.044167, 0.370164},  // 6, 7
    {0.277018, 0.050344, 0.375715}, {0.277941, 0.056324, 0.381191},  // 8, 9
    {0.278791, 0.062145, 0.386592}, {0.279566, 0.067836, 0.391917},  // 10, 11
    {0.280267, 0.073417, 0.397163}, {0.280894, 0.078907, 0.402329},  // 12, 13
    {0.281446, 0.084320, 0.407414}, {0.281924, 0.089666, 0.412415},  // 14, 15
    {0.282327, 0.094955, 0.417331}, {0.282656, 0.100196, 0.422160},  // 16, 17
    {0.282910, 0.105393, 0.426902}, {0.283091, 0.110553, 0.431554},  // 18, 19
    {0.283197, 0.115680, 0.436115}, {0.283229, 0.120777, 0.440584},  // 20, 21
    {0.283187, 0.125848, 0.444960}, {0.283072, 0.130895, 0.449241},  // 22, 23
    {0.282884, 0.135920, 0.453427}, {0.282623, 0.140926, 0.457517},  // 24, 25
    {0.282290, 0.145912, 0.461510}, {0.281887, 0.150881, 0.465405},  // 26, 27
    {0.281412, 0.155834, 0.469201}, {0.280868, 0.160771, 0.472899},  // 28, 29
    {0.280255, 0.165693, 0.476498}, {0.279574, 0.170599, 0.479997},  // 30, 31
    {0.278826, 0.175490, 0.483397}, {0.278012, 0.180367, 0.486697},  // 32, 33
    {0.277134, 0.185228, 0.489898}, {0.276194, 0.190074, 0.493001},  // 34, 35
    {0.275191, 0.194905, 0.496005}, {0.274128, 0.199721, 0.498911},  // 36, 37
    {0.273006, 0.204520, 0.501721}, {0.271828, 0.209303, 0.504434},  // 38, 39
    {0.270595, 0.214069, 0.507052}, {0.269308, 0.218818, 0.509577},  // 40, 41
    {0.267968, 0.223549, 0.512008}, {0.266580, 0.228262, 0.514349},  // 42, 43
    {0.265145, 0.232956, 0.516599}, {0.263663, 0.237631, 0.518762},  // 44, 45
    {0.262138, 0.242286, 0.520837}, {0.260571, 0.246922, 0.522828},  // 46, 47
    {0.258965, 0.251537, 0.524736}, {0.257322, 0.256130, 0.526563},  // 48, 49
    {0.255645, 0.260703, 0.528312}, {0.253935, 0.265254, 0.529983},  // 50, 51
    {0.252194, 0.269783, 0.531579}, {0.250425, 0.274290, 0.533103},  // 52, 53
    {0.248629, 0.278775, 0.534556}, {0.246811, 0.283237, 0.535941},  // 54, 55
    {0.244972, 0.287675, 0.537260}, {0.243113, 0.292092, 0.538516},  // 56, 57
    {0.241237, 0.296485, 0.539709}, {0.239346, 0.300855, 0.540844},  // 58, 59
    {0.237441, 0.305202, 0.541921}, {0.235526, 0.309527, 0.542944},  // 60, 61
    {0.233603, 0.313828, 0.543914}, {0.231674, 0.318106, 0.544834},  // 62, 63
    {0.229739, 0.322361, 0.545706}, {0.227802, 0.326594, 0.546532},  // 64, 65
    {0.225863, 0.330805, 0.547314}, {0.223925, 0.334994, 0.548053},  // 66, 67
    {0.221989, 0.339161, 0.548752}, {0.220057, 0.343307, 0.549413},  // 68, 69
    {0.218130, 0.347432, 0.550038}, {0.216210, 0.351535, 0.550627},  // 70, 71
    {0.214298, 0.355619, 0.551184}, {0.212395, 0.359683, 0.551710},  // 72, 73
    {0.210503, 0.363727, 0.552206}, {0.208623, 0.367752, 0.552675},  // 74, 75
    {0.206756, 0.371758, 0.553117}, {0.204903, 0.375746, 0.553533},  // 76, 77
    {0.203063, 0.379716, 0.553925}, {0.201239, 0.383670, 0.554294},  // 78, 79
    {0.199430, 0.387607, 0.554642}, {0.197636, 0.391528, 0.554969},  // 80, 81
    {0.195860, 0.395433, 0.555276}, {0.194100, 0.399323, 0.555565},  // 82, 83
    {0.192357, 0.403199, 0.555836}, {0.190631, 0.407061, 0.556089},  // 84, 85
    {0.188923, 0.410910, 0.556326}, {0.187231, 0.414746, 0.556547},  // 86, 87
    {0.185556, 0.418570, 0.556753}, {0.183898, 0.422383, 0.556944},  // 88, 89
    {0.182256, 0.426184, 0.557120}, {0.180629, 0.429975, 0.557282},  // 90, 91
    {0.179019, 0.433756, 0.557430}, {0.177423, 0.437527, 0.557565},  // 92, 93
    {0.175841, 0.441290, 0.557685}, {0.174274, 0.445044, 0.557792},  // 94, 95
    {0.172719, 0.448791, 0.557885}, {0.171176, 0.452530, 0.557965},  // 96, 97
    {0.169646, 0.456262, 0.558030}, {0.168126, 0.459988, 0.558082},  // 98, 99
    {0.166617, 0.463708, 0.558119}, {0.165117, 0.467423, 0.558141},  // 100, 101
    {0.163625, 0.471133, 0.558148}, {0.162142, 0.474838, 0.558140},  // 102, 103
    {0.160665, 0.478540, 0.558115}, {0.159194, 0.482237, 0.558073},  // 104, 105
    {0.157729, 0.485932, 0.558013}, {0.156270, 0.489624, 0.557936},  // 106, 107
    {0.154815, 0.493313, 0.557840}, {0.153364, 0.497000, 0.557724},  // 108, 109
    {0.151918, 0.500685, 0.557587}, {0.150476, 0.504369, 0.557430},  // 110, 111
    {0.149039, 0.508051, 0.557250}, {0.147607, 0.511733, 0.557049},  // 112, 113
    {0.146180, 0.515413, 0.556823}, {0.144759, 0.519093, 0.556572},  // 114, 115
    {0.143343, 0.522773, 0.556295}, {0.141935, 0.526453, 0.555991},  // 116, 117
    {0.140536, 0.530132, 0.555659}, {0.139147, 0.533812, 0.555298},  // 118, 119
    {0.137770, 0.537492, 0.554906}, {0.136408, 0.541173, 0.554483},  // 120, 121
    {0.135066, 0.544853, 0.554029}, {0.133743, 0.548535, 0.553541},  // 122, 123
    {0.132444, 0.552216, 0.553018}, {0.131172, 0.555899, 0.552459},  // 124, 125
    {0.129933, 0.559582, 0.551864}, {0.128729, 0.563265, 0.551229},  // 126, 127
    {0.127568, 0.566949, 0.550556}, {0.126453, 0.570633, 0.549841},  // 128, 129
    {0.125394, 0.574318, 0.549086}, {0.124395, 0.578002, 0.548287},  // 130, 131
    {0.123463, 0.581687, 0.547445}, {0.122606, 0.585371, 0.546557},  // 132, 133
    {0.121831, 0.589055, 0.545623}, {0.121148, 0.592739, 0.544641},  // 134, 135
    {0.120565, 0.596422, 0.543611}, {0.120092, 0.600104, 0.542530},  // 136, 137
    {0.119738, 0.603785, 0.541400}, {0.119512, 0.607464, 0.540218},  // 138, 139
    {0.119423, 0.611141, 0.538982}, {0.119483, 0.614817, 0.537692},  // 140, 141
    {0.119699, 0.618490, 0.536347}, {0.120081, 0.622161, 0.534946},  // 142, 143
    {0.120638, 0.625828, 0.533488}, {0.121380, 0.629492, 0.531973},  // 144, 145
    {0.122312, 0.633153, 0.530398}, {0.123444, 0.636809, 0.528763},  // 146, 147
    {0.124780, 0.640461, 0.527068}, {0.126326, 0.644107, 0.525311},  // 148, 149
    {0.128087, 0.647749, 0.523491}, {0.130067, 0.651384, 0.521608},  // 150, 151
    {0.132268, 0.655014, 0.519661}, {0.134692, 0.658636, 0.517649},  // 152, 153
    {0.137339, 0.662252, 0.515571}, {0.140210, 0.665859, 0.513427},  // 154, 155
    {0.143303, 0.669459, 0.511215}, {0.146616, 0.673050, 0.508936},  // 156, 157
    {0.150148, 0.676631, 0.506589}, {0.153894, 0.680203, 0.504172},  // 158, 159
    {0.157851, 0.683765, 0.501686}, {0.162016, 0.687316, 0.499129},  // 160, 161
    {0.166383, 0.690856, 0.496502}, {0.170948, 0.694384, 0.493803},  // 162, 163
    {0.175707, 0.697900, 0.491033}, {0.180653, 0.701402, 0.488189},  // 164, 165
    {0.185783, 0.704891, 0.485273}, {0.191090, 0.708366, 0.482284},  // 166, 167
    {0.196571, 0.711827, 0.479221}, {0.202219, 0.715272, 0.476084},  // 168, 169
    {0.208030, 0.718701, 0.472873}, {0.214000, 0.722114, 0.469588},  // 170, 171
    {0.220124, 0.725509, 0.466226}, {0.226397, 0.728888, 0.462789},  // 172, 173
    {0.232815, 0.732247, 0.459277}, {0.239374, 0.735588, 0.455688},  // 174, 175
    {0.246070, 0.738910, 0.452024}, {0.252899, 0.742211, 0.448284},  // 176, 177
    {0.259857, 0.745492, 0.444467}, {0.266941, 0.748751, 0.440573},  // 178, 179
    {0.274149, 0.751988, 0.436601}, {0.281477, 0.755203, 0.432552},  // 180, 181
    {0.288921, 0.758394, 0.428426}, {0.296479, 0.761561, 0.424223},  // 182, 183
    {0.304148, 0.764704, 0.419943}, {0.311925, 0.767822, 0.415586},  // 184, 185
    {0.319809, 0.770914, 0.411152}, {0.327796, 0.773980, 0.406640},  // 186, 187
    {0.335885, 0.777018, 0.402049}, {0.344074, 0.780029, 0.397381},  // 188, 189
    {0.352360, 0.783011, 0.392636}, {0.360741, 0.785964, 0.387814},  // 190, 191
    {0.369214, 0.788888, 0.382914}, {0.377779, 0.791781, 0.377939},  // 192, 193
    {0.386433, 0.794644, 0.372886}, {0.395174, 0.797475, 0.367757},  // 194, 195
    {0.404001, 0.800275, 0.362552}, {0.412913, 0.803041, 0.357269},  // 196, 197
    {0.421908, 0.805774, 0.351910}, {0.430983, 0.808473, 0.346476},  // 198, 199
    {0.440137, 0.811138, 0.340967}, {0.449368, 0.813768, 0.335384},  // 200, 201
    {0.458674, 0.816363, 0.329727}, {0.468053, 0.818921, 0.323998},  // 202, 203
    {0.477504, 0.821444, 0.318195}, {0.487026, 0.823929, 0.312321},  // 204, 205
    {0.496615, 0.826376, 0.306377}, {0.506271, 0.828786, 0.300362},  // 206, 207
    {0.515992, 0.831158, 0.294279}, {0.525776, 0.833491, 0.288127},  // 208, 209
    {0.535621, 0.835785, 0.281908}, {0.545524, 0.838039, 0.275626},  // 210, 211
    {0.555484, 0.840254, 0.269281}, {0.565498, 0.842430, 0.262877},  // 212, 213
    {0.575563, 0.844566, 0.256415}, {0.585678, 0.846661, 0.249897},  // 214, 215
    {0.595839, 0.848717, 0.243329}, {0.606045, 0.850733, 0.236712},  // 216, 217
    {0.616293, 0.852709, 0.230052}, {0.626579, 0.854645, 0.223353},  // 218, 219
    {0.636902, 0.856542, 0.216620}, {0.647257, 0.858400, 0.209861},  // 220, 221
    {0.657642, 0.860219, 0.203082}, {0.668054, 0.861999, 0.196293},  // 222, 223
    {0.678489, 0.863742, 0.189503}, {0.688944, 0.865448, 0.182725},  // 224, 225
    {0.699415, 0.867117, 0.175971}, {0.709898, 0.868751, 0.169257},  // 226, 227
    {0.720391, 0.870350, 0.162603}, {0.730889, 0.871916, 0.156029},  // 228, 229
    {0.741388, 0.873449, 0.149561}, {0.751884, 0.874951, 0.143228},  // 230, 231
    {0.762373, 0.876424, 0.137064}, {0.772852, 0.877868, 0.131109},  // 232, 233
    {0.783315, 0.879285, 0.125405}, {0.793760, 0.880678, 0.120005},  // 234, 235
    {0.804182, 0.882046, 0.114965}, {0.814576, 0.883393, 0.110347},  // 236, 237
    {0.824940, 0.884720, 0.106217}, {0.835270, 0.886029, 0.102646},  // 238, 239
    {0.845561, 0.887322, 0.099702}, {0.855810, 0.888601, 0.097452},  // 240, 241
    {0.866013, 0.889868, 0.095953}, {0.876168, 0.891125, 0.095250},  // 242, 243
    {0.886271, 0.892374, 0.095374}, {0.896320, 0.893616, 0.096335},  // 244, 245
    {0.906311, 0.894855, 0.098125}, {0.916242, 0.896091, 0.100717},  // 246, 247
    {0.926106, 0.897330, 0.104071}, {0.935904, 0.898570, 0.108131},  // 248, 249
    {0.945636, 0.899815, 0.112838}, {0.955300, 0.901065, 0.118128},  // 250, 251
    {0.964894, 0.902323, 0.123941}, {0.974417, 0.903590, 0.130215},  // 252, 253
    {0.983868, 0.904867, 0.136897}, {0.993248, 0.906157, 0.143936},  // 254, 255
};

/// ColorBrewer RdBu, 11 classes, 8-bit sRGB, from dark red to dark blue.
/// Cynthia Brewer, https://colorbrewer2.org/ ("This product includes color
/// specifications and designs developed by Cynthia Brewer
/// (http://colorbrewer.org/)", Apache-style ColorBrewer licence); the same
/// values, divided by 255, are matplotlib 3.6.3 _cm.py _RdBu_data.
constexpr std::uint8_t rdbu[11][3] = {{103, 0, 31},    {178, 24, 43},   {214, 96, 77},
                                      {244, 165, 130}, {253, 219, 199}, {247, 247, 247},
                                      {209, 229, 240}, {146, 197, 222}, {67, 147, 195},
                                      {33, 102, 172},  {5, 48, 97}};

std::uint8_t to_byte(double x) {
  return static_cast<std::uint8_t>(std::lround(std::clamp(x, 0.0, 1.0) * 255.0));
}

std::uint8_t lerp_byte(std::uint8_t a, std::uint8_t b, double f) {
  return static_cast<std::uint8_t>(std::lround(a + f * (static_cast<double>(b) - a)));
}

// ---- small text helpers ---------------------------------------------------------

std::string trim(const std::string& s) {
  const auto b = s.find_first_not_of(" \t\r\n");
  if (b == std::string::npos) return {};
  return s.substr(b, s.find_last_not_of(" \t\r\n") - b + 1);
}

std::string lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

std::string join(const std::vector<std::string>& items, const char* sep) {
  std::string out;
  for (std::size_t k = 0; k < items.size(); ++k) out += (k ? sep : "") + items[k];
  return out;
}

std::string base_name(const std::string& path) {
  const auto slash = path.rfind('/');
  return slash == std::string::npos ? path : path.substr(slash + 1);
}

/// Parses a whole string as a finite double; false otherwise.
bool parse_number(const std::string& text, double& value) {
  const std::string t = trim(text);
  if (t.empty()) return false;
  char* end = nullptr;
  errno = 0;
  value = std::strtod(t.c_str(), &end);
  return end == t.c_str() + t.size() && errno != ERANGE && std::isfinite(value);
}

std::vector<std::string> split_commas(const std::string& text) {
  std::vector<std::string> parts;
  std::string item;
  for (char c : text) {
    if (c == ',') {
      parts.push_back(item);
      item.clear();
    } else {
      item += c;
    }
  }
  parts.push_back(item);
  return parts;
}

// ---- netCDF-C reading of a non-height variable ([1] 2.5.1, 4.1-4.4, 8.1) ------

/// Open netCDF file, closed on destruction.
class NcFile {
 public:
  explicit NcFile(const std::string& path) : path_(path) {
    const int status = nc_open(path.c_str(), NC_NOWRITE, &id_);
    if (status != NC_NOERR) {
      id_ = -1;
      throw InputError(input_message(
          path, "", std::string("cannot be opened as netCDF (") + nc_strerror(status) + ")"));
    }
  }
  ~NcFile() {
    if (id_ >= 0) nc_close(id_);
  }
  NcFile(const NcFile&) = delete;
  NcFile& operator=(const NcFile&) = delete;
  [[nodiscard]] int id() const { return id_; }
  [[nodiscard]] const std::string& path() const { return path_; }
  /// Throws InputError naming VAR when STATUS is a netCDF error.
  void check(int status, const std::string& var, const std::string& action) const {
    if (status != NC_NOERR)
      throw InputError(input_message(path_, var, action + " (" + nc_strerror(status) + ")"));
  }

 private:
  std::string path_;
  int id_ = -1;
};

bool numeric_type(nc_type t) {
  return t == NC_BYTE || t == NC_UBYTE || t == NC_SHORT || t == NC_USHORT || t == NC_INT ||
         t == NC_UINT || t == NC_INT64 || t == NC_UINT64 || t == NC_FLOAT || t == NC_DOUBLE;
}

/// Text attribute (NC_CHAR, or NC_STRING joined with ", "); "" when absent.
std::string text_att(int ncid, int varid, const char* name) {
  nc_type t = NC_NAT;
  std::size_t len = 0;
  if (nc_inq_att(ncid, varid, name, &t, &len) != NC_NOERR) return {};
  if (t == NC_CHAR) {
    std::string s(len, '\0');
    if (len && nc_get_att_text(ncid, varid, name, s.data()) != NC_NOERR) return {};
    while (!s.empty() && s.back() == '\0') s.pop_back();
    return trim(s);
  }
  if (t == NC_STRING && len > 0) {
    std::vector<char*> p(len, nullptr);
    if (nc_get_att_string(ncid, varid, name, p.data()) != NC_NOERR) return {};
    std::vector<std::string> parts;
    for (char* c : p) parts.emplace_back(c ? c : "");
    nc_free_string(len, p.data());
    return trim(join(parts, ", "));
  }
  return {};
}

/// Numeric attribute values; empty when absent or not numeric. TYPE gets its nc_type.
std::vector<double> number_att(int ncid, int varid, const char* name, nc_type* type = nullptr) {
  nc_type t = NC_NAT;
  std::size_t len = 0;
  if (nc_inq_att(ncid, varid, name, &t, &len) != NC_NOERR || !numeric_type(t) || len == 0)
    return {};
  std::vector<double> v(len);
  if (nc_get_att_double(ncid, varid, name, v.data()) != NC_NOERR) return {};
  if (type) *type = t;
  return v;
}

bool has_att(int ncid, int varid, const char* name) {
  return nc_inq_attid(ncid, varid, name, nullptr) == NC_NOERR;
}

bool is_lat_units(const std::string& u) {
  const std::string s = lower(u);
  return s == "degrees_north" || s == "degree_north" || s == "degree_n" || s == "degrees_n" ||
         s == "degreen" || s == "degreesn";
}

bool is_lon_units(const std::string& u) {
  const std::string s = lower(u);
  return s == "degrees_east" || s == "degree_east" || s == "degree_e" || s == "degrees_e" ||
         s == "degreee" || s == "degreese";
}

/// A variable of an open file.
struct NcVar {
  int id = -1;
  std::string name;
  nc_type type = NC_NAT;
  std::vector<int> dims;
};

NcVar inquire(const NcFile& f, int varid) {
  NcVar v;
  v.id = varid;
  char name[NC_MAX_NAME + 1] = {0};
  int ndims = 0;
  f.check(nc_inq_var(f.id(), varid, name, &v.type, &ndims, nullptr, nullptr), "",
          "cannot read a variable");
  v.name = name;
  v.dims.resize(static_cast<std::size_t>(ndims));
  if (ndims)
    f.check(nc_inq_vardimid(f.id(), varid, v.dims.data()), v.name, "cannot read its dimensions");
  return v;
}

std::optional<NcVar> find_var(const NcFile& f, const std::string& name) {
  int varid = -1;
  if (nc_inq_varid(f.id(), name.c_str(), &varid) != NC_NOERR) return std::nullopt;
  return inquire(f, varid);
}

std::string dim_name(const NcFile& f, int dim) {
  char name[NC_MAX_NAME + 1] = {0};
  f.check(nc_inq_dimname(f.id(), dim, name), "", "cannot read a dimension");
  return name;
}

std::size_t dim_length(const NcFile& f, int dim) {
  std::size_t n = 0;
  f.check(nc_inq_dimlen(f.id(), dim, &n), "", "cannot read a dimension");
  return n;
}

/// The CF coordinate variable of dimension DIM (1-D, same name) [1] 4; nullopt when absent.
std::optional<NcVar> coordinate_of(const NcFile& f, int dim) {
  auto v = find_var(f, dim_name(f, dim));
  if (!v || v->dims.size() != 1 || v->dims[0] != dim || !numeric_type(v->type)) return std::nullopt;
  return v;
}

enum class AxisKind { none, lat, lon };

AxisKind axis_kind(const NcFile& f, const NcVar& c) {
  const std::string units = text_att(f.id(), c.id, "units");
  const std::string sn = text_att(f.id(), c.id, "standard_name");
  const std::string axis = lower(text_att(f.id(), c.id, "axis"));
  const bool degrees = lower(units).rfind("degree", 0) == 0;
  if (is_lat_units(units) || sn == "latitude" || (axis == "y" && degrees)) return AxisKind::lat;
  if (is_lon_units(units) || sn == "longitude" || (axis == "x" && degrees)) return AxisKind::lon;
  return AxisKind::none;
}

/// Values of a 1-D coordinate, unpacked with scale_factor/add_offset [1] 8.1.
std::vector<double> read_coordinate(const NcFile& f, const NcVar& c) {
  std::vector<double> values(dim_length(f, c.dims[0]));
  if (!values.empty())
    f.check(nc_get_var_double(f.id(), c.id, values.data()), c.name, "cannot read values");
  const auto sf = number_att(f.id(), c.id, "scale_factor");
  const auto ao = number_att(f.id(), c.id, "add_offset");
  for (double& x : values) x = x * (sf.empty() ? 1.0 : sf[0]) + (ao.empty() ? 0.0 : ao[0]);
  return values;
}

/// Where a variable's (lat, lon) and optional time dimension are.
struct Layout {
  std::vector<double> lat, lon;
  int lat_dim = -1, lon_dim = -1;
  std::size_t nt = 1;
  bool has_time_dim = false;        ///< the dimension before lat
  std::optional<NcVar> time_coord;  ///< its coordinate variable, when it has one
};

/// True when VAR ends in two dimensions whose coordinate variables are
/// latitude and longitude.
bool on_lat_lon(const NcFile& f, const NcVar& var) {
  const std::size_t n = var.dims.size();
  if (n < 2 || !numeric_type(var.type)) return false;
  const auto la = coordinate_of(f, var.dims[n - 2]);
  const auto lo = coordinate_of(f, var.dims[n - 1]);
  return la && lo && axis_kind(f, *la) == AxisKind::lat && axis_kind(f, *lo) == AxisKind::lon;
}

std::string dims_text(const NcFile& f, const std::vector<int>& dims) {
  std::vector<std::string> parts;
  for (int d : dims) parts.push_back(dim_name(f, d) + "=" + std::to_string(dim_length(f, d)));
  return "(" + join(parts, ", ") + ")";
}

/// The layout of VAR whose last two dimensions hold ROWS x COLUMNS cells
/// (coordinate values, or indices): checks that only the dimension before
/// them may be longer than 1 and takes it as time.
Layout layout_with(const NcFile& f, const NcVar& var, std::vector<double> rows,
                   std::vector<double> columns) {
  if (!numeric_type(var.type))
    throw InputError(input_message(f.path(), var.name, "is not numeric"));
  const std::size_t n = var.dims.size();
  for (std::size_t k = 0; k + 3 < n; ++k)
    if (dim_length(f, var.dims[k]) != 1)
      throw InputError(input_message(f.path(), var.name,
                                     "dimensions " + dims_text(f, var.dims) +
                                         ": only the one before latitude may be longer than 1"));
  Layout l;
  l.lat_dim = var.dims[n - 2];
  l.lon_dim = var.dims[n - 1];
  l.lat = std::move(rows);
  l.lon = std::move(columns);
  if (l.lat.size() != dim_length(f, l.lat_dim) || l.lon.size() != dim_length(f, l.lon_dim))
    throw InputError(input_message(
        f.path(), var.name,
        "dimensions " + dims_text(f, var.dims) + " do not match the grid of the map"));
  if (n >= 3) {
    l.has_time_dim = true;
    l.nt = dim_length(f, var.dims[n - 3]);
    l.time_coord = coordinate_of(f, var.dims[n - 3]);
    if (l.nt == 0) throw InputError(input_message(f.path(), var.name, "has no time steps"));
  }
  return l;
}

Layout resolve_layout(const NcFile& f, const NcVar& var) {
  if (!numeric_type(var.type))
    throw InputError(input_message(f.path(), var.name, "is not numeric"));
  const std::size_t n = var.dims.size();
  if (!on_lat_lon(f, var))
    throw InputError(input_message(
        f.path(), var.name,
        "dimensions " + dims_text(f, var.dims) +
            " do not end in latitude, longitude (CF coordinate variables with units "
            "degrees_north and degrees_east) nor in projected y, x with a grid_mapping or 2-D "
            "latitude/longitude in its coordinates attribute; a map needs (lat, lon) or "
            "(time, lat, lon)"));
  return layout_with(f, var, read_coordinate(f, *coordinate_of(f, var.dims[n - 2])),
                     read_coordinate(f, *coordinate_of(f, var.dims[n - 1])));
}

/// True when VAR may lie on a projected or curvilinear grid: at least two
/// dimensions and a grid_mapping or coordinates attribute (CF 5.2, 5.6).
bool maybe_plane(const NcFile& f, const NcVar& var) {
  return var.dims.size() >= 2 && numeric_type(var.type) &&
         (has_att(f.id(), var.id, "grid_mapping") || has_att(f.id(), var.id, "coordinates"));
}

/// Reads time step T of VAR (layout L) as ny x nx doubles, NaN where missing:
/// _FillValue (else the netCDF default fill of the type; none for bytes),
/// missing_value, outside valid_min/valid_max/valid_range, non-finite;
/// then unpacked, value * scale_factor + add_offset ([1] 2.5.1, 8.1). Missing
/// values are compared in the storage type (float attributes at float
/// precision).
Field read_step(const NcFile& f, const NcVar& var, const Layout& l, std::size_t t) {
  const std::size_t n = var.dims.size();
  std::vector<std::size_t> start(n, 0), count(n, 1);
  if (l.has_time_dim) start[n - 3] = t;
  count[n - 2] = l.lat.size();
  count[n - 1] = l.lon.size();
  Field out(l.lat.size(), l.lon.size());
  f.check(nc_get_vara_double(f.id(), var.id, start.data(), count.data(), out.data.data()), var.name,
          "cannot read time step " + std::to_string(t));

  const int id = f.id();
  const auto raw_value = [&](double v) {
    return var.type == NC_FLOAT ? static_cast<double>(static_cast<float>(v)) : v;
  };
  std::optional<double> fill;
  if (const auto a = number_att(id, var.id, "_FillValue"); !a.empty()) {
    fill = raw_value(a[0]);
  } else {
    switch (var.type) {  // netcdf.h NC_FILL_*; byte types have no default fill
      case NC_SHORT:
        fill = NC_FILL_SHORT;
        break;
      case NC_USHORT:
        fill = NC_FILL_USHORT;
        break;
      case NC_INT:
        fill = NC_FILL_INT;
        break;
      case NC_UINT:
        fill = NC_FILL_UINT;
        break;
      case NC_FLOAT:
        fill = static_cast<double>(NC_FILL_FLOAT);
        break;
      case NC_DOUBLE:
        fill = NC_FILL_DOUBLE;
        break;
      default:
        break;
    }
  }
  std::vector<double> missing;
  for (double v : number_att(id, var.id, "missing_value")) missing.push_back(raw_value(v));
  double lo = -std::numeric_limits<double>::infinity(), hi = -lo;
  if (const auto r = number_att(id, var.id, "valid_range"); r.size() == 2) {
    lo = raw_value(r[0]);
    hi = raw_value(r[1]);
  } else {
    if (const auto a = number_att(id, var.id, "valid_min"); !a.empty()) lo = raw_value(a[0]);
    if (const auto a = number_att(id, var.id, "valid_max"); !a.empty()) hi = raw_value(a[0]);
  }
  const auto sfv = number_att(id, var.id, "scale_factor");
  const auto aov = number_att(id, var.id, "add_offset");
  const double sf = sfv.empty() ? 1.0 : sfv[0], ao = aov.empty() ? 0.0 : aov[0];
  for (double& v : out.data) {
    // NaN-safe: !(lo <= v && v <= hi) holds for NaN.
    bool gone = !std::isfinite(v) || !(lo <= v && v <= hi) || (fill && v == *fill);
    for (double m : missing) gone = gone || v == m;
    v = gone ? nan : v * sf + ao;  // [1] 8.1
  }
  return out;
}

/// ISO 8601 date of time step T, "" without a decodable time coordinate.
std::string step_date(const NcFile& f, const Layout& l, std::size_t t) {
  if (!l.time_coord) return {};
  const std::string units = text_att(f.id(), l.time_coord->id, "units");
  std::string calendar = text_att(f.id(), l.time_coord->id, "calendar");
  try {
    const std::vector<double> values = read_coordinate(f, *l.time_coord);
    return decode_cf_time(values.at(t), units, calendar).iso();
  } catch (const std::exception&) {
    return {};  // undecodable time: the map is still useful without its date
  }
}

/// Names of the variables of F that can be drawn.
std::vector<std::string> drawable_variables(const NcFile& f) {
  int nvars = 0;
  f.check(nc_inq_nvars(f.id(), &nvars), "", "cannot list variables");
  std::vector<std::string> names;
  for (int k = 0; k < nvars; ++k) {
    const NcVar v = inquire(f, k);
    if (v.dims.size() >= 2 && (on_lat_lon(f, v) || maybe_plane(f, v)) &&
        !has_att(f.id(), v.id, "flag_masks") && !has_att(f.id(), v.id, "flag_values"))
      names.push_back(v.name);
  }
  return names;
}

/// Colour map of a variable known by name or standard_name; nullopt when unknown.
std::optional<ColourScale> known_scale(const std::string& name, const std::string& standard_name) {
  // Names of `currents` outputs (product.cpp catalogue): signed components
  // and rates versus magnitudes.
  static const char* const signed_names[] = {
      "u", "v", "vorticity", "strain_normal", "strain_shear", "okubo_weiss"};
  static const char* const magnitude_names[] = {"speed", "strain"};
  for (const char* s : signed_names)
    if (name == s) return ColourScale::diverging;
  for (const char* s : magnitude_names)
    if (name == s) return ColourScale::sequential;
  const std::string sn = lower(standard_name);
  for (const char* s : {"eastward", "northward", "vorticity", "anomaly"})
    if (sn.find(s) != std::string::npos) return ColourScale::diverging;
  if (sn.find("speed") != std::string::npos) return ColourScale::sequential;
  return std::nullopt;
}

/// Diverging when the 2nd and 98th percentiles have opposite signs.
ColourScale scale_from_values(const Field& values) {
  std::vector<double> finite;
  for (double x : values.data)
    if (std::isfinite(x)) finite.push_back(x);
  if (finite.empty()) return ColourScale::sequential;
  const double p2 = percentile(finite, 2.0), p98 = percentile(finite, 98.0);
  return p2 < 0.0 && p98 > 0.0 ? ColourScale::diverging : ColourScale::sequential;
}

bool all_missing(const Field& f) {
  return std::none_of(f.data.begin(), f.data.end(), [](double x) { return std::isfinite(x); });
}

std::string time_beyond(std::size_t t, std::size_t nt) {
  return "--time " + std::to_string(t) + " is beyond the last time step (the file has " +
         std::to_string(nt) + ": 0.." + std::to_string(nt - 1) + ")";
}

/// The grid of a projected or curvilinear INFO (node positions, metric);
/// 2-D latitude/longitude on WGS84 (the `currents` default).
std::shared_ptr<const CurvilinearGrid> plane_grid(const HeightInfo& info) {
  return std::make_shared<const CurvilinearGrid>(make_curvilinear_grid(info, EarthModel::wgs84));
}

/// "polar_stereographic", "curvilinear", ... for titles.
std::string plane_name(const CurvilinearGrid& g) {
  return g.projection() ? g.projection()->name() : std::string("curvilinear");
}

/// Reads a height through seatilt::Reader (metres), as `currents` reads it.
MapData read_height(const std::string& path, const std::string& variable, const std::string& units,
                    std::size_t t) {
  ReaderOptions ro;
  ro.variable = variable;
  ro.units = units;
  ro.horizontal_grids = true;  // projected and curvilinear grids, as in `currents`
  std::optional<Reader> reader;
  try {
    reader.emplace(path, ro);
  } catch (const InputError& e) {
    // The Reader's advice names `currents`' option; quicklook's is --field.
    std::string m = e.what();
    for (auto p = m.find("--variable"); p != std::string::npos; p = m.find("--variable", p))
      m.replace(p, 10, "--field");
    throw InputError(m);
  }
  const HeightInfo& in = reader->info();
  MapData d;
  d.path = path;
  d.variable = in.variable;
  d.long_name = in.long_name.empty() ? in.variable : in.long_name;
  d.units = "m";
  d.scale = in.kind == HeightKind::anomaly ? ColourScale::diverging : ColourScale::sequential;
  d.grid_kind = in.grid_kind;
  if (in.grid_kind == GridKind::lat_lon) {
    d.lat_deg = in.lat.values;
    d.lon_deg = in.lon.values;
  } else {
    d.plane = plane_grid(in);
    d.grid_name = plane_name(*d.plane);
  }
  d.time_steps = in.nt;
  if (t >= in.nt) throw UsageError(input_message(path, in.variable, time_beyond(t, in.nt)));
  d.time_index = t;
  require_memory(24.0 * static_cast<double>(in.ny) * static_cast<double>(in.nx),  // map + copies
                 "the map of " + std::to_string(in.ny) + " x " + std::to_string(in.nx) + " cells",
                 path, in.variable);
  reader->read_rows(t, 0, in.ny, d.values);
  if (in.time) {
    try {
      d.date = reader->date(t).iso();
    } catch (const Error&) {
      d.date.clear();  // undecodable time: the map is still useful without its date
    }
  }
  return d;
}

}  // namespace

// ---- colour maps and ranges --------------------------------------------------------

Rgb8 colour_at(ColourScale scale, double t) {
  if (std::isnan(t)) return no_data_colour();
  t = std::clamp(t, 0.0, 1.0);
  if (scale == ColourScale::sequential) {
    // matplotlib ListedColormap lookup: entry floor(N t), N = 256, t = 1 -> N - 1.
    const auto k = std::min<std::size_t>(255, static_cast<std::size_t>(t * 256.0));
    return {to_byte(viridis[k][0]), to_byte(viridis[k][1]), to_byte(viridis[k][2])};
  }
  // RdBu reversed: t = 0 -> rdbu[10] (dark blue), t = 1 -> rdbu[0] (dark red),
  // linear in sRGB between the 11 equally spaced control points.
  const double pos = (1.0 - t) * 10.0;
  const auto k = std::min<std::size_t>(9, static_cast<std::size_t>(pos));
  const double f = pos - static_cast<double>(k);
  return {lerp_byte(rdbu[k][0], rdbu[k + 1][0], f), lerp_byte(rdbu[k][1], rdbu[k + 1][1], f),
          lerp_byte(rdbu[k][2], rdbu[k + 1][2], f)};
}

Rgb8 no_data_colour() { return {153, 153, 153}; }

double percentile(std::vector<double> values, double p) {
  if (values.empty()) throw std::invalid_argument("percentile of no values");
  if (!(p >= 0.0 && p <= 100.0)) throw std::invalid_argument("percentile outside 0..100");
  // [4] definition 7: h = (n - 1) p / 100, interpolate between order statistics.
  const double h = static_cast<double>(values.size() - 1) * p / 100.0;
  const auto k = static_cast<std::size_t>(std::floor(h));
  std::nth_element(values.begin(), values.begin() + static_cast<std::ptrdiff_t>(k), values.end());
  const double lo = values[k];
  if (k + 1 >= values.size()) return lo;
  const double hi =
      *std::min_element(values.begin() + static_cast<std::ptrdiff_t>(k + 1), values.end());
  return lo + (h - static_cast<double>(k)) * (hi - lo);
}

ValueRange robust_range(const std::vector<double>& values, ColourScale scale) {
  std::vector<double> finite;
  finite.reserve(values.size());
  for (double x : values)
    if (std::isfinite(x)) finite.push_back(x);
  if (finite.empty()) throw std::invalid_argument("no finite value to scale the colours");
  const double p2 = percentile(finite, 2.0), p98 = percentile(finite, 98.0);
  if (scale == ColourScale::diverging) {
    const double m = std::max(std::fabs(p2), std::fabs(p98));
    if (!(m > 0.0)) return {-1.0, 1.0};
    return {-m, m};
  }
  if (p98 > p2) return {p2, p98};
  const double w = std::max(std::fabs(p2) / 10.0, 1e-30);
  return {p2 - w, p2 + w};
}

// ---- option parsing ------------------------------------------------------------------

Region parse_region(const std::string& text) {
  const auto parts = split_commas(text);
  const std::string form = "--region: '" + text + "' is not LON0,LON1,LAT0,LAT1 in degrees";
  if (parts.size() != 4) throw UsageError(form);
  double v[4];
  for (std::size_t k = 0; k < 4; ++k)
    if (!parse_number(parts[k], v[k])) throw UsageError(form);
  Region r{v[0], v[1], v[2], v[3]};
  if (std::fabs(r.lon0) > 360.0 || std::fabs(r.lon1) > 360.0)
    throw UsageError("--region: longitudes must lie within -360..360 degrees");
  if (r.lat0 < -90.0 || r.lat1 > 90.0 || r.lat0 > 90.0 || r.lat1 < -90.0)
    throw UsageError("--region: latitudes must lie within -90..90 degrees");
  if (!(r.lat0 < r.lat1)) throw UsageError("--region: LAT0 must be south of LAT1");
  if (r.lon0 == r.lon1) throw UsageError("--region: LON0 and LON1 are equal");
  if (r.lon1 < r.lon0) r.lon1 += 360.0;  // runs east across the seam
  if (r.lon1 - r.lon0 > 360.0) throw UsageError("--region: longitudes span more than 360 degrees");
  return r;
}

ValueRange parse_range(const std::string& text) {
  const auto parts = split_commas(text);
  ValueRange r;
  if (parts.size() != 2 || !parse_number(parts[0], r.low) || !parse_number(parts[1], r.high))
    throw UsageError("--range: '" + text + "' is not A,B (two numbers)");
  if (!(r.low < r.high)) throw UsageError("--range: A must be less than B");
  return r;
}

// ---- reading -------------------------------------------------------------------------

namespace {

MapData read_other(const NcFile& f, const std::string& name, std::size_t t) {
  const auto var = find_var(f, name);
  if (!var) {
    const auto names = drawable_variables(f);
    throw InputError(input_message(f.path(), name,
                                   "not found in the file (drawable variables: " +
                                       (names.empty() ? std::string("none") : join(names, ", ")) +
                                       ")"));
  }
  if (has_att(f.id(), var->id, "flag_masks") || has_att(f.id(), var->id, "flag_values"))
    throw UsageError(input_message(f.path(), name,
                                   "is a flag variable (flag_masks/flag_values), not a continuous "
                                   "field; choose another --field"));
  MapData d;
  Layout l;
  if (!on_lat_lon(f, *var) && maybe_plane(f, *var)) {
    // The grid as `currents` finds it (reader.hpp): the Reader insists on a
    // length unit, which this probe gives it; only the grid is used.
    ReaderOptions ro;
    ro.variable = name;
    ro.units = "m";
    ro.horizontal_grids = true;
    ro.raw_chunks = false;
    const HeightInfo info = Reader(f.path(), ro).info();
    d.grid_kind = info.grid_kind;
    if (info.grid_kind != GridKind::lat_lon) {
      d.plane = plane_grid(info);
      d.grid_name = plane_name(*d.plane);
    }
    l = layout_with(f, *var, info.lat.values, info.lon.values);
  } else {
    l = resolve_layout(f, *var);
  }
  if (t >= l.nt) throw UsageError(input_message(f.path(), name, time_beyond(t, l.nt)));
  d.path = f.path();
  d.variable = name;
  const std::string long_name = text_att(f.id(), var->id, "long_name");
  d.long_name = long_name.empty() ? name : long_name;
  d.units = text_att(f.id(), var->id, "units");
  if (d.grid_kind == GridKind::lat_lon) {
    d.lat_deg = l.lat;
    d.lon_deg = l.lon;
  }
  d.time_index = t;
  d.time_steps = l.nt;
  require_memory(24.0 * static_cast<double>(l.lat.size()) * static_cast<double>(l.lon.size()),
                 "the map of " + std::to_string(l.lat.size()) + " x " +
                     std::to_string(l.lon.size()) + " cells",
                 f.path(), name);
  d.values = read_step(f, *var, l, t);
  d.date = step_date(f, l, t);
  d.scale = known_scale(name, text_att(f.id(), var->id, "standard_name"))
                .value_or(scale_from_values(d.values));
  return d;
}

/// Reads u and v of time step T onto D (same grid as D's field).
void read_arrows(MapData& d, std::size_t t) {
  NcFile f(d.path);
  const auto u = find_var(f, "u"), v = find_var(f, "v");
  if (!u || !v)
    throw UsageError(input_message(d.path, "",
                                   "--arrows needs the variables u and v (an output "
                                   "of `seatilt currents`)"));
  const auto field = find_var(f, d.variable);
  for (const NcVar* c : {&*u, &*v}) {
    Layout l;
    if (d.grid_kind == GridKind::lat_lon) {
      l = resolve_layout(f, *c);
      if (l.lat != d.lat_deg || l.lon != d.lon_deg)
        throw InputError(input_message(d.path, c->name, "is not on the grid of " + d.variable));
    } else {
      // Same grid = the same last two dimensions as the drawn field.
      const std::size_t n = c->dims.size();
      if (!field || n < 2 || field->dims.size() < 2 ||
          c->dims[n - 2] != field->dims[field->dims.size() - 2] ||
          c->dims[n - 1] != field->dims.back())
        throw InputError(input_message(d.path, c->name, "is not on the grid of " + d.variable));
      l = layout_with(f, *c, d.plane->row_coord(), d.plane->col_coord());
    }
    if (t >= l.nt) throw UsageError(input_message(d.path, c->name, time_beyond(t, l.nt)));
    (c == &*u ? d.u : d.v) = read_step(f, *c, l, t);
  }
  d.arrow_units = text_att(f.id(), u->id, "units");
}

}  // namespace

MapData read_map_data(const std::string& path, const MapRequest& request) {
  MapData d;
  bool height = request.as_height;
  if (!height) {
    NcFile f(path);
    std::string name = request.field;
    if (name.empty()) {
      if (find_var(f, "speed"))
        name = "speed";
      else
        height = true;
    } else if (const auto v = find_var(f, name)) {
      height = lower(text_att(f.id(), v->id, "standard_name")).rfind("sea_surface_height", 0) == 0;
    }
    if (!height) d = read_other(f, name, request.time);
  }
  if (height) d = read_height(path, request.field, request.units, request.time);
  if (d.grid_kind == GridKind::lat_lon) {
    try {
      Grid check(d.lat_deg, d.lon_deg);
    } catch (const std::invalid_argument& e) {
      throw InputError(input_message(path, d.variable, e.what()));
    }
  }
  if (all_missing(d.values))
    throw InputError(
        input_message(path, d.variable,
                      "every cell of time step " + std::to_string(d.time_index) + " is missing"));
  if (request.arrows) read_arrows(d, request.time);
  return d;
}

// ---- geometry ---------------------------------------------------------------------

void pixel_to_lonlat(const QuicklookResult& r, int px, int py, double& lon_deg, double& lat_deg) {
  const PixelBox& m = r.map;
  if (px < m.x || py < m.y || px >= m.x + m.width || py >= m.y + m.height ||
      r.grid_kind != GridKind::lat_lon) {
    lon_deg = lat_deg = nan;
    return;
  }
  lon_deg = r.region.lon0 + (px - m.x + 0.5) / m.width * (r.region.lon1 - r.region.lon0);
  lat_deg = r.region.lat1 - (py - m.y + 0.5) / m.height * (r.region.lat1 - r.region.lat0);
}

void lonlat_to_pixel(const QuicklookResult& r, double lon_deg, double lat_deg, int& px, int& py) {
  const PixelBox& m = r.map;
  const double lon = lon_deg - 360.0 * std::floor((lon_deg - r.region.lon0) / 360.0);
  px = m.x + static_cast<int>(
                 std::floor((lon - r.region.lon0) / (r.region.lon1 - r.region.lon0) * m.width));
  py = m.y + static_cast<int>(std::floor((r.region.lat1 - lat_deg) /
                                         (r.region.lat1 - r.region.lat0) * m.height));
}

void pixel_to_grid(const QuicklookResult& r, int px, int py, double& c, double& row) {
  const PixelBox& m = r.map;
  if (px < m.x || py < m.y || px >= m.x + m.width || py >= m.y + m.height) {
    c = row = nan;
    return;
  }
  const GridWindow& w = r.window;
  c = w.c0 + (px - m.x + 0.5) / m.width * (w.c1 - w.c0);
  row = w.r1 - (py - m.y + 0.5) / m.height * (w.r1 - w.r0);
}

void grid_to_pixel(const QuicklookResult& r, double c, double row, int& px, int& py) {
  const PixelBox& m = r.map;
  const GridWindow& w = r.window;
  px = m.x + static_cast<int>(std::floor((c - w.c0) / (w.c1 - w.c0) * m.width));
  py = m.y + static_cast<int>(std::floor((w.r1 - row) / (w.r1 - w.r0) * m.height));
}

namespace {

/// Cells of a monotonic axis as ascending edges: cell k spans
/// [edges[k], edges[k+1]) and is file index k (ascending) or n-1-k.
struct CellAxis {
  std::vector<double> edges;
  bool descending = false;
  /// File index of the cell holding X; -1 outside (and for NaN).
  [[nodiscard]] long find(double x) const {
    if (!(x >= edges.front() && x < edges.back())) return -1;
    const auto k = std::upper_bound(edges.begin(), edges.end(), x) - edges.begin() - 1;
    const long n = static_cast<long>(edges.size()) - 1;
    return descending ? n - 1 - static_cast<long>(k) : static_cast<long>(k);
  }
};

/// Edges halfway between ascending centres C, the outer ones half a spacing out.
std::vector<double> edges_of(const std::vector<double>& c) {
  const std::size_t n = c.size();
  std::vector<double> e(n + 1);
  for (std::size_t k = 1; k < n; ++k) e[k] = 0.5 * (c[k - 1] + c[k]);
  e[0] = c[0] - 0.5 * (c[1] - c[0]);
  e[n] = c[n - 1] + 0.5 * (c[n - 1] - c[n - 2]);
  return e;
}

/// Cells of a strictly monotonic axis (2 or more values, either direction).
CellAxis cells_of(const std::vector<double>& values) {
  CellAxis a;
  a.descending = values[1] < values[0];
  std::vector<double> c = values;
  if (a.descending) std::reverse(c.begin(), c.end());
  a.edges = edges_of(c);
  return a;
}

CellAxis latitude_cells(const std::vector<double>& lat) {
  CellAxis a = cells_of(lat);
  a.edges.front() = std::max(a.edges.front(), -90.0);
  a.edges.back() = std::min(a.edges.back(), 90.0);
  return a;
}

/// Longitude cells on the unwrapped (strictly increasing) axis; a longitude
/// is shifted by multiples of 360 into [edges.front(), edges.front() + 360).
struct LonCells {
  CellAxis cells;
  [[nodiscard]] long find(double lon) const {
    const double e0 = cells.edges.front();
    return cells.find(lon - 360.0 * std::floor((lon - e0) / 360.0));
  }
};

LonCells longitude_cells(const std::vector<double>& lon, bool periodic) {
  // Unwrapping as Grid does: a step that goes down crosses the seam.
  std::vector<double> un(lon.size());
  un[0] = lon[0];
  for (std::size_t i = 1; i < lon.size(); ++i) {
    double d = std::fmod(lon[i] - lon[i - 1], 360.0);
    if (d <= 0.0) d += 360.0;
    un[i] = un[i - 1] + d;
  }
  LonCells l;
  l.cells.edges = edges_of(un);
  if (periodic) l.cells.edges.back() = l.cells.edges.front() + 360.0;  // no gap at the seam
  return l;
}

// ---- text -------------------------------------------------------------------------

/// Valid UTF-8 without control characters; ASCII only when ASCII_ONLY.
/// Anything else becomes '?' (Cairo refuses invalid UTF-8 and would stop drawing).
std::string clean_text(const std::string& s, bool ascii_only) {
  std::string out;
  for (std::size_t k = 0; k < s.size();) {
    const auto c = static_cast<unsigned char>(s[k]);
    if (c < 0x80) {
      out += c < 0x20 || c == 0x7f ? ' ' : static_cast<char>(c);
      ++k;
      continue;
    }
    const std::size_t len = (c & 0xE0) == 0xC0   ? 2
                            : (c & 0xF0) == 0xE0 ? 3
                            : (c & 0xF8) == 0xF0 ? 4
                                                 : 0;
    bool ok = len > 0 && k + len <= s.size();
    for (std::size_t q = 1; ok && q < len; ++q)
      ok = (static_cast<unsigned char>(s[k + q]) & 0xC0) == 0x80;
    if (ok && (len == 2 ? c >= 0xC2 : true) && !ascii_only)
      out += s.substr(k, len);
    else
      out += '?';
    k += ok ? len : 1;
  }
  return out;
}

/// Draws text with Cairo's toy API. Without an installed font Cairo uses its
/// built-in stroke font, which has ASCII glyphs only: then ascii = true.
class Ink {
 public:
  explicit Ink(cairo_t* cr) : cr_(cr) {
    cairo_select_font_face(cr_, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(cr_, 12.0);
    cairo_scaled_font_t* sf = cairo_get_scaled_font(cr_);
    ascii_ = cairo_status(cr_) != CAIRO_STATUS_SUCCESS ||
             cairo_scaled_font_status(sf) != CAIRO_STATUS_SUCCESS ||
             cairo_scaled_font_get_type(sf) == CAIRO_FONT_TYPE_USER;
  }
  [[nodiscard]] bool ascii() const { return ascii_; }
  /// Picks FANCY when the font has it, else PLAIN (ASCII).
  [[nodiscard]] const char* pick(const char* fancy, const char* plain) const {
    return ascii_ ? plain : fancy;
  }
  void font(double size, bool bold = false) {
    cairo_select_font_face(cr_, "sans-serif", CAIRO_FONT_SLANT_NORMAL,
                           bold ? CAIRO_FONT_WEIGHT_BOLD : CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(cr_, size);
    cairo_text_extents_t te{};
    cairo_text_extents(cr_, "0", &te);
    cap_ = -te.y_bearing;
  }
  /// Height of the digits in the current font (pixels).
  [[nodiscard]] double cap() const { return cap_; }
  [[nodiscard]] double width(const std::string& text) const {
    const std::string t = clean_text(text, ascii_);
    cairo_text_extents_t te{};
    cairo_text_extents(cr_, t.c_str(), &te);
    return te.x_advance;
  }
  /// Draws TEXT with its anchor at (X, Y): AX 0 left, 0.5 centre, 1 right;
  /// AY 0 top of the digits, 0.5 their middle, 1 baseline.
  void show(const std::string& text, double x, double y, double ax, double ay) {
    const std::string t = clean_text(text, ascii_);
    cairo_move_to(cr_, x - ax * width(t), y + (1.0 - ay) * cap_);
    cairo_show_text(cr_, t.c_str());
  }
  /// Like show, in black on a white halo HALO pixels wide (text over the map).
  void show_on_map(const std::string& text, double x, double y, double ax, double ay, double halo) {
    const std::string t = clean_text(text, ascii_);
    cairo_save(cr_);
    cairo_new_path(cr_);
    cairo_move_to(cr_, x - ax * width(t), y + (1.0 - ay) * cap_);
    cairo_text_path(cr_, t.c_str());
    cairo_set_source_rgba(cr_, 1.0, 1.0, 1.0, 0.85);
    cairo_set_line_width(cr_, halo);
    cairo_set_line_join(cr_, CAIRO_LINE_JOIN_ROUND);
    cairo_stroke_preserve(cr_);
    cairo_set_source_rgb(cr_, 0.0, 0.0, 0.0);
    cairo_fill(cr_);
    cairo_restore(cr_);
  }

 private:
  cairo_t* cr_;
  bool ascii_ = false;
  double cap_ = 9.0;
};

/// "m s-1" -> "m s⁻¹" (UDUNITS exponents as superscripts) when FANCY.
std::string pretty_units(const std::string& units, bool fancy) {
  if (!fancy) return units;
  static const char* const sup[] = {"⁰", "¹", "²", "³", "⁴", "⁵", "⁶", "⁷", "⁸", "⁹"};
  std::string out, token;
  const auto flush = [&] {
    std::size_t k = 0;
    while (k < token.size() && std::isalpha(static_cast<unsigned char>(token[k]))) ++k;
    std::size_t q = k + (k < token.size() && token[k] == '-' ? 1 : 0);
    bool digits = k > 0 && q < token.size();
    for (std::size_t p = q; p < token.size(); ++p)
      digits = digits && std::isdigit(static_cast<unsigned char>(token[p]));
    if (digits) {
      out += token.substr(0, k);
      if (q > k) out += "⁻";
      for (std::size_t p = q; p < token.size(); ++p) out += sup[token[p] - '0'];
    } else {
      out += token;
    }
    token.clear();
  };
  for (char c : units) {
    if (c == ' ') {
      flush();
      out += ' ';
    } else {
      token += c;
    }
  }
  flush();
  return out;
}

/// "10^E" as text: "10⁻⁵" with a real font, "10^-5" otherwise.
std::string power_of_ten(int e, bool fancy) {
  if (!fancy) return "10^" + std::to_string(e);
  static const char* const sup[] = {"⁰", "¹", "²", "³", "⁴", "⁵", "⁶", "⁷", "⁸", "⁹"};
  std::string out = "10";
  if (e < 0) out += "⁻";
  for (char c : std::to_string(std::abs(e))) out += sup[c - '0'];
  return out;
}

/// Smallest of 1, 2, 5 x 10^k not below RAW (> 0).
double nice_step(double raw) {
  const double p = std::pow(10.0, std::floor(std::log10(raw)));
  const double f = raw / p;
  return (f <= 1.0 + 1e-9 ? 1.0 : f <= 2.0 + 1e-9 ? 2.0 : f <= 5.0 + 1e-9 ? 5.0 : 10.0) * p;
}

/// Of 1, 2, 5 x 10^k the one nearest to X (> 0) on a log scale.
double nice_round(double x) {
  const double p = std::pow(10.0, std::floor(std::log10(x)));
  double best = p, err = 1e300;
  for (double m : {1.0, 2.0, 5.0, 10.0}) {
    const double d = std::fabs(std::log(x / (m * p)));
    if (d < err) {
      err = d;
      best = m * p;
    }
  }
  return best;
}

std::string fixed(double v, int decimals) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  std::string s = buf;
  if (s.find_first_not_of("-0.") == std::string::npos && s[0] == '-') s.erase(0, 1);  // no "-0"
  return s;
}

std::string short_number(double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.3g", v);
  return buf;
}

/// Graticule label of longitude LON (degrees, any turn) or latitude.
std::string degree_label(double value, bool is_lon, int decimals, const Ink& ink) {
  double v = value;
  if (is_lon) {
    v = std::fmod(v, 360.0);
    if (v > 180.0) v -= 360.0;
    if (v <= -180.0) v += 360.0;
  }
  const double tiny = 0.5 * std::pow(10.0, -decimals);
  const std::string deg = ink.pick("°", "");
  if (std::fabs(v) < tiny) return "0" + std::string(ink.pick("°", ""));
  if (is_lon && std::fabs(std::fabs(v) - 180.0) < tiny) return "180" + deg;
  const char* hemi = is_lon ? (v > 0 ? "E" : "W") : (v > 0 ? "N" : "S");
  return fixed(std::fabs(v), decimals) + deg + hemi;
}

/// Degree step for graticule lines at least MIN_PX pixels apart.
double graticule_step(double span_deg, double pixels, double min_px) {
  for (double st : {0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0, 15.0, 30.0, 45.0})
    if (st / span_deg * pixels >= min_px) return st;
  return 90.0;
}

int line_count(double a, double b, double step) {
  return static_cast<int>(std::floor(b / step + 1e-9) - std::ceil(a / step - 1e-9)) + 1;
}

/// "2026-03-14" for midnight, else "2026-03-14 06:00 UTC".
std::string display_date(const std::string& iso) {
  if (iso.size() < 20) return iso;
  if (iso.compare(10, 10, "T00:00:00Z") == 0) return iso.substr(0, 10);
  std::string d = iso.substr(0, 10) + " " + iso.substr(11, 5);
  if (iso.compare(16, 4, ":00Z") != 0) d += iso.substr(16, 3);
  return d + " UTC";
}

// ---- output file --------------------------------------------------------------------

std::pair<std::string, std::string> split_path(const std::string& path) {
  const auto slash = path.rfind('/');
  if (slash == std::string::npos) return {".", path};
  return {slash == 0 ? std::string("/") : path.substr(0, slash), path.substr(slash + 1)};
}

[[noreturn]] void output_fail(const std::string& path, const std::string& problem) {
  throw OutputError(input_message(path, "", problem));
}

/// Refuses an output that cannot be written, exists without FORCE, or is INPUT.
void check_output(const std::string& path, bool force, const std::string& input) {
  const auto [folder, name] = split_path(path);
  if (name.empty() || name == "." || name == "..") output_fail(path, "output is not a file name");
  struct stat st {};
  if (::stat(folder.c_str(), &st) != 0)
    output_fail(path, "output folder " + folder + ": " + std::strerror(errno));
  if (!S_ISDIR(st.st_mode))
    output_fail(path, "output folder " + folder + ": " + std::strerror(ENOTDIR));
  if (::access(folder.c_str(), W_OK | X_OK) != 0)
    output_fail(path, "output folder " + folder + ": " + std::strerror(errno));
  if (::lstat(path.c_str(), &st) == 0) {
    struct stat target {
    }, in{};
    if (::stat(path.c_str(), &target) == 0) {
      if (S_ISDIR(target.st_mode)) output_fail(path, "output is a folder");
      if (::stat(input.c_str(), &in) == 0 && in.st_dev == target.st_dev &&
          in.st_ino == target.st_ino)
        output_fail(path, "output is the input file");
    }
    if (!force) output_fail(path, "output exists (use --force to overwrite)");
  } else if (errno != ENOENT) {
    output_fail(path, std::strerror(errno));
  }
}

std::uint32_t random_bits() {
  try {
    std::random_device rd;
    return static_cast<std::uint32_t>(rd());
  } catch (...) {
    return static_cast<std::uint32_t>(std::chrono::steady_clock::now().time_since_epoch().count());
  }
}

/// A temporary sibling of the output, unlinked on destruction unless published.
class TempFile {
 public:
  explicit TempFile(const std::string& final_path) : final_(final_path) {
    const auto slash = final_path.rfind('/');
    const std::string prefix =
        slash == std::string::npos ? std::string() : final_path.substr(0, slash + 1);
    const std::string name = final_path.substr(slash == std::string::npos ? 0 : slash + 1);
    for (int attempt = 0; attempt < 4 && fd_ < 0; ++attempt) {
      char tag[32];
      std::snprintf(tag, sizeof tag, "%ld-%08x", static_cast<long>(::getpid()),
                    static_cast<unsigned>(random_bits()));
      path_ = prefix + "." + name + ".tmp-" + tag;
      fd_ = ::open(path_.c_str(), O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
      if (fd_ < 0 && errno != EEXIST) break;
    }
    if (fd_ < 0)
      output_fail(final_, "cannot create temporary file " + path_ + ": " + std::strerror(errno));
  }
  ~TempFile() {
    if (fd_ >= 0) ::close(fd_);
    if (!published_) ::unlink(path_.c_str());
  }
  TempFile(const TempFile&) = delete;
  TempFile& operator=(const TempFile&) = delete;

  /// Writes SURFACE as PNG, flushes, and renames onto the final path
  /// (without FORCE never over a file that appeared meanwhile).
  void publish(cairo_surface_t* surface, bool force) {
    const cairo_status_t st = cairo_surface_write_to_png_stream(surface, &TempFile::sink, this);
    if (st != CAIRO_STATUS_SUCCESS || error_ != 0)
      output_fail(final_, std::string("writing the PNG: ") +
                              (error_ ? std::strerror(error_) : cairo_status_to_string(st)));
    if (::fsync(fd_) != 0 && errno != EINVAL && errno != EROFS)
      output_fail(final_, std::string("flushing to disk: ") + std::strerror(errno));
    const int fd = fd_;
    fd_ = -1;
    if (::close(fd) != 0) output_fail(final_, std::string("closing: ") + std::strerror(errno));
    int err = 0;
    if (force) {
      err = std::rename(path_.c_str(), final_.c_str()) == 0 ? 0 : errno;
    } else {
#ifdef RENAME_NOREPLACE
      err = ::renameat2(AT_FDCWD, path_.c_str(), AT_FDCWD, final_.c_str(), RENAME_NOREPLACE) == 0
                ? 0
                : errno;
      if (err == EINVAL || err == ENOSYS || err == ENOTSUP)
#endif
      {
        struct stat st2 {};
        err = ::lstat(final_.c_str(), &st2) == 0                ? EEXIST
              : std::rename(path_.c_str(), final_.c_str()) == 0 ? 0
                                                                : errno;
      }
    }
    if (err == EEXIST) output_fail(final_, "output exists (use --force to overwrite)");
    if (err != 0) output_fail(final_, "renaming " + path_ + ": " + std::strerror(err));
    published_ = true;
    // Make the rename durable; a failure here still leaves a complete file.
    const int dir = ::open(split_path(final_).first.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
    if (dir >= 0) {
      ::fsync(dir);
      ::close(dir);
    }
  }

 private:
  static cairo_status_t sink(void* closure, const unsigned char* data, unsigned int length) {
    auto* self = static_cast<TempFile*>(closure);
    while (length > 0) {
      const ssize_t n = ::write(self->fd_, data, length);
      if (n < 0) {
        if (errno == EINTR) continue;
        self->error_ = errno;
        return CAIRO_STATUS_WRITE_ERROR;
      }
      data += n;
      length -= static_cast<unsigned int>(n);
    }
    return CAIRO_STATUS_SUCCESS;
  }

  std::string final_, path_;
  int fd_ = -1;
  int error_ = 0;
  bool published_ = false;
};

/// Owning Cairo handles.
struct SurfaceDeleter {
  void operator()(cairo_surface_t* s) const { cairo_surface_destroy(s); }
};
struct ContextDeleter {
  void operator()(cairo_t* c) const { cairo_destroy(c); }
};
using Surface = std::unique_ptr<cairo_surface_t, SurfaceDeleter>;
using Context = std::unique_ptr<cairo_t, ContextDeleter>;

void set_colour(cairo_t* cr, double grey, double alpha = 1.0) {
  cairo_set_source_rgba(cr, grey, grey, grey, alpha);
}

}  // namespace

// ---- drawing --------------------------------------------------------------------------

namespace {

constexpr double deg_to_rad = 3.14159265358979323846 / 180.0;

int px_round(double x) { return static_cast<int>(std::lround(x)); }

/// Writes colour C into pixel (X, Y) of a CAIRO_FORMAT_RGB24 image (0x00RRGGBB, native endian).
void put_pixel(unsigned char* data, int stride, int x, int y, Rgb8 c) {
  const std::uint32_t p = (std::uint32_t{c.r} << 16) | (std::uint32_t{c.g} << 8) | c.b;
  std::memcpy(data + static_cast<std::ptrdiff_t>(y) * stride + 4 * x, &p, 4);
}

/// One current arrow: centre (pixels), direction on the map, speed (u units).
struct Arrow {
  double x, y, ex, ey, speed;
};

void arrow_path(cairo_t* cr, double x, double y, double ex, double ey, double length, double head) {
  const double n = std::hypot(ex, ey);
  const double dx = ex / n, dy = ey / n;
  const double tx = x - 0.5 * length * dx, ty = y - 0.5 * length * dy;  // centred on the sample
  const double hx = x + 0.5 * length * dx, hy = y + 0.5 * length * dy;
  cairo_move_to(cr, tx, ty);
  cairo_line_to(cr, hx, hy);
  const double c = std::cos(26.0 * deg_to_rad), s = std::sin(26.0 * deg_to_rad);
  for (double sign : {1.0, -1.0}) {
    const double wx = -(dx * c - sign * dy * s), wy = -(sign * dx * s + dy * c);
    cairo_move_to(cr, hx, hy);
    cairo_line_to(cr, hx + head * wx, hy + head * wy);
  }
}

// ---- projected and curvilinear maps (quicklook.hpp "Projected and curvilinear grids") ----

/// Latitude/longitude at grid coordinates of a projected or curvilinear map.
class PlaneLocator {
 public:
  /// C_SIGN, R_SIGN: -1 when the map's column/row coordinate is the negated
  /// index (2-D latitude/longitude drawn flipped so that north is up).
  PlaneLocator(const CurvilinearGrid& g, double c_sign, double r_sign)
      : g_(g), c_sign_(c_sign), r_sign_(r_sign) {
    if (g.projected()) return;
    const std::size_t n = g.ny() * g.nx();
    unit_.resize(3 * n);
    for (std::size_t k = 0; k < n; ++k) {
      double sp = 0, cp = 0, sl = 0, cl = 0;
      sincosd(g.lat_deg()[k], sp, cp);
      sincosd(g.lon_deg()[k], sl, cl);
      unit_[3 * k] = cp * cl;  // unit vector on the sphere (only its direction is used)
      unit_[3 * k + 1] = cp * sl;
      unit_[3 * k + 2] = sp;
    }
  }

  /// LAT_DEG, LON_DEG (-180..180) at grid coordinates (C, R): PROJ's inverse
  /// for a projection (NaN outside its domain); for 2-D latitude/longitude,
  /// C and R are fractional column and row indices, and the position is the
  /// bilinear blend of the four surrounding nodes' unit vectors, normalised
  /// (extrapolated beyond the outer nodes).
  void at(double c, double r, double& lat_deg, double& lon_deg) const {
    if (const Projection* p = g_.projection()) {
      p->inverse(c, r, lat_deg, lon_deg);
      return;
    }
    const std::size_t nx = g_.nx();
    c *= c_sign_;
    r *= r_sign_;
    const double i0 = std::clamp(std::floor(c), 0.0, static_cast<double>(nx - 2));
    const double j0 = std::clamp(std::floor(r), 0.0, static_cast<double>(g_.ny() - 2));
    const double t = c - i0, u = r - j0;
    const auto k00 = static_cast<std::size_t>(j0) * nx + static_cast<std::size_t>(i0);
    const std::size_t k01 = k00 + 1, k10 = k00 + nx, k11 = k10 + 1;
    double v[3];
    for (int q = 0; q < 3; ++q)
      v[q] = (1 - t) * (1 - u) * unit_[3 * k00 + q] + t * (1 - u) * unit_[3 * k01 + q] +
             (1 - t) * u * unit_[3 * k10 + q] + t * u * unit_[3 * k11 + q];
    lat_deg = std::atan2(v[2], std::hypot(v[0], v[1])) / deg_to_rad;
    lon_deg = std::atan2(v[1], v[0]) / deg_to_rad;
  }

 private:
  const CurvilinearGrid& g_;
  double c_sign_ = 1.0, r_sign_ = 1.0;
  std::vector<double> unit_;  // 3 per node
};

/// Height / width of the ground covered by the rows [R0, R1] and columns
/// [C0, C1] (index coordinates) of a curvilinear grid: the medians of the
/// distances between row and column neighbours (on the unit sphere; only the
/// ratio matters), sampled on at most about 64 x 64 nodes.
double curvilinear_aspect(const CurvilinearGrid& g, const GridWindow& w) {
  const std::size_t ny = g.ny(), nx = g.nx();
  const std::size_t sj = std::max<std::size_t>(1, ny / 64), si = std::max<std::size_t>(1, nx / 64);
  const auto angle = [&](std::size_t a, std::size_t b) {
    double s1 = 0, c1 = 0, s2 = 0, c2 = 0;
    sincosd(g.lat_deg()[a], s1, c1);
    sincosd(g.lat_deg()[b], s2, c2);
    const double dl = (g.lon_deg()[b] - g.lon_deg()[a]) * deg_to_rad;
    const double h = std::pow(std::sin(0.5 * (g.lat_deg()[b] - g.lat_deg()[a]) * deg_to_rad), 2) +
                     c1 * c2 * std::pow(std::sin(0.5 * dl), 2);  // haversine
    return 2.0 * std::asin(std::min(1.0, std::sqrt(h)));
  };
  std::vector<double> along_rows, along_cols;  // column steps, row steps
  for (std::size_t j = 0; j < ny; j += sj)
    for (std::size_t i = 0; i < nx; i += si) {
      const std::size_t k = j * nx + i;
      if (i + 1 < nx) along_rows.push_back(angle(k, k + 1));
      if (j + 1 < ny) along_cols.push_back(angle(k, k + nx));
    }
  const double dx = percentile(along_rows, 50.0), dy = percentile(along_cols, 50.0);
  if (!(dx > 0.0) || !(dy > 0.0)) return (w.r1 - w.r0) / (w.c1 - w.c0);
  return (w.r1 - w.r0) * dy / ((w.c1 - w.c0) * dx);
}

/// Graticule of a projected or curvilinear map: latitude and longitude on a
/// lattice of pixels, lines by contouring each lattice square (marching
/// squares, linear along the square's edges), labels where lines cross the
/// frame.
class PlaneGraticule {
 public:
  PlaneGraticule(const PlaneLocator& locator, const PixelBox& m, const GridWindow& w, double s)
      : loc_(locator), m_(m), w_(w), s_(s) {
    const int step = std::max(2, px_round(4 * s));
    for (int k = 0; k < m.width; k += step) xs_.push_back(k);
    xs_.push_back(m.width);
    for (int k = 0; k < m.height; k += step) ys_.push_back(k);
    ys_.push_back(m.height);
    lat_.resize(xs_.size() * ys_.size());
    lon_.resize(lat_.size());
    for (std::size_t j = 0; j < ys_.size(); ++j)
      for (std::size_t i = 0; i < xs_.size(); ++i) {
        double la = 0, lo = 0;
        position(xs_[i], ys_[j], la, lo);
        lat_[j * xs_.size() + i] = la;
        lon_[j * xs_.size() + i] = lo;
      }
    // Steps: the median gradient (degrees per pixel) over the lattice;
    // lines about 60 px apart in latitude and 100 px in longitude at 1000 px
    // (meridians converge towards a pole; common practice, no source).
    std::vector<double> g_lat, g_lon;
    for (std::size_t j = 0; j + 1 < ys_.size(); ++j)
      for (std::size_t i = 0; i + 1 < xs_.size(); ++i) {
        const std::size_t a = j * xs_.size() + i, b = a + 1, d = a + xs_.size();
        const double hx = xs_[i + 1] - xs_[i], hy = ys_[j + 1] - ys_[j];
        if (!std::isfinite(lat_[a] + lat_[b] + lat_[d] + lon_[a] + lon_[b] + lon_[d])) continue;
        g_lat.push_back(std::hypot((lat_[b] - lat_[a]) / hx, (lat_[d] - lat_[a]) / hy));
        const double ex = std::remainder(lon_[b] - lon_[a], 360.0);
        const double ey = std::remainder(lon_[d] - lon_[a], 360.0);
        if (std::fabs(ex) < 30.0 && std::fabs(ey) < 30.0)
          g_lon.push_back(std::hypot(ex / hx, ey / hy));
      }
    if (!g_lat.empty()) lat_step_ = choose(percentile(g_lat, 50.0), 60 * s);
    if (!g_lon.empty()) lon_step_ = choose(percentile(g_lon, 50.0), 100 * s);
  }

  [[nodiscard]] double lat_step() const { return lat_step_; }
  [[nodiscard]] double lon_step() const { return lon_step_; }

  /// Adds the line segments to CR's path (pixels).
  void add_lines(cairo_t* cr) const {
    const std::size_t n = xs_.size();
    for (std::size_t j = 0; j + 1 < ys_.size(); ++j)
      for (std::size_t i = 0; i + 1 < n; ++i) {
        const std::size_t k[4] = {j * n + i, j * n + i + 1, (j + 1) * n + i + 1, (j + 1) * n + i};
        double px[4], py[4], la[4], lo[4];
        bool ok = true;
        for (int q = 0; q < 4; ++q) {
          px[q] = m_.x + xs_[k[q] % n];
          py[q] = m_.y + ys_[k[q] / n];
          la[q] = lat_[k[q]];
          lo[q] = lon_[k[q]];
          ok = ok && std::isfinite(la[q]) && std::isfinite(lo[q]);
        }
        if (!ok) continue;
        if (lat_step_ > 0.0) {
          const double lo_v = *std::min_element(la, la + 4), hi_v = *std::max_element(la, la + 4);
          for (double q = std::ceil(lo_v / lat_step_); q * lat_step_ <= hi_v; q += 1.0)
            if (std::fabs(q * lat_step_) < 90.0 - 1e-9) contour(cr, px, py, la, q * lat_step_);
        }
        if (lon_step_ > 0.0) {
          for (int q = 1; q < 4; ++q) lo[q] = lo[0] + std::remainder(lo[q] - lo[0], 360.0);
          const double lo_v = *std::min_element(lo, lo + 4), hi_v = *std::max_element(lo, lo + 4);
          if (hi_v - lo_v > 30.0) continue;  // a pole inside the square
          for (double q = std::ceil(lo_v / lon_step_); q * lon_step_ <= hi_v; q += 1.0)
            contour(cr, px, py, lo, q * lon_step_);
        }
      }
  }

  /// A label placed on the map itself, drawn last (over the arrows).
  struct MapLabel {
    std::string text;
    double x, y;
  };

  /// Labels (and ticks) where lines cross the frame; labels of parallels
  /// that never reach it go to ON_MAP. Returns how many labels in all.
  std::size_t add_labels(cairo_t* cr, Ink& ink, double frame, double tick, int page_width,
                         std::vector<MapLabel>& on_map) const {
    struct Candidate {
      bool is_lon;
      double value;
      int edge;    // 0 bottom, 1 left, 2 top, 3 right
      double pos;  // pixel along the edge
    };
    std::vector<Candidate> found;
    for (int edge = 0; edge < 4; ++edge) {
      const bool horizontal = edge == 0 || edge == 2;
      const int len = horizontal ? m_.width : m_.height;
      double prev_la = nan, prev_lo = nan, prev_p = nan;
      for (int p = 0; p < len; ++p) {
        const double t = p + 0.5;
        double la = 0, lo = 0;
        if (horizontal)
          position(t, edge == 0 ? m_.height : 0.0, la, lo);
        else
          position(edge == 1 ? 0.0 : m_.width, t, la, lo);
        if (std::isfinite(prev_la) && std::isfinite(la) && lat_step_ > 0.0) {
          const double a = prev_la, b = la;
          for (double q = std::ceil(std::min(a, b) / lat_step_); q * lat_step_ <= std::max(a, b);
               q += 1.0) {
            const double L = q * lat_step_;
            if (L == std::min(a, b) || std::fabs(L) >= 90.0 - 1e-9) continue;
            found.push_back({false, L, edge, prev_p + (L - a) / (b - a) * (t - prev_p)});
          }
        }
        if (std::isfinite(prev_lo) && std::isfinite(lo) && lon_step_ > 0.0) {
          const double a = prev_lo, b = prev_lo + std::remainder(lo - prev_lo, 360.0);
          if (std::fabs(b - a) < 30.0)
            for (double q = std::ceil(std::min(a, b) / lon_step_); q * lon_step_ <= std::max(a, b);
                 q += 1.0) {
              const double L = q * lon_step_;
              if (L == std::min(a, b)) continue;
              found.push_back({true, L, edge, prev_p + (L - a) / (b - a) * (t - prev_p)});
            }
        }
        prev_la = la;
        prev_lo = lo;
        prev_p = t;
      }
    }
    // Priority: longitudes below and above, latitudes left and right, then the rest.
    const std::pair<int, bool> order[8] = {{0, true},  {1, false}, {2, true},  {3, false},
                                           {0, false}, {1, true},  {2, false}, {3, true}};
    struct Box {
      double x0, y0, x1, y1;
    };
    std::vector<Box> placed;
    std::vector<std::pair<bool, double>> labelled;
    const double gap = 3 * s_;
    const auto decimals = [](double step) {
      return step >= 1.0 - 1e-9 ? 0 : step >= 0.1 - 1e-9 ? 1 : 2;
    };
    ink.font(12.5 * s_);
    const double cap = ink.cap();
    std::size_t count = 0;
    for (const auto& side : order)
      for (const Candidate& c : found) {
        // Plain locals, not structured bindings: clang 14 cannot capture
        // those in the lambdas below (C++17).
        const auto edge = side.first;
        const bool is_lon = side.second;
        if (c.edge != edge || c.is_lon != is_lon) continue;
        const double key = is_lon ? std::remainder(c.value, 360.0) : c.value;
        const bool done = std::any_of(labelled.begin(), labelled.end(), [&](const auto& l) {
          return l.first == is_lon && std::fabs(l.second - key) < 1e-9;
        });
        if (done) continue;
        const std::string text =
            degree_label(c.value, is_lon, decimals(is_lon ? lon_step_ : lat_step_), ink);
        const double w = ink.width(text);
        const double out = frame + tick + 4 * s_;
        double x = 0, y = 0, ax = 0, ay = 0;
        Box b{};
        if (edge == 0 || edge == 2) {
          x = std::floor(m_.x + c.pos) + 0.5;
          y = edge == 0 ? m_.y + m_.height + out : m_.y - out;
          ax = 0.5;
          ay = edge == 0 ? 0.0 : 1.0;
          b = {x - 0.5 * w, edge == 0 ? y : y - cap, x + 0.5 * w, edge == 0 ? y + cap : y};
        } else {
          y = std::floor(m_.y + c.pos) + 0.5;
          x = edge == 1 ? m_.x - out : m_.x + m_.width + out;
          ax = edge == 1 ? 1.0 : 0.0;
          ay = 0.5;
          b = {edge == 1 ? x - w : x, y - 0.5 * cap, edge == 1 ? x : x + w, y + 0.5 * cap};
        }
        if (b.x0 < 1.0 || b.x1 > page_width - 1.0) continue;
        const bool clash = std::any_of(placed.begin(), placed.end(), [&](const Box& q) {
          return b.x0 < q.x1 + gap && q.x0 < b.x1 + gap && b.y0 < q.y1 + gap && q.y0 < b.y1 + gap;
        });
        if (clash) continue;
        placed.push_back(b);
        labelled.emplace_back(is_lon, key);
        ink.show(text, x, y, ax, ay);
        // Tick from the frame outwards.
        if (edge == 0 || edge == 2) {
          const double y0 = edge == 0 ? m_.y + m_.height + frame : m_.y - frame;
          cairo_move_to(cr, x, y0);
          cairo_line_to(cr, x, edge == 0 ? y0 + tick : y0 - tick);
        } else {
          const double x0 = edge == 1 ? m_.x - frame : m_.x + m_.width + frame;
          cairo_move_to(cr, x0, y);
          cairo_line_to(cr, edge == 1 ? x0 - tick : x0 + tick, y);
        }
        cairo_stroke(cr);
        ++count;
      }
    // Parallels that never reach the frame (around a pole in view): labelled
    // on the map where they cross the lattice column nearest its middle,
    // lowest crossing first.
    if (lat_step_ > 0.0) {
      const std::size_t n = xs_.size();
      const std::size_t mid = n / 2;
      double lo_v = 90.0, hi_v = -90.0;
      for (double v : lat_)
        if (std::isfinite(v)) {
          lo_v = std::min(lo_v, v);
          hi_v = std::max(hi_v, v);
        }
      for (double q = std::ceil(lo_v / lat_step_); q * lat_step_ <= hi_v; q += 1.0) {
        const double L = q * lat_step_;
        if (std::fabs(L) >= 90.0 - 1e-9) continue;
        const bool done = std::any_of(labelled.begin(), labelled.end(), [&](const auto& l) {
          return !l.first && std::fabs(l.second - L) < 1e-9;
        });
        if (done) continue;
        for (std::size_t j = ys_.size() - 1; j > 0; --j) {
          const double a = lat_[j * n + mid], b = lat_[(j - 1) * n + mid];
          if (!std::isfinite(a) || !std::isfinite(b) || (a > L) == (b > L)) continue;
          const double y = m_.y + ys_[j] + (L - a) / (b - a) * (ys_[j - 1] - ys_[j]);
          const double x = m_.x + xs_[mid];
          const std::string text = degree_label(L, false, decimals(lat_step_), ink);
          const double w = ink.width(text);
          const Box b2{x - 0.5 * w, y - 0.5 * cap, x + 0.5 * w, y + 0.5 * cap};
          if (b2.x0 < m_.x || b2.x1 > m_.x + m_.width || b2.y0 < m_.y || b2.y1 > m_.y + m_.height)
            break;
          const bool clash = std::any_of(placed.begin(), placed.end(), [&](const Box& q2) {
            return b2.x0 < q2.x1 + gap && q2.x0 < b2.x1 + gap && b2.y0 < q2.y1 + gap &&
                   q2.y0 < b2.y1 + gap;
          });
          if (clash) break;
          placed.push_back(b2);
          labelled.emplace_back(false, L);
          on_map.push_back({text, x, y});
          ++count;
          break;
        }
      }
    }
    return count;
  }

 private:
  /// Position at map-local pixel coordinates (X right, Y down; 0..width, 0..height).
  void position(double x, double y, double& lat, double& lon) const {
    const double c = w_.c0 + x / m_.width * (w_.c1 - w_.c0);
    const double r = w_.r1 - y / m_.height * (w_.r1 - w_.r0);
    loc_.at(c, r, lat, lon);
  }

  static double choose(double deg_per_px, double min_px) {
    for (double st : {0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0, 15.0, 30.0, 45.0})
      if (st / deg_per_px >= min_px) return st;
    return 90.0;
  }

  /// Adds the segment(s) of the level line LEVEL through the square with
  /// corners (PX, PY) (in order around it) and values V.
  static void contour(cairo_t* cr, const double* px, const double* py, const double* v,
                      double level) {
    double cx[4], cy[4];
    int n = 0;
    for (int k = 0; k < 4; ++k) {
      const int q = (k + 1) % 4;
      if ((v[k] > level) == (v[q] > level)) continue;
      const double t = (level - v[k]) / (v[q] - v[k]);
      cx[n] = px[k] + t * (px[q] - px[k]);
      cy[n] = py[k] + t * (py[q] - py[k]);
      ++n;
    }
    for (int k = 0; k + 1 < n; k += 2) {
      cairo_move_to(cr, cx[k], cy[k]);
      cairo_line_to(cr, cx[k + 1], cy[k + 1]);
    }
  }

  const PlaneLocator& loc_;
  PixelBox m_;
  GridWindow w_;
  double s_;
  std::vector<double> xs_, ys_, lat_, lon_;  // lattice (map-local pixels) and positions
  double lat_step_ = 0.0, lon_step_ = 0.0;
};

}  // namespace

QuicklookResult write_quicklook(const MapData& map, const QuicklookOptions& o,
                                const std::string& png_path) {
  if (o.width_px < 320 || o.width_px > 4096)
    throw UsageError("--width: " + std::to_string(o.width_px) + " px is outside 320..4096");
  const bool plane = map.grid_kind != GridKind::lat_lon;
  if (plane && !map.plane)
    throw std::invalid_argument("write_quicklook: a projected or curvilinear map without its grid");
  const std::size_t ny = plane ? map.plane->ny() : map.lat_deg.size();
  const std::size_t nx = plane ? map.plane->nx() : map.lon_deg.size();
  if (ny < 2 || nx < 2 || map.values.ny != ny || map.values.nx != nx)
    throw std::invalid_argument("write_quicklook: values do not match the coordinates");
  if (o.arrows && (map.u.ny != ny || map.u.nx != nx || map.v.ny != ny || map.v.nx != nx))
    throw UsageError(input_message(map.path, "",
                                   "--arrows needs the variables u and v (an "
                                   "output of `seatilt currents`)"));
  check_output(png_path, o.force, map.path);

  QuicklookResult res;
  res.scale = map.scale;
  res.grid_kind = map.grid_kind;

  // ---- cells along the page axes and the part of the grid drawn ----
  // Lat/lon maps: columns are longitudes, rows latitudes. Plane maps: columns
  // follow the column coordinate c (x, or the column index) to the right,
  // rows the row coordinate r (y, or the row index) upwards.
  CellAxis lat, c_cells, r_cells;
  double c_sign = 1.0, r_sign = 1.0;
  LonCells lon;
  double aspect = 1.0;
  if (!plane) {
    bool periodic = false;
    try {
      periodic = Grid(map.lat_deg, map.lon_deg).periodic();
    } catch (const std::invalid_argument& e) {
      throw InputError(input_message(map.path, map.variable, e.what()));
    }
    lat = latitude_cells(map.lat_deg);
    lon = longitude_cells(map.lon_deg, periodic);
    res.region = o.region.value_or(Region{lon.cells.edges.front(), lon.cells.edges.back(),
                                          lat.edges.front(), lat.edges.back()});
    const Region& r = res.region;
    // [5] equidistant cylindrical, standard parallel at the centre latitude:
    // x = lon cos(lat_c), y = lat, so height/width = dlat / (dlon cos(lat_c)).
    const double cos_c = std::max(std::cos(0.5 * (r.lat0 + r.lat1) * deg_to_rad), 0.05);
    aspect = std::clamp((r.lat1 - r.lat0) / ((r.lon1 - r.lon0) * cos_c), 0.2, 1.5);
  } else {
    const CurvilinearGrid& g = *map.plane;
    // 2-D latitude/longitude: indices, negated where that puts east to the
    // right and north up at the centre node.
    std::vector<double> cc = g.col_coord(), rc = g.row_coord();
    if (!g.projected()) {
      const DirectionalMetric& b = g.metric(ny / 2, nx / 2);
      if (b.e_c < 0.0) {  // columns run west
        c_sign = -1.0;
        for (double& v : cc) v = -v;
      }
      if (b.n_r < 0.0) {  // rows run south
        r_sign = -1.0;
        for (double& v : rc) v = -v;
      }
    }
    c_cells = cells_of(cc);
    r_cells = cells_of(rc);
    GridWindow& w = res.window;
    w = {c_cells.edges.front(), c_cells.edges.back(), r_cells.edges.front(), r_cells.edges.back()};
    if (o.region) {
      // The smallest rectangle of cells holding every cell centre inside the box.
      const Region& r = *o.region;
      const auto position = [](const CellAxis& a, std::size_t index) {
        const std::size_t n = a.edges.size() - 1;
        return a.descending ? n - 1 - index : index;  // ascending position of a file index
      };
      std::size_t c_lo = nx, c_hi = 0, r_lo = ny, r_hi = 0;
      for (std::size_t j = 0; j < ny; ++j)
        for (std::size_t i = 0; i < nx; ++i) {
          const double la = g.lat_deg(j, i);
          const double lo0 = g.lon_deg(j, i);
          const double lo = lo0 - 360.0 * std::floor((lo0 - r.lon0) / 360.0);
          if (!(la >= r.lat0 && la <= r.lat1 && lo <= r.lon1)) continue;
          const std::size_t pc = position(c_cells, i), pr = position(r_cells, j);
          c_lo = std::min(c_lo, pc);
          c_hi = std::max(c_hi, pc);
          r_lo = std::min(r_lo, pr);
          r_hi = std::max(r_hi, pr);
        }
      if (c_lo > c_hi) {
        char buf[200];
        std::snprintf(buf, sizeof buf,
                      "--region %g,%g,%g,%g does not overlap the grid (no cell centre inside; %s)",
                      r.lon0, r.lon1, r.lat0, r.lat1, map.path.c_str());
        throw UsageError(buf);
      }
      w = {c_cells.edges[c_lo], c_cells.edges[c_hi + 1], r_cells.edges[r_lo],
           r_cells.edges[r_hi + 1]};
    }
    aspect = g.projected() ? (w.r1 - w.r0) / (w.c1 - w.c0) : curvilinear_aspect(g, w);
    aspect = std::clamp(aspect, 0.2, 1.5);
  }

  // ---- page layout (s = size scale) ----
  const int W = o.width_px;
  const double s = std::max(W / 1000.0, 0.55);
  PixelBox& m = res.map;
  m.x = px_round(66 * s);
  m.y = px_round((plane ? 88 : 66) * s);  // plane maps: room for labels above the frame
  m.width = W - m.x - px_round((plane ? 66 : 30) * s);
  m.height = std::max(1, px_round(m.width * aspect));
  PixelBox& bar = res.colour_bar;
  bar.height = std::max(6, px_round(16 * s));
  bar.width = px_round(0.5 * m.width);
  bar.y = m.y + m.height + px_round(38 * s);
  bar.x = o.arrows ? m.x + px_round(0.04 * m.width) : m.x + (m.width - bar.width) / 2;
  const int H = bar.y + bar.height + px_round(34 * s);
  res.width_px = W;
  res.height_px = H;

  // ---- grid cell under each map pixel ----
  std::vector<long> col(static_cast<std::size_t>(m.width)), row(static_cast<std::size_t>(m.height));
  for (int px = 0; px < m.width; ++px) {
    double a = 0, b = 0;
    if (plane) {
      pixel_to_grid(res, m.x + px, m.y, a, b);
      col[static_cast<std::size_t>(px)] = c_cells.find(a);
    } else {
      pixel_to_lonlat(res, m.x + px, m.y, a, b);
      col[static_cast<std::size_t>(px)] = lon.find(a);
    }
  }
  for (int py = 0; py < m.height; ++py) {
    double a = 0, b = 0;
    if (plane) {
      pixel_to_grid(res, m.x, m.y + py, a, b);
      row[static_cast<std::size_t>(py)] = r_cells.find(b);
    } else {
      pixel_to_lonlat(res, m.x, m.y + py, a, b);
      row[static_cast<std::size_t>(py)] = lat.find(b);
    }
  }
  const auto inside = [](const std::vector<long>& v) {
    std::vector<long> u;
    for (long k : v)
      if (k >= 0) u.push_back(k);
    std::sort(u.begin(), u.end());
    u.erase(std::unique(u.begin(), u.end()), u.end());
    return u;
  };
  const std::vector<long> cols = inside(col), rows = inside(row);
  if (cols.empty() || rows.empty()) {
    const Region& r = res.region;
    char buf[160];
    std::snprintf(buf, sizeof buf, "--region %g,%g,%g,%g does not overlap the grid (%s)", r.lon0,
                  r.lon1, r.lat0, r.lat1, map.path.c_str());
    throw UsageError(buf);
  }
  if (plane) {  // latitude/longitude range of the nodes drawn (for messages)
    Region& r = res.region;
    r = {180.0, -180.0, 90.0, -90.0};
    for (long j : rows)
      for (long i : cols) {
        const double la =
            map.plane->lat_deg(static_cast<std::size_t>(j), static_cast<std::size_t>(i));
        const double lo = std::remainder(
            map.plane->lon_deg(static_cast<std::size_t>(j), static_cast<std::size_t>(i)), 360.0);
        r.lat0 = std::min(r.lat0, la);
        r.lat1 = std::max(r.lat1, la);
        r.lon0 = std::min(r.lon0, lo);
        r.lon1 = std::max(r.lon1, lo);
      }
  }

  // ---- colour range from the cells in view ----
  std::vector<double> view;
  for (long j : rows)
    for (long i : cols) {
      const double v = map.values.at(static_cast<std::size_t>(j), static_cast<std::size_t>(i));
      if (std::isfinite(v)) view.push_back(v);
    }
  if (view.empty())  // only missing cells in view: scale as the whole field
    for (double v : map.values.data)
      if (std::isfinite(v)) view.push_back(v);
  if (view.empty())
    throw InputError(input_message(map.path, map.variable, "every cell is missing"));
  res.range = o.range ? *o.range : robust_range(view, map.scale);
  res.range_from_percentiles = !o.range;
  const double lo = res.range.low, span = res.range.high - res.range.low;
  const bool below =
      std::any_of(view.begin(), view.end(), [&](double v) { return v < res.range.low; });
  const bool above =
      std::any_of(view.begin(), view.end(), [&](double v) { return v > res.range.high; });

  // ---- raster: map cells and colour bar gradient, written as pixels ----
  Surface surface(cairo_image_surface_create(CAIRO_FORMAT_RGB24, W, H));
  if (cairo_surface_status(surface.get()) != CAIRO_STATUS_SUCCESS)
    output_fail(png_path, "cannot create a " + std::to_string(W) + " x " + std::to_string(H) +
                              " px image (" +
                              cairo_status_to_string(cairo_surface_status(surface.get())) + ")");
  Context context(cairo_create(surface.get()));
  cairo_t* cr = context.get();
  cairo_set_source_rgb(cr, 1.0, 1.0, 1.0);
  cairo_paint(cr);
  cairo_surface_flush(surface.get());
  unsigned char* data = cairo_image_surface_get_data(surface.get());
  const int stride = cairo_image_surface_get_stride(surface.get());
  for (int py = 0; py < m.height; ++py) {
    const long j = row[static_cast<std::size_t>(py)];
    for (int px = 0; px < m.width; ++px) {
      const long i = col[static_cast<std::size_t>(px)];
      const double v = (j < 0 || i < 0) ? nan
                                        : map.values.at(static_cast<std::size_t>(j),
                                                        static_cast<std::size_t>(i));
      put_pixel(data, stride, m.x + px, m.y + py, colour_at(map.scale, (v - lo) / span));
    }
  }
  for (int c = 0; c < bar.width; ++c) {
    const Rgb8 colour = colour_at(map.scale, (c + 0.5) / bar.width);
    for (int y = 0; y < bar.height; ++y) put_pixel(data, stride, bar.x + c, bar.y + y, colour);
  }
  cairo_surface_mark_dirty(surface.get());

  // ---- graticule, frame ----
  const double thin = std::max(1.0, std::round(s));
  const double frame = std::max(1.0, std::round(1.2 * s));
  const double tick = std::round(5 * s);
  std::optional<PlaneLocator> locator;
  std::optional<PlaneGraticule> plane_lines;
  std::vector<PlaneGraticule::MapLabel> map_labels;
  std::vector<std::pair<double, double>> lon_lines, lat_lines;  // (degrees, pixel)
  double lon_step = 0.0, lat_step = 0.0;
  if (plane) {
    locator.emplace(*map.plane, c_sign, r_sign);
    plane_lines.emplace(*locator, m, res.window, s);
    cairo_save(cr);
    cairo_rectangle(cr, m.x, m.y, m.width, m.height);
    cairo_clip(cr);
    cairo_set_line_width(cr, thin);
    set_colour(cr, 0.0, 0.3);
    plane_lines->add_lines(cr);
    cairo_stroke(cr);
    cairo_restore(cr);
  } else {
    const Region& r = res.region;
    const double lon_span = r.lon1 - r.lon0, lat_span = r.lat1 - r.lat0;
    lon_step = graticule_step(lon_span, m.width, 75 * s);
    lat_step = graticule_step(lat_span, m.height, 60 * s);
    const double common = std::max(lon_step, lat_step);
    if (line_count(r.lon0, r.lon1, common) >= 2 && line_count(r.lat0, r.lat1, common) >= 2)
      lon_step = lat_step = common;
    for (double k = std::ceil(r.lon0 / lon_step - 1e-9); k * lon_step <= r.lon1 + 1e-9 * lon_step;
         k += 1) {
      const double x = m.x + (k * lon_step - r.lon0) / lon_span * m.width;
      if (x >= m.x && x < m.x + m.width) lon_lines.emplace_back(k * lon_step, std::floor(x) + 0.5);
    }
    for (double k = std::ceil(r.lat0 / lat_step - 1e-9); k * lat_step <= r.lat1 + 1e-9 * lat_step;
         k += 1) {
      const double y = m.y + (r.lat1 - k * lat_step) / lat_span * m.height;
      if (y >= m.y && y < m.y + m.height) lat_lines.emplace_back(k * lat_step, std::floor(y) + 0.5);
    }
    cairo_set_line_width(cr, thin);
    set_colour(cr, 0.0, 0.3);
    for (const auto& [v, x] : lon_lines) {
      cairo_move_to(cr, x, m.y);
      cairo_line_to(cr, x, m.y + m.height);
    }
    for (const auto& [v, y] : lat_lines) {
      cairo_move_to(cr, m.x, y);
      cairo_line_to(cr, m.x + m.width, y);
    }
    cairo_stroke(cr);
  }
  // Frames lie just outside their boxes, so every pixel inside keeps its colour.
  set_colour(cr, 0.0);
  cairo_set_line_width(cr, frame);
  cairo_rectangle(cr, m.x - 0.5 * frame, m.y - 0.5 * frame, m.width + frame, m.height + frame);
  cairo_stroke(cr);
  cairo_set_line_width(cr, thin);
  for (const auto& [v, x] : lon_lines) {
    cairo_move_to(cr, x, m.y + m.height + frame);
    cairo_line_to(cr, x, m.y + m.height + frame + tick);
  }
  for (const auto& [v, y] : lat_lines) {
    cairo_move_to(cr, m.x - frame, y);
    cairo_line_to(cr, m.x - frame - tick, y);
  }
  cairo_stroke(cr);

  // ---- text: graticule labels, title ----
  Ink ink(cr);
  res.ascii_text = ink.ascii();
  const auto decimals = [](double step) {
    return step >= 1.0 - 1e-9 ? 0 : step >= 0.1 - 1e-9 ? 1 : 2;
  };
  if (plane) {
    set_colour(cr, 0.0);
    cairo_set_line_width(cr, thin);
    res.graticule_labels = plane_lines->add_labels(cr, ink, frame, tick, W, map_labels);
  } else {
    ink.font(12.5 * s);
    for (const auto& [v, x] : lon_lines)
      ink.show(degree_label(v, true, decimals(lon_step), ink), x,
               m.y + m.height + frame + tick + 4 * s, 0.5, 0.0);
    for (const auto& [v, y] : lat_lines)
      ink.show(degree_label(v, false, decimals(lat_step), ink), m.x - frame - tick - 4 * s, y, 1.0,
               0.5);
    res.graticule_labels = lon_lines.size() + lat_lines.size();
  }

  set_colour(cr, 0.0);
  const double avail = W - m.x - 12 * s;
  double title_size = 21 * s;
  const std::string title = map.date.empty()
                                ? map.long_name
                                : map.long_name + ink.pick(" — ", " - ") + display_date(map.date);
  ink.font(title_size, true);
  if (const double w = ink.width(title); w > avail) ink.font(title_size *= avail / w, true);
  ink.show(title, m.x, 30 * s, 0.0, 1.0);
  std::vector<std::string> parts;
  if (map.time_steps > 1)
    parts.push_back("time step " + std::to_string(map.time_index) + " (0.." +
                    std::to_string(map.time_steps - 1) + ")");
  parts.push_back(base_name(map.path) + ": " + map.variable);
  if (plane)
    parts.push_back((map.grid_name.empty() ? std::string("projected") : map.grid_name) + " grid");
  parts.push_back(res.range_from_percentiles
                      ? std::string("colours: ") + ink.pick("2nd–98th", "2nd-98th") +
                            " percentile" +
                            (map.scale == ColourScale::diverging ? ", symmetric" : "")
                      : std::string("colours: given range"));
  std::string subtitle = join(parts, ink.pick("  ·  ", "  |  "));
  set_colour(cr, 0.25);
  ink.font(13.5 * s);
  if (const double w = ink.width(subtitle); w > avail) ink.font(13.5 * s * avail / w);
  ink.show(subtitle, m.x, 52 * s, 0.0, 1.0);

  // ---- colour bar: frame, overflow triangles, ticks, units ----
  const double tri = 0.9 * bar.height;
  const double ymid = bar.y + 0.5 * bar.height;
  for (int side = 0; side < 2; ++side) {
    if (!(side == 0 ? below : above)) continue;
    const double x0 = side == 0 ? bar.x - 0.5 : bar.x + bar.width + 0.5;
    const double tip = side == 0 ? x0 - tri : x0 + tri;
    const Rgb8 c = colour_at(map.scale, side == 0 ? 0.0 : 1.0);
    cairo_move_to(cr, x0, bar.y - 0.5);
    cairo_line_to(cr, tip, ymid);
    cairo_line_to(cr, x0, bar.y + bar.height + 0.5);
    cairo_close_path(cr);
    cairo_set_source_rgb(cr, c.r / 255.0, c.g / 255.0, c.b / 255.0);
    cairo_fill_preserve(cr);
    set_colour(cr, 0.0);
    cairo_set_line_width(cr, 1.0);
    cairo_stroke(cr);
  }
  set_colour(cr, 0.0);
  cairo_set_line_width(cr, 1.0);
  cairo_rectangle(cr, bar.x - 0.5, bar.y - 0.5, bar.width + 1.0, bar.height + 1.0);
  cairo_stroke(cr);
  const double mag = std::max(std::fabs(res.range.low), std::fabs(res.range.high));
  const int e10 = static_cast<int>(std::floor(std::log10(mag)));
  const bool scaled = e10 <= -3 || e10 >= 4;
  const double factor = scaled ? std::pow(10.0, e10) : 1.0;
  const double step = nice_step(span / 5.0);
  const int tick_decimals =
      std::max(0, static_cast<int>(-std::floor(std::log10(step / factor) + 1e-9)));
  ink.font(12 * s);
  cairo_set_line_width(cr, thin);
  for (double k = std::ceil(res.range.low / step - 1e-9); k * step <= res.range.high + 1e-9 * step;
       k += 1) {
    const double x = std::floor(bar.x + (k * step - lo) / span * bar.width) + 0.5;
    cairo_move_to(cr, x, bar.y + bar.height + 0.5);
    cairo_line_to(cr, x, bar.y + bar.height + 0.5 + tick);
    cairo_stroke(cr);
    ink.show(fixed(k * step / factor, tick_decimals), x, bar.y + bar.height + tick + 4 * s, 0.5,
             0.0);
  }
  std::string units = pretty_units(map.units, !ink.ascii());
  if (scaled)
    units = std::string(ink.pick("× ", "x ")) + power_of_ten(e10, !ink.ascii()) +
            (units.empty() ? "" : " " + units);
  ink.font(13 * s);
  ink.show(units, bar.x + bar.width + (above ? tri : 0.0) + 10 * s, ymid, 0.0, 0.5);

  // ---- current arrows, thinned to one per d x d pixels, and the legend ----
  if (o.arrows) {
    const int d = std::max(14, px_round(32 * s));
    std::vector<Arrow> arrows;
    std::vector<bool> used(ny * nx, false);  // one arrow per cell when cells are larger than d
    const Region& r = res.region;
    const GridWindow& w = res.window;
    for (int py = d / 2; py < m.height; py += d) {
      const long j = row[static_cast<std::size_t>(py)];
      if (j < 0) continue;
      // Lat/lon maps: east moves lon by u/(R cos(lat)), north lat by v/R.
      const double coslat =
          plane ? 1.0
                : std::max(std::cos(map.lat_deg[static_cast<std::size_t>(j)] * deg_to_rad), 0.05);
      for (int px = d / 2; px < m.width; px += d) {
        const long i = col[static_cast<std::size_t>(px)];
        if (i < 0) continue;
        const auto jj = static_cast<std::size_t>(j), ii = static_cast<std::size_t>(i);
        const double u = map.u.at(jj, ii), v = map.v.at(jj, ii);
        if (!std::isfinite(u) || !std::isfinite(v) || (u == 0.0 && v == 0.0)) continue;
        const std::size_t cell = jj * nx + ii;
        if (used[cell]) continue;
        double ex = 0.0, ey = 0.0;
        if (plane) {
          // Plane maps: (dc/dt, dr/dt) = (e_c u + n_c v, e_r u + n_r v) with the
          // node's metric (grid.hpp DirectionalMetric; c, r per metre), then
          // pixels per grid unit on each page axis (y down).
          const DirectionalMetric& b = map.plane->metric(jj, ii);
          if (!std::isfinite(b.e_c)) continue;  // a pole: no east
          ex = c_sign * (b.e_c * u + b.n_c * v) * m.width / (w.c1 - w.c0);
          ey = -r_sign * (b.e_r * u + b.n_r * v) * m.height / (w.r1 - w.r0);
        } else {
          ex = u / coslat * m.width / (r.lon1 - r.lon0);
          ey = -v * m.height / (r.lat1 - r.lat0);
        }
        if (!(std::hypot(ex, ey) > 0.0)) continue;
        used[cell] = true;
        arrows.push_back({m.x + px + 0.5, m.y + py + 0.5, ex, ey, std::hypot(u, v)});
      }
    }
    if (!arrows.empty()) {
      std::vector<double> speeds;
      for (const Arrow& a : arrows) speeds.push_back(a.speed);
      // Reference: a round number near the 99th percentile, drawn 0.9 d long,
      // so strong currents stay within about one arrow spacing; arrows
      // shorter than 0.15 d would read as dots and are left out (common
      // practice, no source).
      res.arrow_reference = nice_round(percentile(speeds, 99.0));
      const double ref_len = 0.9 * d;
      cairo_save(cr);  // arrows stay inside the map box
      cairo_rectangle(cr, m.x, m.y, m.width, m.height);
      cairo_clip(cr);
      cairo_set_line_cap(cr, CAIRO_LINE_CAP_ROUND);
      cairo_set_line_join(cr, CAIRO_LINE_JOIN_ROUND);
      for (int pass = 0; pass < 2; ++pass) {
        if (pass == 0) {
          cairo_set_source_rgba(cr, 1.0, 1.0, 1.0, 0.8);
          cairo_set_line_width(cr, 2.8 * s);
        } else {
          set_colour(cr, 0.0);
          cairo_set_line_width(cr, 1.1 * s);
        }
        std::size_t drawn = 0;
        for (const Arrow& a : arrows) {
          const double len = a.speed / res.arrow_reference * ref_len;
          if (len < std::max(3.0, 0.15 * d)) continue;
          arrow_path(cr, a.x, a.y, a.ex, a.ey, len, std::min(0.4 * len, 6.0 * s));
          if (pass == 0) {
            const double n = std::hypot(a.ex, a.ey);
            res.arrows.push_back({a.x, a.y, a.ex / n, a.ey / n, a.speed});
          }
          ++drawn;
        }
        cairo_stroke(cr);
        res.arrow_count = drawn;
      }
      cairo_restore(cr);
      // Legend: the reference arrow at the right end of the colour bar row.
      const double xr = m.x + m.width - 4 * s;
      set_colour(cr, 0.0);
      cairo_set_line_width(cr, 1.3 * s);
      arrow_path(cr, xr - 0.5 * ref_len, ymid, 1.0, 0.0, ref_len, 6.0 * s);
      cairo_stroke(cr);
      ink.font(13 * s);
      ink.show(
          short_number(res.arrow_reference) + " " + pretty_units(map.arrow_units, !ink.ascii()),
          xr - ref_len - 8 * s, ymid, 1.0, 0.5);
    }
  }

  // Labels of parallels inside the map, over everything (white halo).
  ink.font(12.5 * s);
  for (const auto& l : map_labels) ink.show_on_map(l.text, l.x, l.y, 0.5, 0.5, 3.0 * s);

  if (cairo_status(cr) != CAIRO_STATUS_SUCCESS)
    output_fail(png_path,
                std::string("drawing failed (") + cairo_status_to_string(cairo_status(cr)) + ")");
  cairo_surface_flush(surface.get());
  TempFile tmp(png_path);
  tmp.publish(surface.get(), o.force);
  return res;
}

}  // namespace seatilt
