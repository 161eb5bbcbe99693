package ingest

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"
)

// NIfTI-1 (single-file .nii, optionally gzip-compressed as .nii.gz) is read
// here as laid out in the format's reference header nifti1.h (byte offsets
// below, from memory of that header; the fixtures written by nibabel in
// testdata/nifti check them).

// Sentinel kinds of NIfTI and binary-file problems.
var (
	ErrTruncated        = errors.New("file ends before its data do")
	ErrNotNifti         = errors.New("not a single-file NIfTI-1 image")
	ErrNiftiDatatype    = errors.New("unsupported NIfTI datatype")
	ErrGridMismatch     = errors.New("not on the grid of the atlas")
	ErrEmptyLabel       = errors.New("label has no voxels in the atlas")
	ErrAtlas            = errors.New("not a usable label atlas")
	ErrNonFiniteVoxel   = errors.New("voxel value is not a finite number")
	ErrNiftiHeaderValue = errors.New("impossible NIfTI header value")
)

// niftiHeaderSize is sizeof_hdr of NIfTI-1; NIfTI-2 has 540.
const niftiHeaderSize = 348

// NIfTI-1 datatype codes (nifti1.h) that topostate reads.
const (
	dtUint8   = 2
	dtInt16   = 4
	dtInt32   = 8
	dtFloat32 = 16
	dtFloat64 = 64
	dtInt8    = 256
	dtUint16  = 512
	dtUint32  = 768
	dtInt64   = 1024
	dtUint64  = 1280
)

// niftiTypes maps a supported datatype code to its name and bytes per voxel.
var niftiTypes = map[int]struct {
	name  string
	bytes int
}{
	dtUint8: {"uint8", 1}, dtInt16: {"int16", 2}, dtInt32: {"int32", 4}, dtFloat32: {"float32", 4},
	dtFloat64: {"float64", 8}, dtInt8: {"int8", 1}, dtUint16: {"uint16", 2}, dtUint32: {"uint32", 4},
	dtInt64: {"int64", 8}, dtUint64: {"uint64", 8},
}

// niftiTypeNames names codes topostate refuses, for the error message.
var niftiTypeNames = map[int]string{1: "binary (1 bit)", 32: "complex64", 128: "RGB24", 1536: "float128",
	1792: "complex128", 2048: "complex256", 2304: "RGBA32"}

// NiftiHeader is what topostate reads from a NIfTI-1 header.
type NiftiHeader struct {
	Dim       [8]int     // dim[0]: number of dimensions; dim[1..dim[0]]: sizes (x, y, z, t, ...)
	Datatype  int        // datatype code (nifti1.h)
	Bitpix    int        // bits per voxel
	Pixdim    [8]float64 // pixdim[0]: qfac (-1 or 1); [1..3]: voxel size; [4]: time step
	VoxOffset int64      // byte offset of the image data in the (uncompressed) file
	SclSlope  float64    // value = SclSlope*stored + SclInter; 0 (or not finite): no scaling
	SclInter  float64
	XYZTUnits int // space unit in bits 0-2, time unit in bits 3-5
	QformCode int // > 0: the quaternion affine is set
	SformCode int // > 0: the SRow affine is set
	Quatern   [3]float64
	QOffset   [3]float64
	SRow      [3][4]float64
	Order     binary.ByteOrder
}

