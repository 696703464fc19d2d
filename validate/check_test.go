package validate

import (
	"context"
	"fmt"
	"sync"
	"testing"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
)

// checkSpacing is the lattice spacing at which the check tests mesh the
// demo parts: 1 mm, about the resolution of a fused scan (2 mm voxels)
// and the spacing the features tests use.
const checkSpacing = 0.001

// checkParts caches the demo parts meshed at checkSpacing with their
// tables.
var checkParts sync.Map

type checkPart struct {
	mesh   *mesh.Mesh
	tables *features.Model
	part   *parts.Part
}

// tablesFor samples m at the default 5 % spacing and builds its tables.
func tablesFor(t testing.TB, m *mesh.Mesh) *features.Model {
	t.Helper()
	so := mesh.DefaultSampleOptions()
	if m.Normals == nil {
		so.Normals = mesh.NormalsFace
	}
	c, spacing, err := mesh.Sample(m, so)
	if err != nil {
		t.Fatal(err)
	}
	to := features.DefaultTableOptions()
	to.Spacing = spacing
	tb, err := features.BuildTables(context.Background(), c, to)
	if err != nil {
		t.Fatal(err)
	}
	return tb
}

func demoCheckPart(t testing.TB, name string) checkPart {
	t.Helper()
	if v, ok := checkParts.Load(name); ok {
		return v.(checkPart)
	}
	p, err := parts.Get(name)
	if err != nil {
		t.Fatal(err)
	}
	m, err := p.Mesh(checkSpacing)
	if err != nil {
		t.Fatal(err)
	}
	cp := checkPart{mesh: m, tables: tablesFor(t, m), part: p}
	checkParts.Store(name, cp)
	return cp
}

func logCheck(t testing.TB, res *CheckResult) {
	t.Helper()
	t.Logf("%s: verdict %s, diameter %.1f mm, symmetric %v, %d views", res.Name, res.Verdict, res.Diameter*1e3, res.Symmetric, len(res.Views))
	for _, f := range []ScorerFigures{res.Baseline, res.Point, res.Votes} {
		th := "-"
		if f.Calibration != nil {
			th = fmtF(f.Calibration.Threshold) + " AUC " + fmtF(f.Calibration.AUC) + " gap " + fmtF(f.Calibration.Gap)
		}
		t.Logf("  %-26s recall %.3f colour %.3f MSSD-AR %.3f  threshold %s", f.Name, f.Recall, f.ColorRecall, f.MSSDRecall, th)
	}
	t.Logf("  oracle %.3f; weights %+v; %s", res.Oracle, res.PointOptions, res.WeightsNote)
	for _, r := range res.Reasons {
		t.Logf("  [%s] %s: %s", r.Verdict, r.Code, r.Message)
	}
	for _, tm := range res.Timings {
		t.Logf("  %-40s %.2f s", tm.Stage, tm.Seconds)
	}
}

func fmtF(x float64) string { return fmtFloat(x) }

func TestCheckExplore(t *testing.T) {
	cp := demoCheckPart(t, "valve")
	opt := DefaultCheckOptions()
	opt.Views = 12
	res, err := Check(context.Background(), CheckInput{Name: "valve", Model: cp.mesh, Tables: cp.tables}, opt)
	if err != nil {
		t.Fatal(err)
	}
	logCheck(t, res)
}

func fmtFloat(x float64) string { return fmt.Sprintf("%.3f", x) }
