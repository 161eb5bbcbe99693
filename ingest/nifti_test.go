package ingest

import (
	"bytes"
	"compress/gzip"
	"encoding/binary"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"testing"
)

// The fixtures in ../testdata/nifti were written by Debian's python3-nibabel
// 5.0 and python3-numpy 1.24 (testdata/nifti/make_fixture.py, run once);
// the expected values below are what nibabel and numpy read back from the
// same bytes.
const niftiDir = "../testdata/nifti"

// readExpected reads a fixture TSV into a header map and rows.
func readExpected(t *testing.T, path string) ([]string, [][]string) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimRight(string(b), "\n"), "\n")
	var rows [][]string
	for _, l := range lines[1:] {
		rows = append(rows, strings.Split(l, "\t"))
	}
	return strings.Split(lines[0], "\t"), rows
}

func atof(t *testing.T, s string) float64 {
	t.Helper()
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

func closeRel(a, b, tol float64) bool {
	return math.Abs(a-b) <= tol*math.Max(1, math.Max(math.Abs(a), math.Abs(b)))
}

// Region means, dimensions, datatype, TR and affine of every fixture image
// against nibabel (get_fdata, get_best_affine, get_zooms with
// get_xyzt_units) and numpy (mean over the label's voxels).
func TestNiftiMatchesNibabel(t *testing.T) {
	atlas, err := LoadAtlas(filepath.Join(niftiDir, "atlas.nii.gz"), "")
	if err != nil {
		t.Fatal(err)
	}
	if got := strings.Join(atlas.Regions, ","); got != "label_1,label_2,label_3,label_4" {
		t.Fatalf("regions without a table: %s", got)
	}
	_, hrows := readExpected(t, filepath.Join(niftiDir, "expected_header.tsv"))
	_, mrows := readExpected(t, filepath.Join(niftiDir, "expected_means.tsv"))
	want := map[string]map[[2]int]float64{}
	for _, r := range mrows {
		if want[r[0]] == nil {
			want[r[0]] = map[[2]int]float64{}
		}
		v, _ := strconv.Atoi(r[1])
		l, _ := strconv.Atoi(r[2])
		want[r[0]][[2]int{v, l}] = atof(t, r[3])
	}
	if len(hrows) < 9 {
		t.Fatalf("only %d fixture images", len(hrows))
	}
	for _, r := range hrows {
		name := r[0]
		t.Run(name, func(t *testing.T) {
			path := filepath.Join(niftiDir, name)
			h, err := ReadNiftiHeader(path)
			if err != nil {
				t.Fatal(err)
			}
			for i := 1; i <= 4; i++ {
				if d, _ := strconv.Atoi(r[i]); h.Dim[i] != d {
					t.Errorf("dim[%d] = %d, nibabel %d", i, h.Dim[i], d)
				}
			}
			if dt, _ := strconv.Atoi(r[5]); h.Datatype != dt {
				t.Errorf("datatype %d, nibabel %d", h.Datatype, dt)
			}
			tr, ok := h.TR()
			if !ok || !closeRel(tr, atof(t, r[6]), 1e-9) {
				t.Errorf("TR %v (%v), nibabel %s s", tr, ok, r[6])
			}
			aff, known := h.Affine()
			if !known {
				t.Error("affine not known")
			}
			for i := range 3 {
				for j := range 4 {
					if w := atof(t, r[7+4*i+j]); math.Abs(aff[i][j]-w) > 1e-5 {
						t.Errorf("affine[%d][%d] = %v, nibabel %v", i, j, aff[i][j], w)
					}
				}
			}
			sf, err := atlas.RegionMeans(path)
			if err != nil {
				t.Fatal(err)
			}
			if sf.Series.T != h.Dim[4] || sf.Series.P != 4 || sf.TR != tr {
				t.Fatalf("series %d x %d TR %v", sf.Series.T, sf.Series.P, sf.TR)
			}
			n := 0
			for v := 1; v <= sf.Series.T; v++ {
				for l := 1; l <= 4; l++ {
					w, ok := want[name][[2]int{v, l}]
					if !ok {
						t.Fatalf("no expected mean for volume %d label %d", v, l)
					}
					// Relative 1e-6: the tolerance chosen for this fixture
					// (common practice, no source); the differences seen
					// are rounding (about 1e-13).
					if got := sf.Series.At(v-1, l-1); !closeRel(got, w, 1e-6) {
						t.Errorf("volume %d label %d: mean %v, numpy %v", v, l, got, w)
					}
					n++
				}
			}
			if n != len(want[name]) {
				t.Errorf("compared %d means of %d", n, len(want[name]))
			}
		})
	}
}

func TestAtlasLabelTable(t *testing.T) {
	a, err := LoadAtlas(filepath.Join(niftiDir, "atlas.nii.gz"), filepath.Join(niftiDir, "atlas_labels.tsv"))
	if err != nil {
		t.Fatal(err)
	}
	if got := strings.Join(a.Regions, ","); got != "deck_a,deck_b,hull_a,hull_b" {
		t.Errorf("regions %s", got)
	}
	// Voxel counts of make_fixture.py's atlas_labels(): blocks of 2x2x2,
	// 2x2x2, 2x2x2 plus a lone voxel, and 3x3x2.
	if got := a.Voxels; got[0] != 8 || got[1] != 8 || got[2] != 9 || got[3] != 18 {
		t.Errorf("voxels per label %v, want [8 8 9 18]", got)
	}
	// A table listed out of order still gives regions in label order.
	tmp := t.TempDir()
	shuffled := filepath.Join(tmp, "labels.tsv")
	os.WriteFile(shuffled, []byte("3\thull_a\n1\tdeck_a\n4\thull_b\n2\tdeck_b\n"), 0o644)
	b, err := LoadAtlas(filepath.Join(niftiDir, "atlas.nii.gz"), shuffled)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(b.Regions, ",") != strings.Join(a.Regions, ",") {
		t.Errorf("shuffled table gives %v", b.Regions)
	}
}

// gunzip returns the uncompressed bytes of a .nii.gz fixture.
func gunzip(t *testing.T, path string) []byte {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	z, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	b, err := io.ReadAll(z)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func TestNiftiErrors(t *testing.T) {
	tmp := t.TempDir()
	read := func(name string) []byte {
		b, err := os.ReadFile(filepath.Join(niftiDir, name))
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	write := func(name string, b []byte) string {
		p := filepath.Join(tmp, name)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	patch := func(b []byte, off int, v []byte) []byte {
		c := bytes.Clone(b)
		copy(c[off:], v)
		return c
	}
	int16 := read("bold_int16_scaled.nii")
	be := read("bold_float64_be.nii")
	gz := read("bold_float32.nii.gz")
	nan := make([]byte, 8)
	binary.BigEndian.PutUint64(nan, math.Float64bits(math.NaN()))
	le540 := binary.LittleEndian.AppendUint32(nil, 540)
	// An atlas holding non-integral labels: the float64 image with dim[0]
	// = 3 and dim[4] = 1, so its first volume reads as a 3-D atlas.
	frac := patch(patch(be, 40, []byte{0, 3}), 46, []byte{0, 1})
	cases := []struct {
		name, atlas, labels, image string
		want                       error
		msg                        string
	}{
		{"affine moved 5 mm", "atlas_shifted.nii.gz", "", filepath.Join(niftiDir, "bold_int16_scaled.nii"), ErrGridMismatch, "affines differ"},
		{"other grid size", "atlas_small.nii.gz", "", filepath.Join(niftiDir, "bold_int16_scaled.nii"), ErrGridMismatch, "6 x 5 x 4 voxels, the atlas 6 x 5 x 3"},
		{"complex datatype", "atlas.nii.gz", "", filepath.Join(niftiDir, "bold_complex64.nii"), ErrNiftiDatatype, "complex64"},
		{"truncated image", "atlas.nii.gz", "", write("cut.nii", int16[:len(int16)-100]), ErrTruncated, "the header describes 12 volume(s) of 240 bytes"},
		{"truncated gzip", "atlas.nii.gz", "", write("cut.nii.gz", gz[:len(gz)/2]), ErrTruncated, "volume"},
		{"header only", "atlas.nii.gz", "", write("short.nii", int16[:200]), ErrTruncated, "348"},
		{"text file", "atlas.nii.gz", "", write("text.nii", []byte(strings.Repeat("not an image\n", 40))), ErrNotNifti, "sizeof_hdr"},
		{"NIfTI-2", "atlas.nii.gz", "", write("two.nii", patch(int16, 0, le540)), ErrNotNifti, "NIfTI-2"},
		{"header and image pair", "atlas.nii.gz", "", write("pair.nii", patch(int16, 344, []byte("ni1\x00"))), ErrNotNifti, ".img"},
		{"bitpix disagrees", "atlas.nii.gz", "", write("bitpix.nii", patch(int16, 72, []byte{32, 0})), ErrNiftiHeaderValue, "bitpix"},
		{"3-D image", "atlas.nii.gz", "", filepath.Join(niftiDir, "atlas.nii.gz"), ErrNiftiHeaderValue, "4-D"},
		// Voxel (0, 0, 0) of volume 1 carries label 3 (the lone voxel).
		{"NaN voxel", "atlas.nii.gz", "atlas_labels.tsv", write("nan.nii", patch(be, 352, nan)), ErrNonFiniteVoxel, `volume 1, voxel (0, 0, 0) of region "hull_a"`},
		{"label listed but absent", "atlas.nii.gz", write("extra.tsv", []byte("index\tname\n1\ta\n2\tb\n3\tc\n4\td\n9\tghost\n")), "", ErrEmptyLabel, "label 9"},
		{"label missing from table", "atlas.nii.gz", write("short.tsv", []byte("1\ta\n2\tb\n3\tc\n")), "", ErrAtlas, "label(s) 4"},
		{"table duplicate", "atlas.nii.gz", write("dup.tsv", []byte("1\ta\n2\tb\n3\tc\n4\ta\n")), "", nil, `name "a" is also on line 1`},
		{"atlas with fractions", write("frac.nii", frac), "", "", ErrAtlas, "whole numbers"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			atlasPath := c.atlas
			if !filepath.IsAbs(atlasPath) && !strings.HasPrefix(atlasPath, tmp) {
				atlasPath = filepath.Join(niftiDir, c.atlas)
			}
			labels := c.labels
			if labels != "" && !strings.HasPrefix(labels, tmp) {
				labels = filepath.Join(niftiDir, labels)
			}
			a, err := LoadAtlas(atlasPath, labels)
			named := atlasPath
			if labels != "" {
				named = labels
			}
			if err == nil && c.image != "" {
				_, err = a.RegionMeans(c.image)
				named = c.image
			}
			if err == nil {
				t.Fatal("accepted")
			}
			if c.want != nil && !errors.Is(err, c.want) {
				t.Errorf("error %v is not %v", err, c.want)
			}
			if !strings.Contains(err.Error(), named) || !strings.Contains(err.Error(), c.msg) {
				t.Errorf("error %q does not name %s or say %q", err, named, c.msg)
			}
		})
	}
}

// writeNifti writes a little-endian int16 NIfTI-1 image of nx*ny*nz*nt
// voxels whose value at (voxel i, volume t) is f(i, t): the test's own
// minimal writer, used only for the memory check.
func writeNifti(t testing.TB, path string, dims [4]int, f func(i, t int) int16) {
	hdr := make([]byte, 352)
	le := binary.LittleEndian
	le.PutUint32(hdr, 348)
	nd := 3
	if dims[3] > 1 {
		nd = 4
	}
	le.PutUint16(hdr[40:], uint16(nd))
	for i, d := range dims {
		le.PutUint16(hdr[42+2*i:], uint16(d))
	}
	le.PutUint16(hdr[70:], dtInt16)
	le.PutUint16(hdr[72:], 16)
	for i, v := range []float32{1, 2, 2, 2, 2} {
		le.PutUint32(hdr[76+4*i:], math.Float32bits(v))
	}
	le.PutUint32(hdr[108:], math.Float32bits(352))
	hdr[123] = 2 | 8 // mm, seconds
	copy(hdr[344:], "n+1\x00")
	out, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer out.Close()
	w := io.Writer(out)
	w.Write(hdr)
	n := dims[0] * dims[1] * dims[2]
	vol := make([]byte, 2*n)
	for tt := range max(1, dims[3]) {
		for i := range n {
			le.PutUint16(vol[2*i:], uint16(f(i, tt)))
		}
		if _, err := w.Write(vol); err != nil {
			t.Fatal(err)
		}
	}
}

// Reading a 4-D image allocates about one volume, not the image: a 26 MB
// series (64 x 64 x 32 voxels x 100 volumes) must be read with less than
// 4 MB allocated in all (rule of the design: stream volume by volume).
func TestRegionMeansStreams(t *testing.T) {
	tmp := t.TempDir()
	dims := [4]int{64, 64, 32, 100}
	nvox := dims[0] * dims[1] * dims[2]
	writeNifti(t, filepath.Join(tmp, "atlas.nii"), [4]int{64, 64, 32, 1}, func(i, _ int) int16 { return int16(1 + i%5) })
	writeNifti(t, filepath.Join(tmp, "bold.nii"), dims, func(i, tt int) int16 { return int16(i%5*100 + tt) })
	a, err := LoadAtlas(filepath.Join(tmp, "atlas.nii"), "")
	if err != nil {
		t.Fatal(err)
	}
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	sf, err := a.RegionMeans(filepath.Join(tmp, "bold.nii"))
	runtime.ReadMemStats(&after)
	if err != nil {
		t.Fatal(err)
	}
	alloc := after.TotalAlloc - before.TotalAlloc
	if alloc > 4<<20 {
		t.Errorf("reading %d MB allocated %d bytes", nvox*2*dims[3]>>20, alloc)
	}
	// Label l = 1 + i%5 holds values (l-1)*100 + t: its mean is exact.
	for tt := range dims[3] {
		for l := range 5 {
			if got := sf.Series.At(tt, l); got != float64(l*100+tt) {
				t.Fatalf("volume %d label %d: %v", tt, l+1, got)
			}
		}
	}
	if sf.TR != 2 {
		t.Errorf("TR %v", sf.TR)
	}
}

// BenchmarkRegionMeans measures the reading rate of an uncompressed 4-D
// int16 image (64 x 64 x 32 x 100, 26 MB).
func BenchmarkRegionMeans(b *testing.B) {
	tmp := b.TempDir()
	writeNifti(b, filepath.Join(tmp, "atlas.nii"), [4]int{64, 64, 32, 1}, func(i, _ int) int16 { return int16(i % 100) })
	writeNifti(b, filepath.Join(tmp, "bold.nii"), [4]int{64, 64, 32, 100}, func(i, tt int) int16 { return int16(i + tt) })
	a, err := LoadAtlas(filepath.Join(tmp, "atlas.nii"), "")
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(64 * 64 * 32 * 100 * 2)
	for b.Loop() {
		if _, err := a.RegionMeans(filepath.Join(tmp, "bold.nii")); err != nil {
			b.Fatal(err)
		}
	}
}

// FuzzNifti: any bytes, read as a 4-D image over the fixture atlas or as
// an atlas, give a result or an error, never a crash.
func FuzzNifti(f *testing.F) {
	for _, name := range []string{"bold_int16_scaled.nii", "bold_float64_be.nii", "bold_uint8.nii", "bold_int8.nii"} {
		b, err := os.ReadFile(filepath.Join(niftiDir, name))
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	atlas, err := LoadAtlas(filepath.Join(niftiDir, "atlas.nii.gz"), "")
	if err != nil {
		f.Fatal(err)
	}
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, b []byte) {
		p := filepath.Join(dir, "x.nii")
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		if sf, err := atlas.RegionMeans(p); err == nil {
			if len(sf.Series.Data) != sf.Series.T*4 {
				t.Fatalf("%d values for %d volumes", len(sf.Series.Data), sf.Series.T)
			}
			for _, v := range sf.Series.Data {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatal("non-finite mean accepted")
				}
			}
		}
		if len(b) < 2 || b[0] != 0x1f || b[1] != 0x8b { // a gzip stream may ask for a large volume
			LoadAtlas(p, "")
		}
	})
}
