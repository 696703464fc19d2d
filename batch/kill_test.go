package batch

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/scanfold/scanfold/catalog"
)

// The kill test runs a batch in a child process: the test binary
// re-executes itself with childEnv set, and TestMain hands control to
// runChild instead of the tests.
const childEnv = "SCANFOLD_BATCH_TEST_CHILD"

// runChild runs the batch in CHILD_BIN into the catalog CHILD_CATALOG
// with one worker and the quick settings, printing "finished NAME
// STATUS" as each part gets its result.
func runChild() int {
	store, err := catalog.Open(os.Getenv("CHILD_CATALOG"), catalog.DefaultOptions())
	if err != nil {
		fmt.Fprintln(os.Stderr, "child:", err)
		return 2
	}
	defer store.Close()
	opt := quickOptions()
	opt.Workers = 1
	opt.Events = func(e Event) {
		if e.Kind == EventFinished {
			fmt.Printf("finished %s %s\n", e.Part.Name, e.Part.Status)
		}
	}
	if _, err := Run(context.Background(), os.Getenv("CHILD_BIN"), store, opt); err != nil {
		fmt.Fprintln(os.Stderr, "child:", err)
		return 1
	}
	return 0
}

// TestKilledRunResumes kills a batch with SIGKILL part-way (after its
// first part finished, at a seeded random moment in the next), checks
// that the summary it left reads and that the run folder was locked
// while it ran, then runs the batch again: every part ends filed
// exactly once (revision 1 only), every part the killed run reported is
// kept, and the catalog verifies healthy. SCANFOLD_LONG=1 kills three
// times.
func TestKilledRunResumes(t *testing.T) {
	if testing.Short() {
		t.Skip("renders and onboards several sweeps")
	}
	parts := []Part{
		{Name: "a", Sweep: testSweep(t, "nut", 12, 4)},
		{Name: "b", Sweep: testSweep(t, "nut", 12, 6)},
		{Name: "c", Sweep: testSweep(t, "nut", 12, 5)},
	}
	dir := t.TempDir()
	bin := writeBin(t, filepath.Join(dir, "bin"), parts)
	catDir := filepath.Join(dir, "cat")
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	rounds := 1
	if os.Getenv("SCANFOLD_LONG") != "" {
		rounds = 3
	}
	rng := rand.New(rand.NewPCG(20261202, 7))
	reported := map[string]bool{} // parts a killed child said it had filed
	for round := 0; round < rounds; round++ {
		cmd := exec.Command(exe, "-test.run=^$")
		cmd.Env = append(os.Environ(), childEnv+"=1", "CHILD_BIN="+bin, "CHILD_CATALOG="+catDir)
		stdout, err := cmd.StdoutPipe()
		if err != nil {
			t.Fatal(err)
		}
		var stderr strings.Builder
		cmd.Stderr = &stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		lines := make(chan string, 16)
		go func() {
			sc := bufio.NewScanner(stdout)
			for sc.Scan() {
				lines <- sc.Text()
			}
			close(lines)
		}()
		first, ok := <-lines
		if !ok {
			cmd.Wait()
			t.Fatalf("round %d: the child ended without a result: %s", round, stderr.String())
		}
		// While it runs, the run folder is locked.
		store := openStore(t, catDir)
		if _, err := Run(context.Background(), bin, store, quickOptions()); !errors.Is(err, ErrBusy) {
			t.Errorf("round %d: a second run beside the child: err = %v, want ErrBusy", round, err)
		}
		store.Close()
		delay := time.Duration(rng.IntN(3000)) * time.Millisecond
		time.Sleep(delay)
		if err := cmd.Process.Kill(); err != nil { // SIGKILL on Unix
			t.Fatal(err)
		}
		cmd.Wait()
		got := []string{first}
		for l := range lines {
			got = append(got, l)
		}
		for _, l := range got {
			if f := strings.Fields(l); len(f) == 3 && (f[2] == string(StatusFiled) || f[2] == string(StatusSkipped)) {
				reported[f[1]] = true
			}
		}
		s := readSummary(t, filepath.Join(bin, RunDirName)) // never torn
		t.Logf("round %d: killed %v after the first result; the child reported %q; its summary: %v, state %s",
			round, delay, got, statuses(s), s.State)
	}

	store := openStore(t, catDir)
	sum, err := Run(context.Background(), bin, store, quickOptions())
	if err != nil {
		t.Fatal(err)
	}
	if sum.State != StateFinished || sum.Counts.Filed+sum.Counts.Skipped != len(parts) {
		t.Fatalf("after the kills: state %s, %v", sum.State, statuses(sum))
	}
	for _, p := range parts {
		if revs, err := store.Revisions(p.Name); err != nil || !reflect.DeepEqual(revs, []int{1}) {
			t.Errorf("%s: revisions %v (%v), want [1]", p.Name, revs, err)
		}
		pr := partOf(t, sum, p.Name)
		if reported[p.Name] && pr.Status != StatusSkipped {
			t.Errorf("%s was filed by a killed run but is %s now", p.Name, pr.Status)
		}
		if _, err := os.Stat(filepath.Join(bin, RunDirName, filepath.FromSlash(pr.Report), "index.html")); err != nil {
			t.Errorf("%s: report: %v", p.Name, err)
		}
	}
	rep, err := store.Verify(false)
	if err != nil || !rep.Healthy() {
		t.Errorf("catalog after the kills: %+v, %v", rep, err)
	}
}
