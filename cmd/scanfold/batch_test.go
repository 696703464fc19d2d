package main

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/scanfold/scanfold/batch"
)

// TestBatchCommand onboards a bin of a short sweep and a sweep whose
// manifest is cut short: the table names both, the failure gives exit
// 1 with its reason; again with --json nothing is redone; an
// interrupted run exits 130; bad arguments are refused.
func TestBatchCommand(t *testing.T) {
	dir := t.TempDir()
	bin := filepath.Join(dir, "bin")
	code, _, errOut := runArgs(t, context.Background(), "synth", "--part", "nut", "--frames", "12", "--seed", "4", "--out", filepath.Join(bin, "nut"))
	if code != 0 {
		t.Fatalf("synth: %s", errOut)
	}
	if err := os.MkdirAll(filepath.Join(bin, "broken"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(bin, "broken", "sweep.json"), []byte(`{"format": "scanfold.sweep", "vers`), 0o644); err != nil {
		t.Fatal(err)
	}
	cat := filepath.Join(dir, "cat")
	quick := []string{"--catalog", cat, "--views", "6", "--real-frames", "2", "--demo-confusers=false", "--voxel", "3mm"}

	code, out, errOut := runArgs(t, context.Background(), append([]string{"batch", bin}, quick...)...)
	if code != 1 || !strings.Contains(errOut, "1 of 2 parts failed") {
		t.Fatalf("batch: exit %d, stderr %q", code, errOut)
	}
	for _, w := range []string{"PART", "VERDICT", "broken", "error", "sweep.json", "nut", "2 parts:", "summary: " + filepath.Join(bin, batch.RunDirName, batch.SummaryFile), "risk assessment"} {
		if !strings.Contains(out, w) {
			t.Errorf("batch output lacks %q:\n%s", w, out)
		}
	}
	if !strings.Contains(errOut, "broken: error") || !strings.Contains(errOut, "nut: ") {
		t.Errorf("progress lines:\n%s", errOut)
	}

	// Again, as JSON: the nut is skipped, the failure carried.
	code, out, _ = runArgs(t, context.Background(), append([]string{"batch", bin, "--json"}, quick...)...)
	if code != 1 {
		t.Errorf("second batch: exit %d", code)
	}
	var sum batch.Summary
	if err := json.Unmarshal([]byte(out), &sum); err != nil {
		t.Fatalf("--json output: %v\n%s", err, out)
	}
	if len(sum.Parts) != 2 || sum.Parts[1].Name != "nut" || sum.Parts[1].Status != batch.StatusSkipped || !sum.Parts[0].Carried {
		t.Errorf("second batch: %+v", sum.Parts)
	}

	// Interrupted before it starts anything: 130, and the summary says so.
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	code, _, errOut = runArgs(t, ctx, append([]string{"batch", bin, "--retry-failed"}, quick...)...)
	if code != 130 || !strings.Contains(errOut, "interrupted") {
		t.Errorf("interrupted batch: exit %d, %q", code, errOut)
	}

	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"batch"}, "one bin folder"},
		{[]string{"batch", bin, "--max-memory", "lots"}, `--max-memory "lots"`},
		{[]string{"batch", bin, "--workers", "-2"}, "--workers -2"},
		{[]string{"batch", filepath.Join(dir, "missing"), "--catalog", cat}, "bin folder"},
	} {
		code, _, errOut := runArgs(t, context.Background(), c.args...)
		if code != 1 || !strings.Contains(errOut, c.want) {
			t.Errorf("%v: exit %d, stderr %q, want 1 and %q", c.args, code, errOut, c.want)
		}
	}
}
