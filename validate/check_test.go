package validate

import (
	"context"
	"fmt"
	"math"
	"os"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

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
		t.Logf("  %-26s recall %.3f colour %.3f MSSD-AR %.3f accepted %.3f threshold %s", f.Name, f.Recall, f.ColorRecall, f.MSSDRecall, f.AcceptedRecall, th)
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

// demoBin returns the other demo parts (meshed at checkSpacing, with
// their tables) as confusers of the named part.
func demoBin(t testing.TB, exclude string) []NamedModel {
	t.Helper()
	var out []NamedModel
	for _, name := range parts.Names() {
		if name == exclude {
			continue
		}
		cp := demoCheckPart(t, name)
		out = append(out, NamedModel{Name: name, Mesh: cp.mesh, Tables: cp.tables})
	}
	return out
}

// TestCheckRecallDemoParts measures the check's recall target on every
// demo part in clutter (the other demo parts and two boxes, 0–4
// objects) with occluders hiding up to 40 % of the part: the share of
// views in which the chosen hypothesis is right (ADD, or ADD-S for a
// symmetric part, < 10 % of the diameter: Hinterstoisser et al. 2012,
// ACCV) for the point-difference scorer and the inlier-count baseline.
// Target: point ≥ 90 % and ≥ 1.3× the baseline, pooled over the parts.
//
// The default run uses 6 views per part and checks only that the point
// scorer is not worse than the baseline on every part and reaches 75 %
// pooled (6 views a part cannot resolve 90 %); SCANFOLD_LONG=1 runs 60
// views per part and checks the targets.
func TestCheckRecallDemoParts(t *testing.T) {
	if testing.Short() {
		t.Skip("renders and votes many scenes")
	}
	views := 6
	long := os.Getenv("SCANFOLD_LONG") == "1"
	if long {
		views = 60
	}
	if v, err := strconv.Atoi(os.Getenv("SCANFOLD_CHECK_VIEWS")); err == nil && v > 1 {
		views = v
	}
	var pointHits, baseHits, total float64
	for _, name := range parts.Names() {
		cp := demoCheckPart(t, name)
		opt := DefaultCheckOptions()
		opt.Views = views
		opt.Scene.MaxOcclusion = 0.4
		opt.ConfuserViews = 0
		res, err := Check(context.Background(), CheckInput{Name: name, Model: cp.mesh, Tables: cp.tables, Confusers: demoBin(t, name)}, opt)
		if err != nil {
			t.Fatal(err)
		}
		logCheck(t, res)
		n := float64(len(res.Views))
		pointHits += res.Point.Recall * n
		baseHits += res.Baseline.Recall * n
		total += n
		if res.Point.Recall < res.Baseline.Recall {
			t.Errorf("%s: point-difference recall %.3f below the baseline's %.3f", name, res.Point.Recall, res.Baseline.Recall)
		}
	}
	point, base := pointHits/total, baseHits/total
	t.Logf("pooled over %d views: point difference %.3f, baseline %.3f, ratio %.2f", int(total), point, base, point/math.Max(base, 1e-9))
	if long {
		if point < 0.9 {
			t.Errorf("point-difference recall %.3f, target ≥ 0.9", point)
		}
		if point < 1.3*base {
			t.Errorf("point-difference recall %.3f is %.2f× the baseline's %.3f, target ≥ 1.3×", point, point/base, base)
		}
	} else if point < 0.75 {
		t.Errorf("point-difference recall %.3f over %d views, want ≥ 0.75", point, int(total))
	}
}

// TestCheckConfusers: the valve checked against the demo bin is not
// confused with any other demo part; a copy of the valve 2 % larger in
// the catalog (a second revision filed as another part) is named as a
// confuser, both ways.
func TestCheckConfusers(t *testing.T) {
	if testing.Short() {
		t.Skip("renders and votes many scenes")
	}
	cp := demoCheckPart(t, "valve")
	twin := scaledMesh(cp.mesh, 1.02)
	opt := DefaultCheckOptions()
	opt.Views = 8
	confusers := append(demoBin(t, "valve"), NamedModel{Name: "valve-b", Mesh: twin})
	res := runCheck(t, CheckInput{Name: "valve", Model: cp.mesh, Tables: cp.tables, Confusers: confusers}, opt)
	logCheck(t, res)
	for _, c := range res.Confusers {
		t.Logf("%-9s forward: %d/%d best %.3f (threshold %.3f, %s); reverse: %d/%d best %.3f (threshold %.3f, %s); own score %.3f",
			c.Name, c.Forward.Accepted, c.Forward.Scenes, c.Forward.Best, c.Forward.Threshold, c.Forward.ThresholdFrom,
			c.Reverse.Accepted, c.Reverse.Scenes, c.Reverse.Best, c.Reverse.Threshold, c.Reverse.ThresholdFrom, c.OwnScore)
	}
	named := map[string]bool{}
	for _, r := range res.Reasons {
		if r.Code != CodeConfuser {
			continue
		}
		for _, c := range confusers {
			if strings.Contains(r.Message, " with "+c.Name+":") {
				named[c.Name] = true
			}
		}
		if r.Verdict != VerdictReview {
			t.Errorf("confuser reason argues for %s", r.Verdict)
		}
	}
	if !named["valve-b"] {
		t.Errorf("the valve's 2 %% larger twin was not named as a confuser")
	}
	for n := range named {
		if n != "valve-b" {
			t.Errorf("the valve was confused with %s", n)
		}
	}
}

// cpuTime returns the process's user and system CPU time: reported
// beside wall time because the benchmark machine is shared, and CPU
// time over the cores shows the work independent of other load.
func cpuTime() time.Duration {
	var r syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &r)
	return time.Duration(r.Utime.Nano() + r.Stime.Nano())
}

// BenchmarkCheck60 is a whole 60-view check of the valve (the largest
// demo part, 42,000 triangles at 1 mm) with the default options: the
// other demo parts and two boxes as clutter, occluders hiding up to
// half of it, and the other demo parts as confusers (3 scenes each way).
// Target: ≤ 30 s on 2 cores. It reports the CPU seconds per check
// beside the wall time, and the seconds per stage.
func BenchmarkCheck60(b *testing.B) {
	cp := demoCheckPart(b, "valve")
	in := CheckInput{Name: "valve", Model: cp.mesh, Tables: cp.tables, Confusers: demoBin(b, "valve")}
	opt := DefaultCheckOptions()
	c0 := cpuTime()
	stages := map[string]float64{}
	var order []string
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		res, err := Check(context.Background(), in, opt)
		if err != nil {
			b.Fatal(err)
		}
		for _, tm := range res.Timings {
			if _, ok := stages[tm.Stage]; !ok {
				order = append(order, tm.Stage)
			}
			stages[tm.Stage] += tm.Seconds
		}
	}
	b.ReportMetric(float64(cpuTime()-c0)/float64(b.N)/1e9, "cpu-s/op")
	for _, s := range order {
		b.Logf("%-40s %.2f s", s, stages[s]/float64(b.N))
	}
}
