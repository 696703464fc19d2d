package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"sort"
	"strings"
	"syscall"
	"text/tabwriter"
	"time"

	"github.com/dustin/go-humanize"
	"github.com/urfave/cli/v2"

	"github.com/scanfold/scanfold/batch"
)

func batchCommand() *cli.Command {
	return &cli.Command{
		Name:            "batch",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "onboard every part of a bin folder unattended and leave a summary",
		UsageText:       "scanfold batch BIN_DIR [--workers N] [--max-memory 8GiB] [--out DIR] [--retry-failed] [--catalog DIR]",
		Description: "Onboards each part of BIN_DIR as 'scanfold onboard' would: each sub-folder is one part's sweep, " +
			"named like the folder, unless BIN_DIR holds bin.json (parts with name, sweep and optional reference). " +
			"Parts run on a pool of workers within a memory budget; each has a log, and the run folder " +
			"(--out, default BIN_DIR/.scanfold-batch) keeps summary.json and index.html, which links every report, " +
			"up to date as parts finish. One part's failure stops none of the others. Run it again to carry on: " +
			"parts already filed from the same sweep and settings are skipped, failed ones are kept unless " +
			"--retry-failed. Ctrl-C starts no more parts and lets the running ones finish; a second Ctrl-C abandons " +
			"them (nothing half-filed). Exit status: 0 when every part has a verdict, 1 when any failed, 130 when " +
			"interrupted. A model that passes still needs a supervised, reduced-speed trial in the cell, under the " +
			"cell's risk assessment and local safety rules.",
		Flags: append([]cli.Flag{
			&cli.IntFlag{Name: "workers", Usage: "parts onboarded at once (default: the number of cores)"},
			&cli.StringFlag{Name: "max-memory", Usage: "memory budget for the parts running at once, e.g. 8GiB or 512MiB; 0 for none (default: half the machine's memory)"},
			&cli.StringFlag{Name: "out", Usage: "run folder for logs, reports and the summary (default: BIN_DIR/.scanfold-batch)", TakesFile: true},
			&cli.BoolFlag{Name: "retry-failed", Usage: "onboard again the parts that failed in the previous run"},
			&cli.BoolFlag{Name: "json", Usage: "print the summary as JSON, for programs, instead of the table"},
		}, onboardFlags()...),
		Action: batchAction,
	}
}

func batchAction(c *cli.Context) error {
	if c.Args().Len() != 1 {
		return fmt.Errorf("batch takes one bin folder, got %d arguments", c.Args().Len())
	}
	if c.Int("workers") < 0 {
		return fmt.Errorf("--workers %d: want 1 or more (0: the number of cores)", c.Int("workers"))
	}
	opt := batch.DefaultOptions()
	opt.Onboard = onboardOptions(c)
	opt.Workers = c.Int("workers")
	opt.OutDir = c.String("out")
	opt.RetryFailed = c.Bool("retry-failed")
	opt.MaxMemory = batch.MachineMemory() / 2
	if s := c.String("max-memory"); s != "" {
		b, err := humanize.ParseBytes(s)
		if err != nil || b > 1<<62 {
			return fmt.Errorf("--max-memory %q: want a size such as 8GiB, 512MiB or 0", s)
		}
		opt.MaxMemory = int64(b)
	}
	store, err := openCatalog(c, true)
	if err != nil {
		return err
	}
	defer store.Close()

	// The first Ctrl-C (which cancels c.Context) stops new parts from
	// starting; a second one abandons the running parts.
	ctx, abandon := context.WithCancel(context.WithoutCancel(c.Context))
	defer abandon()
	stop := make(chan struct{})
	finished := make(chan struct{})
	defer close(finished)
	sigs := make(chan os.Signal, 2)
	signal.Notify(sigs, os.Interrupt, syscall.SIGTERM)
	defer signal.Stop(sigs)
	go func() {
		select {
		case <-c.Context.Done():
			close(stop)
		case <-finished:
		}
	}()
	go func() {
		for n := 0; ; {
			select {
			case <-sigs:
				if n++; n >= 2 {
					abandon()
					return
				}
			case <-finished:
				return
			}
		}
	}()
	opt.Stop = stop

	view := newBatchView(c.App.ErrWriter)
	opt.Events = view.event
	sum, err := batch.Run(ctx, c.Args().First(), store, opt)
	view.close()
	if sum == nil {
		return err
	}
	if c.Bool("json") {
		data, jerr := json.MarshalIndent(sum, "", "  ")
		if jerr != nil {
			return jerr
		}
		fmt.Fprintf(c.App.Writer, "%s\n", data)
	} else {
		printBatch(c.App.Writer, sum)
	}
	if err != nil {
		return err
	}
	if n := sum.Counts.Failed; n > 0 {
		return fmt.Errorf("batch: %d of %d parts failed; their reasons are in %s", n, sum.Counts.Parts, filepath.Join(sum.RunDir, batch.SummaryFile))
	}
	return nil
}

