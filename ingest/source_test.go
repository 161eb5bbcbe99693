package ingest

import (
	"bytes"
	"compress/gzip"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func cohortOptions(dir string) Options {
	o := Defaults()
	o.Input, o.Window, o.States, o.Restarts, o.Grid, o.Seed = dir, 12, 2, 3, "-1:1:41", 3
	return o
}

// The fixture cohort as 4-D NIfTI images with an atlas, as TSV tables of
// the region means numpy computed from the same images, and as .npy arrays
// of those means (make_fixture.py) ingests to the same tables: same rows,
// numbers equal to 1e-9 (the image route averages voxels in Go, in its own
// order of summation and scaling, so its means may differ from numpy's in
// the last bits; on these fixtures they came out identical).
func TestImageAndArrayCohortsMatchTables(t *testing.T) {
	tmp := t.TempDir()
	img := cohortOptions(filepath.Join(niftiDir, "cohort"))
	img.Atlas = filepath.Join(niftiDir, "atlas.nii.gz")
	img.AtlasLabels = filepath.Join(niftiDir, "atlas_labels.tsv")
	paths := map[string]Options{
		"img": img,
		"tsv": cohortOptions(filepath.Join(niftiDir, "cohort_tsv")),
		"npy": cohortOptions(filepath.Join(npyDir, "cohort")),
	}
	for name, o := range paths {
		s := ingestInto(t, filepath.Join(tmp, name+".duckdb"), o)
		if s.Subjects != 4 || s.Regions != 4 || s.States != 2 {
			t.Fatalf("%s: summary %+v", name, s)
		}
	}
	db, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	for name := range paths {
		if _, err := db.Exec(fmt.Sprintf(`ATTACH '%s' AS %s (READ_ONLY)`, filepath.Join(tmp, name+".duckdb"), name)); err != nil {
			t.Fatal(err)
		}
	}
	// Where each input's TR came from differs by design; the rest is the same.
	skip := map[string]bool{"inputs.path": true, "inputs.sha256": true, "inputs.tr_source": true}
	for _, table := range []string{"regions", "state_centroids", "state_sequence", "state_metrics", "subject_dynamics",
		"transitions", "betti_curves", "filtration_events", "state_networks", "inputs", "subjects"} {
		ref := tableRows(t, db, "tsv", table, skip)
		if len(ref) == 0 {
			t.Errorf("%s: no rows", table)
		}
		for _, other := range []string{"img", "npy"} {
			got := tableRows(t, db, other, table, skip)
			if msg := diffRows(ref, got); msg != "" {
				t.Errorf("%s: %s differs from tsv: %s", table, other, msg)
			}
		}
	}
	var names string
	if err := db.QueryRow(`SELECT string_agg(region_name, ',' ORDER BY column_index) FROM img.regions`).Scan(&names); err != nil {
		t.Fatal(err)
	}
	if names != "deck_a,deck_b,hull_a,hull_b" {
		t.Errorf("region names %s", names)
	}
}

func tableRows(t *testing.T, db *sql.DB, cat, table string, skip map[string]bool) [][]any {
	t.Helper()
	rows, err := db.Query(`SELECT column_name FROM information_schema.columns WHERE table_catalog = ? AND table_name = ? ORDER BY ordinal_position`, cat, table)
	if err != nil {
		t.Fatal(err)
	}
	var cols []string
	for rows.Next() {
		var c string
		rows.Scan(&c)
		if !skip[table+"."+c] {
			cols = append(cols, `"`+c+`"`)
		}
	}
	rows.Close()
	rows, err = db.Query(fmt.Sprintf(`SELECT %s FROM %s.%s ORDER BY ALL`, strings.Join(cols, ", "), cat, table))
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	var out [][]any
	for rows.Next() {
		r := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for i := range r {
			ptrs[i] = &r[i]
		}
		if err := rows.Scan(ptrs...); err != nil {
			t.Fatal(err)
		}
		out = append(out, r)
	}
	return out
}

func diffRows(a, b [][]any) string {
	if len(a) != len(b) {
		return fmt.Sprintf("%d rows, want %d", len(b), len(a))
	}
	for i := range a {
		for j := range a[i] {
			x, y := a[i][j], b[i][j]
			if fx, ok := x.(float64); ok {
				if fy, ok := y.(float64); ok && closeRel(fx, fy, 1e-9) {
					continue
				}
			} else if fmt.Sprint(x) == fmt.Sprint(y) {
				continue
			}
			return fmt.Sprintf("row %d column %d: %v, want %v", i+1, j+1, y, x)
		}
	}
	return ""
}

// copyDir copies a fixture folder so a test can change it.
func copyDir(t *testing.T, src, dst string) {
	t.Helper()
	err := filepath.Walk(src, func(p string, info os.FileInfo, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(src, p)
		if info.IsDir() {
			return os.MkdirAll(filepath.Join(dst, rel), 0o755)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(filepath.Join(dst, rel), b, 0o644)
	})
	if err != nil {
		t.Fatal(err)
	}
}

// TR precedence: --tr, then the sidecar's RepetitionTime, then the NIfTI
// header's pixdim[4] in its unit (2 s in the fixture, nibabel's
// get_zooms); a header without a time unit is not trusted.
func TestNiftiTRPrecedence(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "cohort")
	copyDir(t, filepath.Join(niftiDir, "cohort"), dir)
	fn := func(s string) string { return filepath.Join(dir, s, "func", s+"_task-rest_bold") }
	os.WriteFile(fn("sub-02")+".json", []byte(`{"RepetitionTime": 3}`), 0o644)
	os.WriteFile(fn("sub-03")+".json", []byte(`{"TaskName": "rest"}`), 0o644)
	o := cohortOptions(dir)
	o.Atlas = filepath.Join(niftiDir, "atlas.nii.gz")
	// Two TRs (3 s and 2 s) are refused with the window in time points...
	if _, err := LoadCohort(o); err == nil || !strings.Contains(err.Error(), "2 different repetition times") {
		t.Errorf("mixed TRs with --window: %v", err)
	}
	// ... and accepted with the window in seconds.
	o.WindowSeconds = 24
	c, err := LoadCohort(o)
	if err != nil {
		t.Fatal(err)
	}
	// sub-02's header (2 s) contradicts its sidecar (3 s): reported.
	if w := strings.Join(c.Warnings, "\n"); !strings.Contains(w, fn("sub-02")+".nii.gz: the header's pixdim[4] says TR 2 s but its sidecar "+fn("sub-02")+".json says 3 s; the sidecar's 3 s is used") {
		t.Errorf("warnings: %s", w)
	}
	want := map[string]float64{"sub-01": 2, "sub-02": 3, "sub-03": 2, "sub-04": 2}
	for _, in := range c.Inputs {
		if in.TR != want[in.Subject] {
			t.Errorf("%s: TR %v from %s, want %v", in.Subject, in.TR, in.TRSource, want[in.Subject])
		}
		fromHeader := strings.Contains(in.TRSource, "pixdim[4]")
		if fromHeader == (in.Subject == "sub-02") {
			t.Errorf("%s: TR source %q", in.Subject, in.TRSource)
		}
	}
	if got := strings.Join(c.Regions, ","); got != "label_1,label_2,label_3,label_4" {
		t.Errorf("regions without a label table: %s", got)
	}
	o.TR = 1.25
	if c, err = LoadCohort(o); err != nil {
		t.Fatal(err)
	}
	for _, in := range c.Inputs {
		if in.TR != 1.25 || in.TRSource != "option --tr" {
			t.Errorf("%s: TR %v from %s with --tr 1.25", in.Subject, in.TR, in.TRSource)
		}
	}
	// sub-04 without a time unit (xyzt_units = mm only), uncompressed.
	b := gunzip(t, fn("sub-04")+".nii.gz")
	b[123] = 2
	os.Remove(fn("sub-04") + ".nii.gz")
	os.WriteFile(fn("sub-04")+".nii", b, 0o644)
	o.TR = 0
	_, err = LoadCohort(o)
	if !errors.Is(err, ErrNoTR) || !strings.Contains(err.Error(), fn("sub-04")+".nii") || !strings.Contains(err.Error(), "no time unit") {
		t.Errorf("header without a time unit: %v", err)
	}
}

func TestDiscoverImagesNeedAtlas(t *testing.T) {
	o := cohortOptions(filepath.Join(niftiDir, "cohort"))
	_, err := LoadCohort(o)
	if !errors.Is(err, ErrNoSeries) || !strings.Contains(err.Error(), "found 4 _bold.nii[.gz] image(s); pass --atlas") {
		t.Errorf("images without --atlas: %v", err)
	}
	// A missing atlas and a bad label table are reported before any image
	// is read, naming the file.
	o.Atlas = filepath.Join(niftiDir, "no-such-atlas.nii.gz")
	if _, err := LoadCohort(o); err == nil || !strings.Contains(err.Error(), o.Atlas) {
		t.Errorf("missing atlas: %v", err)
	}
	// A label table whose length does not fit an array's columns names
	// the table.
	s, err := NewSource(Options{AtlasLabels: filepath.Join(niftiDir, "atlas_labels.tsv")})
	if err != nil {
		t.Fatal(err)
	}
	_, err = s.Read(Input{Path: filepath.Join(npyDir, "c_f64.npy")})
	if !errors.Is(err, ErrNpy) || !strings.Contains(err.Error(), "3 columns but 4 region names in "+filepath.Join(niftiDir, "atlas_labels.tsv")) {
		t.Errorf("names and columns disagree: %v", err)
	}
}

// A damaged image in a cohort is a problem of that file, with the others
// still checked, and nothing is written (LoadCohort fails before Run).
func TestNiftiCohortBadImage(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "cohort")
	copyDir(t, filepath.Join(niftiDir, "cohort"), dir)
	bad := filepath.Join(dir, "sub-03", "func", "sub-03_task-rest_bold.nii.gz")
	raw := gunzip(t, bad)
	var buf bytes.Buffer
	z := gzip.NewWriter(&buf)
	z.Write(raw[:len(raw)-500])
	z.Close()
	os.WriteFile(bad, buf.Bytes(), 0o644)
	o := cohortOptions(dir)
	o.Atlas = filepath.Join(niftiDir, "atlas.nii.gz")
	_, err := LoadCohort(o)
	var ps Problems
	if !errors.As(err, &ps) || len(ps) != 1 || !errors.Is(err, ErrTruncated) || !strings.Contains(err.Error(), bad) {
		t.Errorf("truncated image: %v", err)
	}
	o.OnBadSubject = "skip"
	c, err := LoadCohort(o)
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Inputs) != 3 || len(c.Excluded) != 1 || c.Excluded[0].Subject != "sub-03" {
		t.Errorf("skip: %d inputs, excluded %+v", len(c.Inputs), c.Excluded)
	}
}
