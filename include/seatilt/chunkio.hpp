// seatilt/chunkio.hpp — direct chunk I/O on netCDF-4 (HDF5) files.
//
// Owns: reading and writing the stored bytes of HDF5 chunks directly
// (H5Dread_chunk / H5Dwrite_chunk), and the two filters netCDF-C puts on
// compressed variables — byte shuffle and deflate — done by seatilt on any
// thread, so that (de)compression runs in parallel while every HDF5 call stays
// on one thread. Does not own netCDF metadata: netCDF-C defines a file
// (dimensions, variables, chunking, filters, _FillValue, attributes), closes
// it, and only then is it reopened here; see ../shared/CHUNK_IO.md for the
// measurements and the pitfalls each part below guards against.
//
// Stored chunk = filters applied in pipeline order to the full chunk (edge
// chunks padded to the full chunk shape with the dataset's fill value [2]):
//   shuffle [2]: byte k of element e moves to position k * n + e (n elements);
//                a no-op for 1-byte elements;
//   deflate [2]: a zlib stream (RFC 1950 [3]: 2-byte header, raw deflate
//                RFC 1951 [4], Adler-32), level 0..9 from the filter's
//                first client value.
// Codecs: libdeflate [5] (default; ~1.7x faster than zlib at level 1 on this
// machine, CHUNK_IO.md) or zlib [6] (compress2/uncompress: the bytes HDF5's
// own deflate filter writes). Both produce valid zlib streams; readers see
// identical values, only the compressed bytes differ.
//
// References
//  [1] HDF5 1.10 reference manual: H5Dwrite_chunk, H5Dread_chunk,
//      H5Dget_chunk_info_by_coord, H5Pget_filter2, H5Pget_fill_value.
//  [2] HDF5 source, H5Zshuffle.c and H5Zdeflate.c (filter byte layouts);
//      HDF5 user guide, "Chunking in HDF5" (edge chunks are stored full size).
//  [3] RFC 1950, ZLIB Compressed Data Format Specification 3.3.
//  [4] RFC 1951, DEFLATE Compressed Data Format Specification 1.3.
//  [5] libdeflate 1.14 (Debian libdeflate-dev), libdeflate.h.
//  [6] zlib 1.2.13 (Debian zlib1g-dev), zlib.h.
//
// Thread safety: encode_chunk / decode_chunk / shuffle helpers are reentrant
// (codec state is per thread). H5File, H5Chunked and RawInput call HDF5:
// use each from one thread, the same thread for every HDF5 object of a
// process (netCDF-C has no locking; CHUNK_IO.md pitfall 8).
// Errors: functions here throw std::runtime_error with a message that names
// the dataset and the problem; Reader and Writer turn it into InputError or
// OutputError with the file name.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

namespace seatilt::chunkio {

/// Compression library used for deflate.
enum class Codec {
  libdeflate,  ///< default
  zlib,        ///< fallback; byte-identical to HDF5's deflate filter
};

/// Element types that can be read or written raw (HDF5 integer and IEEE
/// float classes of the netCDF-4 numeric types).
enum class ElementType : std::uint8_t { i8, u8, i16, u16, i32, u32, i64, u64, f32, f64 };

/// Asks the kernel to back the whole 2 MiB pages inside [DATA, DATA + BYTES)
/// with transparent huge pages (madvise MADV_HUGEPAGE; ignored where not
/// supported). Call before the memory is first touched: on this project's
/// machine a first touch costs ~4.5 ms of CPU per MiB in 4 KiB pages and
/// ~0.15-1 ms per MiB in huge pages (docs/performance.md).
void advise_huge(void* data, std::size_t bytes);

/// Resizes V to N elements; a new block of at least 2 MiB is advised for huge
/// pages (advise_huge) before it is filled.
template <class T>
void resize_huge(std::vector<T>& v, std::size_t n) {
  if (n > v.capacity() && n * sizeof(T) >= (std::size_t{2} << 20)) {
    std::vector<T> fresh;
    fresh.reserve(n);
    advise_huge(fresh.data(), n * sizeof(T));
    fresh.assign(v.begin(), v.end());
    v.swap(fresh);
  }
  v.resize(n);
}

/// Stops HDF5 from closing still-open files itself at process exit
/// (H5dont_atexit). Call first thing in main(), before any netCDF or HDF5
/// call. seatilt closes every file it keeps explicitly; after a write error
/// (a full disk) HDF5 1.10's exit-time close of the failed file crashed
/// with SIGSEGV in H5F__close_cb (tests/e2e/test_disk_full.py).
void skip_hdf5_exit_cleanup();

/// Bytes per element of TYPE (1, 2, 4 or 8).
std::size_t element_size(ElementType type);

/// How one chunked dataset stores its values, as read from the file.
struct ChunkFormat {
  std::vector<std::size_t> dims;   ///< current extent per dimension (elements)
  std::vector<std::size_t> chunk;  ///< chunk shape, same rank, every entry >= 1
  ElementType type = ElementType::f32;
  bool swap = false;                ///< file byte order is not the machine's
  bool shuffle = false;             ///< shuffle filter in the pipeline
  bool deflate = false;             ///< deflate filter in the pipeline
  int level = 0;                    ///< deflate level 0..9 (when deflate)
  unsigned shuffle_bit = 0;         ///< filter-mask bit of shuffle (1 << index), 0 when absent
  unsigned deflate_bit = 0;         ///< filter-mask bit of deflate, 0 when absent
  std::vector<unsigned char> fill;  ///< one element, machine byte order

