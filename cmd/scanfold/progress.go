package main

import (
	"io"
	"os"

	"github.com/schollz/progressbar/v3"
)

// progressFunc returns a progress callback that draws a bar on w when
// w is a terminal, and does nothing otherwise (logs stay clean). The
// returned finish function ends the bar's line.
func progressFunc(w io.Writer, desc string) (progress func(done, total int), finish func()) {
	if !isTerminal(w) {
		return func(int, int) {}, func() {}
	}
	var bar *progressbar.ProgressBar
	progress = func(done, total int) {
		if bar == nil {
			bar = progressbar.NewOptions(total,
				progressbar.OptionSetWriter(w),
				progressbar.OptionSetDescription(desc),
				progressbar.OptionShowCount(),
				progressbar.OptionSetPredictTime(true),
				progressbar.OptionClearOnFinish(),
			)
		}
		bar.Set(done)
	}
	finish = func() {
		if bar != nil {
			bar.Finish()
		}
	}
	return progress, finish
}

// isTerminal reports whether w is a character device (a terminal).
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