// printBatch prints the summary table (part, verdict, time, reasons),
// the counts and where the summary and the index are.
func printBatch(w io.Writer, sum *batch.Summary) {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "PART\tVERDICT\tTIME\tREVISION\tREASONS")
	for _, p := range sum.Parts {
		rev, took := "-", "-"
		if p.Revision > 0 {
			rev = fmt.Sprint(p.Revision)
		}
		if p.Finished != "" {
			took = fmt.Sprintf("%.1fs", p.Seconds)
		}
		outcome := p.Outcome()
		if p.Status == batch.StatusSkipped {
			outcome += " (filed before)"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", p.Name, outcome, took, rev, reasonText(p))
	}
	tw.Flush()
	c := sum.Counts
	fmt.Fprintf(w, "\n%d parts: %d ready, %d review, %d rescan, %d failed, %d without a result (%d filed in this run, %d filed before)\n",
		c.Parts, c.Ready, c.Review, c.Rescan, c.Failed, c.Pending, c.Filed, c.Skipped)
	if sum.Started != "" && sum.Finished != "" {
		if t0, err := time.Parse(time.RFC3339, sum.Started); err == nil {
			if t1, err := time.Parse(time.RFC3339, sum.Finished); err == nil {
				fmt.Fprintf(w, "time:    %s with %d workers; peak heap %s\n", t1.Sub(t0), sum.Workers, humanize.IBytes(uint64(sum.PeakHeap)))
			}
		}
	}
	fmt.Fprintf(w, "summary: %s\nindex:   %s\n", filepath.Join(sum.RunDir, batch.SummaryFile), filepath.Join(sum.RunDir, batch.IndexFile))
	fmt.Fprintln(w, "A model that passes still needs a supervised, reduced-speed trial in the cell, under the cell's risk assessment and local safety rules.")
}

// reasonText is the table's reasons cell: the error of a failed part,
// else the first reason that is not a ready remark, shortened, and how
// many more there are.
func reasonText(p batch.PartResult) string {
	if p.Error != "" {
		return shorten(p.Error, 110)
	}
	rs := p.ShortReasons()
	if len(rs) == 0 {
		return "-"
	}
	s := shorten(rs[0], 90)
	if len(rs) > 1 {
		s += fmt.Sprintf(" (+%d more)", len(rs)-1)
	}
	return s
}

func shorten(s string, n int) string {
	s = strings.Join(strings.Fields(s), " ")
	if r := []rune(s); len(r) > n {
		return string(r[:n-1]) + "…"
	}
	return s
}

// batchView renders a run's events on w: on a terminal an overall bar
// with the ETA and a line per running part, redrawn in place; otherwise
// one line per part as it finishes.
type batchView struct {
	w       io.Writer
	live    bool
	lines   int // lines of the live block on screen
	last    time.Time
	running map[int]string // part index → "name  stage done/total"
	prog    batch.Progress
}

func newBatchView(w io.Writer) *batchView {
	return &batchView{w: w, live: isTerminal(w), running: map[int]string{}}
}

func (v *batchView) event(e batch.Event) {
	v.prog = e.Progress
	switch e.Kind {
	case batch.EventStarted:
		v.running[e.Index] = e.Part.Name
	case batch.EventStage:
		v.running[e.Index] = fmt.Sprintf("%s  %s %d/%d", e.Part.Name, e.Stage, e.Done, e.Total)
		if v.live && time.Since(v.last) < 200*time.Millisecond {
			return
		}
	case batch.EventFinished:
		delete(v.running, e.Index)
		v.clear()
		line := fmt.Sprintf("[%d/%d] %s: %s", e.Progress.Finished, e.Progress.Total, e.Part.Name, e.Part.Outcome())
		if e.Part.Revision > 0 {
			line += " (" + fmt.Sprintf("r%d", e.Part.Revision) + ")"
		}
		line += fmt.Sprintf(", %.1f s", e.Part.Seconds)
		if e.Part.Error != "" {
			line += ": " + shorten(e.Part.Error, 100)
		}
		fmt.Fprintln(v.w, line)
	case batch.EventStopping:
		v.clear()
		fmt.Fprintln(v.w, "stopping: no more parts start; the running ones finish (Ctrl-C again to abandon them; nothing half-filed is left)")
	}
	v.draw()
}

// clear removes the live block.
func (v *batchView) clear() {
	if !v.live || v.lines == 0 {
		return
	}
	fmt.Fprintf(v.w, "\x1b[%dA", v.lines)
	for i := 0; i < v.lines; i++ {
		fmt.Fprint(v.w, "\x1b[2K\n")
	}
	fmt.Fprintf(v.w, "\x1b[%dA", v.lines)
	v.lines = 0
}

// draw redraws the live block: the overall bar and the running parts.
func (v *batchView) draw() {
	if !v.live {
		return
	}
	v.last = time.Now()
	if v.lines > 0 {
		fmt.Fprintf(v.w, "\x1b[%dA", v.lines)
	}
	p := v.prog
	const width = 30
	fill := 0
	if p.Total > 0 {
		fill = width * p.Finished / p.Total
	}
	eta := "ETA -"
	if p.ETA > 0 {
		eta = "ETA " + p.ETA.Round(time.Second).String()
	}
	fmt.Fprintf(v.w, "\x1b[2Kparts [%s%s] %d/%d  %s elapsed, %s\n", strings.Repeat("=", fill), strings.Repeat(" ", width-fill),
		p.Finished, p.Total, p.Elapsed.Round(time.Second), eta)
	idx := make([]int, 0, len(v.running))
	for i := range v.running {
		idx = append(idx, i)
	}
	sort.Ints(idx)
	for _, i := range idx {
		fmt.Fprintf(v.w, "\x1b[2K  %s\n", v.running[i])
	}
	n := 1 + len(idx)
	for i := n; i < v.lines; i++ { // lines left over from a longer block
		fmt.Fprint(v.w, "\x1b[2K\n")
	}
	if v.lines > n {
		fmt.Fprintf(v.w, "\x1b[%dA", v.lines-n)
	}
	v.lines = n
}

// close removes the live block at the end of the run.
func (v *batchView) close() { v.clear() }
