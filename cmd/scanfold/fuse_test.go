package main

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
)

// TestFuseCommand synthesises a small turntable sweep and fuses it
// through the command line; the accuracy of fusion is tested in package
// reconstruct against the sweep's truth.
func TestFuseCommand(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "sweep")
	if code, _, errOut := runArgs(t, context.Background(), "synth", "--part", "labelbox", "--frames", "8", "--seed", "2", "--out", dir); code != 0 {
		t.Fatalf("synth exit %d: %s", code, errOut)
	}
	out := filepath.Join(t.TempDir(), "part.ply")
	js := filepath.Join(t.TempDir(), "fuse.json")
	code, stdout, errOut := runArgs(t, context.Background(), "fuse", dir, "--out", out, "--voxel", "3mm", "--json", js)
	if code != 0 {
		t.Fatalf("fuse exit %d: %s", code, errOut)
	}
	for _, w := range []string{"8 used of 8", "axis:", "estimated", "area:", "time:"} {
		if !strings.Contains(stdout, w) {
			t.Errorf("summary lacks %q:\n%s", w, stdout)
		}
	}
	m, err := mesh.LoadMesh(out)
	if err != nil {
		t.Fatal(err)
	}
	// The labelbox is 80 × 50 × 30 mm: its fused surface (without the
	// underside it stood on) is about 2·80·30 + 2·50·30 + 80·50 = 11,800
	// mm²; a few frames at 3 mm voxels leave it within a third of that.
	if a := m.Area(); a < 0.0118*2/3 || a > 0.0118*4/3 {
		t.Errorf("fused area %.1f cm², want about 118 cm²", a*1e4)
	}
	var rep map[string]any
	data, err := os.ReadFile(js)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(data, &rep); err != nil || rep["frames_used"] != 8.0 {
		t.Errorf("report JSON: %v, frames_used %v", err, rep["frames_used"])
	}
	// A missing sweep is an error naming it.
	code, _, errOut = runArgs(t, context.Background(), "fuse", filepath.Join(dir, "nope"), "--out", out)
	if code != 1 || !strings.Contains(errOut, "nope") {
		t.Errorf("missing sweep: exit %d, %q", code, errOut)
	}
}

// TestPrintFuseReportLoop checks that a handheld fuse says what its pose
// graph did, and a turntable fuse (no graph) says nothing of it.
func TestPrintFuseReportLoop(t *testing.T) {
	r := &reconstruct.FuseReport{Rig: reconstruct.RigHandheld, Frames: 120, FramesUsed: 120, VoxelSize: 0.002,
		GraphNodes: 23, GraphEdges: 68, GraphDropped: 1, GraphCorrection: 0.00437,
		Timings: map[string]string{"integrate": "9.8s", "pose graph": "1.1s"}}
	var b strings.Builder
	printFuseReport(&b, "sweep", "part.ply", r, 10*time.Second)
	for _, w := range []string{"pose graph of 23 views and 68 links (1 dropped as inconsistent)", "up to 4.37 mm", "pose graph 1.1s"} {
		if !strings.Contains(b.String(), w) {
			t.Errorf("report lacks %q:\n%s", w, b.String())
		}
	}
	r.GraphNodes = 0
	b.Reset()
	printFuseReport(&b, "sweep", "part.ply", r, 10*time.Second)
	if strings.Contains(b.String(), "loop:") {
		t.Errorf("a report without a pose graph mentions one:\n%s", b.String())
	}
}