// parseNiftiHeader decodes the 348 header bytes. Either byte order is
// accepted: the one in which sizeof_hdr reads 348.
func parseNiftiHeader(path string, b []byte) (*NiftiHeader, error) {
	if len(b) < niftiHeaderSize {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: %d bytes, a NIfTI-1 header alone has 348", ErrTruncated, len(b))}
	}
	h := &NiftiHeader{Order: binary.LittleEndian}
	switch {
	case binary.LittleEndian.Uint32(b) == niftiHeaderSize:
	case binary.BigEndian.Uint32(b) == niftiHeaderSize:
		h.Order = binary.BigEndian
	case binary.LittleEndian.Uint32(b) == 540 || binary.BigEndian.Uint32(b) == 540:
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: this is NIfTI-2; convert it to NIfTI-1 (for example nibabel's Nifti1Image) first", ErrNotNifti)}
	default:
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: the first four bytes are not sizeof_hdr 348 in either byte order", ErrNotNifti)}
	}
	switch magic := string(b[344:348]); magic {
	case "n+1\x00":
	case "ni1\x00":
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: the header says its data is in a separate .img file; join the pair into one .nii file", ErrNotNifti)}
	default:
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: magic %q, want \"n+1\"", ErrNotNifti, strings.TrimRight(magic, "\x00"))}
	}
	o := h.Order
	i16 := func(off int) int { return int(int16(o.Uint16(b[off:]))) }
	f32 := func(off int) float64 { return float64(math.Float32frombits(o.Uint32(b[off:]))) }
	for i := range h.Dim {
		h.Dim[i] = i16(40 + 2*i)
		h.Pixdim[i] = f32(76 + 4*i)
	}
	h.Datatype, h.Bitpix = int(uint16(i16(70))), i16(72)
	vox := f32(108)
	h.SclSlope, h.SclInter = f32(112), f32(116)
	h.XYZTUnits = int(b[123])
	h.QformCode, h.SformCode = i16(252), i16(254)
	for i := range 3 {
		h.Quatern[i] = f32(256 + 4*i)
		h.QOffset[i] = f32(268 + 4*i)
		for j := range 4 {
			h.SRow[i][j] = f32(280 + 16*i + 4*j)
		}
	}
	bad := func(format string, a ...any) error {
		return &ParseError{Path: path, Err: fmt.Errorf("%w: "+format, append([]any{ErrNiftiHeaderValue}, a...)...)}
	}
	if h.Dim[0] < 1 || h.Dim[0] > 7 {
		return nil, bad("dim[0] = %d, want 1 to 7 dimensions", h.Dim[0])
	}
	for i := 1; i <= h.Dim[0]; i++ {
		if h.Dim[i] < 1 {
			return nil, bad("dim[%d] = %d, want a positive size", i, h.Dim[i])
		}
	}
	// vox_offset is a float in the header; it must be a whole number of
	// bytes past the header and its 4-byte extension flag.
	if !(vox >= niftiHeaderSize+4) || vox != math.Trunc(vox) || vox > 1<<40 {
		return nil, bad("vox_offset = %v, want a whole number of bytes of at least 352", vox)
	}
	h.VoxOffset = int64(vox)
	if t, ok := niftiTypes[h.Datatype]; ok && h.Bitpix != 8*t.bytes {
		return nil, bad("bitpix = %d but datatype %s has %d bits", h.Bitpix, t.name, 8*t.bytes)
	}
	return h, nil
}

// maxVolumeBytes bounds one 3-D volume (a 1 mm whole-head grid in float64
// is about 60 MB); a header asking for more is refused before anything is
// allocated for it.
const maxVolumeBytes = 1 << 30

// volumeBytes returns the bytes of one x*y*z volume, checking the size
// against maxVolumeBytes and, for an uncompressed file of size bytes
// (size < 0: compressed, unknown), that volumes volumes fit in it.
func (h *NiftiHeader) volumeBytes(path string, bpv, volumes int, size int64) (int, error) {
	n := int64(h.Dim[1]) * int64(h.Dim[2]) * int64(h.Dim[3]) * int64(bpv)
	if n > maxVolumeBytes {
		return 0, &ParseError{Path: path, Err: fmt.Errorf("%w: a %d x %d x %d volume of %d-byte voxels is over 1 GiB", ErrNiftiHeaderValue, h.Dim[1], h.Dim[2], h.Dim[3], bpv)}
	}
	if need := h.VoxOffset + n*int64(volumes); size >= 0 && size < need {
		return 0, &ParseError{Path: path, Err: fmt.Errorf("%w: the header describes %d volume(s) of %d bytes from byte %d (%d bytes), the file has %d", ErrTruncated, volumes, n, h.VoxOffset, need, size)}
	}
	return int(n), nil
}

