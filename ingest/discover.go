package ingest

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
)

// Input is one series file of the cohort: a subject, optionally a session.
type Input struct {
	Subject string // sub-<label>
	Session string // ses-<label>, or "" when the name has none
	Path    string // full path
	Rel     string // path relative to the cohort folder, slash-separated
	Sidecar string // JSON sidecar beside it, or ""
}

// seriesName matches sub-<label>[_ses-<label>][_<key>-<value>...] followed
// by _timeseries.tsv|csv|npy or _bold.nii|nii.gz.
var seriesName = regexp.MustCompile(`^(sub-[A-Za-z0-9]+)(?:_(ses-[A-Za-z0-9]+))?(?:_[A-Za-z0-9]+-[A-Za-z0-9]+)*_(timeseries\.(?:tsv|csv|npy)|bold\.nii(?:\.gz)?)$`)

// Discover walks dir (symbolic links are not followed, so a link loop
// cannot trap it) and returns the series files (tables and .npy arrays) in
// path order. Unreadable folders are reported, not skipped.
func Discover(dir string) ([]Input, error) { return discover(dir, false) }

// discover is Discover that also takes _bold.nii[.gz] images when images
// is true (ingest --atlas); otherwise it only counts them, to say so when
// nothing else is found.
func discover(dir string, images bool) ([]Input, error) {
	st, err := os.Stat(dir)
	if err != nil {
		return nil, fmt.Errorf("ingest: input folder: %w", err)
	}
	if !st.IsDir() {
		return nil, fmt.Errorf("ingest: input %s is not a folder", dir)
	}
	var found []Input
	var problems Problems
	skipped := 0 // _bold images seen without --atlas
	err = filepath.WalkDir(dir, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			problems = append(problems, &ParseError{Path: path, Err: fileError(path, err)})
			if d != nil && d.IsDir() {
				return fs.SkipDir
			}
			return nil
		}
		if d.IsDir() {
			if path != dir && strings.HasPrefix(d.Name(), ".") {
				return fs.SkipDir
			}
			return nil
		}
		m := seriesName.FindStringSubmatch(d.Name())
		if m == nil {
			return nil
		}
		if strings.HasPrefix(m[3], "bold") && !images {
			skipped++
			return nil
		}
		rel, _ := filepath.Rel(dir, path)
		in := Input{Subject: m[1], Session: m[2], Path: path, Rel: filepath.ToSlash(rel)}
		side := strings.TrimSuffix(strings.TrimSuffix(path, ".gz"), filepath.Ext(strings.TrimSuffix(path, ".gz"))) + ".json"
		if _, err := os.Stat(side); err == nil {
			in.Sidecar = side
		}
		found = append(found, in)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	if len(problems) > 0 {
		return nil, problems
	}
	if len(found) == 0 && skipped > 0 {
		return nil, fmt.Errorf("ingest: %s: %w: found %d _bold.nii[.gz] image(s); pass --atlas FILE (a label image on the same grid) to average their voxels into regions", dir, ErrNoSeries, skipped)
	}
	if len(found) == 0 {
		return nil, fmt.Errorf("ingest: %s: %w: expected files named sub-<label>[_ses-<label>]_..._timeseries.tsv (or .csv, .npy), or _bold.nii[.gz] images with --atlas", dir, ErrNoSeries)
	}
	sort.Slice(found, func(i, j int) bool { return found[i].Rel < found[j].Rel })
	return found, nil
}

// SidecarTR reads RepetitionTime (seconds) from a BIDS JSON sidecar.
func SidecarTR(path string) (float64, error) {
	f, err := openFile(path)
	if err != nil {
		return 0, err
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, MaxLine+1))
	if err != nil {
		return 0, &ParseError{Path: path, Err: readError(err)}
	}
	if len(b) > MaxLine {
		return 0, perr(path, 0, 0, "a JSON sidecar larger than 16 MiB is not a sidecar")
	}
	var side struct {
		RepetitionTime *float64
	}
	if err := json.Unmarshal(b, &side); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			line := 1 + strings.Count(string(b[:se.Offset]), "\n")
			return 0, perr(path, line, 0, "not valid JSON: %v", err)
		}
		return 0, perr(path, 0, 0, "not a usable sidecar: %v", err)
	}
	if side.RepetitionTime == nil {
		return 0, &ParseError{Path: path, Err: fmt.Errorf("%w: the sidecar has no RepetitionTime", ErrNoTR)}
	}
	if err := CheckTR(*side.RepetitionTime); err != nil {
		return 0, perr(path, 0, 0, "RepetitionTime: %v", err)
	}
	return *side.RepetitionTime, nil
}
