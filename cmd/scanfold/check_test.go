package main

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
	"github.com/scanfold/scanfold/validate"
)

// partFiles writes a demo part's mesh (1 mm lattice), samples it and
// builds its tables through the CLI; it returns the mesh and table
// paths (the cloud is PART-cloud.ply beside the tables).
func partFiles(t *testing.T, dir, name string) (meshPath, tablePath string, m *mesh.Mesh) {
	t.Helper()
	m, err := reconstruct.SynthPartMesh(name, 0.001)
	if err != nil {
		t.Fatal(err)
	}
	meshPath = filepath.Join(dir, name+".ply")
	if err := mesh.SaveMesh(meshPath, m); err != nil {
		t.Fatal(err)
	}
	cloudPath := filepath.Join(dir, name+"-cloud.ply")
	if code, _, e := runArgs(t, context.Background(), "sample", meshPath, "--out", cloudPath); code != 0 {
		t.Fatalf("sample: %s", e)
	}
	tablePath = filepath.Join(dir, name+".ppf")
	if code, _, e := runArgs(t, context.Background(), "tables", cloudPath, "--out", tablePath); code != 0 {
		t.Fatalf("tables: %s", e)
	}
	return meshPath, tablePath, m
}

// TestCheckCommand runs 'scanfold check' on the nut with a few views and
// a report: exit 0, a verdict with its reasons, the safety caution, and
// a complete report folder whose JSON holds the verdict and both
// scorers. The cloud is found beside the tables.
func TestCheckCommand(t *testing.T) {
	if testing.Short() {
		t.Skip("renders and votes views")
	}
	dir := t.TempDir()
	meshPath, tablePath, _ := partFiles(t, dir, "nut")
	report := filepath.Join(dir, "report")
	code, out, errOut := runArgs(t, context.Background(), "check", meshPath, "--tables", tablePath,
		"--views", "4", "--report", report, "--confusers", "none", "--support-z", "0mm")
	if code != 0 {
		t.Fatalf("check: exit %d: %s", code, errOut)
	}
	t.Log(out)
	for _, w := range []string{"check of nut:", "recall", "threshold", filepath.Join(report, "index.html"), "risk assessment"} {
		if !strings.Contains(out, w) {
			t.Errorf("output lacks %q", w)
		}
	}
	for _, f := range []string{"index.html", "report.json", "model.png", "views.png", "scores-1.png", "scores-2.png"} {
		if _, err := os.Stat(filepath.Join(report, f)); err != nil {
			t.Errorf("report: %v", err)
		}
	}
	data, err := os.ReadFile(filepath.Join(report, "report.json"))
	if err != nil {
		t.Fatal(err)
	}
	var r validate.Report
	if err := json.Unmarshal(data, &r); err != nil {
		t.Fatal(err)
	}
	if !r.Verdict.Valid() || len(r.Scorers) != 2 || r.Safety != validate.SafetyCaution || r.Check == nil || len(r.Check.Rankings) != 3 {
		t.Errorf("report.json: verdict %q, %d scorers, check summary %v", r.Verdict, len(r.Scorers), r.Check != nil)
	}
	if !strings.Contains(out, strings.ToUpper(string(r.Verdict))) {
		t.Errorf("printed verdict differs from the report's %q", r.Verdict)
	}
}

// TestCheckCommandErrors: bad input gives a non-zero exit and a message
// naming what is wrong.
func TestCheckCommandErrors(t *testing.T) {
	dir := t.TempDir()
	meshPath, tablePath, _ := partFiles(t, dir, "nut")
	other := filepath.Join(dir, "other-cloud.ply")
	if err := mesh.SaveCloud(other, &mesh.Cloud{Points: []r3.Vec{{}, {X: 0.01}, {Y: 0.01}}, Normals: []r3.Vec{{Z: 1}, {Z: 1}, {Z: 1}}}); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"check", meshPath}, "tables"},
		{[]string{"check", meshPath, "--tables", filepath.Join(dir, "missing.ppf")}, "missing"},
		{[]string{"check", meshPath, "--tables", tablePath, "--cloud", other}, "does not belong"},
		{[]string{"check", filepath.Join(dir, "missing.ply"), "--tables", tablePath}, "missing.ply"},
		{[]string{"check", meshPath, "--tables", tablePath, "--views", "1"}, "views"},
		{[]string{"check", meshPath, "--tables", tablePath, "--model-frame", "up", "--sweep", dir}, "sweep"},
		{[]string{"check", meshPath, "--tables", tablePath, "--rests", "sideways"}, `--rests "sideways"`},
		{[]string{"check", meshPath, "--tables", tablePath, "--rests", "as-scanned"}, "--support-z"},
		{[]string{"check", meshPath, "--tables", tablePath, "--resolution", "9cm"}, "--resolution"},
		{[]string{"compare", meshPath}, "reference"},
		{[]string{"compare", meshPath, "--reference", meshPath, "--align", "sideways"}, "sideways"},
	} {
		code, _, errOut := runArgs(t, context.Background(), tc.args...)
		if code == 0 || !strings.Contains(errOut, tc.want) {
			t.Errorf("%v: exit %d, stderr %q (want it to mention %q)", tc.args, code, errOut, tc.want)
		}
	}
}