// voxelBytes returns the bytes per voxel of a supported datatype, or an
// error naming the datatype.
func (h *NiftiHeader) voxelBytes(path string) (int, error) {
	if t, ok := niftiTypes[h.Datatype]; ok {
		return t.bytes, nil
	}
	name := niftiTypeNames[h.Datatype]
	if name == "" {
		name = "unknown"
	}
	return 0, &ParseError{Path: path, Err: fmt.Errorf("%w %d (%s); topostate reads uint8, int8, int16, uint16, int32, uint32, int64, uint64, float32 and float64 images", ErrNiftiDatatype, h.Datatype, name)}
}

// scaled reports whether stored values are scaled: scl_slope non-zero and
// finite (nifti1.h: "If the scl_slope field is nonzero, then each voxel
// value in the dataset should be scaled as y = scl_slope * x + scl_inter").
func (h *NiftiHeader) scaled() bool {
	return h.SclSlope != 0 && !math.IsNaN(h.SclSlope) && !math.IsInf(h.SclSlope, 0)
}

// scale maps a stored value (or a mean of stored values: the map is
// linear) to the image value.
func (h *NiftiHeader) scale(v float64) float64 {
	if !h.scaled() {
		return v
	}
	inter := h.SclInter
	if math.IsNaN(inter) || math.IsInf(inter, 0) {
		inter = 0
	}
	return h.SclSlope*v + inter
}

// TR returns the time step pixdim[4] in seconds, using the time unit in
// bits 3-5 of xyzt_units: 8 seconds, 16 milliseconds, 24 microseconds. ok is
// false when the header states no time unit (0), a unit that is not a time
// (Hz, ppm, rad/s), or no positive step; a unitless step is not trusted.
func (h *NiftiHeader) TR() (seconds float64, ok bool) {
	step := h.Pixdim[4]
	if !(step > 0) || math.IsInf(step, 0) {
		return 0, false
	}
	switch h.XYZTUnits & 0x38 {
	case 8:
		return step, true
	case 16:
		return step * 1e-3, true
	case 24:
		return step * 1e-6, true
	}
	return 0, false
}

// Affine returns the voxel-to-world matrix (3 x 4, millimetres) the header
// prefers: the sform when sform_code > 0, else the qform when qform_code > 0
// (nifti1.h "method 2": rotation from the quaternion (b, c, d) with
// a = sqrt(1 - b^2 - c^2 - d^2), columns scaled by pixdim[1..3], the third
// by qfac = pixdim[0] (taken as 1 unless negative), translated by
// qoffset). known is false when neither code is set; the matrix is then the
// voxel sizes on the diagonal.
func (h *NiftiHeader) Affine() (m [3][4]float64, known bool) {
	if h.SformCode > 0 {
		return h.SRow, true
	}
	dx, dy, dz := h.Pixdim[1], h.Pixdim[2], h.Pixdim[3]
	if h.QformCode <= 0 {
		m[0][0], m[1][1], m[2][2] = dx, dy, dz
		return m, false
	}
	b, c, d := h.Quatern[0], h.Quatern[1], h.Quatern[2]
	a := 1 - (b*b + c*c + d*d)
	if a < 1e-7 { // a 180-degree rotation: renormalise (b, c, d)
		n := 1 / math.Sqrt(b*b+c*c+d*d)
		b, c, d, a = b*n, c*n, d*n, 0
	} else {
		a = math.Sqrt(a)
	}
	if h.Pixdim[0] < 0 {
		dz = -dz
	}
	r := [3][3]float64{
		{a*a + b*b - c*c - d*d, 2*b*c - 2*a*d, 2*b*d + 2*a*c},
		{2*b*c + 2*a*d, a*a + c*c - b*b - d*d, 2*c*d - 2*a*b},
		{2*b*d - 2*a*c, 2*c*d + 2*a*b, a*a + d*d - c*c - b*b},
	}
	for i := range 3 {
		m[i][0], m[i][1], m[i][2], m[i][3] = r[i][0]*dx, r[i][1]*dy, r[i][2]*dz, h.QOffset[i]
	}
	return m, true
}

