package ingest

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"
	"unicode/utf8"

	"github.com/topostate/topostate/compute"
)

// Atlas is a 3-D integer label image: voxels with label n > 0 form one
// region, label 0 is outside every region. Regions are in ascending label
// order, named by the label table or else "label_<n>".
type Atlas struct {
	Path    string
	Header  *NiftiHeader
	Labels  []int    // label value of each region
	Regions []string // region names: from the label table, else "label_<n>"
	Voxels  []int    // voxels per region

	vox []int32 // voxel offsets (x fastest) of every labelled voxel, ascending
	reg []int32 // region of each of them
}

// LoadAtlas reads a label atlas (.nii or .nii.gz: three dimensions, or four
// with one volume; integer labels, stored as any supported datatype with
// whole values after scaling) and, when labelsPath is not "", its label
// table (see ReadLabelTable). With a table, a listed label with no voxel
// and a label in the image missing from the table are errors.
func LoadAtlas(path, labelsPath string) (*Atlas, error) {
	nf, err := openNifti(path, nil)
	if err != nil {
		return nil, err
	}
	defer nf.close()
	h := nf.h
	bad := func(format string, a ...any) error {
		return &ParseError{Path: path, Err: fmt.Errorf("%w: "+format, append([]any{ErrAtlas}, a...)...)}
	}
	if h.Dim[0] < 3 {
		return nil, bad("it has %d dimension(s); an atlas is a 3-D image", h.Dim[0])
	}
	for i := 4; i <= h.Dim[0]; i++ {
		if h.Dim[i] != 1 {
			return nil, bad("dimension %d has size %d; an atlas is one 3-D volume of labels", i, h.Dim[i])
		}
	}
	bpv, err := h.voxelBytes(path)
	if err != nil {
		return nil, err
	}
	vol, err := h.volumeBytes(path, bpv, 1, nf.size)
	if err != nil {
		return nil, err
	}
	n := vol / bpv
	buf := make([]byte, vol)
	if got, err := io.ReadFull(nf.data, buf); err != nil {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: %d of the %d bytes of labels are there", ErrTruncated, got, len(buf))}
	}
	dec := decoder(h.Datatype, h.Order)
	labelOf := make([]int, n)
	count := map[int]int{}
	for i := range n {
		v := h.scale(dec(buf, i))
		if math.IsNaN(v) || math.IsInf(v, 0) || v != math.Trunc(v) || v < 0 || v > math.MaxInt32 {
			return nil, bad("voxel %s holds %v; labels must be whole numbers >= 0 (0: outside every region)", voxelName(i, h.Dim[1], h.Dim[2]), v)
		}
		labelOf[i] = int(v)
		if v > 0 {
			count[int(v)]++
		}
	}
	a := &Atlas{Path: path, Header: h}
	if labelsPath != "" {
		table, err := ReadLabelTable(labelsPath)
		if err != nil {
			return nil, err
		}
		var problems Problems
		listed := map[int]bool{}
		for _, row := range table {
			listed[row.Label] = true
			if count[row.Label] == 0 {
				problems = append(problems, &ParseError{Path: labelsPath, Line: row.Line, Err: fmt.Errorf("%w %s: label %d (%q) is listed but no voxel has it", ErrEmptyLabel, path, row.Label, row.Name)})
				continue
			}
			a.Labels = append(a.Labels, row.Label)
			a.Regions = append(a.Regions, row.Name)
		}
		var missing []int
		for l := range count {
			if !listed[l] {
				missing = append(missing, l)
			}
		}
		if len(missing) > 0 {
			slices.Sort(missing)
			problems = append(problems, &ParseError{Path: labelsPath, Err: fmt.Errorf("%w: the atlas %s has label(s) %s that the table does not name; add a row for each", ErrAtlas, path, joinInts(missing, 10))})
		}
		if len(problems) > 0 {
			return nil, problems
		}
		idx := make([]int, len(a.Labels))
		for i := range idx {
			idx[i] = i
		}
		slices.SortFunc(idx, func(i, j int) int { return a.Labels[i] - a.Labels[j] })
		labels, regions := slices.Clone(a.Labels), slices.Clone(a.Regions)
		for i, k := range idx {
			a.Labels[i], a.Regions[i] = labels[k], regions[k]
		}
	} else {
		for l := range count {
			a.Labels = append(a.Labels, l)
		}
		slices.Sort(a.Labels)
		for _, l := range a.Labels {
			a.Regions = append(a.Regions, fmt.Sprintf("label_%d", l))
		}
	}
	if len(a.Labels) < 2 {
		return nil, bad("%d labelled region(s); a network needs at least two (three after any dropped region)", len(a.Labels))
	}
	region := map[int]int32{}
	for r, l := range a.Labels {
		region[l] = int32(r)
	}
	a.Voxels = make([]int, len(a.Labels))
	for i, l := range labelOf {
		if l == 0 {
			continue
		}
		r := region[l]
		a.vox = append(a.vox, int32(i))
		a.reg = append(a.reg, r)
		a.Voxels[r]++
	}
	return a, nil
}