// TestCheckCommandWrongUnit: a model in millimetres read as metres is
// judged rescan for its size, quickly (no views are rendered), and the
// same file with --mesh-unit 1mm is not.
func TestCheckCommandWrongUnit(t *testing.T) {
	dir := t.TempDir()
	_, tablePath, m := partFiles(t, dir, "nut")
	mm := m.Clone()
	for i, v := range mm.Vertices {
		mm.Vertices[i] = r3.Scale(1000, v)
	}
	mmPath := filepath.Join(dir, "nut-mm.stl")
	if err := mesh.SaveMesh(mmPath, mm); err != nil {
		t.Fatal(err)
	}
	code, out, errOut := runArgs(t, context.Background(), "check", mmPath, "--tables", tablePath, "--views", "0", "--confusers", "none")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	if !strings.Contains(out, "RESCAN") || !strings.Contains(out, validate.CodeUnit) {
		t.Errorf("a model 1000× too large: %s", out)
	}
	code, out, errOut = runArgs(t, context.Background(), "check", mmPath, "--mesh-unit", "1mm", "--tables", tablePath, "--views", "0", "--confusers", "none")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	if strings.Contains(out, validate.CodeUnit) {
		t.Errorf("--mesh-unit 1mm still flags the unit: %s", out)
	}
}

// TestCheckCommandSweep checks the nut's model against a synthetic
// turntable sweep of it (12 frames): the frames are scored with the
// true poses from truth/poses.json (--model-frame part) and the
// coverage is counted.
func TestCheckCommandSweep(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a sweep")
	}
	dir := t.TempDir()
	meshPath, tablePath, m := partFiles(t, dir, "nut")
	sweep := filepath.Join(dir, "sweep")
	opt := reconstruct.DefaultSynthOptions()
	opt.Frames = 12
	opt.PartName = "nut"
	if _, err := reconstruct.Synth(context.Background(), sweep, m, opt); err != nil {
		t.Fatal(err)
	}
	code, out, errOut := runArgs(t, context.Background(), "check", meshPath, "--tables", tablePath, "--views", "0",
		"--confusers", "none", "--sweep", sweep, "--poses", filepath.Join(sweep, reconstruct.TruthDir, reconstruct.TruthPosesName),
		"--model-frame", "part", "--frames", "6", "--support-z", "0mm")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	t.Log(out)
	if !strings.Contains(out, "real frames found in 100% of 6") || !strings.Contains(out, "coverage") {
		t.Errorf("sweep check output: %s", out)
	}
}

// TestCompareCommand: a scan 5 % too large, turned and moved, is
// aligned to its reference, its scale flagged, and the deviation PLY
// and report written.
func TestCompareCommand(t *testing.T) {
	if testing.Short() {
		t.Skip("aligns and samples meshes")
	}
	dir := t.TempDir()
	m, err := reconstruct.SynthPartMesh("valve", 0.001)
	if err != nil {
		t.Fatal(err)
	}
	ref := filepath.Join(dir, "valve-cad.stl")
	if err := mesh.SaveMesh(ref, m); err != nil {
		t.Fatal(err)
	}
	scan := m.Clone()
	move := mesh.PoseFromAxisAngle(r3.Vec{X: 1, Y: 2, Z: 3}, 1.2, r3.Vec{X: 0.1, Z: 0.4})
	for i, v := range scan.Vertices {
		scan.Vertices[i] = move.Apply(r3.Scale(1.05, v))
	}
	scan.Normals = nil
	scanPath := filepath.Join(dir, "scan.ply")
	if err := mesh.SaveMesh(scanPath, scan); err != nil {
		t.Fatal(err)
	}
	dev := filepath.Join(dir, "dev.ply")
	report := filepath.Join(dir, "cmp")
	code, out, errOut := runArgs(t, context.Background(), "compare", scanPath, "--reference", ref, "--threshold", "1mm", "--deviation", dev, "--report", report)
	if code != 0 {
		t.Fatalf("compare: exit %d: %s", code, errOut)
	}
	t.Log(out)
	if !strings.Contains(out, "scale        1.05") || !strings.Contains(out, "off by more than") {
		t.Errorf("the 5 %% scale error is not reported: %s", out)
	}
	for _, f := range []string{dev, filepath.Join(report, "index.html"), filepath.Join(report, "deviation.png"), filepath.Join(report, "deviation.ply")} {
		if _, err := os.Stat(f); err != nil {
			t.Error(err)
		}
	}
}
