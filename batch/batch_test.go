package batch

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/onboard"
	"github.com/scanfold/scanfold/reconstruct"
)

// The tests share synthetic sweeps, rendered once per test binary into
// sweepCache, and list them in a bin.json by absolute path, so that each
// test has its own bin and run folder.
var (
	sweepCache string
	sweepMu    sync.Mutex
)

func TestMain(m *testing.M) {
	if os.Getenv(childEnv) != "" {
		os.Exit(runChild())
	}
	dir, err := os.MkdirTemp("", "scanfold-batch-test-*")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(2)
	}
	sweepCache = dir
	code := m.Run()
	os.RemoveAll(dir)
	os.Exit(code)
}

// testSweep returns a turntable sweep of a demo part with the given
// frames and seed, rendering it on first use.
func testSweep(t testing.TB, part string, frames int, seed uint64) string {
	t.Helper()
	sweepMu.Lock()
	defer sweepMu.Unlock()
	dir := filepath.Join(sweepCache, fmt.Sprintf("%s-%d-%d", part, frames, seed))
	if _, err := os.Stat(filepath.Join(dir, reconstruct.ManifestName)); err == nil {
		return dir
	}
	m, err := reconstruct.SynthPartMesh(part, reconstruct.DefaultPartSpacing)
	if err != nil {
		t.Fatal(err)
	}
	opt := reconstruct.DefaultSynthOptions()
	opt.Frames, opt.Seed, opt.PartName = frames, seed, part
	if _, err := reconstruct.Synth(context.Background(), dir, m, opt); err != nil {
		t.Fatal(err)
	}
	return dir
}

// quickOptions are small onboarding settings: few views and frames, a
// coarse voxel, no confusers, so that a part takes seconds.
func quickOptions() Options {
	o := DefaultOptions()
	o.Onboard.Check.Views = 6
	o.Onboard.Check.ConfuserViews = 1
	o.Onboard.RealFrames = 2
	o.Onboard.DemoConfusers = false
	o.Onboard.Fuse.TSDF.VoxelSize = 0.003
	return o
}

// writeBin writes a bin folder with a bin.json listing parts.
func writeBin(t testing.TB, dir string, parts []Part) string {
	t.Helper()
	type pw struct {
		Name  string `json:"name"`
		Sweep string `json:"sweep"`
	}
	var list struct {
		Parts []pw `json:"parts"`
	}
	for _, p := range parts {
		list.Parts = append(list.Parts, pw{p.Name, p.Sweep})
	}
	data, err := json.Marshal(list)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, BinFile), data, 0o644); err != nil {
		t.Fatal(err)
	}
	return dir
}

// copyDir copies a sweep folder (files and sub-folders).
func copyDir(t testing.TB, src, dst string) {
	t.Helper()
	err := filepath.WalkDir(src, func(p string, d os.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(src, p)
		if d.IsDir() {
			return os.MkdirAll(filepath.Join(dst, rel), 0o755)
		}
		data, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(filepath.Join(dst, rel), data, 0o644)
	})
	if err != nil {
		t.Fatal(err)
	}
}

// corruptCopy copies a sweep and truncates its manifest mid-value.
func corruptCopy(t testing.TB, src, dst string) string {
	t.Helper()
	copyDir(t, src, dst)
	p := filepath.Join(dst, reconstruct.ManifestName)
	data, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, data[:len(data)/3], 0o644); err != nil {
		t.Fatal(err)
	}
	return dst
}

