package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
)

// TestSampleAndTables runs 'scanfold sample' on a demo part's mesh and
// 'scanfold tables' on the cloud it writes, then loads the tables
// against the cloud read back from the PLY file: the float32 PLY round
// trip must keep the cloud's hash.
func TestSampleAndTables(t *testing.T) {
	dir := t.TempDir()
	part, err := reconstruct.SynthPartMesh("nut", 0.001)
	if err != nil {
		t.Fatal(err)
	}
	meshPath := filepath.Join(dir, "nut.ply")
	if err := mesh.SaveMesh(meshPath, part); err != nil {
		t.Fatal(err)
	}
	cloudPath := filepath.Join(dir, "nut-cloud.ply")
	code, out, errOut := runArgs(t, context.Background(), "sample", meshPath, "--spacing", "5%", "--out", cloudPath)
	if code != 0 {
		t.Fatalf("sample: exit %d: %s", code, errOut)
	}
	if !strings.Contains(out, "points") {
		t.Errorf("sample output: %q", out)
	}
	tablePath := filepath.Join(dir, "nut.ppf")
	code, out, errOut = runArgs(t, context.Background(), "tables", cloudPath, "--out", tablePath)
	if code != 0 {
		t.Fatalf("tables: exit %d: %s", code, errOut)
	}
	if !strings.Contains(out, "pairs") {
		t.Errorf("tables output: %q", out)
	}
	cloud, err := mesh.LoadCloud(cloudPath)
	if err != nil {
		t.Fatal(err)
	}
	m, err := features.LoadTables(tablePath, cloud)
	if err != nil {
		t.Fatal(err)
	}
	if m.Pairs() == 0 {
		t.Error("empty tables")
	}
	// A spacing as a length, and bad flags.
	code, _, errOut = runArgs(t, context.Background(), "sample", meshPath, "--spacing", "3mm", "--out", filepath.Join(dir, "b.ply"))
	if code != 0 {
		t.Errorf("sample --spacing 3mm: exit %d: %s", code, errOut)
	}
	for _, args := range [][]string{
		{"sample", meshPath, "--spacing", "0%", "--out", filepath.Join(dir, "c.ply")},
		{"sample", meshPath, "--normals", "smooth", "--out", filepath.Join(dir, "c.ply")},
		{"tables", meshPath, "--angle-bins", "31", "--out", filepath.Join(dir, "c.ppf")},
		{"tables", cloudPath, "--distance-step", "2mm", "--out", filepath.Join(dir, "c.ppf")},
	} {
		if code, _, errOut := runArgs(t, context.Background(), args...); code == 0 {
			t.Errorf("%v: accepted", args)
		} else if strings.Count(errOut, "\n") > 1 {
			t.Errorf("%v: error not on one line: %q", args, errOut)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "c.ppf")); err == nil {
		t.Error("a failed tables run left a file behind")
	}
}

func TestInterspersed(t *testing.T) {
	app := newApp(&strings.Builder{}, &strings.Builder{})
	for _, c := range []struct{ in, want string }{
		{"scanfold sample m.ply --spacing 5% --out c.ply", "scanfold sample --spacing 5% --out c.ply -- m.ply"},
		{"scanfold tables c.ply --keep-planar --out t.ppf", "scanfold tables --keep-planar --out t.ppf -- c.ply"},
		{"scanfold tables --out=t.ppf c.ply", "scanfold tables --out=t.ppf -- c.ply"},
		{"scanfold synth --part nut --out d", "scanfold synth --part nut --out d"},
		{"scanfold sample --out c.ply -- -odd.ply", "scanfold sample --out c.ply -- -odd.ply"},
		{"scanfold --help", "scanfold --help"},
		{"scanfold nosuch x --y", "scanfold nosuch x --y"},
	} {
		got := strings.Join(interspersed(app, strings.Fields(c.in)), " ")
		if got != c.want {
			t.Errorf("%q → %q, want %q", c.in, got, c.want)
		}
	}
}
