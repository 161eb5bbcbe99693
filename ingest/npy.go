package ingest

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strings"

	"codeberg.org/sbinet/npyio"

	"github.com/topostate/topostate/compute"
)

// ErrNpy marks a .npy file topostate cannot use.
var ErrNpy = errors.New("not a usable NumPy array")

// maxNpyHeader bounds the header of a .npy file (NumPy writes a few hundred
// bytes); a larger one is refused before anything is allocated for it.
const maxNpyHeader = 1 << 20

// ReadNpyFile reads a region time series stored by NumPy (.npy, format
// versions 1 to 3): a 2-D array of T time points by p regions, float32 or
// float64, either byte order, C (row-major) or Fortran (column-major)
// order. Its regions are named region_001, region_002, ... (Source.Read
// names them from a sidecar or a label table). Values must be finite.
func ReadNpyFile(path string) (sf *SeriesFile, err error) {
	b, err := readFile(path)
	if err != nil {
		return nil, err
	}
	sum := sha256.Sum256(b)
	bad := func(format string, a ...any) error {
		return &ParseError{Path: path, Err: fmt.Errorf("%w: "+format, append([]any{ErrNpy}, a...)...)}
	}
	// The prelude is checked here so that a damaged file is an error, not
	// a fault inside the reader: magic, version, header length, and a
	// header that ends in a newline.
	if len(b) < 10 || !bytes.Equal(b[:6], []byte("\x93NUMPY")) {
		return nil, bad("it does not start with the .npy magic bytes (\\x93NUMPY)")
	}
	var hlen, start int
	switch b[6] {
	case 1:
		hlen, start = int(binary.LittleEndian.Uint16(b[8:])), 10
	case 2, 3:
		if len(b) < 12 {
			return nil, bad("the header is cut short")
		}
		hlen, start = int(binary.LittleEndian.Uint32(b[8:])), 12
	default:
		return nil, bad("format version %d.%d; NumPy's .npy versions are 1 to 3", b[6], b[7])
	}
	if hlen > maxNpyHeader || start+hlen > len(b) || hlen == 0 || b[start+hlen-1] != '\n' {
		return nil, bad("the header (%d bytes) is damaged or cut short", hlen)
	}
	if b[6] == 3 {
		b[6] = 2 // version 3 differs only in allowing UTF-8 in the header
	}
	defer func() {
		// npyio trusts its input; a header that passed the checks above
		// but still trips it is reported, never a crash.
		if r := recover(); r != nil {
			sf, err = nil, bad("the header could not be parsed (%v)", r)
		}
	}()
	hdr := b[start : start+hlen]
	r, err := npyio.NewReader(bytes.NewReader(b))
	if err != nil {
		return nil, bad("%v (header %q)", err, truncate(string(bytes.TrimSpace(hdr)), 120))
	}
	d := r.Header.Descr
	dtype := strings.Trim(d.Type, `'" `)
	size := 0
	switch strings.TrimLeft(dtype, "<>=|") {
	case "f4":
		size = 4
	case "f8":
		size = 8
	default:
		return nil, bad("dtype %s; topostate reads float32 (f4) or float64 (f8) arrays (in NumPy: a.astype(np.float64))", dtype)
	}
	if len(d.Shape) != 2 {
		return nil, bad("shape %v; want a 2-D array of time points x regions", d.Shape)
	}
	T, p := d.Shape[0], d.Shape[1]
	if T < 1 || p < 2 {
		return nil, bad("shape %v; want at least one time point and two regions (rows are time points, columns regions)", d.Shape)
	}
	// The data size is checked by division, so no product of the header's
	// numbers can overflow (a crafted shape of 2^62 x 4 wraps to a small
	// size in int64): the array must fit in the bytes the file has.
	have := int64(len(b) - start - hlen)
	if int64(p) > math.MaxInt64/int64(size) || int64(T) > math.MaxInt64/int64(size)/int64(p) {
		return nil, bad("shape %v of %s is larger than any file can hold (this one has %d data bytes); the header is damaged", d.Shape, dtype, have)
	}
	want := int64(T) * int64(p) * int64(size)
	if have < want {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: shape %v of %s needs %d data bytes, the file has %d", ErrTruncated, d.Shape, dtype, want, have)}
	}
	if have > want {
		return nil, bad("%d bytes follow the %v array of %s; is the shape in the header right?", have-want, d.Shape, dtype)
	}
	vals := make([]float64, T*p)
	if size == 4 {
		var v []float32
		if err := r.Read(&v); err != nil {
			return nil, bad("%v", err)
		}
		for i, x := range v {
			vals[i] = float64(x)
		}
	} else if err := r.Read(&vals); err != nil {
		return nil, bad("%v", err)
	}
	y := compute.NewSeries(T, p)
	if d.Fortran { // column-major: element (t, j) at j*T + t
		for t := range T {
			for j := range p {
				y.Data[t*p+j] = vals[j*T+t]
			}
		}
	} else {
		copy(y.Data, vals)
	}
	names := make([]string, p)
	for j := range names {
		names[j] = fmt.Sprintf("region_%03d", j+1)
	}
	var problems Problems
	for i, v := range y.Data {
		if err := checkValue(v); err != nil {
			if len(problems) == maxProblemsPerFile {
				problems = append(problems, perr(path, 0, 0, "and more values like these"))
				break
			}
			t, j := i/p, i%p
			problems = append(problems, &ParseError{Path: path, Err: fmt.Errorf("row %d, column %d (both from 0): %w", t, j, err)})
		}
	}
	if len(problems) > 0 {
		return nil, problems
	}
	return &SeriesFile{Path: path, Regions: names, Series: y, SHA256: hex.EncodeToString(sum[:])}, nil
}

// SidecarRegionNames reads the region names of a .npy series from its JSON
// sidecar's "RegionNames" key: a list of distinct, non-empty strings, one
// per column. It returns nil names when the key is absent.
func SidecarRegionNames(path string) ([]string, error) {
	b, err := readFile(path)
	if err != nil {
		return nil, err
	}
	var side struct {
		RegionNames json.RawMessage
	}
	if err := json.Unmarshal(b, &side); err != nil {
		return nil, perr(path, 0, 0, "not valid JSON: %v", err)
	}
	if side.RegionNames == nil {
		return nil, nil
	}
	var names []string
	if err := json.Unmarshal(side.RegionNames, &names); err != nil {
		return nil, perr(path, 0, 0, "RegionNames must be a list of strings, one per column of the array")
	}
	seen := map[string]int{}
	for i, n := range names {
		if strings.TrimSpace(n) == "" {
			return nil, perr(path, 0, 0, "RegionNames[%d] is empty", i)
		}
		if j, dup := seen[n]; dup {
			return nil, perr(path, 0, 0, "RegionNames[%d] %q repeats RegionNames[%d]", i, n, j)
		}
		seen[n] = i
	}
	return names, nil
}