func openStore(t testing.TB, dir string) *catalog.Store {
	t.Helper()
	s, err := catalog.Open(dir, catalog.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func statuses(s *Summary) map[string]Status {
	out := map[string]Status{}
	for _, p := range s.Parts {
		out[p.Name] = p.Status
	}
	return out
}

func partOf(t *testing.T, s *Summary, name string) PartResult {
	t.Helper()
	for _, p := range s.Parts {
		if p.Name == name {
			return p
		}
	}
	t.Fatalf("no part %s in the summary", name)
	return PartResult{}
}

// blobHashes returns the SHA-256 of the model blobs of name's latest
// revision.
func blobHashes(t *testing.T, s *catalog.Store, name string) map[string]string {
	t.Helper()
	rev, err := s.Show(name, 0)
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]string{}
	for _, role := range []string{catalog.RoleMesh, catalog.RoleCloud, catalog.RoleTables} {
		out[role] = rev.Blobs[role].SHA256
	}
	return out
}

// TestRunBin onboards a bin of two short sweeps and a corrupted one and
// checks the whole record: statuses, the reason of the failure, the
// summary on disk, the index's relative links, the logs, the catalog;
// the same bin with one worker gives the same models bit for bit; run
// again, nothing is filed twice and the failure is carried; a missing
// report folder is written back from the catalog; --retry-failed tries
// the failure again; a repaired sweep is onboarded without it.
func TestRunBin(t *testing.T) {
	nut := testSweep(t, "nut", 12, 4)
	nut2 := testSweep(t, "nut", 12, 5)
	dir := t.TempDir()
	broken := corruptCopy(t, nut, filepath.Join(dir, "sweeps", "broken"))
	bin := writeBin(t, filepath.Join(dir, "bin"), []Part{{Name: "nut", Sweep: nut}, {Name: "broken", Sweep: broken}, {Name: "nut2", Sweep: nut2}})
	store := openStore(t, filepath.Join(dir, "cat"))
	out := filepath.Join(bin, RunDirName)

	opt := quickOptions()
	opt.Workers = 2
	var mu sync.Mutex
	kinds := map[EventKind]int{}
	var last Event
	opt.Events = func(e Event) {
		mu.Lock()
		defer mu.Unlock()
		kinds[e.Kind]++
		last = e
	}
	sum, err := Run(context.Background(), bin, store, opt)
	if err != nil {
		t.Fatal(err)
	}
	if want := map[string]Status{"nut": StatusFiled, "nut2": StatusFiled, "broken": StatusFailed}; !reflect.DeepEqual(statuses(sum), want) {
		t.Fatalf("statuses %v, want %v; %+v", statuses(sum), want, sum.Parts)
	}
	if sum.State != StateFinished || sum.Counts.Failed != 1 || sum.Counts.Filed != 2 || sum.Counts.Pending != 0 {
		t.Errorf("state %s, counts %+v", sum.State, sum.Counts)
	}
	if b := partOf(t, sum, "broken"); !strings.Contains(b.Error, reconstruct.ManifestName) || b.Revision != 0 || b.Report != "" {
		t.Errorf("broken part: %+v; want its reason to name %s", b, reconstruct.ManifestName)
	}
	if kinds[EventStarted] != 3 || kinds[EventFinished] != 3 || kinds[EventStage] == 0 {
		t.Errorf("events %v", kinds)
	}
	if last.Progress.Finished != 3 || last.Progress.Total != 3 || last.Progress.Running != 0 {
		t.Errorf("last progress %+v", last.Progress)
	}

	// The summary on disk is the one returned.
	data, err := os.ReadFile(filepath.Join(out, SummaryFile))
	if err != nil {
		t.Fatal(err)
	}
	disk, err := ParseSummary(data)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(disk, sum) {
		t.Errorf("summary.json differs from the returned summary")
	}
	// The index links each report and log relatively, and they are there.
	index, err := os.ReadFile(filepath.Join(out, IndexFile))
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"nut", "nut2"} {
		p := partOf(t, sum, name)
		if p.Report != ReportDir+"/"+name+"-r1" || p.Verdict == "" || len(p.Stages) < 5 {
			t.Errorf("%s: %+v", name, p)
		}
		for _, link := range []string{p.Report + "/index.html", p.Log} {
			if !bytes.Contains(index, []byte(`href="`+link+`"`)) {
				t.Errorf("index.html does not link %s", link)
			}
			if _, err := os.Stat(filepath.Join(out, filepath.FromSlash(link))); err != nil {
				t.Errorf("linked file: %v", err)
			}
		}
		log, _ := os.ReadFile(filepath.Join(out, filepath.FromSlash(p.Log)))
		for _, w := range []string{"start: sweep " + p.Sweep, "stage fuse", "stages: load", "filed as " + name + "@1"} {
			if !bytes.Contains(log, []byte(w)) {
				t.Errorf("%s's log lacks %q:\n%s", name, w, log)
			}
		}
		if revs, _ := store.Revisions(name); !reflect.DeepEqual(revs, []int{1}) {
			t.Errorf("%s revisions %v", name, revs)
		}
	}
	log, _ := os.ReadFile(filepath.Join(out, LogDir, "broken.log"))
	if !bytes.Contains(log, []byte("failed after")) || !bytes.Contains(log, []byte(reconstruct.ManifestName)) {
		t.Errorf("broken's log:\n%s", log)
	}
	// The memory estimate is an upper bound of what the run used: the
	// heap in use as the Go runtime reports it (runtime.MemStats), with
	// two parts at most at once.
	var biggest int64
	for _, p := range sum.Parts {
		biggest = max(biggest, p.MemoryEstimate)
	}
	if sum.PeakHeap <= 0 || sum.PeakHeap > 2*biggest {
		t.Errorf("peak heap %d MiB, estimate %d MiB a part", sum.PeakHeap>>20, biggest>>20)
	}
	t.Logf("peak heap %d MiB, estimate %d MiB a part; nut %.1f s, nut2 %.1f s", sum.PeakHeap>>20, biggest>>20,
		partOf(t, sum, "nut").Seconds, partOf(t, sum, "nut2").Seconds)

	// One worker, another catalog: the same verdicts, reasons and model
	// files, bit for bit.
	bin1 := writeBin(t, filepath.Join(dir, "bin1"), []Part{{Name: "nut", Sweep: nut}, {Name: "nut2", Sweep: nut2}})
	store1 := openStore(t, filepath.Join(dir, "cat1"))
	opt1 := quickOptions()
	opt1.Workers = 1
	sum1, err := Run(context.Background(), bin1, store1, opt1)
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"nut", "nut2"} {
		a, b := partOf(t, sum, name), partOf(t, sum1, name)
		if a.Verdict != b.Verdict || !reflect.DeepEqual(a.Reasons, b.Reasons) || a.InputHash != b.InputHash {
			t.Errorf("%s: two workers gave %s %q, one worker %s %q", name, a.Verdict, a.Reasons, b.Verdict, b.Reasons)
		}
		if ha, hb := blobHashes(t, store, name), blobHashes(t, store1, name); !reflect.DeepEqual(ha, hb) {
			t.Errorf("%s: model blobs differ with the worker count: %v vs %v", name, ha, hb)
		}
	}

	// Again: nothing filed twice, the failure carried, and a report
	// folder deleted from the run folder written back from the catalog.
	nut2Report := filepath.Join(out, ReportDir, "nut2-r1")
	wantJSON, err := os.ReadFile(filepath.Join(nut2Report, "report.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.RemoveAll(nut2Report); err != nil {
		t.Fatal(err)
	}
	sum2, err := Run(context.Background(), bin, store, quickOptions())
	if err != nil {
		t.Fatal(err)
	}
	if want := map[string]Status{"nut": StatusSkipped, "nut2": StatusSkipped, "broken": StatusFailed}; !reflect.DeepEqual(statuses(sum2), want) {
		t.Fatalf("second run: statuses %v, want %v", statuses(sum2), want)
	}
	for _, name := range []string{"nut", "nut2"} {
		a, b := partOf(t, sum, name), partOf(t, sum2, name)
		// The reasons read back from the catalog read as those filed.
		if b.Revision != 1 || b.Verdict != a.Verdict || !reflect.DeepEqual(a.Reasons, b.Reasons) || b.Report != a.Report {
			t.Errorf("second run %s: %+v\nfirst: %+v", name, b, a)
		}
		if revs, _ := store.Revisions(name); !reflect.DeepEqual(revs, []int{1}) {
			t.Errorf("second run: %s revisions %v", name, revs)
		}
	}
	if got, err := os.ReadFile(filepath.Join(nut2Report, "report.json")); err != nil || !bytes.Equal(got, wantJSON) {
		t.Errorf("restored report.json: %v (equal %v)", err, bytes.Equal(got, wantJSON))
	}
	if _, err := os.Stat(filepath.Join(nut2Report, "index.html")); err != nil {
		t.Errorf("restored report: %v", err)
	}
	if b := partOf(t, sum2, "broken"); !b.Carried || !strings.Contains(b.Error, "--retry-failed") {
		t.Errorf("second run broken: %+v", b)
	}

	// --retry-failed tries it again (and it fails again, for the same
	// reason).
	opt3 := quickOptions()
	opt3.RetryFailed = true
	sum3, err := Run(context.Background(), bin, store, opt3)
	if err != nil {
		t.Fatal(err)
	}
	if b := partOf(t, sum3, "broken"); b.Status != StatusFailed || b.Carried || !strings.Contains(b.Error, reconstruct.ManifestName) {
		t.Errorf("retried broken: %+v", b)
	}

	// The sweep repaired: onboarded without --retry-failed.
	good, err := os.ReadFile(filepath.Join(nut, reconstruct.ManifestName))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(broken, reconstruct.ManifestName), good, 0o644); err != nil {
		t.Fatal(err)
	}
	sum4, err := Run(context.Background(), bin, store, quickOptions())
	if err != nil {
		t.Fatal(err)
	}
	if b := partOf(t, sum4, "broken"); b.Status != StatusFiled || b.Revision != 1 {
		t.Errorf("repaired broken: %+v", b)
	}
	if sum4.Counts.Failed != 0 || sum4.State != StateFinished {
		t.Errorf("after the repair: %+v", sum4.Counts)
	}
}

