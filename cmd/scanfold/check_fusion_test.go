package main

import (
	"context"
	"path/filepath"
	"testing"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
	"github.com/scanfold/scanfold/validate"
)

// fusedCheckInput synthesises a turntable sweep of a demo part, fuses
// it, puts the fused mesh in its canonical frame (z along the support
// the fusion found), builds its tables, and returns the check input
// with every sixth frame of the sweep (posed where the fusion put it)
// and the sweep's coverage. This is what an onboarding run hands to
// validate.Check.
func fusedCheckInput(t *testing.T, name string, frames int) validate.CheckInput {
	t.Helper()
	part, err := reconstruct.SynthPartMesh(name, 0.001)
	if err != nil {
		t.Fatal(err)
	}
	dir := filepath.Join(t.TempDir(), "sweep")
	so := reconstruct.DefaultSynthOptions()
	so.Frames = frames
	so.WriteAxis = true
	so.PartName = name
	if _, err := reconstruct.Synth(context.Background(), dir, part, so); err != nil {
		t.Fatal(err)
	}
	sw, err := reconstruct.LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	fr, err := reconstruct.Fuse(context.Background(), sw, reconstruct.DefaultFuseOptions())
	if err != nil {
		t.Fatal(err)
	}
	rep := fr.Report
	partToWorld, err := validate.CanonicalFrame(fr.Mesh, rep.Support.Normal)
	if err != nil {
		t.Fatal(err)
	}
	model := fr.Mesh.Transform(partToWorld.Inv())
	so2 := mesh.DefaultSampleOptions()
	cloud, spacing, err := mesh.Sample(model, so2)
	if err != nil {
		t.Fatal(err)
	}
	to := features.DefaultTableOptions()
	to.Spacing = spacing
	tables, err := features.BuildTables(context.Background(), cloud, to)
	if err != nil {
		t.Fatal(err)
	}
	in := validate.CheckInput{Name: name + " (fused)", Model: model, Tables: tables,
		SupportZ: validate.PlaneHeight(partToWorld, rep.Support.Normal, rep.Support.Offset), SupportKnown: true}
	var poses []mesh.Pose
	skipped := map[int]bool{}
	for _, s := range rep.Skipped {
		skipped[s.Frame] = true
	}
	for i := 0; i < sw.NumFrames(); i++ {
		if skipped[i] {
			continue
		}
		poses = append(poses, rep.CamToWorld[i])
		if i%6 != 0 {
			continue
		}
		f, err := sw.Frame(i)
		if err != nil {
			t.Fatal(err)
		}
		in.Frames = append(in.Frames, validate.RealFrame{Index: i, Intr: f.Intr, Depth: f.Depth, Color: f.Color,
			ModelToCam: rep.CamToWorld[i].Inv().Mul(partToWorld)})
	}
	in.Sweep = &validate.SweepInput{Intr: sw.Manifest.Intrinsics, CamToWorld: poses, ModelToWorld: partToWorld}
	var dem []validate.NamedModel
	all, err := validate.DemoConfusers(0, name)
	if err != nil {
		t.Fatal(err)
	}
	dem = append(dem, all...)
	in.Confusers = dem
	t.Logf("%s fused: %d triangles, watertight %v, %d frames used, support at z = %.1f mm", name, len(model.Faces), rep.Watertight, rep.FramesUsed, in.SupportZ*1e3)
	return in
}

// TestCheckCleanFusion checks a clean fusion of a 36-frame turntable
// sweep of the valve with every stage. The findings that concern the
// scan itself must be absent: the fusion reached down to the support
// (no missing underside), its resting face is recognised as such, it is
// the part's size, the sweep saw it all round, and the sweep's own
// frames find it where the fusion put it. Its recall on synthetic views
// is measured and logged: a 2 mm fusion is rougher than the demo
// meshes, and on this sweep the point-difference scorer finds it in
// fewer than 80 % of 12 views (67–75 % as the fusion has changed), so
// the verdict, rescan for that recall, is not asserted.
func TestCheckCleanFusion(t *testing.T) {
	if testing.Short() {
		t.Skip("synthesises, fuses and checks a sweep")
	}
	in := fusedCheckInput(t, "valve", 36)
	opt := validate.DefaultCheckOptions()
	opt.Views = 12
	res, err := validate.Check(context.Background(), in, opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("verdict %s; point recall %.3f, baseline %.3f, votes %.3f; real frames %.2f; coverage %.3f; openings %d (holes %.4f, undersides %.4f, support %.0f mm², gap %.1f mm)",
		res.Verdict, res.Point.Recall, res.Baseline.Recall, res.Votes.Recall, res.Real.Recall, res.Coverage.SeenFraction,
		len(res.Openings.List), res.Openings.HoleFraction, res.Openings.UndersideFraction, res.Openings.SupportArea*1e6, res.Openings.SupportGap*1e3)
	for _, r := range res.Reasons {
		t.Logf("[%s] %s: %s", r.Verdict, r.Code, r.Message)
		switch r.Code {
		case validate.CodeMissingUnderside, validate.CodeUnit, validate.CodeLowCoverage, validate.CodeRealFrames, validate.CodeColorMismatch:
			t.Errorf("finding against a clean fusion: %s", r.Code)
		}
	}
	if res.Openings.SupportArea <= 0 {
		t.Error("the fusion's resting face was not recognised")
	}
	if res.Real.Recall < 0.8 {
		t.Errorf("the sweep's frames found the fused model in %.0f%% of them", 100*res.Real.Recall)
	}
}
