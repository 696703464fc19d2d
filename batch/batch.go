package batch

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"strings"
	"sync"
	"time"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/onboard"
	"github.com/scanfold/scanfold/validate"
)

// Names inside the run folder.
const (
	// RunDirName is the run folder's name inside the bin when
	// Options.OutDir is empty.
	RunDirName = ".scanfold-batch"
	// SummaryFile and IndexFile are the summary (JSON) and its HTML
	// index; LockFile keeps two runs out of one folder; LogDir holds a
	// log per part and ReportDir a report folder per part revision.
	SummaryFile = "summary.json"
	IndexFile   = "index.html"
	LockFile    = "lock"
	LogDir      = "logs"
	ReportDir   = "reports"
)

var (
	// ErrStopped is returned by Run when it was stopped (Options.Stop or
	// ctx) before every part had a result. It wraps context.Canceled.
	ErrStopped = fmt.Errorf("batch: stopped before every part was onboarded; run again to carry on: %w", context.Canceled)
	// ErrBusy: another batch holds the run folder.
	ErrBusy = errors.New("batch: run folder busy")
)

// Options configures Run. Start from DefaultOptions.
type Options struct {
	// Onboard is the onboarding of each part. Run sets, per part,
	// SkipFiled (true), ReportDir, Reference, ReferenceUnit, Progress
	// and, when nil, Confusers; and the workers inside a part.
	// DEFAULT: onboard.DefaultOptions()
	Onboard onboard.Options
	// Workers is the number of parts onboarded at once; 0 means
	// runtime.GOMAXPROCS(0). The cores are shared out among the parts
	// running. The results do not depend on it.
	// DEFAULT: 0
	Workers int
	// MaxMemory is the memory budget in bytes: a part is not started
	// while its estimated peak (EstimateMemory) and those of the parts
	// running would together exceed it, unless no part runs. 0 means
	// no budget.
	// DEFAULT: 0
	MaxMemory int64
	// OutDir is the run folder (logs, reports, summary); "" means
	// RunDirName inside the bin.
	// DEFAULT: ""
	OutDir string
	// RetryFailed onboards again the parts that failed in the previous
	// run. Without it they keep their failure, unless their sweep folder
	// changed since.
	// DEFAULT: false
	RetryFailed bool
	// MaxAttempts is how many runs may end (killed, crashed) while
	// onboarding the same part before the part is marked failed instead
	// of being tried again (RetryFailed tries it anyway).
	// DEFAULT: 3
	MaxAttempts int
	// Stop, when closed, stops the run from starting more parts; the
	// parts running go on to their end. Cancelling Run's context
	// abandons them as well.
	// DEFAULT: nil
	Stop <-chan struct{}
	// Events, when set, is told what happens, from one goroutine at a
	// time. It must return quickly.
	// DEFAULT: nil
	Events func(Event)
	// Now is the clock. DEFAULT: time.Now
	Now func() time.Time
}

// DefaultOptions returns the documented defaults.
func DefaultOptions() Options {
	return Options{Onboard: onboard.DefaultOptions(), MaxAttempts: 3, Now: time.Now}
}

// EventKind says what an Event reports.
type EventKind int

// The kinds of events.
const (
	// EventStarted: a part started; Part.Status is running.
	EventStarted EventKind = iota + 1
	// EventStage: a running part's stage advanced (Stage, Done, Total).
	EventStage
	// EventFinished: a part has its result (Part), or was abandoned.
	EventFinished
	// EventStopping: the run will start no more parts.
	EventStopping
)

// Event is one thing that happened in a run.
type Event struct {
	Kind EventKind
	// Index is the part's position in the bin and Part its line of the
	// summary as it stands.
	Index int
	Part  PartResult
	// Stage, Done and Total: the stage's progress (EventStage).
	Stage       string
	Done, Total int
	// Progress is the whole run's.
	Progress Progress
}

// Progress is how far the whole run is.
type Progress struct {
	// Total parts; Finished of them have a result (from this run or
	// carried over); Running are being onboarded.
	Total, Finished, Running int
	// Elapsed since the run started; ETA the estimated time left, 0
	// while no part has been onboarded in this run to estimate from.
	Elapsed, ETA time.Duration
}