// TestStopAndCancel: closing Stop lets the running part finish and
// starts no other; cancelling the context abandons the running part,
// which files nothing; each time the next run carries on.
func TestStopAndCancel(t *testing.T) {
	a := testSweep(t, "nut", 12, 4)
	b := testSweep(t, "nut", 12, 5)
	dir := t.TempDir()
	bin := writeBin(t, filepath.Join(dir, "bin"), []Part{{Name: "a", Sweep: a}, {Name: "b", Sweep: b}})
	store := openStore(t, filepath.Join(dir, "cat"))

	opt := quickOptions()
	opt.Workers = 1
	stop := make(chan struct{})
	var once sync.Once
	opt.Stop = stop
	opt.Events = func(e Event) {
		if e.Kind == EventStarted {
			once.Do(func() { close(stop) })
		}
	}
	sum, err := Run(context.Background(), bin, store, opt)
	if !errors.Is(err, ErrStopped) || !errors.Is(err, context.Canceled) {
		t.Fatalf("stopped run: err = %v, want ErrStopped", err)
	}
	if want := map[string]Status{"a": StatusFiled, "b": StatusPending}; !reflect.DeepEqual(statuses(sum), want) || sum.State != StateInterrupted {
		t.Fatalf("stopped run: %v, state %s", statuses(sum), sum.State)
	}

	// Cancel as soon as b is under way: abandoned, nothing filed.
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	opt = quickOptions()
	opt.Events = func(e Event) {
		if e.Kind == EventStage && e.Part.Name == "b" {
			cancel()
		}
	}
	sum, err = Run(ctx, bin, store, opt)
	if !errors.Is(err, ErrStopped) {
		t.Fatalf("cancelled run: err = %v", err)
	}
	if want := map[string]Status{"a": StatusSkipped, "b": StatusAbandoned}; !reflect.DeepEqual(statuses(sum), want) {
		t.Fatalf("cancelled run: %v", statuses(sum))
	}
	if revs, err := store.Revisions("b"); len(revs) != 0 {
		t.Fatalf("b filed after being abandoned: %v %v", revs, err)
	}

	sum, err = Run(context.Background(), bin, store, quickOptions())
	if err != nil {
		t.Fatal(err)
	}
	if want := map[string]Status{"a": StatusSkipped, "b": StatusFiled}; !reflect.DeepEqual(statuses(sum), want) {
		t.Fatalf("last run: %v", statuses(sum))
	}
	if p := partOf(t, sum, "b"); p.Attempts != 1 {
		t.Errorf("b attempts %d after an abandoned run and a finished one, want 1 (an interrupt is no crash)", p.Attempts)
	}
}

