// Package npy reads and writes arrays in the NPY file format (format
// versions 1.0, 2.0 and 3.0), as used for stimulus movies and for
// exporting estimates.
//
// # Reading
//
// Read parses one array: the magic string, the version, the header (a
// Python dict literal with the keys 'descr', 'fortran_order' and 'shape')
// and the raw element bytes. Only simple scalar dtypes are accepted
// ('<f8', '<f4', '|u1', '<i4', ...); structured dtypes and object arrays are
// rejected. The header is bounded (MaxHeader bytes) and the data are read
// incrementally, so a hostile header that claims a huge shape costs no more
// memory than the bytes actually present, and never more than the limit
// given to ReadLimit. Array keeps the data in their stored dtype;
// Float64To converts any range of elements.
//
// # Writing
//
// Write writes a C-order little-endian float64 ('<f8') array with a
// version 1.0 header padded to a multiple of 64 bytes; Write32 writes
// float32 ('<f4').
//
// # Concurrency
//
// The functions keep no state; an *Array may be read by several goroutines
// at once and must not be changed while it is being read.
package npy
