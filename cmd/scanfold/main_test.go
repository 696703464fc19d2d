package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"regexp"
	"runtime"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/urfave/cli/v2"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
)

func runArgs(t *testing.T, ctx context.Context, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var o, e bytes.Buffer
	code = run(ctx, append([]string{"scanfold"}, args...), &o, &e)
	return code, o.String(), e.String()
}

func TestVersion(t *testing.T) {
	code, out, _ := runArgs(t, context.Background(), "version")
	if code != 0 || !strings.Contains(out, Version) || !strings.Contains(out, runtime.Version()) {
		t.Errorf("version: code %d, output %q", code, out)
	}
}

func TestHelp(t *testing.T) {
	code, out, _ := runArgs(t, context.Background(), "--help")
	if code != 0 {
		t.Fatalf("--help exit %d", code)
	}
	for _, w := range []string{"synth", "demo", "version", "risk assessment"} {
		if !strings.Contains(out, w) {
			t.Errorf("--help does not mention %q:\n%s", w, out)
		}
	}
	code, out, _ = runArgs(t, context.Background(), "synth", "--help")
	if code != 0 || !strings.Contains(out, "--mesh-unit") || !strings.Contains(out, "--rig") {
		t.Errorf("synth --help: exit %d\n%s", code, out)
	}
	// Every flag of every command has help text.
	for _, c := range newApp(&bytes.Buffer{}, &bytes.Buffer{}).Commands {
		for _, f := range c.Flags {
			if u := f.(cli.DocGenerationFlag).GetUsage(); u == "" {
				t.Errorf("%s --%s has no help text", c.Name, f.Names()[0])
			}
		}
		if c.Usage == "" {
			t.Errorf("command %s has no usage line", c.Name)
		}
	}
}

func TestSynthEndToEnd(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "sweep")
	code, out, errOut := runArgs(t, context.Background(), "synth", "--part", "nut", "--frames", "3", "--width", "161", "--height", "121",
		"--spacing", "2mm", "--distance", "0.5m", "--seed", "3", "--out", dir)
	if code != 0 {
		t.Fatalf("synth exit %d: %s", code, errOut)
	}
	for _, w := range []string{"wrote " + dir, "3 × 161×121", "turntable", "valid depth", "nut"} {
		if !strings.Contains(out, w) {
			t.Errorf("summary lacks %q:\n%s", w, out)
		}
	}
	s, err := reconstruct.LoadSweepWith(context.Background(), dir, reconstruct.LoadOptions{Strict: true, CheckPixels: true})
	if err != nil {
		t.Fatal(err)
	}
	if s.NumFrames() != 3 || s.Manifest.Intrinsics.Width != 161 {
		t.Errorf("loaded %d frames of width %d", s.NumFrames(), s.Manifest.Intrinsics.Width)
	}
	f, err := s.Frame(2)
	if err != nil {
		t.Fatal(err)
	}
	valid := 0
	for _, z := range f.Depth {
		if z > 0 {
			valid++
		}
	}
	if valid < len(f.Depth)/3 {
		t.Errorf("frame 2 has %d valid depths of %d", valid, len(f.Depth))
	}
	// Running again without --force refuses and leaves the sweep.
	code, _, errOut = runArgs(t, context.Background(), "synth", "--part", "nut", "--frames", "1", "--out", dir)
	if code != 1 || !strings.Contains(errOut, "already holds a sweep") {
		t.Errorf("second synth: exit %d, %q", code, errOut)
	}
}

func TestSynthMeshFile(t *testing.T) {
	// A mesh file in millimetres, read with --mesh-unit 1mm.
	m, err := reconstruct.SynthPartMesh("bushing", 0.002)
	if err != nil {
		t.Fatal(err)
	}
	for i := range m.Vertices {
		m.Vertices[i] = r3.Scale(1000, m.Vertices[i])
	}
	file := filepath.Join(t.TempDir(), "bushing.stl")
	if err := mesh.SaveMesh(file, m); err != nil {
		t.Fatal(err)
	}
	dir := filepath.Join(t.TempDir(), "sweep")
	code, out, errOut := runArgs(t, context.Background(), "synth", "--mesh", file, "--mesh-unit", "1mm", "--rig", "handheld",
		"--frames", "2", "--width", "81", "--height", "61", "--noise=false", "--out", dir)
	if code != 0 {
		t.Fatalf("synth --mesh exit %d: %s", code, errOut)
	}
	// The bushing is Ø40 × 30 mm (mesh/parts); meshed at 2 mm, its
	// round outline comes out up to a few tenths of a millimetre small.
	if !regexp.MustCompile(`(39\.\d|40\.0) × (39\.\d|40\.0) × 30\.0 mm`).MatchString(out) {
		t.Errorf("summary does not give the bushing's 40 × 40 × 30 mm size:\n%s", out)
	}
	// Read as metres, the same file is a 40 m part and is refused.
	code, _, errOut = runArgs(t, context.Background(), "synth", "--mesh", file, "--frames", "1", "--out", filepath.Join(t.TempDir(), "s"))
	if code != 1 || !strings.Contains(errOut, "millimetres") {
		t.Errorf("mesh in mm read as m: exit %d, %q", code, errOut)
	}
}

func TestCommandErrors(t *testing.T) {
	out := filepath.Join(t.TempDir(), "s")
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"synth", "--part", "nut"}, `"out" not set`},
		{[]string{"synth", "--out", out}, "give a part to scan"},
		{[]string{"synth", "--part", "gear", "--out", out}, `unknown part "gear"`},
		{[]string{"synth", "--part", "nut", "--mesh", "x.ply", "--out", out}, "either --part or --mesh"},
		{[]string{"synth", "--part", "nut", "--distance", "2 furlongs", "--out", out}, "units are mm, cm and m"},
		{[]string{"synth", "--part", "nut", "--rig", "drone", "--out", out}, `synth option Rig = drone`},
		{[]string{"synth", "--part", "nut", "--frames", "0", "--out", out}, "synth option Frames = 0"},
		{[]string{"synth", "--part", "nut", "--out", out, "extra"}, `no arguments, got "extra"`},
		{[]string{"synth", "--mesh", "missing.ply", "--out", out}, "missing.ply"},
		{[]string{"frobnicate"}, "frobnicate"},
	} {
		code, _, errOut := runArgs(t, context.Background(), c.args...)
		if code != 1 || !strings.Contains(errOut, c.want) {
			t.Errorf("%v: exit %d, stderr %q, want 1 and %q", c.args, code, errOut, c.want)
		}
		if _, err := os.Stat(out); err == nil {
			t.Fatalf("%v wrote %s", c.args, out)
		}
	}
}

func TestInterrupted(t *testing.T) {
	parent := t.TempDir()
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	code, _, errOut := runArgs(t, ctx, "synth", "--part", "nut", "--frames", "2", "--width", "81", "--height", "61", "--out", filepath.Join(parent, "s"))
	if code != 130 || !strings.Contains(errOut, "interrupted") {
		t.Errorf("interrupted synth: exit %d, %q", code, errOut)
	}
	if ents, _ := os.ReadDir(parent); len(ents) != 0 {
		t.Errorf("interrupted synth left %v", ents)
	}
}
