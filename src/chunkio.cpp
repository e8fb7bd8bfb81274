// chunkio.cpp — direct chunk I/O on netCDF-4 (HDF5) files (see chunkio.hpp).
//
// Notation: n = elements per chunk, s = bytes per element, bytes = n * s;
// "stored" = what H5Dread_chunk returns / H5Dwrite_chunk takes; a filter
// mask bit k set means filter k of the pipeline was skipped for that chunk.
#include "seatilt/chunkio.hpp"

#include <hdf5.h>
#include <libdeflate.h>
#include <sys/mman.h>
#include <zlib.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <cstring>
#include <stdexcept>
#include <utility>

namespace seatilt::chunkio {

namespace {

// ---- per-thread codec state ------------------------------------------------

/// libdeflate compressors (one per level, allocated on first use) and one
/// decompressor for the calling thread; libdeflate objects are not
/// thread-safe, so each thread owns its own [5].
struct CodecState {
  std::array<libdeflate_compressor*, 13> compressors{};
  libdeflate_decompressor* decompressor = nullptr;
  std::vector<unsigned char> scratch;   // shuffle buffer
  std::vector<unsigned char> deflated;  // compressed output before it is copied out
  std::vector<unsigned char> swapped;   // byte-swapped copy of a chunk to encode
  CodecState() = default;
  CodecState(const CodecState&) = delete;
  CodecState& operator=(const CodecState&) = delete;
  ~CodecState() {
    for (auto* c : compressors)
      if (c != nullptr) libdeflate_free_compressor(c);
    if (decompressor != nullptr) libdeflate_free_decompressor(decompressor);
  }
  libdeflate_compressor* compressor(int level) {
    auto& c = compressors[static_cast<std::size_t>(level)];
    if (c == nullptr) c = libdeflate_alloc_compressor(level);
    if (c == nullptr) throw std::runtime_error("libdeflate: cannot allocate a compressor");
    return c;
  }
  libdeflate_decompressor* inflater() {
    if (decompressor == nullptr) decompressor = libdeflate_alloc_decompressor();
    if (decompressor == nullptr)
      throw std::runtime_error("libdeflate: cannot allocate a decompressor");
    return decompressor;
  }
};

CodecState& codec_state() {
  thread_local CodecState state;
  return state;
}

/// Compresses IN (N bytes) into a zlib stream (RFC 1950) at LEVEL.
void deflate_into(Codec codec, int level, const unsigned char* in, std::size_t n,
                  std::vector<unsigned char>& out) {
  if (level < 0 || level > 9) throw std::runtime_error("deflate level outside 0..9");
  // Compress into this thread's scratch buffer (worst-case size), then copy
  // the exact bytes: OUT keeps only what it needs and no fresh memory is
  // zero-filled per chunk.
  std::vector<unsigned char>& tmp = codec_state().deflated;
  if (codec == Codec::libdeflate) {
    libdeflate_compressor* c = codec_state().compressor(level);
    const std::size_t bound = libdeflate_zlib_compress_bound(c, n);
    if (tmp.size() < bound) resize_huge(tmp, bound);
    const std::size_t got = libdeflate_zlib_compress(c, in, n, tmp.data(), bound);
    if (got == 0) throw std::runtime_error("libdeflate: compression failed");
    out.assign(tmp.data(), tmp.data() + got);
    return;
  }
  uLongf len = compressBound(static_cast<uLong>(n));
  if (tmp.size() < len) resize_huge(tmp, len);
  const int status = compress2(tmp.data(), &len, in, static_cast<uLong>(n), level);
  if (status != Z_OK)
    throw std::runtime_error(std::string("zlib: compression failed: ") + zError(status));
  out.assign(tmp.data(), tmp.data() + len);
}

/// Inflates a zlib stream IN (N bytes) into exactly BYTES bytes at OUT.
void inflate_into(const unsigned char* in, std::size_t n, unsigned char* out, std::size_t bytes) {
  std::size_t got = 0;
  const libdeflate_result r =
      libdeflate_zlib_decompress(codec_state().inflater(), in, n, out, bytes, &got);
  if (r != LIBDEFLATE_SUCCESS || got != bytes)
    throw std::runtime_error("compressed chunk does not inflate to one chunk of " +
                             std::to_string(bytes) + " bytes (corrupt data?)");
}

// ---- HDF5 helpers ----------------------------------------------------------

/// Closes an HDF5 identifier of any kind when it goes out of scope.
struct Hid {
  hid_t id = -1;
  explicit Hid(hid_t h) : id(h) {}
  Hid(const Hid&) = delete;
  Hid& operator=(const Hid&) = delete;
  ~Hid() {
    if (id < 0) return;
    H5E_BEGIN_TRY { H5Idec_ref(id); }
    H5E_END_TRY;
  }
  explicit operator bool() const { return id >= 0; }
};

hid_t native_type(ElementType t) {
  switch (t) {
    case ElementType::i8:
      return H5T_NATIVE_SCHAR;
    case ElementType::u8:
      return H5T_NATIVE_UCHAR;
    case ElementType::i16:
      return H5T_NATIVE_SHORT;
    case ElementType::u16:
      return H5T_NATIVE_USHORT;
    case ElementType::i32:
      return H5T_NATIVE_INT;
    case ElementType::u32:
      return H5T_NATIVE_UINT;
    case ElementType::i64:
      return H5T_NATIVE_LLONG;
    case ElementType::u64:
      return H5T_NATIVE_ULLONG;
    case ElementType::f32:
      return H5T_NATIVE_FLOAT;
    case ElementType::f64:
      return H5T_NATIVE_DOUBLE;
  }
  return H5T_NATIVE_FLOAT;
}

std::vector<hsize_t> to_hsize(const std::vector<std::size_t>& v) {
  return std::vector<hsize_t>(v.begin(), v.end());
}

template <class T>
void convert_run(const unsigned char* p, std::size_t n, double* out) {
  for (std::size_t i = 0; i < n; ++i) {
    T v;
    std::memcpy(&v, p + i * sizeof(T), sizeof(T));
    out[i] = static_cast<double>(v);  // as C (and nc_get_vara_double) converts
  }
}

/// Converts N elements of TYPE at P (machine order) to doubles.
void to_double(ElementType type, const unsigned char* p, std::size_t n, double* out) {
  switch (type) {
    case ElementType::i8:
      convert_run<signed char>(p, n, out);
      break;
    case ElementType::u8:
      convert_run<unsigned char>(p, n, out);
      break;
    case ElementType::i16:
      convert_run<std::int16_t>(p, n, out);
      break;
    case ElementType::u16:
      convert_run<std::uint16_t>(p, n, out);
      break;
    case ElementType::i32:
      convert_run<std::int32_t>(p, n, out);
      break;
    case ElementType::u32:
      convert_run<std::uint32_t>(p, n, out);
      break;
    case ElementType::i64:
      convert_run<long long>(p, n, out);
      break;
    case ElementType::u64:
      convert_run<unsigned long long>(p, n, out);
      break;
    case ElementType::f32:
      convert_run<float>(p, n, out);
      break;
    case ElementType::f64:
      convert_run<double>(p, n, out);
      break;
  }
}

}  // namespace

// ---- memory ----------------------------------------------------------------------

void advise_huge(void* data, std::size_t bytes) {
  // Only whole 2 MiB pages inside the block can be huge pages.
  constexpr std::uintptr_t huge = std::uintptr_t{2} << 20;
  const auto begin = (reinterpret_cast<std::uintptr_t>(data) + huge - 1) & ~(huge - 1);
  const auto end = (reinterpret_cast<std::uintptr_t>(data) + bytes) & ~(huge - 1);
  if (end > begin) ::madvise(reinterpret_cast<void*>(begin), end - begin, MADV_HUGEPAGE);
}

// ---- formats and filters -----------------------------------------------------

std::size_t element_size(ElementType type) {
  switch (type) {
    case ElementType::i8:
    case ElementType::u8:
      return 1;
    case ElementType::i16:
    case ElementType::u16:
      return 2;
    case ElementType::i32:
    case ElementType::u32:
    case ElementType::f32:
      return 4;
    case ElementType::i64:
    case ElementType::u64:
    case ElementType::f64:
      return 8;
  }
  return 1;
}

std::size_t ChunkFormat::chunk_elements() const {
  std::size_t n = 1;
  for (std::size_t c : chunk) n *= c;
  return n;
}

std::size_t ChunkFormat::chunks_along(std::size_t d) const {
  return chunk[d] == 0 ? 0 : (dims[d] + chunk[d] - 1) / chunk[d];
}

// HDF5 shuffle [2]: out[k * n + e] = in[e * s + k].
void shuffle_bytes(const unsigned char* in, unsigned char* out, std::size_t n, std::size_t size) {
  if (size == 4) {  // the common case, written out so the compiler keeps it in registers
    unsigned char* o0 = out;
    unsigned char* o1 = out + n;
    unsigned char* o2 = out + 2 * n;
    unsigned char* o3 = out + 3 * n;
    for (std::size_t e = 0; e < n; ++e) {
      o0[e] = in[4 * e];
      o1[e] = in[4 * e + 1];
      o2[e] = in[4 * e + 2];
      o3[e] = in[4 * e + 3];
    }
    return;
  }
  for (std::size_t k = 0; k < size; ++k)
    for (std::size_t e = 0; e < n; ++e) out[k * n + e] = in[e * size + k];
}

void unshuffle_bytes(const unsigned char* in, unsigned char* out, std::size_t n, std::size_t size) {
  if (size == 4) {
    const unsigned char* i0 = in;
    const unsigned char* i1 = in + n;
    const unsigned char* i2 = in + 2 * n;
    const unsigned char* i3 = in + 3 * n;
    for (std::size_t e = 0; e < n; ++e) {
      out[4 * e] = i0[e];
      out[4 * e + 1] = i1[e];
      out[4 * e + 2] = i2[e];
      out[4 * e + 3] = i3[e];
    }
    return;
  }
  for (std::size_t k = 0; k < size; ++k)
    for (std::size_t e = 0; e < n; ++e) out[e * size + k] = in[k * n + e];
}

void swap_bytes(unsigned char* data, std::size_t n, std::size_t size) {
  if (size < 2) return;
  for (std::size_t e = 0; e < n; ++e) std::reverse(data + e * size, data + (e + 1) * size);
}

void encode_chunk(const ChunkFormat& format, Codec codec, const unsigned char* chunk,
                  std::vector<unsigned char>& out) {
  const std::size_t n = format.chunk_elements(), s = format.elem_size(), bytes = n * s;
  const unsigned char* src = chunk;
  if (format.swap) {
    std::vector<unsigned char>& swapped = codec_state().swapped;
    if (swapped.size() < bytes) resize_huge(swapped, bytes);
    std::memcpy(swapped.data(), chunk, bytes);
    swap_bytes(swapped.data(), n, s);
    src = swapped.data();
  }
  if (format.shuffle && s > 1) {
    std::vector<unsigned char>& tmp = codec_state().scratch;
    if (tmp.size() < bytes) resize_huge(tmp, bytes);
    shuffle_bytes(src, tmp.data(), n, s);
    src = tmp.data();
  }
  if (!format.deflate) {
    out.assign(src, src + bytes);
    return;
  }
  deflate_into(codec, format.level, src, bytes, out);
}

void decode_chunk(const ChunkFormat& format, const unsigned char* data, std::size_t size,
                  unsigned filter_mask, unsigned char* out) {
  const std::size_t n = format.chunk_elements(), s = format.elem_size(), bytes = n * s;
  const bool deflated = format.deflate && (filter_mask & format.deflate_bit) == 0;
  const bool shuffled = format.shuffle && (filter_mask & format.shuffle_bit) == 0 && s > 1;
  std::vector<unsigned char>& tmp = codec_state().scratch;
  unsigned char* target = out;
  if (shuffled) {
    if (tmp.size() < bytes) resize_huge(tmp, bytes);
    target = tmp.data();
  }
  if (deflated) {
    inflate_into(data, size, target, bytes);
  } else {
    if (size != bytes)
      throw std::runtime_error("uncompressed chunk of " + std::to_string(size) +
                               " bytes, expected " + std::to_string(bytes));
    std::memcpy(target, data, bytes);
  }
  if (shuffled) unshuffle_bytes(tmp.data(), out, n, s);
  if (format.swap) swap_bytes(out, n, s);
}

// ---- H5File ----------------------------------------------------------------------

H5File::H5File(const std::string& path, bool writable) {
  hid_t id = -1;
  H5E_BEGIN_TRY {
    id = H5Fopen(path.c_str(), writable ? H5F_ACC_RDWR : H5F_ACC_RDONLY, H5P_DEFAULT);
  }
  H5E_END_TRY;
  if (id < 0)
    throw std::runtime_error(std::string("HDF5 cannot open the file ") +
                             (writable ? "for writing" : "for reading"));
  id_ = id;
}

H5File::~H5File() {
  if (id_ < 0) return;
  H5E_BEGIN_TRY { H5Fclose(id_); }
  H5E_END_TRY;
}

H5File::H5File(H5File&& other) noexcept : id_(std::exchange(other.id_, -1)) {}

H5File& H5File::operator=(H5File&& other) noexcept {
  if (this != &other) {
    if (id_ >= 0) {
      H5E_BEGIN_TRY { H5Fclose(id_); }
      H5E_END_TRY;
    }
    id_ = std::exchange(other.id_, -1);
  }
  return *this;
}

void H5File::close() {
  if (id_ < 0) return;
  herr_t status = -1;
  H5E_BEGIN_TRY { status = H5Fclose(id_); }
  H5E_END_TRY;
  id_ = -1;
  if (status < 0) throw std::runtime_error("HDF5 cannot close the file");
}

// ---- H5Chunked -------------------------------------------------------------------

H5Chunked::H5Chunked(const H5File& file, const std::string& name) : name_(name) {
  Hid dapl(H5Pcreate(H5P_DATASET_ACCESS));
  hid_t id = -1;
  H5E_BEGIN_TRY {
    // No HDF5 chunk cache: chunks are read and written whole, by us.
    if (dapl)
      H5Pset_chunk_cache(dapl.id, H5D_CHUNK_CACHE_NSLOTS_DEFAULT, 0, H5D_CHUNK_CACHE_W0_DEFAULT);
    id = H5Dopen2(static_cast<hid_t>(file.id()), name.c_str(), dapl ? dapl.id : H5P_DEFAULT);
    if (id < 0)  // netCDF-C's name for a variable that shares a dimension's name
      id = H5Dopen2(static_cast<hid_t>(file.id()), ("_nc4_non_coord_" + name).c_str(),
                    dapl ? dapl.id : H5P_DEFAULT);
  }
  H5E_END_TRY;
  if (id < 0) throw std::runtime_error("variable " + name + ": no HDF5 dataset of that name");
  id_ = id;
  try {
    read_format();
  } catch (...) {
    H5E_BEGIN_TRY { H5Dclose(id_); }
    H5E_END_TRY;
    id_ = -1;
    throw;
  }
}

H5Chunked::~H5Chunked() {
  if (id_ < 0) return;
  H5E_BEGIN_TRY { H5Dclose(id_); }
  H5E_END_TRY;
}

H5Chunked::H5Chunked(H5Chunked&& other) noexcept
    : id_(std::exchange(other.id_, -1)),
      name_(std::move(other.name_)),
      format_(std::move(other.format_)),
      chunked_(other.chunked_),
      unsupported_(std::move(other.unsupported_)) {}

H5Chunked& H5Chunked::operator=(H5Chunked&& other) noexcept {
  if (this != &other) {
    if (id_ >= 0) {
      H5E_BEGIN_TRY { H5Dclose(id_); }
      H5E_END_TRY;
    }
    id_ = std::exchange(other.id_, -1);
    name_ = std::move(other.name_);
    format_ = std::move(other.format_);
    chunked_ = other.chunked_;
    unsupported_ = std::move(other.unsupported_);
  }
  return *this;
}

void H5Chunked::read_format() {
  // Everything inside H5E_BEGIN_TRY/H5E_END_TRY must not throw (the macro
  // restores HDF5's error printing only on the normal path): collect the
  // problem and throw afterwards.
  std::string problem;
  H5E_BEGIN_TRY { problem = describe(); }
  H5E_END_TRY;
  if (!problem.empty()) throw std::runtime_error("variable " + name_ + ": " + problem);
}

std::string H5Chunked::describe() {
  Hid space(H5Dget_space(id_));
  Hid dcpl(H5Dget_create_plist(id_));
  Hid type(H5Dget_type(id_));
  if (!space || !dcpl || !type) return "HDF5 cannot describe the dataset";
  const int rank = H5Sget_simple_extent_ndims(space.id);
  if (rank < 0) return "HDF5 cannot read the extent";
  std::vector<hsize_t> dims(static_cast<std::size_t>(rank));
  if (rank > 0 && H5Sget_simple_extent_dims(space.id, dims.data(), nullptr) < 0)
    return "HDF5 cannot read the extent";
  format_.dims.assign(dims.begin(), dims.end());

  chunked_ = H5Pget_layout(dcpl.id) == H5D_CHUNKED;
  if (!chunked_) unsupported_ = "not chunked";
  if (chunked_) {
    std::vector<hsize_t> chunk(static_cast<std::size_t>(rank));
    if (H5Pget_chunk(dcpl.id, rank, chunk.data()) != rank)
      return "HDF5 cannot read the chunk shape";
    format_.chunk.assign(chunk.begin(), chunk.end());
    for (std::size_t c : format_.chunk)
      if (c == 0) return "chunk shape with a zero extent";
  }

  // Filters: a subset of [shuffle, deflate] in that order.
  const int nfilters = H5Pget_nfilters(dcpl.id);
  for (int k = 0; k < nfilters && unsupported_.empty(); ++k) {
    unsigned flags = 0, config = 0;
    std::size_t nelmts = 8;
    unsigned cd[8] = {0};
    char fname[64] = {0};
    const H5Z_filter_t f = H5Pget_filter2(dcpl.id, static_cast<unsigned>(k), &flags, &nelmts, cd,
                                          sizeof fname, fname, &config);
    if (f == H5Z_FILTER_SHUFFLE && !format_.shuffle && !format_.deflate) {
      format_.shuffle = true;
      format_.shuffle_bit = 1u << k;
    } else if (f == H5Z_FILTER_DEFLATE && !format_.deflate) {
      format_.deflate = true;
      format_.deflate_bit = 1u << k;
      format_.level = nelmts > 0 ? static_cast<int>(cd[0]) : 6;  // H5Pset_deflate default
      if (format_.level > 9) format_.level = 9;
    } else {
      unsupported_ = "filter " + std::to_string(f) +
                     (fname[0] ? std::string(" (") + fname + ")" : std::string()) +
                     " at position " + std::to_string(k);
    }
  }

  // Element type: integers of 1-8 bytes and IEEE binary32/binary64.
  const H5T_class_t cls = H5Tget_class(type.id);
  const std::size_t size = H5Tget_size(type.id);
  const H5T_order_t order = H5Tget_order(type.id);
  bool ok = true;
  if (cls == H5T_INTEGER) {
    const bool is_signed = H5Tget_sign(type.id) == H5T_SGN_2;
    switch (size) {
      case 1:
        format_.type = is_signed ? ElementType::i8 : ElementType::u8;
        break;
      case 2:
        format_.type = is_signed ? ElementType::i16 : ElementType::u16;
        break;
      case 4:
        format_.type = is_signed ? ElementType::i32 : ElementType::u32;
        break;
      case 8:
        format_.type = is_signed ? ElementType::i64 : ElementType::u64;
        break;
      default:
        ok = false;
    }
  } else if (cls == H5T_FLOAT) {
    if (H5Tequal(type.id, H5T_IEEE_F32LE) > 0 || H5Tequal(type.id, H5T_IEEE_F32BE) > 0)
      format_.type = ElementType::f32;
    else if (H5Tequal(type.id, H5T_IEEE_F64LE) > 0 || H5Tequal(type.id, H5T_IEEE_F64BE) > 0)
      format_.type = ElementType::f64;
    else
      ok = false;
  } else {
    ok = false;
  }
  if (!ok && unsupported_.empty()) unsupported_ = "element type not an integer or IEEE float";
  if (ok) {
    const H5T_order_t native = H5Tget_order(H5T_NATIVE_INT);
    if (size > 1 && order != H5T_ORDER_LE && order != H5T_ORDER_BE && unsupported_.empty())
      unsupported_ = "byte order neither little- nor big-endian";
    format_.swap = size > 1 && order != native;
  }

  // Fill value of chunks never written: what H5Dread returns for them.
  format_.fill.assign(size > 0 ? size : 1, 0);
  H5D_fill_value_t status = H5D_FILL_VALUE_UNDEFINED;
  if (ok && H5Pfill_value_defined(dcpl.id, &status) >= 0 && status != H5D_FILL_VALUE_UNDEFINED) {
    if (H5Pget_fill_value(dcpl.id, native_type(format_.type), format_.fill.data()) < 0)
      return "HDF5 cannot read the fill value";
  }
  return {};
}

bool H5Chunked::supported(std::string* why) const {
  if (!unsupported_.empty()) {
    if (why != nullptr) *why = unsupported_;
    return false;
  }
  if (format_.dims.size() < 2) {
    if (why != nullptr) *why = "fewer than two dimensions";
    return false;
  }
  return true;
}

void H5Chunked::set_extent(const std::vector<std::size_t>& dims) {
  if (dims.size() != format_.dims.size())
    throw std::runtime_error("variable " + name_ + ": extent of the wrong rank");
  const auto h = to_hsize(dims);
  herr_t status = -1;
  H5E_BEGIN_TRY { status = H5Dset_extent(id_, h.data()); }
  H5E_END_TRY;
  if (status < 0) throw std::runtime_error("variable " + name_ + ": HDF5 cannot set the extent");
  format_.dims = dims;
}

void H5Chunked::write_chunk(const std::vector<std::size_t>& offset, const unsigned char* data,
                            std::size_t size) {
  if (offset.size() != format_.dims.size())
    throw std::runtime_error("variable " + name_ + ": chunk offset of the wrong rank");
  for (std::size_t d = 0; d < offset.size(); ++d)
    if (offset[d] % format_.chunk[d] != 0 || offset[d] >= format_.dims[d])
      throw std::runtime_error("variable " + name_ + ": chunk offset " + std::to_string(offset[d]) +
                               " in dimension " + std::to_string(d) +
                               " is not a chunk start inside the extent " +
                               std::to_string(format_.dims[d]));
  const auto h = to_hsize(offset);
  herr_t status = -1;
  errno = 0;
  H5E_BEGIN_TRY { status = H5Dwrite_chunk(id_, H5P_DEFAULT, 0, h.data(), size, data); }
  H5E_END_TRY;
  if (status < 0) {
    // The system's reason where HDF5's file driver left one that matters to
    // the user (full disk, quota, file size limit, device error).
    const int err = errno;
    const bool telling = err == ENOSPC || err == EDQUOT || err == EFBIG || err == EIO;
    throw std::runtime_error("variable " + name_ + ": HDF5 cannot write a chunk" +
                             (telling ? std::string(" (") + std::strerror(err) + ")" : ""));
  }
}

void skip_hdf5_exit_cleanup() { H5dont_atexit(); }

bool H5Chunked::read_chunk(const std::vector<std::size_t>& offset, std::vector<unsigned char>& data,
                           unsigned& mask) {
  const auto h = to_hsize(offset);
  haddr_t addr = HADDR_UNDEF;
  hsize_t size = 0;
  unsigned m = 0;
  herr_t status = -1;
  H5E_BEGIN_TRY { status = H5Dget_chunk_info_by_coord(id_, h.data(), &m, &addr, &size); }
  H5E_END_TRY;
  if (status < 0) throw std::runtime_error("variable " + name_ + ": HDF5 cannot locate a chunk");
  data.clear();
  if (addr == HADDR_UNDEF || size == 0) return false;
  resize_huge(data, static_cast<std::size_t>(size));
  std::uint32_t filters = 0;
  H5E_BEGIN_TRY { status = H5Dread_chunk(id_, H5P_DEFAULT, h.data(), &filters, data.data()); }
  H5E_END_TRY;
  if (status < 0) throw std::runtime_error("variable " + name_ + ": HDF5 cannot read a chunk");
  mask = filters;
  return true;
}

// ---- RawRows / RawInput -------------------------------------------------------------

void RawRows::run_task(std::size_t k) const {
  // Inflate straight into the chunk's buffer and leave a shuffled chunk in
  // its byte planes: rows are unshuffled (and byte-swapped) as they are
  // read, so no chunk-sized scratch buffer is needed.
  const ChunkFormat& f = *format_;
  InputChunk& c = *chunks_[pending_[k]];
  const std::size_t bytes = f.chunk_bytes();
  resize_huge(c.data, bytes);
  if (f.deflate && (c.mask & f.deflate_bit) == 0) {
    inflate_into(c.stored.data(), c.stored.size(), c.data.data(), bytes);
  } else {
    if (c.stored.size() != bytes)
      throw std::runtime_error("uncompressed chunk of " + std::to_string(c.stored.size()) +
                               " bytes, expected " + std::to_string(bytes));
    std::memcpy(c.data.data(), c.stored.data(), bytes);
  }
  c.planes = f.shuffle && (c.mask & f.shuffle_bit) == 0 && f.elem_size() > 1;
  std::vector<unsigned char>().swap(c.stored);  // the stored bytes are no longer needed
}

void RawRows::row_as_double(std::size_t r, double* out) const {
  const ChunkFormat& f = *format_;
  const std::size_t rank = f.chunk.size();
  const std::size_t cr = f.chunk[rank - 2], cc = f.chunk[rank - 1], es = f.elem_size();
  const std::size_t n_chunk = f.chunk_elements();
  const std::size_t j = j0_ + r;
  const std::size_t rc = j / cr - row_chunk0_, jr = j % cr;
  thread_local std::vector<unsigned char> row;
  for (std::size_t c = 0; c < col_chunks_; ++c) {
    const InputChunk& ch = *chunks_[rc * col_chunks_ + c];
    const std::size_t i0 = c * cc, n = std::min(cc, nx_ - i0);
    if (!ch.allocated) {
      double v = 0.0;
      to_double(f.type, f.fill.data(), 1, &v);
      std::fill(out + i0, out + i0 + n, v);
      continue;
    }
    const std::size_t first = lead_offset_ + jr * cc;  // element index inside the chunk
    const unsigned char* src = ch.data.data() + first * es;
    if (ch.planes || f.swap) {
      row.resize(n * es);
      if (ch.planes) {  // byte k of element e is at k * n_chunk + e [2]
        for (std::size_t b = 0; b < es; ++b) {
          const unsigned char* plane = ch.data.data() + b * n_chunk + first;
          for (std::size_t e = 0; e < n; ++e) row[e * es + b] = plane[e];
        }
      } else {
        std::memcpy(row.data(), src, n * es);
      }
      if (f.swap) swap_bytes(row.data(), n, es);
      src = row.data();
    }
    to_double(f.type, src, n, out + i0);
  }
}

std::unique_ptr<RawInput> RawInput::open(const std::string& path, const std::string& name,
                                         std::size_t max_chunk_bytes, std::string& why) {
  try {
    H5File file(path, false);
    H5Chunked ds(file, name);
    if (!ds.supported(&why)) return nullptr;
    if (ds.format().chunk_bytes() > max_chunk_bytes) {
      why = "chunks of " + std::to_string(ds.format().chunk_bytes()) + " bytes";
      return nullptr;
    }
    return std::unique_ptr<RawInput>(new RawInput(std::move(file), std::move(ds)));
  } catch (const std::exception& e) {
    why = e.what();
    return nullptr;
  }
}

void RawInput::fetch(const std::vector<std::size_t>& lead, std::size_t j0, std::size_t nrows,
                     RawRows& out) {
  const ChunkFormat& f = ds_.format();
  const std::size_t rank = f.dims.size();
  if (lead.size() != rank - 2)
    throw std::logic_error("RawInput::fetch: leading indices of the wrong rank");
  const std::size_t cr = f.chunk[rank - 2], cc = f.chunk[rank - 1];
  out = RawRows();
  out.format_ = &f;
  out.j0_ = j0;
  out.nrows_ = nrows;
  out.nx_ = f.dims[rank - 1];
  if (nrows == 0) return;
  out.row_chunk0_ = j0 / cr;
  out.row_chunks_ = (j0 + nrows - 1) / cr + 1 - out.row_chunk0_;
  out.col_chunks_ = f.chunks_along(rank - 1);

  // Leading dimensions: the chunk that holds index lead[d], and the element
  // offset of (lead..., 0, 0) inside it (row-major chunk strides).
  std::vector<std::size_t> offset(rank, 0);
  std::size_t stride = cr * cc;
  out.lead_offset_ = 0;
  for (std::size_t d = rank - 2; d-- > 0;) {
    offset[d] = lead[d] / f.chunk[d] * f.chunk[d];
    out.lead_offset_ += (lead[d] - offset[d]) * stride;
    stride *= f.chunk[d];
  }

  // A record beyond this variable's own extent (the unlimited dimension grown
  // by another variable) was never written: fill, as netCDF-C returns it.
  bool beyond = false;
  for (std::size_t d = 0; d + 2 < rank; ++d) beyond = beyond || lead[d] >= f.dims[d];

  std::vector<std::shared_ptr<InputChunk>> keep;
  for (std::size_t rc = 0; rc < out.row_chunks_; ++rc) {
    for (std::size_t c = 0; c < out.col_chunks_; ++c) {
      offset[rank - 2] = (out.row_chunk0_ + rc) * cr;
      offset[rank - 1] = c * cc;
      std::shared_ptr<InputChunk> chunk;
      for (const auto& cached : cache_)
        if (cached->offset == offset) chunk = cached;
      if (!chunk) {
        chunk = std::make_shared<InputChunk>();
        chunk->offset = offset;
        chunk->allocated = !beyond && ds_.read_chunk(offset, chunk->stored, chunk->mask);
        if (chunk->allocated) out.pending_.push_back(out.chunks_.size());
      }
      out.chunks_.push_back(chunk);
      keep.push_back(chunk);
    }
  }
  cache_ = std::move(keep);
}

}  // namespace seatilt::chunkio