// fakeOnboard stands in for onboard.Onboard in the scheduling tests: it
// holds the part for a while, counts how many run at once, writes a
// report folder and panics for the part named "crash".
type fakeOnboard struct {
	mu           sync.Mutex
	running, top int
}

func (f *fakeOnboard) onboard(ctx context.Context, sweep, name string, _ *catalog.Store, opt onboard.Options) (*onboard.Result, error) {
	f.mu.Lock()
	f.running++
	f.top = max(f.top, f.running)
	f.mu.Unlock()
	defer func() {
		f.mu.Lock()
		f.running--
		f.mu.Unlock()
	}()
	opt.Progress("fuse", 0, 1)
	time.Sleep(60 * time.Millisecond)
	if name == "crash" {
		var m map[string]int
		m["x"]++ // a nil map write: a real runtime panic
	}
	if err := os.MkdirAll(opt.ReportDir, 0o755); err != nil {
		return nil, err
	}
	if err := os.WriteFile(filepath.Join(opt.ReportDir, "index.html"), []byte(name), 0o644); err != nil {
		return nil, err
	}
	return &onboard.Result{Part: name, Revision: 1, Verdict: catalog.Ready, ReportDir: opt.ReportDir}, nil
}

// TestSchedule checks the pool against the workers and the memory
// budget with a stand-in onboarding, and that a panic in one part fails
// that part alone, with the stack trace in its log.
func TestSchedule(t *testing.T) {
	sweep := testSweep(t, "nut", 2, 1)
	opt := quickOptions()
	est := EstimateMemory(sweep, opt.Onboard, 1)
	// The estimate's terms by hand: the check's views at the scene
	// camera's 640×480, the real frames and two frames in flight at the
	// sweep's 640×480, one worker.
	if want := int64(estBase + 6*640*480*estViewPixel + 2*640*480*estFramePixel + estWorker + 2*640*480*estFramePixel); est != want {
		t.Errorf("estimate %d, want %d", est, want)
	}
	if got := EstimateMemory(filepath.Join(t.TempDir(), "none"), opt.Onboard, 1); got != int64(estBase+6*640*480*estViewPixel) {
		t.Errorf("estimate without a manifest %d", got)
	}
	// The same sweep's manifest as a handheld rig's adds the tracking
	// fusion's term.
	data, err := os.ReadFile(filepath.Join(sweep, reconstruct.ManifestName))
	if err != nil {
		t.Fatal(err)
	}
	m, err := reconstruct.ParseManifest(data)
	if err != nil {
		t.Fatal(err)
	}
	m.Rig, m.Turntable = reconstruct.RigHandheld, nil
	for i := range m.Frames {
		m.Frames[i].Angle = nil
	}
	if data, err = m.Encode(); err != nil {
		t.Fatal(err)
	}
	handheld := t.TempDir()
	if err := os.WriteFile(filepath.Join(handheld, reconstruct.ManifestName), data, 0o644); err != nil {
		t.Fatal(err)
	}
	if got := EstimateMemory(handheld, opt.Onboard, 1); got != est+640*480*estHandheldPixel {
		t.Errorf("handheld estimate %d, want %d", got, est+640*480*estHandheldPixel)
	}

	names := []string{"p1", "p2", "crash", "p3"}
	var parts []Part
	for _, n := range names {
		parts = append(parts, Part{Name: n, Sweep: sweep})
	}
	defer func(f func(context.Context, string, string, *catalog.Store, onboard.Options) (*onboard.Result, error)) {
		onboardFunc = f
	}(onboardFunc)

	for _, tc := range []struct {
		name      string
		workers   int
		maxMemory int64
		wantTop   int
	}{
		{"no budget", 4, 0, 4},
		{"two fit", 4, 2*est + est/2, 2},
		{"budget below one part: one at a time", 4, est / 2, 1},
		{"one worker", 1, 0, 1},
	} {
		f := &fakeOnboard{}
		onboardFunc = f.onboard
		dir := t.TempDir()
		bin := writeBin(t, filepath.Join(dir, "bin"), parts)
		store := openStore(t, filepath.Join(dir, "cat"))
		opt := quickOptions()
		opt.Workers, opt.MaxMemory = tc.workers, tc.maxMemory
		sum, err := Run(context.Background(), bin, store, opt)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		if f.top != tc.wantTop {
			t.Errorf("%s: %d parts ran at once, want %d", tc.name, f.top, tc.wantTop)
		}
		st := statuses(sum)
		if st["p1"] != StatusFiled || st["p2"] != StatusFiled || st["p3"] != StatusFiled || st["crash"] != StatusFailed {
			t.Errorf("%s: statuses %v", tc.name, st)
		}
		c := partOf(t, sum, "crash")
		if !strings.Contains(c.Error, "crash in a stage") || !strings.Contains(c.Error, "nil map") {
			t.Errorf("%s: crash error %q", tc.name, c.Error)
		}
		log, _ := os.ReadFile(filepath.Join(bin, RunDirName, LogDir, "crash.log"))
		if !bytes.Contains(log, []byte("panic: assignment to entry in nil map")) || !bytes.Contains(log, []byte("goroutine ")) {
			t.Errorf("%s: crash log lacks the panic and its stack:\n%s", tc.name, log)
		}
	}
}

