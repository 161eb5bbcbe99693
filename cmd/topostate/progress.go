package main

import (
	"fmt"
	"io"
	"os"

	"github.com/mattn/go-isatty"
	"github.com/schollz/progressbar/v3"
)

// barProgress shows one bar per stage on a terminal.
type barProgress struct {
	w   io.Writer
	bar *progressbar.ProgressBar
}

// newProgress returns a progress bar writer when w is a terminal and quiet
// is off; otherwise nil (silent).
func newProgress(w io.Writer, quiet bool) *barProgress {
	if quiet {
		return nil
	}
	f, ok := w.(*os.File)
	if !ok || !(isatty.IsTerminal(f.Fd()) || isatty.IsCygwinTerminal(f.Fd())) {
		return nil
	}
	return &barProgress{w: w}
}

func (p *barProgress) Stage(name string, total int) {
	if p.bar != nil {
		p.bar.Finish()
		fmt.Fprintln(p.w)
	}
	p.bar = progressbar.NewOptions(total,
		progressbar.OptionSetWriter(p.w),
		progressbar.OptionSetDescription(fmt.Sprintf("%-24s", name)),
		progressbar.OptionShowCount(),
		progressbar.OptionSetWidth(30),
		progressbar.OptionThrottle(100_000_000),
		progressbar.OptionClearOnFinish(),
		progressbar.OptionShowElapsedTimeOnFinish(),
	)
	p.bar.RenderBlank()
}

func (p *barProgress) Add(n int) {
	if p.bar != nil {
		p.bar.Add(n)
	}
}

func (p *barProgress) Finish() {
	if p.bar != nil {
		p.bar.Finish()
		p.bar = nil
	}
}