// Run onboards every part of the bin folder bin into store (ReadBin
// says which parts) and returns the summary, which it also keeps
// written in the run folder (summary.json, index.html) as parts
// finish. A part's failure is recorded in its line and stops nothing;
// Run returns an error only when the run itself cannot go on (the bin
// cannot be read, the run folder cannot be written or is busy) or
// ErrStopped when stopped early. See the package documentation for
// resumption.
func Run(ctx context.Context, bin string, store *catalog.Store, opt Options) (*Summary, error) {
	if opt.Now == nil {
		opt.Now = time.Now
	}
	if opt.MaxAttempts <= 0 {
		opt.MaxAttempts = 3
	}
	if opt.Workers < 0 || opt.MaxMemory < 0 {
		return nil, fmt.Errorf("batch: Workers %d and MaxMemory %d must not be negative", opt.Workers, opt.MaxMemory)
	}
	binAbs, err := filepath.Abs(bin)
	if err != nil {
		return nil, fmt.Errorf("batch: %w", err)
	}
	out := opt.OutDir
	if out == "" {
		out = filepath.Join(binAbs, RunDirName)
	}
	if out, err = filepath.Abs(out); err != nil {
		return nil, fmt.Errorf("batch: %w", err)
	}
	parts, err := ReadBin(binAbs, out, store.Dir())
	if err != nil {
		return nil, err
	}
	for _, d := range []string{out, filepath.Join(out, LogDir), filepath.Join(out, ReportDir)} {
		if err := os.MkdirAll(d, 0o755); err != nil {
			return nil, fmt.Errorf("batch: run folder: %w", err)
		}
	}
	unlock, err := lockRun(filepath.Join(out, LockFile))
	if err != nil {
		return nil, err
	}
	defer unlock()

	r := &runner{opt: opt, store: store, out: out, parts: parts, start: opt.Now()}
	catAbs, _ := filepath.Abs(store.Dir())
	r.sum = &Summary{
		Format: SummaryFormat, Version: SummaryVersion, Bin: binAbs, Catalog: catAbs, RunDir: out,
		ToolVersion: opt.Onboard.ToolVersion, Started: r.stamp(r.start), State: StateRunning, MaxMemory: opt.MaxMemory,
	}
	if err := r.prepare(); err != nil {
		return nil, err
	}
	return r.run(ctx)
}

// runner is one run.
type runner struct {
	opt   Options
	store *catalog.Store
	out   string
	parts []Part
	start time.Time

	confusers []validate.NamedModel
	todo      []int   // indices of the parts to onboard, in bin order
	estimate  []int64 // per part
	inner     int     // workers inside a part

	mu       sync.Mutex // guards sum, peakHeap and events
	sum      *Summary
	writeErr error
}

func (r *runner) stamp(t time.Time) string { return t.UTC().Format(time.RFC3339) }