// TestBusyAndBadOptions: a second run in a locked run folder is
// refused; negative options are refused.
func TestBusyAndBadOptions(t *testing.T) {
	dir := t.TempDir()
	sweep := testSweep(t, "nut", 2, 1)
	bin := writeBin(t, filepath.Join(dir, "bin"), []Part{{Name: "n", Sweep: sweep}})
	store := openStore(t, filepath.Join(dir, "cat"))
	out := filepath.Join(dir, "run")
	if err := os.MkdirAll(out, 0o755); err != nil {
		t.Fatal(err)
	}
	unlock, err := lockRun(filepath.Join(out, LockFile))
	if err != nil {
		t.Fatal(err)
	}
	opt := quickOptions()
	opt.OutDir = out
	if _, err := Run(context.Background(), bin, store, opt); !errors.Is(err, ErrBusy) {
		t.Errorf("locked run folder: err = %v, want ErrBusy", err)
	}
	unlock()
	opt.Workers = -1
	if _, err := Run(context.Background(), bin, store, opt); err == nil {
		t.Error("Workers -1 accepted")
	}
	// An unreadable previous summary is noted, not fatal.
	if err := os.WriteFile(filepath.Join(out, SummaryFile), []byte("{"), 0o644); err != nil {
		t.Fatal(err)
	}
	defer func(f func(context.Context, string, string, *catalog.Store, onboard.Options) (*onboard.Result, error)) {
		onboardFunc = f
	}(onboardFunc)
	onboardFunc = (&fakeOnboard{}).onboard
	opt.Workers = 0
	sum, err := Run(context.Background(), bin, store, opt)
	if err != nil {
		t.Fatal(err)
	}
	if len(sum.Notes) != 1 || !strings.Contains(sum.Notes[0], "could not be read") {
		t.Errorf("notes %q", sum.Notes)
	}
}

// readSummary reads and parses a run folder's summary.
func readSummary(t *testing.T, out string) *Summary {
	t.Helper()
	f, err := os.Open(filepath.Join(out, SummaryFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	data, err := io.ReadAll(f)
	if err != nil {
		t.Fatal(err)
	}
	s, err := ParseSummary(data)
	if err != nil {
		t.Fatalf("summary on disk: %v", err)
	}
	return s
}
