package ingest

import (
	"fmt"
	"slices"
	"strings"
)

// Source reads the region time series of one input file, whatever its
// format: a TSV/CSV table, a NumPy .npy array, or a NIfTI-1 4-D image
// reduced to region means over an atlas. Validation (LoadCohort) and the
// stages (Run) both read through it, so they see the same numbers.
//
// The zero Source reads tables and arrays and refuses images.
type Source struct {
	Atlas     *Atlas   // nil: NIfTI images are refused (no --atlas)
	Names     []string // region names of .npy arrays without RegionNames in their sidecar, from --atlas-labels; nil: generated
	NamesFrom string   // the file Names came from, for messages
}

// NewSource loads what the options name: the atlas and its label table
// (--atlas, --atlas-labels). The label table also names the columns of
// .npy arrays that have no RegionNames in their sidecar: column j is the
// j-th label in ascending order, the order of the atlas's regions, so an
// array averaged over the same atlas gets the same region names.
func NewSource(o Options) (*Source, error) {
	s := &Source{}
	switch {
	case o.Atlas != "":
		a, err := LoadAtlas(o.Atlas, o.AtlasLabels)
		if err != nil {
			return nil, err
		}
		s.Atlas = a
		if o.AtlasLabels != "" {
			s.Names, s.NamesFrom = a.Regions, o.AtlasLabels
		}
	case o.AtlasLabels != "":
		rows, err := ReadLabelTable(o.AtlasLabels)
		if err != nil {
			return nil, err
		}
		labels, names := make([]int, len(rows)), make([]string, len(rows))
		for i, r := range rows {
			labels[i], names[i] = r.Label, r.Name
		}
		s.Names, s.NamesFrom = sortedNames(labels, names), o.AtlasLabels
	}
	return s, nil
}

// sortedNames returns names ordered by ascending label.
func sortedNames(labels []int, names []string) []string {
	idx := make([]int, len(labels))
	for i := range idx {
		idx[i] = i
	}
	for i := 1; i < len(idx); i++ { // insertion sort: tables are short
		for j := i; j > 0 && labels[idx[j]] < labels[idx[j-1]]; j-- {
			idx[j], idx[j-1] = idx[j-1], idx[j]
		}
	}
	out := make([]string, len(idx))
	for i, k := range idx {
		out[i] = names[k]
	}
	return out
}

// Kind of series file, from its name.
const (
	KindTable = "table" // _timeseries.tsv or .csv
	KindNpy   = "npy"   // _timeseries.npy
	KindNifti = "nifti" // _bold.nii or .nii.gz
)

// FileKind tells the format of a series file from its name.
func FileKind(path string) string {
	low := strings.ToLower(path)
	switch {
	case strings.HasSuffix(low, ".nii"), strings.HasSuffix(low, ".nii.gz"):
		return KindNifti
	case strings.HasSuffix(low, ".npy"):
		return KindNpy
	}
	return KindTable
}

// Read reads one input's series. A nil Source is the zero Source.
func (s *Source) Read(in Input) (*SeriesFile, error) {
	if s == nil {
		s = &Source{}
	}
	switch FileKind(in.Path) {
	case KindNifti:
		if s.Atlas == nil {
			return nil, &ParseError{Path: in.Path, Err: fmt.Errorf("a NIfTI image needs --atlas FILE to average its voxels into regions")}
		}
		return s.Atlas.RegionMeans(in.Path)
	case KindNpy:
		sf, err := ReadNpyFile(in.Path)
		if err != nil {
			return nil, err
		}
		names, from := s.Names, s.NamesFrom
		if in.Sidecar != "" {
			n, err := SidecarRegionNames(in.Sidecar)
			if err != nil {
				return nil, err
			}
			if n != nil {
				names, from = n, in.Sidecar+" (RegionNames)"
			}
		}
		if names != nil {
			if len(names) != sf.Series.P {
				return nil, &ParseError{Path: in.Path, Err: fmt.Errorf("%w: %d columns but %d region names in %s", ErrNpy, sf.Series.P, len(names), from)}
			}
			sf.Regions = slices.Clone(names)
		}
		return sf, nil
	}
	return ReadSeriesFile(in.Path)
}