  [[nodiscard]] std::size_t elem_size() const { return element_size(type); }
  [[nodiscard]] std::size_t chunk_elements() const;
  [[nodiscard]] std::size_t chunk_bytes() const { return chunk_elements() * elem_size(); }
  /// Chunks along dimension D (ceil(dims[D] / chunk[D])).
  [[nodiscard]] std::size_t chunks_along(std::size_t d) const;
};

/// Shuffles N elements of SIZE bytes from IN to OUT (HDF5 shuffle [2]);
/// IN and OUT must not overlap. SIZE 1 copies.
void shuffle_bytes(const unsigned char* in, unsigned char* out, std::size_t n, std::size_t size);
/// Inverse of shuffle_bytes.
void unshuffle_bytes(const unsigned char* in, unsigned char* out, std::size_t n, std::size_t size);
/// Reverses the byte order of N elements of SIZE bytes in place.
void swap_bytes(unsigned char* data, std::size_t n, std::size_t size);

/// Encodes one full chunk for H5Dwrite_chunk with filter mask 0: byte swap
/// (when format.swap), shuffle, deflate at format.level with CODEC. CHUNK
/// holds chunk_bytes() in machine order, already padded with the fill value.
/// OUT receives the stored bytes (its capacity is reused). Throws
/// std::runtime_error when the codec fails (out of memory).
void encode_chunk(const ChunkFormat& format, Codec codec, const unsigned char* chunk,
                  std::vector<unsigned char>& out);

/// Decodes stored bytes DATA (SIZE bytes) written with FILTER_MASK (bit set =
/// that filter was skipped) into OUT (chunk_bytes(), machine order). Throws
/// std::runtime_error when the data do not inflate to exactly one chunk.
void decode_chunk(const ChunkFormat& format, const unsigned char* data, std::size_t size,
                  unsigned filter_mask, unsigned char* out);

/// An HDF5 file opened with the HDF5 library that netCDF-C links. Move-only.
class H5File {
 public:
  /// Opens PATH read-only or read-write. Throws std::runtime_error.
  H5File(const std::string& path, bool writable);
  ~H5File();
  H5File(H5File&& other) noexcept;
  H5File& operator=(H5File&& other) noexcept;
  H5File(const H5File&) = delete;
  H5File& operator=(const H5File&) = delete;
  /// Closes the file now (also done by the destructor); throws std::runtime_error
  /// when HDF5 reports a failure (e.g. a write that cannot be flushed).
  void close();
  [[nodiscard]] std::int64_t id() const { return id_; }

 private:
  std::int64_t id_ = -1;
};

/// One chunked dataset of an open H5File, for raw chunk access. Move-only.
class H5Chunked {
 public:
  /// Opens dataset NAME (netCDF variable name; the "_nc4_non_coord_" prefix
  /// netCDF-C uses for clashing names is tried too) without a chunk cache.
  /// Throws std::runtime_error when it does not exist.
  H5Chunked(const H5File& file, const std::string& name);
  ~H5Chunked();
  H5Chunked(H5Chunked&& other) noexcept;
  H5Chunked& operator=(H5Chunked&& other) noexcept;
  H5Chunked(const H5Chunked&) = delete;
  H5Chunked& operator=(const H5Chunked&) = delete;

  /// True when the chunks can be handled here: chunked layout, filters a
  /// subset of [shuffle, deflate] in that order, an integer or IEEE float
  /// element type. Otherwise WHY (when given) says what is not supported.
  [[nodiscard]] bool supported(std::string* why = nullptr) const;
  /// Storage description read from the file (only meaningful when supported()).
  [[nodiscard]] const ChunkFormat& format() const { return format_; }

