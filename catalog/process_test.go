//go:build unix

package catalog

import (
	"bufio"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"os/exec"
	"reflect"
	"sort"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"
)

// The tests in this file run real processes against one catalog: the
// test binary re-executes itself with childEnv set, and TestMain hands
// control to runChild instead of the tests.

const childEnv = "SCANFOLD_CATALOG_TEST_CHILD"

func TestMain(m *testing.M) {
	if os.Getenv(childEnv) != "" {
		os.Exit(runChild())
	}
	os.Exit(m.Run())
}

// runChild files revisions as the environment says:
//
//	CHILD_DIR    catalog folder
//	CHILD_ID     a number naming this child
//	CHILD_COUNT  filings to make; -1 for "until killed"
//	CHILD_WAIT   "1": print "ready" and wait for a line on stdin first
//
// After each committed filing of part "a" it prints "filed a N". In the
// endless mode it also files and removes revisions of part "b", so that
// kills land in removals too.
func runChild() int {
	dir := os.Getenv("CHILD_DIR")
	id, _ := strconv.Atoi(os.Getenv("CHILD_ID"))
	count, _ := strconv.Atoi(os.Getenv("CHILD_COUNT"))
	s, err := Open(dir, Options{})
	if err != nil {
		fmt.Fprintln(os.Stderr, "child open:", err)
		return 2
	}
	defer s.Close()
	if os.Getenv("CHILD_WAIT") == "1" {
		fmt.Println("ready")
		if _, err := bufio.NewReader(os.Stdin).ReadString('\n'); err != nil {
			fmt.Fprintln(os.Stderr, "child wait:", err)
			return 2
		}
	}
	ctx := context.Background()
	for i := 0; count < 0 || i < count; i++ {
		f := testFiling("a", uint64(id)<<32|uint64(i))
		f.Extra = json.RawMessage(fmt.Sprintf(`{"child":%d,"i":%d}`, id, i))
		r, err := s.File(ctx, f)
		if err != nil {
			fmt.Fprintln(os.Stderr, "child file:", err)
			return 1
		}
		fmt.Printf("filed a %d\n", r.Number)
		if count < 0 {
			if _, err := s.File(ctx, testFiling("b", uint64(id)<<32|uint64(i)|1<<31)); err != nil {
				fmt.Fprintln(os.Stderr, "child file b:", err)
				return 1
			}
			if i%2 == 1 {
				revs, err := s.Revisions("b")
				if err != nil {
					fmt.Fprintln(os.Stderr, "child revisions b:", err)
					return 1
				}
				if err := s.Remove("b", revs[0]); err != nil {
					fmt.Fprintln(os.Stderr, "child remove b:", err)
					return 1
				}
			}
		}
	}
	return 0
}

// startChild starts the test binary as a child filer.
func startChild(t *testing.T, dir string, id, count int, wait bool) (*exec.Cmd, io.WriteCloser, *bufio.Scanner, *strings.Builder) {
	t.Helper()
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe, "-test.run=^$")
	w := "0"
	if wait {
		w = "1"
	}
	cmd.Env = append(os.Environ(), childEnv+"=1", "CHILD_DIR="+dir, "CHILD_ID="+strconv.Itoa(id),
		"CHILD_COUNT="+strconv.Itoa(count), "CHILD_WAIT="+w)
	stdin, err := cmd.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	stderr := &strings.Builder{}
	cmd.Stderr = stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	return cmd, stdin, bufio.NewScanner(stdout), stderr
}

// Two processes filing the same part at once both succeed, many times:
// every revision number is handed out exactly once, and each one holds
// what the process that got it filed.
func TestTwoProcessesFileConcurrently(t *testing.T) {
	dir := t.TempDir() + "/cat"
	s, err := Open(dir, Options{}) // create first, so both children only open
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	const perChild = 25
	type child struct {
		cmd    *exec.Cmd
		stdin  io.WriteCloser
		out    *bufio.Scanner
		stderr *strings.Builder
		got    []int
	}
	children := make([]*child, 2)
	for i := range children {
		cmd, stdin, out, stderr := startChild(t, dir, i+1, perChild, true)
		children[i] = &child{cmd: cmd, stdin: stdin, out: out, stderr: stderr}
	}
	for i, c := range children {
		if !c.out.Scan() || c.out.Text() != "ready" {
			t.Fatalf("child %d did not get ready: %q %s", i+1, c.out.Text(), c.stderr)
		}
	}
	for _, c := range children { // start both at once
		io.WriteString(c.stdin, "go\n")
	}
	var wg sync.WaitGroup
	for _, c := range children {
		wg.Add(1)
		go func(c *child) {
			defer wg.Done()
			for c.out.Scan() {
				var n int
				if _, err := fmt.Sscanf(c.out.Text(), "filed a %d", &n); err == nil {
					c.got = append(c.got, n)
				}
			}
		}(c)
	}
	wg.Wait()
	for i, c := range children {
		if err := c.cmd.Wait(); err != nil {
			t.Fatalf("child %d: %v\n%s", i+1, err, c.stderr)
		}
		if len(c.got) != perChild {
			t.Fatalf("child %d reported %d filings, want %d", i+1, len(c.got), perChild)
		}
	}

	owner := map[int]int{}
	interleaved := 0
	for i, c := range children {
		for k, n := range c.got {
			if prev, dup := owner[n]; dup {
				t.Errorf("revision %d handed to child %d and child %d", n, prev, i+1)
			}
			owner[n] = i + 1
			if k > 0 && n != c.got[k-1]+1 {
				interleaved++
			}
		}
	}
	t.Logf("%d times a child's next number was not its previous + 1 (the two interleaved)", interleaved)
	revs, err := s.Revisions("a")
	if err != nil {
		t.Fatal(err)
	}
	want := make([]int, 2*perChild)
	for i := range want {
		want[i] = i + 1
	}
	if !reflect.DeepEqual(revs, want) {
		t.Fatalf("revisions %v, want 1…%d with none lost or doubled", revs, 2*perChild)
	}
	for n, who := range owner {
		r, err := s.Show("a", n)
		if err != nil {
			t.Fatal(err)
		}
		var extra struct{ Child, I int }
		json.Unmarshal(r.Extra, &extra)
		if extra.Child != who {
			t.Errorf("a@%d holds child %d's filing, but child %d was told it filed it", n, extra.Child, who)
		}
	}
	rep, err := s.Verify(false)
	if err != nil || !rep.Clean() {
		t.Errorf("Verify: %+v, %v", rep, err)
	}
}