// prepare reads the previous summary, decides which parts to onboard,
// fixes the confusers and estimates the memory.
func (r *runner) prepare() error {
	prev := map[string]PartResult{}
	var prevStarted string
	if data, err := os.ReadFile(filepath.Join(r.out, SummaryFile)); err == nil {
		if ps, err := ParseSummary(data); err != nil {
			r.sum.Notes = append(r.sum.Notes, fmt.Sprintf("The previous summary could not be read (%v); no failure was carried over.", err))
		} else {
			prevStarted = ps.Started
			for _, p := range ps.Parts {
				prev[strings.ToLower(p.Name)] = p
			}
		}
	} else if !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("batch: %w", err)
	}

	seen := map[string]int{}
	r.sum.Parts = make([]PartResult, len(r.parts))
	r.estimate = make([]int64, len(r.parts))
	for i, p := range r.parts {
		pr := PartResult{Name: p.Name, Sweep: p.Sweep, Status: StatusPending, Log: LogDir + "/" + p.Name + ".log"}
		pr.Fingerprint = fingerprint(p.Sweep)
		key := strings.ToLower(p.Name)
		if j, dup := seen[key]; dup {
			pr.Status, pr.Log = StatusFailed, ""
			pr.Error = fmt.Sprintf("the bin holds %q and %q: the catalog's names ignore letter case; rename one", r.parts[j].Name, p.Name)
			r.sum.Parts[i] = pr
			continue
		}
		seen[key] = i
		old, had := prev[key]
		if had && old.Fingerprint == pr.Fingerprint {
			pr.Attempts = old.Attempts
			switch {
			case old.Status == StatusFailed && !r.opt.RetryFailed:
				pr = old
				pr.Carried = true
				if !strings.Contains(pr.Error, "--retry-failed") {
					pr.Error = fmt.Sprintf("%s (in the run of %s; retry with --retry-failed)", pr.Error, prevStarted)
				}
				r.sum.Parts[i] = pr
				continue
			case old.Status == StatusRunning && old.Attempts >= r.opt.MaxAttempts && !r.opt.RetryFailed:
				pr.Status = StatusFailed
				pr.Error = fmt.Sprintf("%d runs ended (killed or crashed) while onboarding this part; see its log; retry with --retry-failed", old.Attempts)
				r.sum.Parts[i] = pr
				continue
			case old.Status != StatusRunning:
				pr.Attempts = 0
			}
		}
		r.sum.Parts[i] = pr
		r.todo = append(r.todo, i)
	}

	workers := r.opt.Workers
	if workers == 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	r.sum.Workers = workers
	// Share the cores out among the parts that will run at once; the
	// memory budget may allow fewer than the workers.
	conc := max(1, min(workers, len(r.todo)))
	for _, i := range r.todo {
		e := EstimateMemory(r.parts[i].Sweep, r.opt.Onboard, max(1, runtime.GOMAXPROCS(0)/conc))
		r.estimate[i] = e
	}
	if r.opt.MaxMemory > 0 {
		var biggest int64
		for _, i := range r.todo {
			biggest = max(biggest, r.estimate[i])
		}
		if biggest > 0 {
			conc = max(1, min(conc, int(r.opt.MaxMemory/biggest)))
		}
	}
	r.inner = max(1, runtime.GOMAXPROCS(0)/conc)
	for _, i := range r.todo {
		r.estimate[i] = EstimateMemory(r.parts[i].Sweep, r.opt.Onboard, r.inner)
		r.sum.Parts[i].MemoryEstimate = r.estimate[i]
	}

	// The confusers: fixed once for the whole run, so that no part's
	// check depends on which parts were filed before it. The bin's own
	// parts are left out, so that a resumed run checks against the same
	// set as the first.
	r.confusers = r.opt.Onboard.Confusers
	if r.confusers == nil && len(r.todo) > 0 {
		all, err := onboard.CatalogConfusers(r.store, "", false)
		if err != nil {
			return fmt.Errorf("batch: reading the catalog's parts: %w", err)
		}
		r.confusers = []validate.NamedModel{}
		for _, c := range all {
			if _, inBin := seen[strings.ToLower(c.Name)]; !inBin {
				r.confusers = append(r.confusers, c)
			}
		}
		if len(r.confusers) == 0 && r.opt.Onboard.DemoConfusers {
			if r.confusers, err = validate.DemoConfusers(0, ""); err != nil {
				return err
			}
		}
	}
	for _, c := range r.confusers {
		r.sum.Confusers = append(r.sum.Confusers, c.Name)
	}
	return nil
}

// fingerprint hashes the names, sizes and modification times of the
// files under dir (at most 100,000 entries), or returns "" when dir
// cannot be read.
func fingerprint(dir string) string {
	h := sha256.New()
	n := 0
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if n++; n > 100000 {
			return fs.SkipAll
		}
		info, err := d.Info()
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(dir, p)
		fmt.Fprintf(h, "%s\x00%d\x00%d\x00", filepath.ToSlash(rel), info.Size(), info.ModTime().UnixNano())
		return nil
	})
	if err != nil {
		return ""
	}
	return hex.EncodeToString(h.Sum(nil))[:16]
}

// onboardFunc onboards one part; the scheduling tests replace it.
var onboardFunc = onboard.Onboard

// done is what a part's goroutine hands back.
type done struct {
	i  int
	pr PartResult
}