func joinInts(v []int, most int) string {
	s := make([]string, 0, min(len(v), most)+1)
	for i, x := range v {
		if i == most {
			s = append(s, fmt.Sprintf("and %d more", len(v)-most))
			break
		}
		s = append(s, strconv.Itoa(x))
	}
	return strings.Join(s, ", ")
}

// LabelRow is one row of a label table.
type LabelRow struct {
	Label int
	Name  string
	Line  int
}

// ReadLabelTable reads a tab-separated table of atlas labels: per line a
// label number (a whole number > 0) and a region name. A first line whose
// first cell is not a number (such as "index<TAB>name") is a header and is
// skipped; further columns are ignored. Labels and names must be unique.
func ReadLabelTable(path string) ([]LabelRow, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	lr := newLineReader(path, f)
	var rows []LabelRow
	var problems Problems
	seenLabel, seenName := map[int]int{}, map[string]int{}
	for {
		line := lr.next()
		if line == nil {
			break
		}
		if len(bytes.TrimSpace(line)) == 0 {
			continue
		}
		if !utf8.Valid(line) {
			problems = append(problems, notUTF8(path, lr.line, line, '\t', ""))
			continue
		}
		cells := strings.Split(string(line), "\t")
		first := strings.TrimSpace(cells[0])
		l, err := strconv.Atoi(first)
		if err != nil && lr.line == 1 {
			continue // header
		}
		if err != nil || l <= 0 {
			problems = append(problems, perr(path, lr.line, 1, "label %q is not a whole number > 0", truncate(first, 40)))
			continue
		}
		if len(cells) < 2 || strings.TrimSpace(cells[1]) == "" {
			problems = append(problems, perr(path, lr.line, 2, "label %d has no name (want: label<TAB>name)", l))
			continue
		}
		name := strings.TrimSpace(cells[1])
		if j, dup := seenLabel[l]; dup {
			problems = append(problems, perr(path, lr.line, 1, "label %d is also on line %d", l, j))
			continue
		}
		if j, dup := seenName[name]; dup {
			problems = append(problems, perr(path, lr.line, 2, "name %q is also on line %d", name, j))
			continue
		}
		seenLabel[l], seenName[name] = lr.line, lr.line
		rows = append(rows, LabelRow{Label: l, Name: name, Line: lr.line})
	}
	if err := lr.fatal(); err != nil {
		return nil, err
	}
	if len(problems) > 0 {
		return nil, problems
	}
	if len(rows) == 0 {
		return nil, &ParseError{Path: path, Err: errors.Join(ErrEmpty, errors.New("expected lines of label<TAB>name"))}
	}
	return rows, nil
}

