package onboard

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
)

// smallSweep synthesises a short turntable sweep of a demo part.
func smallSweep(t *testing.T, part string, frames int) string {
	t.Helper()
	m, err := reconstruct.SynthPartMesh(part, reconstruct.DefaultPartSpacing)
	if err != nil {
		t.Fatal(err)
	}
	opt := reconstruct.DefaultSynthOptions()
	opt.Frames = frames
	opt.Seed = 4
	dir := filepath.Join(t.TempDir(), part)
	if _, err := reconstruct.Synth(context.Background(), dir, m, opt); err != nil {
		t.Fatal(err)
	}
	return dir
}

func quickOptions() Options {
	opt := DefaultOptions()
	opt.Check.Views = 6
	opt.Check.ConfuserViews = 1
	opt.RealFrames = 2
	opt.DemoConfusers = false
	opt.Fuse.TSDF.VoxelSize = 0.003
	return opt
}

// TestOnboardFilesEverything onboards a short sweep into an empty
// catalog and checks what was filed: every blob the cell needs, the
// report, the provenance, the transform back to the sweep; then that a
// second run with SkipFiled files nothing new, and that the filed tables
// load against the filed cloud (the table file's cloud hash).
func TestOnboardFilesEverything(t *testing.T) {
	sweep := smallSweep(t, "labelbox", 12)
	store, err := catalog.Open(filepath.Join(t.TempDir(), "cat"), catalog.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer store.Close()
	opt := quickOptions()
	res, err := Onboard(context.Background(), sweep, "labelbox", store, opt)
	if err != nil {
		t.Fatal(err)
	}
	if res.Revision != 1 || res.Verdict == "" || len(res.Stages) < 5 {
		t.Fatalf("result %+v", res)
	}
	rev, err := store.Show("labelbox", 1)
	if err != nil {
		t.Fatal(err)
	}
	for _, role := range []string{"mesh", "cloud", "tables", "report.json", "report.html"} {
		if _, ok := rev.Blobs[role]; !ok {
			t.Errorf("revision lacks %s (has %v)", role, rev.Blobs)
		}
	}
	if rev.Verdict != res.Verdict || rev.Provenance.InputHash != res.InputHash || len(rev.Provenance.Settings) == 0 {
		t.Errorf("metadata %+v", rev.Metadata)
	}
	if _, err := os.Stat(filepath.Join(res.ReportDir, "index.html")); err != nil {
		t.Errorf("report: %v", err)
	}
	// The filed tables belong to the filed cloud.
	cloud, err := readBlob(store, rev, "cloud", mesh.ReadPLYCloud)
	if err != nil {
		t.Fatal(err)
	}
	ref := rev.Blobs["tables"]
	rc, err := store.OpenBlob(ref)
	if err != nil {
		t.Fatal(err)
	}
	_, err = features.ReadTables(rc, cloud)
	rc.Close()
	if err != nil {
		t.Errorf("filed tables do not load against the filed cloud: %v", err)
	}
	// PartToSweep takes the canonical model back onto the fused mesh:
	// the model's centroid is the origin, so PartToSweep's translation is
	// the fused surface's area centroid, inside the part's bounds.
	m, err := readBlob(store, rev, "mesh", mesh.ReadPLY)
	if err != nil {
		t.Fatal(err)
	}
	p, err := mesh.PoseFromMat4(rev.Frame.PartToSweep, 1e-6)
	if err != nil {
		t.Fatal(err)
	}
	if b := m.Transform(p).Bounds(); !b.Contains(p.T) {
		t.Errorf("PartToSweep's origin %v lies outside the fused part %v", p.T, b)
	}
	// Same sweep, same settings, SkipFiled: nothing new.
	opt.SkipFiled = true
	again, err := Onboard(context.Background(), sweep, "labelbox", store, opt)
	if err != nil {
		t.Fatal(err)
	}
	if !again.Skipped || again.Revision != 1 {
		t.Errorf("second run: %+v", again)
	}
	if revs, _ := store.Revisions("labelbox"); len(revs) != 1 {
		t.Errorf("revisions %v after a skipped run", revs)
	}
}

// TestOnboardCancelledFilesNothing cancels the run before it starts:
// nothing is filed and the catalog stays empty.
func TestOnboardCancelledFilesNothing(t *testing.T) {
	sweep := smallSweep(t, "nut", 4)
	store, err := catalog.Open(filepath.Join(t.TempDir(), "cat"), catalog.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer store.Close()
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := Onboard(ctx, sweep, "nut", store, quickOptions()); !errors.Is(err, context.Canceled) {
		t.Fatalf("err = %v, want context.Canceled", err)
	}
	if list, _ := store.List(); len(list) != 0 {
		t.Errorf("catalog holds %v after a cancelled run", list)
	}
	if _, err := Onboard(context.Background(), sweep, "../nut", store, quickOptions()); !errors.Is(err, catalog.ErrBadName) {
		t.Errorf("bad name: err = %v", err)
	}
}