// gridTolerance is the largest difference, in millimetres, allowed between
// two affines' entries (or voxel sizes) for images on the same grid. Common
// practice, no source: far below a voxel, far above float32 rounding.
const gridTolerance = 1e-3

// sameGrid explains how h (of path) and the atlas header differ, or
// returns "" when they share a grid: the same x, y, z sizes and, when both
// state an orientation, the same affine; otherwise the same voxel sizes.
func sameGrid(h, atlas *NiftiHeader) string {
	if h.Dim[1] != atlas.Dim[1] || h.Dim[2] != atlas.Dim[2] || h.Dim[3] != atlas.Dim[3] {
		return fmt.Sprintf("the image is %d x %d x %d voxels, the atlas %d x %d x %d", h.Dim[1], h.Dim[2], h.Dim[3], atlas.Dim[1], atlas.Dim[2], atlas.Dim[3])
	}
	ma, ka := h.Affine()
	mb, kb := atlas.Affine()
	if !ka || !kb {
		for i := 1; i <= 3; i++ {
			if math.Abs(h.Pixdim[i]-atlas.Pixdim[i]) > gridTolerance {
				return fmt.Sprintf("voxel size %d is %g mm in the image, %g mm in the atlas", i, h.Pixdim[i], atlas.Pixdim[i])
			}
		}
		return ""
	}
	for i := range 3 {
		for j := range 4 {
			if math.Abs(ma[i][j]-mb[i][j]) > gridTolerance {
				return fmt.Sprintf("the voxel-to-world affines differ (row %d: image %s, atlas %s)", i+1, fmtRow(ma[i]), fmtRow(mb[i]))
			}
		}
	}
	return ""
}

func fmtRow(r [4]float64) string {
	// Adding +0 turns -0 into 0 (IEEE 754), so rows print cleanly.
	return fmt.Sprintf("[%.4g %.4g %.4g %.4g]", r[0]+0, r[1]+0, r[2]+0, r[3]+0)
}

// niftiFile is an open NIfTI-1 file positioned at its image data. Every
// byte read from disk also goes through hash (when not nil).
type niftiFile struct {
	path string
	h    *NiftiHeader
	f    *os.File
	raw  io.Reader // the file's bytes (through the hash)
	gz   *gzip.Reader
	data io.Reader // uncompressed bytes from the image data on
	size int64     // file size when not compressed; -1 when compressed
}

// openNifti opens path, gzip-compressed or not (told by its first two
// bytes, not its name), reads the header and skips to vox_offset.
func openNifti(path string, hash io.Writer) (*niftiFile, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, err
	}
	nf := &niftiFile{path: path, f: f, size: -1}
	var raw io.Reader = f
	if hash != nil {
		raw = io.TeeReader(f, hash)
	}
	nf.raw = raw
	br := bufio.NewReaderSize(raw, 1<<16)
	head, _ := br.Peek(2)
	var r io.Reader = br
	if bytes.Equal(head, []byte{0x1f, 0x8b}) {
		gz, err := gzip.NewReader(br)
		if err != nil {
			f.Close()
			return nil, &ParseError{Path: path, Err: fmt.Errorf("not readable gzip: %w", err)}
		}
		nf.gz = gz
		r = bufio.NewReaderSize(gz, 1<<16)
	} else if st, err := f.Stat(); err == nil {
		nf.size = st.Size()
	}
	hdr := make([]byte, niftiHeaderSize)
	n, err := io.ReadFull(r, hdr)
	if err != nil && !errors.Is(err, io.ErrUnexpectedEOF) && !errors.Is(err, io.EOF) {
		f.Close()
		return nil, &ParseError{Path: path, Err: fmt.Errorf("reading the header: %w", err)}
	}
	h, err := parseNiftiHeader(path, hdr[:n])
	if err != nil {
		f.Close()
		return nil, err
	}
	if skip := h.VoxOffset - niftiHeaderSize; skip > 0 {
		if m, err := io.CopyN(io.Discard, r, skip); err != nil {
			f.Close()
			return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: it ends %d bytes into the %d bytes between the header and vox_offset %d", ErrTruncated, m, skip, h.VoxOffset)}
		}
	}
	nf.h, nf.data = h, r
	return nf, nil
}