// RegionMeans reads a 4-D NIfTI-1 image on the atlas's grid and returns
// its region series: y[t][r] = (1/|R_r|) sum over voxels v in region r of
// x_t(v), the mean of the scaled values of volume t (scaling applied to the
// mean, which is the same by linearity). Volumes are read one at a time,
// so memory is one volume (raw and decoded) whatever the length of the
// series. The SeriesFile carries the SHA-256 of the file's bytes and the
// header's TR (0 when the header states none; see NiftiHeader.TR).
func (a *Atlas) RegionMeans(path string) (*SeriesFile, error) {
	hash := sha256.New()
	nf, err := openNifti(path, hash)
	if err != nil {
		return nil, err
	}
	defer nf.close()
	h := nf.h
	if h.Dim[0] < 4 {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: it has %d dimensions; a BOLD series is 4-D (x, y, z, time)", ErrNiftiHeaderValue, h.Dim[0])}
	}
	for i := 5; i <= h.Dim[0]; i++ {
		if h.Dim[i] != 1 {
			return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: dimension %d has size %d; want one 4-D series (x, y, z, time)", ErrNiftiHeaderValue, i, h.Dim[i])}
		}
	}
	bpv, err := h.voxelBytes(path)
	if err != nil {
		return nil, err
	}
	if msg := sameGrid(h, a.Header); msg != "" {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w %s: %s; resample the atlas to the image grid", ErrGridMismatch, a.Path, msg)}
	}
	T, p := h.Dim[4], len(a.Labels)
	vol, err := h.volumeBytes(path, bpv, T, nf.size)
	if err != nil {
		return nil, err
	}
	buf := make([]byte, vol)
	vals := make([]float64, vol/bpv) // one volume, decoded
	dec := decoder(h.Datatype, h.Order)
	y := compute.NewSeries(T, p)
	sums := make([]float64, p)
	for t := range T {
		if got, err := io.ReadFull(nf.data, buf); err != nil {
			if errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) {
				return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: volume %d of %d has %d of its %d bytes", ErrTruncated, t+1, T, got, len(buf))}
			}
			return nil, &ParseError{Path: path, Err: fmt.Errorf("volume %d of %d: %w", t+1, T, err)}
		}
		decodeVolume(vals, buf, h.Datatype, h.Order)
		clear(sums)
		for q, v := range a.vox {
			sums[a.reg[q]] += vals[v]
		}
		for r := range p {
			m := h.scale(sums[r] / float64(a.Voxels[r]))
			if math.IsNaN(m) || math.IsInf(m, 0) {
				return nil, a.nonFinite(path, buf, dec, t, r)
			}
			y.Data[t*p+r] = m
		}
	}
	if err := nf.finish(); err != nil {
		return nil, err
	}
	sf := &SeriesFile{Path: path, Regions: slices.Clone(a.Regions), Series: y, SHA256: hex.EncodeToString(hash.Sum(nil))}
	sf.TR, _ = h.TR()
	return sf, nil
}

// nonFinite names the first voxel of region r in volume t whose value is
// not finite (or says the sum overflowed).
func (a *Atlas) nonFinite(path string, buf []byte, dec voxelDecoder, t, r int) error {
	h := a.Header
	for q, v := range a.vox {
		if int(a.reg[q]) != r {
			continue
		}
		if x := dec(buf, int(v)); math.IsNaN(x) || math.IsInf(x, 0) {
			return &ParseError{Path: path, Err: fmt.Errorf("%w: volume %d, voxel %s of region %q holds %v; mask or fill such voxels before ingest", ErrNonFiniteVoxel, t+1, voxelName(int(v), h.Dim[1], h.Dim[2]), a.Regions[r], x)}
		}
	}
	return &ParseError{Path: path, Err: fmt.Errorf("%w: volume %d, region %q: the mean overflows float64", ErrNonFiniteVoxel, t+1, a.Regions[r])}
}
