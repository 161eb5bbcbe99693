package report

import (
	"bytes"
	"context"
	"image"
	"image/color"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
	"time"

	"golang.org/x/net/html"
)

// chromiumPath is Debian's chromium package's command.
const chromiumPath = "/usr/bin/chromium"

// chromium returns the browser command, skipping the test when it is not
// installed (failing instead when TOPOSTATE_CHROMIUM_REQUIRED=1).
func chromium(t *testing.T) string {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		msg := "headless Chromium check skipped: " + chromiumPath + " not found (Debian: apt-get install chromium); set TOPOSTATE_CHROMIUM_REQUIRED=1 to fail instead"
		if os.Getenv("TOPOSTATE_CHROMIUM_REQUIRED") == "1" {
			t.Fatal(msg)
		}
		t.Skip(msg)
	}
	return chromiumPath
}

// runChromium runs headless Chromium on page with extra arguments: no
// sandbox (containers), no GPU, no network of its own, a fresh profile.
func runChromium(t *testing.T, bin, page string, extra ...string) []byte {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	defer cancel()
	args := append([]string{"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir=" + t.TempDir()}, extra...)
	args = append(args, "file://"+page)
	cmd := exec.CommandContext(ctx, bin, args...)
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium %v: %v\n%s", extra, err, stderr.String())
	}
	return stdout.Bytes()
}

// The page as a browser builds and draws it: the DOM Chromium holds after
// loading has every section and the inline figures, and a screenshot of
// the first 3000 pixels is a drawn page (many colours, not blank) showing
// the masthead rule and the caution box in their colours.
func TestChromiumRendersReport(t *testing.T) {
	bin := chromium(t)
	_, b := fixture(t)
	dir := t.TempDir()
	page := filepath.Join(dir, "report.html")
	if err := os.WriteFile(page, b, 0o644); err != nil {
		t.Fatal(err)
	}

	dom := runChromium(t, bin, page, "--dump-dom")
	doc, err := html.Parse(bytes.NewReader(dom))
	if err != nil {
		t.Fatal(err)
	}
	for _, id := range append([]string{"caution"}, Sections...) {
		if byID(doc, id) == nil {
			t.Errorf("the browser's DOM has no element %q", id)
		}
	}
	svgs := find(doc, isTag("svg"))
	if len(svgs) < 7 {
		t.Errorf("the browser's DOM has %d <svg> elements, want at least 7", len(svgs))
	}
	for _, s := range svgs {
		if s.Namespace != "svg" || len(find(s, isTag("path"))) == 0 {
			t.Errorf("an <svg> without drawing (namespace %q)", s.Namespace)
		}
	}

	shot := filepath.Join(dir, "shot.png")
	runChromium(t, bin, page, "--screenshot="+shot, "--window-size=1280,3000", "--hide-scrollbars")
	f, err := os.Open(shot)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatalf("screenshot: %v", err)
	}
	if bd := img.Bounds(); bd.Dx() != 1280 || bd.Dy() != 3000 {
		t.Errorf("screenshot %v, want 1280 x 3000", bd)
	}
	colours := map[color.RGBA]int{}
	nonWhite := 0
	bd := img.Bounds()
	for y := bd.Min.Y; y < bd.Max.Y; y++ {
		for x := bd.Min.X; x < bd.Max.X; x++ {
			c := color.RGBAModel.Convert(img.At(x, y)).(color.RGBA)
			colours[c]++
			if c.R < 245 || c.G < 245 || c.B < 245 {
				nonWhite++
			}
		}
	}
	share := float64(nonWhite) / float64(bd.Dx()*bd.Dy())
	if len(colours) < 100 || share < 0.03 {
		t.Errorf("screenshot looks blank: %d colours, %.1f%% non-white", len(colours), 100*share)
	}
	// report.css: the masthead rule and section numbers in --accent
	// (#0072b2), the caution box on --warn-bg (#fff3dc) with its edge in
	// --warn-edge (#d55e00).
	near := func(want color.RGBA, region image.Rectangle) int {
		n := 0
		for y := region.Min.Y; y < region.Max.Y; y++ {
			for x := region.Min.X; x < region.Max.X; x++ {
				c := color.RGBAModel.Convert(img.At(x, y)).(color.RGBA)
				if absDiff(c.R, want.R) <= 3 && absDiff(c.G, want.G) <= 3 && absDiff(c.B, want.B) <= 3 {
					n++
				}
			}
		}
		return n
	}
	top := image.Rect(0, 0, 1280, 500)
	for name, c := range map[string]color.RGBA{
		"accent #0072b2":  {0x00, 0x72, 0xb2, 0xff},
		"caution #fff3dc": {0xff, 0xf3, 0xdc, 0xff},
		"caution #d55e00": {0xd5, 0x5e, 0x00, 0xff},
	} {
		if n := near(c, top); n < 500 {
			t.Errorf("%s: %d pixels in the top 500 rows, want at least 500", name, n)
		}
	}
	if t.Failed() {
		keep := filepath.Join(os.TempDir(), "topostate-report-shot.png")
		if b, err := os.ReadFile(shot); err == nil && os.WriteFile(keep, b, 0o644) == nil {
			t.Logf("screenshot kept as %s", keep)
		}
	}
}

func absDiff(a, b uint8) uint8 {
	if a > b {
		return a - b
	}
	return b - a
}