// killRounds: 3 with -short, 8 by default (a few seconds), or
// SCANFOLD_CATALOG_KILL_ROUNDS for a long run by hand.
func killRounds() int {
	if n, err := strconv.Atoi(os.Getenv("SCANFOLD_CATALOG_KILL_ROUNDS")); err == nil && n > 0 {
		return n
	}
	if testing.Short() {
		return 3
	}
	return 8
}

// A child filing in a loop is killed with SIGKILL at seeded random
// moments; after each kill the catalog opens, Verify finds every
// committed revision whole and its blobs hash-correct, every revision
// the child reported is there, numbers have no gaps, and a repair
// leaves the catalog clean.
func TestKillWhileFiling(t *testing.T) {
	dir := t.TempDir() + "/cat"
	rng := rand.New(rand.NewPCG(20250301, 7))
	acked := 0 // highest revision of "a" a child reported as filed
	for round := 0; round < killRounds(); round++ {
		cmd, _, out, stderr := startChild(t, dir, round+1, -1, false)
		lines := make(chan int, 1024)
		go func() {
			for out.Scan() {
				var n int
				if _, err := fmt.Sscanf(out.Text(), "filed a %d", &n); err == nil {
					lines <- n
				}
			}
			close(lines)
		}()
		// From the child's start: some kills land while it creates or
		// opens the catalog, most while it files or removes.
		delay := time.Duration(rng.IntN(400)) * time.Millisecond
		time.Sleep(delay)
		if err := cmd.Process.Kill(); err != nil { // SIGKILL on Unix
			t.Fatal(err)
		}
		err := cmd.Wait()
		if ws, ok := cmd.ProcessState.Sys().(interface{ Signaled() bool }); ok && !ws.Signaled() {
			t.Fatalf("round %d: child ended by itself before the kill: %v\n%s", round, err, stderr)
		}
		for n := range lines {
			if n > acked {
				acked = n
			}
		}

		s, err := Open(dir, Options{})
		if err != nil {
			t.Fatalf("round %d (kill after %v): Open: %v", round, delay, err)
		}
		rep, err := s.Verify(false)
		if err != nil {
			t.Fatalf("round %d: Verify: %v", round, err)
		}
		if !rep.Healthy() {
			t.Fatalf("round %d (kill after %v): not healthy: %+v", round, delay, rep)
		}
		revs, err := s.Revisions("a")
		if err != nil && acked > 0 {
			t.Fatalf("round %d: %v", round, err)
		}
		for i, n := range revs {
			if n != i+1 {
				t.Fatalf("round %d: revisions of a %v have a gap", round, revs)
			}
		}
		if len(revs) < acked || len(revs) > acked+1 {
			t.Fatalf("round %d: %d revisions of a, but the children reported %d filed (at most one more may have committed unreported)",
				round, len(revs), acked)
		}
		for _, part := range []string{"a", "b"} {
			rs, _ := s.Revisions(part)
			for _, n := range rs {
				r, err := s.Show(part, n)
				if err != nil {
					t.Fatalf("round %d: %s@%d: %v", round, part, n, err)
				}
				var roles []string
				for role, ref := range r.Blobs {
					roles = append(roles, role)
					if err := checkBlobFile(s.BlobPath(ref.SHA256), ref); err != nil {
						t.Fatalf("round %d: %s@%d: %v", round, part, n, err)
					}
				}
				sort.Strings(roles)
				if want := []string{"cloud", "legend.png", "mesh", "report.json", "tables"}; !reflect.DeepEqual(roles, want) {
					t.Fatalf("round %d: half revision %s@%d with roles %v", round, part, n, roles)
				}
			}
		}
		fixed, err := s.Verify(true)
		if err != nil {
			t.Fatalf("round %d: repair: %v", round, err)
		}
		after, err := s.Verify(false)
		if err != nil || !after.Clean() || after.InFlight != 0 {
			t.Fatalf("round %d: after repair: %+v, %v", round, after, err)
		}
		t.Logf("round %d: killed after %v; %d revisions of a (%d reported); repair removed %d files, %d stale records",
			round, delay, len(revs), acked, len(fixed.Removed), fixed.StalePending)
		s.Close()
	}
}