// run schedules the parts and writes the summary.
func (r *runner) run(ctx context.Context) (*Summary, error) {
	r.writeLocked()
	if r.writeErr != nil {
		return nil, r.writeErr
	}
	stopSampling := r.sampleMemory()
	results := make(chan done)
	running, next := 0, 0
	var used int64
	stopping := false
	stop := r.opt.Stop
	ctxDone := ctx.Done()
	beginStop := func() {
		if !stopping {
			stopping = true
			r.emit(Event{Kind: EventStopping})
		}
	}
	for {
		select { // a stop that came while parts were being started
		case <-stop:
			stop = nil
			beginStop()
		case <-ctxDone:
			ctxDone = nil
			beginStop()
		default:
		}
		if !stopping && next < len(r.todo) && running < r.sum.Workers {
			i := r.todo[next]
			if running == 0 || r.opt.MaxMemory == 0 || used+r.estimate[i] <= r.opt.MaxMemory {
				next++
				running++
				used += r.estimate[i]
				r.begin(i)
				go func() { results <- done{i, r.onboardPart(ctx, i)} }()
				continue
			}
		}
		if running == 0 {
			break
		}
		select {
		case d := <-results:
			running--
			used -= r.estimate[d.i]
			r.finish(d.i, d.pr)
		case <-stop:
			stop = nil
			beginStop()
		case <-ctxDone:
			ctxDone = nil
			beginStop()
		}
	}
	stopSampling()

	r.mu.Lock()
	defer r.mu.Unlock()
	r.sum.State = StateFinished
	for i := range r.sum.Parts {
		if s := r.sum.Parts[i].Status; s == StatusPending || s == StatusAbandoned || s == StatusRunning {
			r.sum.State = StateInterrupted
		}
	}
	r.sum.Finished = r.stamp(r.opt.Now())
	r.sum.PeakRSS = peakRSS()
	r.writeLocked()
	if r.writeErr != nil {
		return r.sum, r.writeErr
	}
	if r.sum.State == StateInterrupted {
		return r.sum, ErrStopped
	}
	return r.sum, nil
}

// sampleMemory records the peak heap in use every 250 ms until the
// returned function is called.
func (r *runner) sampleMemory() func() {
	quit := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	sample := func() {
		var ms runtime.MemStats
		runtime.ReadMemStats(&ms)
		r.mu.Lock()
		r.sum.PeakHeap = max(r.sum.PeakHeap, int64(ms.HeapInuse))
		r.mu.Unlock()
	}
	go func() {
		defer wg.Done()
		t := time.NewTicker(250 * time.Millisecond)
		defer t.Stop()
		for {
			select {
			case <-quit:
				sample()
				return
			case <-t.C:
				sample()
			}
		}
	}()
	return func() { close(quit); wg.Wait() }
}

// begin marks part i running and writes the summary, so that a run
// that dies now leaves a record of the attempt.
func (r *runner) begin(i int) {
	r.mu.Lock()
	defer r.mu.Unlock()
	p := &r.sum.Parts[i]
	p.Status, p.Attempts, p.Started, p.Finished, p.Error = StatusRunning, p.Attempts+1, r.stamp(r.opt.Now()), "", ""
	r.writeLocked()
	r.emitLocked(Event{Kind: EventStarted, Index: i, Part: *p})
}

// finish records part i's result and writes the summary.
func (r *runner) finish(i int, pr PartResult) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.sum.Parts[i] = pr
	r.writeLocked()
	r.emitLocked(Event{Kind: EventFinished, Index: i, Part: pr})
}

// writeLocked refreshes the counts and writes the summary; r.mu is held.
// The first write error is kept (and returned by Run): a run that cannot
// write its record stops being resumable, which the caller must hear.
func (r *runner) writeLocked() {
	r.sum.Updated = r.stamp(r.opt.Now())
	r.sum.Count()
	if err := writeSummary(r.out, r.sum); err != nil && r.writeErr == nil {
		r.writeErr = err
	}
}

func (r *runner) emit(e Event) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.emitLocked(e)
}

// emitLocked fills in the progress and calls Events; r.mu is held.
func (r *runner) emitLocked(e Event) {
	if r.opt.Events == nil {
		return
	}
	e.Progress = r.progressLocked()
	r.opt.Events(e)
}

// progressLocked computes the run's progress and ETA: the mean time of
// the parts onboarded in this run, times the parts left, less the time
// the running ones have already spent, shared among the workers.
func (r *runner) progressLocked() Progress {
	now := r.opt.Now()
	p := Progress{Total: len(r.sum.Parts), Elapsed: now.Sub(r.start)}
	var sum float64
	var n, pending int
	var spent float64
	for _, pr := range r.sum.Parts {
		switch pr.Status {
		case StatusFiled:
			sum += pr.Seconds
			n++
			p.Finished++
		case StatusSkipped, StatusFailed:
			p.Finished++
		case StatusRunning:
			p.Running++
			if t, err := time.Parse(time.RFC3339, pr.Started); err == nil {
				spent += now.Sub(t).Seconds()
			}
		default:
			pending++
		}
	}
	if n > 0 {
		mean := sum / float64(n)
		left := mean*float64(pending+p.Running) - spent
		left = max(left, 0) / float64(max(1, min(r.sum.Workers, pending+p.Running)))
		p.ETA = time.Duration(left * float64(time.Second))
	}
	return p
}