  /// Sets the extent to DIMS (e.g. the final length of an unlimited time
  /// dimension; CHUNK_IO.md pitfall 1: before any chunk is written).
  void set_extent(const std::vector<std::size_t>& dims);
  /// Writes one stored chunk at element OFFSET (a multiple of the chunk
  /// shape, inside the extent: checked here, since HDF5 accepts an offset at
  /// the extent and the chunk is then invisible) with filter mask 0.
  void write_chunk(const std::vector<std::size_t>& offset, const unsigned char* data,
                   std::size_t size);
  /// Reads the stored bytes of the chunk at OFFSET into DATA and its filter
  /// mask into MASK; returns false (DATA empty) when the chunk was never
  /// written (its values are the fill value).
  bool read_chunk(const std::vector<std::size_t>& offset, std::vector<unsigned char>& data,
                  unsigned& mask);

 private:
  void read_format();
  std::string describe();  // fills format_; returns a problem or ""
  std::int64_t id_ = -1;
  std::string name_;
  ChunkFormat format_;
  bool chunked_ = false;
  std::string unsupported_;
};

/// One decoded (or still to be decoded) input chunk, shared between the
/// row slabs that cover it.
struct InputChunk {
  std::vector<std::size_t> offset;    ///< element offset of the chunk
  std::vector<unsigned char> stored;  ///< stored bytes until decoded
  unsigned mask = 0;
  bool allocated = false;           ///< false: every value is the fill value
  std::vector<unsigned char> data;  ///< inflated chunk, file byte order, after decoding
  bool planes = false;              ///< data still shuffled (byte planes)
};

/// Rows [j0, j0 + nrows) of the last two dimensions of a dataset at fixed
/// indices LEAD of the leading dimensions, as fetched raw (see RawInput).
class RawRows {
 public:
  /// Chunks this slab must decode (the others were decoded by earlier slabs).
  [[nodiscard]] std::size_t tasks() const { return pending_.size(); }
  /// Decodes pending chunk K; distinct K may run concurrently on any threads.
  /// Throws std::runtime_error for corrupt data.
  void run_task(std::size_t k) const;
  /// Converts slab row R (0..nrows-1; every task done, also those of the
  /// slabs fetched before this one) to doubles: OUT receives nx values, as a
  /// C cast from the stored type would give them (what nc_get_vara_double returns).
  void row_as_double(std::size_t r, double* out) const;
  [[nodiscard]] std::size_t rows() const { return nrows_; }

 private:
  friend class RawInput;
  const ChunkFormat* format_ = nullptr;
  std::size_t j0_ = 0, nrows_ = 0, nx_ = 0;
  std::size_t row_chunk0_ = 0, row_chunks_ = 0, col_chunks_ = 0;
  std::size_t lead_offset_ = 0;  ///< element offset of the leading indices inside a chunk
  std::vector<std::shared_ptr<InputChunk>> chunks_;  ///< row_chunks_ x col_chunks_
  std::vector<std::size_t> pending_;                 ///< indices into chunks_
};

/// Raw reader of one netCDF-4 variable: fetches stored chunks (HDF5 calls,
/// one thread) and keeps the chunks of the last slab so that overlapping
/// slabs (halo rows) decode each chunk once. Move-only.
class RawInput {
 public:
  /// Opens variable NAME of PATH read-only (a read-only netCDF handle on the
  /// same file may stay open). Returns nullptr and sets WHY when the variable
  /// cannot be read raw (not HDF5, contiguous, other filters, unsupported
  /// type, a chunk over MAX_CHUNK_BYTES decoded); never throws for those.
  static std::unique_ptr<RawInput> open(const std::string& path, const std::string& name,
                                        std::size_t max_chunk_bytes, std::string& why);
  [[nodiscard]] const ChunkFormat& format() const { return ds_.format(); }

  /// Fetches the chunks covering rows [j0, j0 + nrows) (second-last
  /// dimension), every column (last dimension), at leading indices LEAD
  /// (rank - 2 values). Slabs must be decoded in the order they are fetched.
  /// Throws std::runtime_error on an HDF5 failure.
  void fetch(const std::vector<std::size_t>& lead, std::size_t j0, std::size_t nrows, RawRows& out);

 private:
  RawInput(H5File file, H5Chunked ds) : file_(std::move(file)), ds_(std::move(ds)) {}
  H5File file_;
  H5Chunked ds_;
  std::vector<std::shared_ptr<InputChunk>> cache_;  ///< chunks of the last slab
};

}  // namespace seatilt::chunkio