// finish reads what is left, so the hash covers the whole file and a
// gzip stream's checksum is verified, and closes the file.
func (nf *niftiFile) finish() error {
	defer nf.f.Close()
	if nf.gz != nil {
		if _, err := io.Copy(io.Discard, nf.data); err != nil {
			return &ParseError{Path: nf.path, Err: fmt.Errorf("corrupt gzip data after the image: %w", err)}
		}
	}
	if _, err := io.Copy(io.Discard, nf.raw); err != nil {
		return &ParseError{Path: nf.path, Err: err}
	}
	return nil
}

func (nf *niftiFile) close() { nf.f.Close() }

// ReadNiftiHeader reads only the header of a .nii or .nii.gz file.
func ReadNiftiHeader(path string) (*NiftiHeader, error) {
	nf, err := openNifti(path, nil)
	if err != nil {
		return nil, err
	}
	nf.close()
	return nf.h, nil
}

// decodeAt returns the stored value of voxel i of a volume buffer.
type voxelDecoder func(buf []byte, i int) float64

func decoder(dt int, o binary.ByteOrder) voxelDecoder {
	switch dt {
	case dtUint8:
		return func(b []byte, i int) float64 { return float64(b[i]) }
	case dtInt8:
		return func(b []byte, i int) float64 { return float64(int8(b[i])) }
	case dtInt16:
		return func(b []byte, i int) float64 { return float64(int16(o.Uint16(b[2*i:]))) }
	case dtUint16:
		return func(b []byte, i int) float64 { return float64(o.Uint16(b[2*i:])) }
	case dtInt32:
		return func(b []byte, i int) float64 { return float64(int32(o.Uint32(b[4*i:]))) }
	case dtUint32:
		return func(b []byte, i int) float64 { return float64(o.Uint32(b[4*i:])) }
	case dtInt64:
		return func(b []byte, i int) float64 { return float64(int64(o.Uint64(b[8*i:]))) }
	case dtUint64:
		return func(b []byte, i int) float64 { return float64(o.Uint64(b[8*i:])) }
	case dtFloat32:
		return func(b []byte, i int) float64 { return float64(math.Float32frombits(o.Uint32(b[4*i:]))) }
	case dtFloat64:
		return func(b []byte, i int) float64 { return math.Float64frombits(o.Uint64(b[8*i:])) }
	}
	return nil
}

// decodeVolume writes the stored value of every voxel of buf into dst
// (len(dst) voxels). Little-endian int16, float32 and uint8, the common
// cases, have loops of their own; the rest go through decoder.
func decodeVolume(dst []float64, buf []byte, dt int, o binary.ByteOrder) {
	if o == binary.LittleEndian {
		le := binary.LittleEndian
		switch dt {
		case dtInt16:
			for i := range dst {
				dst[i] = float64(int16(le.Uint16(buf[2*i:])))
			}
			return
		case dtFloat32:
			for i := range dst {
				dst[i] = float64(math.Float32frombits(le.Uint32(buf[4*i:])))
			}
			return
		case dtUint8:
			for i := range dst {
				dst[i] = float64(buf[i])
			}
			return
		}
	}
	dec := decoder(dt, o)
	for i := range dst {
		dst[i] = dec(buf, i)
	}
}

// voxelName gives voxel i of an nx x ny grid as 0-based (x, y, z), the
// order the data are stored in (x fastest).
func voxelName(i, nx, ny int) string {
	return fmt.Sprintf("(%d, %d, %d)", i%nx, (i/nx)%ny, i/(nx*ny))
}