// onboardPart onboards part i and returns its line of the summary. It
// never panics: a panic in the part's goroutine becomes its error, with
// the stack in its log.
func (r *runner) onboardPart(ctx context.Context, i int) (pr PartResult) {
	part := r.parts[i]
	r.mu.Lock()
	pr = r.sum.Parts[i]
	r.mu.Unlock()
	start := r.opt.Now()
	logf, closeLog := r.openLog(part.Name)
	defer closeLog()
	logf("start: sweep %s; attempt %d; estimated peak memory %d MiB; workers inside the part: %d", part.Sweep, pr.Attempts, pr.MemoryEstimate>>20, r.inner)

	defer func() {
		if v := recover(); v != nil {
			logf("panic: %v\n%s", v, debug.Stack())
			pr.Status, pr.Error = StatusFailed, fmt.Sprintf("crash in a stage: %v (stack in the log)", v)
		}
		pr.Finished = r.stamp(r.opt.Now())
		pr.Seconds = r.opt.Now().Sub(start).Seconds()
		switch pr.Status {
		case StatusFailed, StatusAbandoned:
			logf("%s after %.1f s: %s", pr.Status, pr.Seconds, pr.Error)
		default:
			var st []string
			for _, t := range pr.Stages {
				st = append(st, fmt.Sprintf("%s %.1f s", t.Stage, t.Seconds))
			}
			if len(st) > 0 {
				logf("stages: %s", strings.Join(st, ", "))
			}
			logf("%s as %s (verdict %s) after %.1f s", pr.Status, catalog.FormatRef(pr.Name, pr.Revision), pr.Verdict, pr.Seconds)
			for _, m := range pr.Reasons {
				logf("  %s", m)
			}
		}
	}()

	opt := r.opt.Onboard
	opt.SkipFiled = true
	opt.Confusers = r.confusers
	opt.Reference, opt.ReferenceUnit = part.Reference, part.ReferenceUnit
	switch part.Rests {
	case onboard.RestsAny:
		opt.Check.RestsAsScanned = false
	case onboard.RestsAsScanned:
		opt.Check.RestsAsScanned = true
	}
	if opt.ReferenceUnit == 0 {
		opt.ReferenceUnit = 1
	}
	pending := filepath.Join(r.out, ReportDir, "."+part.Name+".pending")
	opt.ReportDir = pending
	setWorkers(&opt, r.inner)
	var stage string
	opt.Progress = func(s string, d, t int) {
		if s != stage {
			logf("stage %s", s)
			stage = s
		}
		r.mu.Lock()
		p := r.sum.Parts[i]
		r.emitLocked(Event{Kind: EventStage, Index: i, Part: p, Stage: s, Done: d, Total: t})
		r.mu.Unlock()
	}

	res, err := onboardFunc(ctx, part.Sweep, part.Name, r.store, opt)
	if res != nil {
		pr.InputHash = res.InputHash
	}
	if err != nil && (res == nil || res.Revision == 0) {
		os.RemoveAll(pending)
		if ctx.Err() != nil && errors.Is(err, ctx.Err()) {
			pr.Status, pr.Error = StatusAbandoned, "abandoned by an interrupt; nothing was filed; the next run onboards it"
			return pr
		}
		pr.Status, pr.Error = StatusFailed, err.Error()
		return pr
	}
	pr.Revision, pr.Verdict, pr.Stages = res.Revision, res.Verdict, res.Stages
	pr.Reasons = nil
	for _, m := range res.Reasons {
		if m.Verdict == "" { // read back from the catalog: already "verdict: message"
			pr.Reasons = append(pr.Reasons, m.Message)
		} else {
			pr.Reasons = append(pr.Reasons, fmt.Sprintf("%s: %s", m.Verdict, m.Message))
		}
	}
	pr.Status = StatusFiled
	if res.Skipped {
		pr.Status = StatusSkipped
	}
	if err != nil {
		logf("filed, then: %v", err)
	}
	rep, rerr := r.placeReport(part.Name, res.Revision, pending, res.Skipped || err != nil)
	if rerr != nil {
		logf("report: %v", rerr)
		pr.Error = rerr.Error()
	}
	pr.Report = rep
	return pr
}

// setWorkers bounds the goroutines of every stage of one part.
func setWorkers(opt *onboard.Options, n int) {
	opt.Fuse.TSDF.Workers = n
	opt.Fuse.Weights.Workers = n
	opt.Fuse.Track.Workers = n
	opt.Tables.Workers = n
	opt.Check.Workers = n
	opt.Check.Coverage.Workers = n
}

// placeReport puts revision rev's report at reports/NAME-rREV in the
// run folder and returns that path relative to the run folder. A new
// report is moved there from pending; otherwise (a skipped part, or one
// whose report was not moved) the report folder is written from the
// catalog's blobs unless it is already there.
func (r *runner) placeReport(name string, rev int, pending string, fromCatalog bool) (string, error) {
	rel := ReportDir + "/" + fmt.Sprintf("%s-r%d", name, rev)
	dst := filepath.Join(r.out, filepath.FromSlash(rel))
	if !fromCatalog {
		if err := os.RemoveAll(dst); err != nil {
			return "", fmt.Errorf("batch: %w", err)
		}
		if err := os.Rename(pending, dst); err != nil {
			return "", fmt.Errorf("batch: moving the report: %w", err)
		}
		return rel, nil
	}
	os.RemoveAll(pending)
	if _, err := os.Stat(filepath.Join(dst, "index.html")); err == nil {
		return rel, nil
	}
	if err := r.restoreReport(name, rev, dst); err != nil {
		return "", err
	}
	return rel, nil
}

// restoreReport writes the report blobs of name@rev (report.html as
// index.html, report.json, the pictures) into dst, through a temporary
// folder beside it.
func (r *runner) restoreReport(name string, rev int, dst string) error {
	rv, err := r.store.Show(name, rev)
	if err != nil {
		return err
	}
	if _, ok := rv.Blobs[catalog.RoleReportHTML]; !ok {
		return fmt.Errorf("batch: %s has no report in the catalog", catalog.FormatRef(name, rev))
	}
	tmp, err := os.MkdirTemp(filepath.Dir(dst), "."+filepath.Base(dst)+".*")
	if err != nil {
		return fmt.Errorf("batch: %w", err)
	}
	defer os.RemoveAll(tmp)
	for role, ref := range rv.Blobs {
		file := role
		switch {
		case role == catalog.RoleReportHTML:
			file = "index.html"
		case role == catalog.RoleReportJSON || strings.HasSuffix(role, ".png"):
		default:
			continue
		}
		if err := r.copyBlob(ref, filepath.Join(tmp, file)); err != nil {
			return fmt.Errorf("batch: restoring the report of %s: %w", catalog.FormatRef(name, rev), err)
		}
	}
	if err := os.RemoveAll(dst); err != nil {
		return fmt.Errorf("batch: %w", err)
	}
	if err := os.Rename(tmp, dst); err != nil {
		return fmt.Errorf("batch: %w", err)
	}
	return nil
}

// copyBlob copies a blob, hash-checked as it is read, into path.
func (r *runner) copyBlob(ref catalog.BlobRef, path string) error {
	rc, err := r.store.OpenBlob(ref)
	if err != nil {
		return err
	}
	defer rc.Close()
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	_, err = io.Copy(f, rc)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return err
}

// openLog opens the part's log for appending and returns a printf that
// stamps each line with the time.
func (r *runner) openLog(name string) (logf func(format string, a ...any), closeLog func()) {
	f, err := os.OpenFile(filepath.Join(r.out, LogDir, name+".log"), os.O_WRONLY|os.O_CREATE|os.O_APPEND, 0o644)
	if err != nil {
		return func(string, ...any) {}, func() {}
	}
	var mu sync.Mutex
	logf = func(format string, a ...any) {
		mu.Lock()
		defer mu.Unlock()
		fmt.Fprintf(f, "%s %s\n", r.opt.Now().UTC().Format("2006-01-02T15:04:05.000Z"), fmt.Sprintf(format, a...))
	}
	return logf, func() { f.Close() }
}
