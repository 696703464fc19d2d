package validate

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
)

// Deliberately bad scans, made from the demo parts' meshes, and the
// reason the check must give for each.

// withHole returns m without the faces whose centroid lies within
// radius of the surface point nearest to dir·(large) from the centroid
// of m: a patch of triangles removed, as a fusion leaves where a
// region was never seen or was cleaned away.
func withHole(m *mesh.Mesh, dir r3.Vec, radius float64) *mesh.Mesh {
	out := m.Clone()
	c := m.Bounds().Center()
	// The vertex farthest along dir marks the patch's centre.
	best, at := math.Inf(-1), r3.Vec{}
	for _, v := range m.Vertices {
		if d := r3.Dot(r3.Sub(v, c), dir); d > best {
			best, at = d, v
		}
	}
	kept := out.Faces[:0]
	for _, f := range out.Faces {
		fc := r3.Scale(1.0/3, r3.Add(r3.Add(m.Vertices[f[0]], m.Vertices[f[1]]), m.Vertices[f[2]]))
		if r3.Norm(r3.Sub(fc, at)) < radius {
			continue
		}
		kept = append(kept, f)
	}
	out.Faces = kept
	out.RemoveUnreferencedVertices()
	return out
}

// cutBelow returns m without every face that has a vertex below z: a
// scan whose lower part was lost (cropped with the support, never
// seen).
func cutBelow(m *mesh.Mesh, z float64) *mesh.Mesh {
	out := m.Clone()
	kept := out.Faces[:0]
	for _, f := range out.Faces {
		if m.Vertices[f[0]].Z < z || m.Vertices[f[1]].Z < z || m.Vertices[f[2]].Z < z {
			continue
		}
		kept = append(kept, f)
	}
	out.Faces = kept
	out.RemoveUnreferencedVertices()
	return out
}

// scaledMesh returns m scaled by k about the origin.
func scaledMesh(m *mesh.Mesh, k float64) *mesh.Mesh {
	out := m.Clone()
	for i, v := range out.Vertices {
		out.Vertices[i] = r3.Scale(k, v)
	}
	return out
}

// smeared returns m with every vertex colour replaced by the mean colour
// of the vertices within radius: the blur of a fusion whose frames were
// misregistered or whose light changed, which washes out prints and
// labels.
func smeared(m *mesh.Mesh, radius float64) *mesh.Mesh {
	out := m.Clone()
	tree := mesh.NewKDTree(m.Vertices)
	var idx []int
	for i, v := range m.Vertices {
		idx = tree.Radius(v, radius, idx[:0])
		var r, g, b float64
		for _, j := range idx {
			c := m.Colors[j]
			r, g, b = r+float64(c.R), g+float64(c.G), b+float64(c.B)
		}
		n := float64(len(idx))
		out.Colors[i] = mesh.RGB{R: uint8(r/n + 0.5), G: uint8(g/n + 0.5), B: uint8(b/n + 0.5)}
	}
	return out
}

// realFramesOf renders n frames of the true part standing in its most
// probable resting pose on a table, seen from the upper view sphere at
// 0.35–0.6 m with sensor noise and no clutter: the sweep's own frames,
// with the true poses as the fusion's.
func realFramesOf(t testing.TB, truth *mesh.Mesh, n int) []RealFrame {
	t.Helper()
	st, err := StablePoses(truth, DefaultStableOptions())
	if err != nil {
		t.Fatal(err)
	}
	so := DefaultSceneOptions()
	so.MinClutter, so.MaxClutter = 0, 0
	so.MinOcclusion, so.MaxOcclusion = 0, 0
	so.MaxDistance = 0.6
	so.Seed = 4242
	g, err := NewSceneGenerator(truth, st.Poses[:1], nil, so)
	if err != nil {
		t.Fatal(err)
	}
	var out []RealFrame
	for i := 0; i < n; i++ {
		sc, err := g.Scene(i)
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, RealFrame{Index: i, Intr: sc.Frame.Intr, Depth: sc.Frame.Depth, Color: sc.Frame.Color, ModelToCam: sc.ModelToCam})
	}
	return out
}

// quickOptions run the checks that need no synthetic views.
func quickOptions() CheckOptions {
	opt := DefaultCheckOptions()
	opt.Views = 0
	return opt
}

func reasonFor(res *CheckResult, code string) (Reason, bool) {
	for _, r := range res.Reasons {
		if r.Code == code {
			return r, true
		}
	}
	return Reason{}, false
}

// expectReason fails unless res has a reason with code whose verdict
// is want, and the result's verdict is at least that bad.
func expectReason(t *testing.T, what string, res *CheckResult, code string, want Verdict) {
	t.Helper()
	r, ok := reasonFor(res, code)
	if !ok {
		t.Errorf("%s: no %q reason; reasons: %+v", what, code, res.Reasons)
		return
	}
	if r.Verdict != want {
		t.Errorf("%s: %q argues for %s, want %s (%s)", what, code, r.Verdict, want, r.Message)
	}
	if res.Verdict.rank() < want.rank() {
		t.Errorf("%s: verdict %s, want at least %s", what, res.Verdict, want)
	}
	t.Logf("%s: verdict %s; %s: %s", what, res.Verdict, code, r.Message)
}

// expectNoReason fails if res has a reason with code.
func expectNoReason(t *testing.T, what string, res *CheckResult, code string) {
	t.Helper()
	if r, ok := reasonFor(res, code); ok {
		t.Errorf("%s: unexpected %q reason: %s", what, code, r.Message)
	}
}

func runCheck(t *testing.T, in CheckInput, opt CheckOptions) *CheckResult {
	t.Helper()
	res, err := Check(context.Background(), in, opt)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

// TestCheckWrongUnit: a model written in millimetres and read as metres
// (×1000) is refused as implausibly large, with the unit named; one
// scaled by 1/1000 likewise. The check stops before rendering.
func TestCheckWrongUnit(t *testing.T) {
	cp := demoCheckPart(t, "valve")
	for _, k := range []float64{1000, 0.001} {
		m := scaledMesh(cp.mesh, k)
		res := runCheck(t, CheckInput{Name: "valve", Model: m, Tables: tablesFor(t, m)}, quickOptions())
		expectReason(t, "scaled", res, CodeUnit, VerdictRescan)
		if len(res.Views) != 0 || res.Stable != nil {
			t.Errorf("×%g: the check rendered views of an implausible model", k)
		}
	}
}

// TestCheckHoles: a patch of triangles removed from a side of the valve
// (within 32 mm of a point on its rim: over 2000 mm², more than a tenth
// of its surface) makes the model open there; the check measures the
// opening and asks for a rescan. A smaller hole (12 mm, about 2 %) asks
// for a review. The closed model has no opening.
func TestCheckHoles(t *testing.T) {
	cp := demoCheckPart(t, "valve")
	good := runCheck(t, CheckInput{Name: "valve", Model: cp.mesh, Tables: cp.tables, SupportKnown: true}, quickOptions())
	expectNoReason(t, "closed valve", good, CodeHoles)
	if n := len(good.Openings.List); n != 0 {
		t.Errorf("closed valve has %d openings", n)
	}
	big := withHole(cp.mesh, r3.Vec{X: -1, Y: 1}, 0.032)
	res := runCheck(t, CheckInput{Name: "valve with a hole", Model: big, Tables: tablesFor(t, big), SupportKnown: true}, quickOptions())
	expectReason(t, "32 mm hole", res, CodeHoles, VerdictRescan)
	// The patch closing the hole spans the rim of the removed region; a
	// region bent over an edge has more area than its patch and a flat
	// one the same: between half and all of the removed faces' area,
	// with 5 % for the patch's own facets.
	removed := cp.mesh.Area() - big.Area()
	if a := res.Openings.HoleArea; a < 0.5*removed || a > 1.05*removed {
		t.Errorf("hole patch %.0f mm², removed area %.0f mm²", a*1e6, removed*1e6)
	}
	small := withHole(cp.mesh, r3.Vec{X: -1, Y: 1}, 0.012)
	res = runCheck(t, CheckInput{Name: "valve with a small hole", Model: small, Tables: tablesFor(t, small), SupportKnown: true}, quickOptions())
	expectReason(t, "12 mm hole", res, CodeHoles, VerdictReview)
}

// TestCheckMissingUnderside: the bracket with everything below 20 % of
// its height cut away (its base flange gone) stops 8 mm above the
// support it stood on: rescan. Its resting face alone open (a fusion
// of one sweep, cut 0.5 mm above the support) is expected and only
// noted.
func TestCheckMissingUnderside(t *testing.T) {
	cp := demoCheckPart(t, "bracket")
	h := cp.part.Max.Z - cp.part.Min.Z
	cut := cutBelow(cp.mesh, 0.2*h)
	res := runCheck(t, CheckInput{Name: "bracket cut", Model: cut, Tables: tablesFor(t, cut), SupportKnown: true, SupportZ: 0}, quickOptions())
	expectReason(t, "cut at 20 %", res, CodeMissingUnderside, VerdictRescan)

	rest := cutBelow(cp.mesh, 0.0005)
	res = runCheck(t, CheckInput{Name: "bracket, resting face open", Model: rest, Tables: tablesFor(t, rest), SupportKnown: true, SupportZ: 0}, quickOptions())
	expectNoReason(t, "resting face open", res, CodeMissingUnderside)
	expectNoReason(t, "resting face open", res, CodeHoles)
	expectReason(t, "resting face open", res, CodeRestingFace, VerdictReady)
	// The resting face is the base flange's underside: 60 × 40 mm less
	// the Ø8.5 hole, 2343 mm² (part dimensions from package parts); the
	// rims of the outline and of the hole are both openings on the
	// support. Tolerance: the 1 mm lattice rounds the outline's corners
	// and cuts the rims within a voxel, about the perimeter (227 mm)
	// times half a millimetre, 110 mm².
	if a, want := res.Openings.SupportArea, 0.06*0.04-math.Pi*0.00425*0.00425; math.Abs(a-want) > 110e-6 {
		t.Errorf("resting face patch %.0f mm², want %.0f ± 110", a*1e6, want*1e6)
	}
	if n := len(res.Openings.List); n != 2 {
		t.Errorf("%d openings, want the outline and the hole's rim", n)
	}
}

// TestCheckScaleAgainstReference: a model 5 % too large, compared with
// the part's drawing model (the demo part itself), is flagged for its
// scale: rescan. The true-size model is not.
func TestCheckScaleAgainstReference(t *testing.T) {
	cp := demoCheckPart(t, "valve")
	big := scaledMesh(cp.mesh, 1.05)
	opt := quickOptions()
	res := runCheck(t, CheckInput{Name: "valve ×1.05", Model: big, Tables: tablesFor(t, big), Reference: cp.mesh}, opt)
	expectReason(t, "×1.05", res, CodeScale, VerdictRescan)
	if c := res.Comparison; math.Abs(c.Scale-1.05) > 0.005 {
		t.Errorf("estimated scale %.4f, want 1.05 ± 0.005", c.Scale)
	}
	res = runCheck(t, CheckInput{Name: "valve", Model: cp.mesh, Tables: cp.tables, Reference: cp.mesh}, opt)
	expectNoReason(t, "true size", res, CodeScale)
	expectNoReason(t, "true size", res, CodeShape)
	expectNoReason(t, "true size", res, CodeIncomplete)
}

// TestCheckSmearedColour: the labelbox's colours blurred over 25 mm
// (the print and the label washed out) disagree with the sweep's own
// frames, rendered from the true part: review, naming the colour. The
// true colours agree. The smeared model also loses the colour that
// told the box's symmetric poses apart.
func TestCheckSmearedColour(t *testing.T) {
	cp := demoCheckPart(t, "labelbox")
	frames := realFramesOf(t, cp.mesh, 6)
	opt := quickOptions()
	good := runCheck(t, CheckInput{Name: "labelbox", Model: cp.mesh, Tables: cp.tables, Frames: frames}, opt)
	expectNoReason(t, "true colours", good, CodeColorMismatch)
	expectNoReason(t, "true colours", good, CodeRealFrames)
	sm := smeared(cp.mesh, 0.025)
	bad := runCheck(t, CheckInput{Name: "labelbox smeared", Model: sm, Tables: cp.tables, Frames: frames}, opt)
	t.Logf("colour mismatch: true %.3f, smeared %.3f", good.Real.ColorMismatch, bad.Real.ColorMismatch)
	expectReason(t, "smeared", bad, CodeColorMismatch, VerdictReview)
}

// TestRealFramesTrueModels: every demo part's own model is found where
// it stood in frames of the true part (rendered with sensor noise), and
// its colours agree with them: no real-frame reason.
func TestRealFramesTrueModels(t *testing.T) {
	if testing.Short() {
		t.Skip("votes in rendered frames")
	}
	for _, name := range parts.Names() {
		cp := demoCheckPart(t, name)
		res := runCheck(t, CheckInput{Name: name, Model: cp.mesh, Tables: cp.tables, Frames: realFramesOf(t, cp.mesh, 6)}, quickOptions())
		rf := res.Real
		t.Logf("%s: found in %.0f%% of %d frames, reference score %.3f, inliers %.2f, colour mismatch %.3f of %d points",
			name, 100*rf.Recall, len(rf.Frames), rf.MeanReferenceScore, rf.MeanReferenceInliers, rf.ColorMismatch, rf.ColorChecked)
		expectNoReason(t, name, res, CodeRealFrames)
		expectNoReason(t, name, res, CodeColorMismatch)
	}
}

// ringSweep returns the CamToWorld poses of cameras on rings around a
// part standing on z = 0 (its part frame is the world), 0.5 m from its
// centre, at the given elevations (radians), n per ring.
func ringSweep(t testing.TB, m *mesh.Mesh, elevations []float64, n int) []mesh.Pose {
	t.Helper()
	c := m.Bounds().Center()
	var out []mesh.Pose
	for _, el := range elevations {
		for i := 0; i < n; i++ {
			az := 2 * math.Pi * float64(i) / float64(n)
			eye := r3.Add(c, r3.Scale(0.5, r3.Vec{X: math.Cos(el) * math.Cos(az), Y: math.Cos(el) * math.Sin(az), Z: math.Sin(el)}))
			p, err := mesh.LookAt(eye, c, r3.Vec{Z: 1})
			if err != nil {
				t.Fatal(err)
			}
			out = append(out, p)
		}
	}
	return out
}

// TestCheckLowCoverage: a sweep whose cameras all looked down from 85°
// saw the valve's top but not its sides (beyond the 80° slant at which
// a face counts as seen): the coverage of its surface, the face it
// stood on apart, is low and the check asks for a rescan, naming the
// largest unseen region. Rings at 20° and 50° see it all round.
func TestCheckLowCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("renders the coverage")
	}
	cp := demoCheckPart(t, "valve")
	intr := mesh.DefaultIntrinsics()
	in := CheckInput{Name: "valve", Model: cp.mesh, Tables: cp.tables, SupportKnown: true,
		Sweep: &SweepInput{Intr: intr, CamToWorld: ringSweep(t, cp.mesh, []float64{85 * math.Pi / 180}, 12), ModelToWorld: mesh.Identity()}}
	res := runCheck(t, in, quickOptions())
	t.Logf("from above: seen %.3f of the surface", res.Coverage.SeenFraction)
	expectReason(t, "from above", res, CodeLowCoverage, VerdictRescan)
	in.Sweep.CamToWorld = ringSweep(t, cp.mesh, []float64{20 * math.Pi / 180, 50 * math.Pi / 180}, 12)
	res = runCheck(t, in, quickOptions())
	t.Logf("all round: seen %.3f of the surface", res.Coverage.SeenFraction)
	expectNoReason(t, "all round", res, CodeLowCoverage)
}

// TestCheckGoodModelReady: the valve's own model, checked with every
// stage — synthetic views among the other demo parts, confusers, the
// frames of a sweep of it, the coverage of that sweep, and its drawing
// model — is judged ready, with no finding that argues for review or
// rescan.
func TestCheckGoodModelReady(t *testing.T) {
	if testing.Short() {
		t.Skip("runs every stage of a check")
	}
	cp := demoCheckPart(t, "valve")
	opt := DefaultCheckOptions()
	opt.Views = 12
	in := CheckInput{Name: "valve", Model: cp.mesh, Tables: cp.tables, Confusers: demoBin(t, "valve"),
		Frames: realFramesOf(t, cp.mesh, 6), Reference: cp.mesh, SupportKnown: true,
		Sweep: &SweepInput{Intr: mesh.DefaultIntrinsics(), CamToWorld: ringSweep(t, cp.mesh, []float64{20 * math.Pi / 180, 50 * math.Pi / 180}, 12), ModelToWorld: mesh.Identity()}}
	res := runCheck(t, in, opt)
	logCheck(t, res)
	if res.Verdict != VerdictReady {
		t.Errorf("verdict %s", res.Verdict)
	}
	for _, r := range res.Reasons {
		if r.Verdict != VerdictReady {
			t.Errorf("finding against a good model: %s: %s", r.Code, r.Message)
		}
	}
}

// TestWriteCheckReport: the report of a check of the bracket with its
// resting face open (two openings: the face's outline and the rim of
// the bolt hole through it), a few views, its sweep's coverage and frames is
// written as a complete folder: the page, the JSON (with the verdict,
// the side-by-side recall, the openings and the real frames) and every
// picture, the openings picture among them.
func TestWriteCheckReport(t *testing.T) {
	if testing.Short() {
		t.Skip("renders views")
	}
	cp := demoCheckPart(t, "bracket")
	m := cutBelow(cp.mesh, 0.0005)
	opt := DefaultCheckOptions()
	opt.Views = 4
	in := CheckInput{Name: "bracket", Model: m, Tables: tablesFor(t, m), SupportKnown: true,
		Frames: realFramesOf(t, cp.mesh, 3),
		Sweep:  &SweepInput{Intr: mesh.DefaultIntrinsics(), CamToWorld: ringSweep(t, m, []float64{30 * math.Pi / 180}, 8), ModelToWorld: mesh.Identity()}}
	res := runCheck(t, in, opt)
	r := res.Report(Tool{Name: "scanfold", Version: "test"})
	dir := filepath.Join(t.TempDir(), "report")
	popt := DefaultPictureOptions()
	if err := WriteReport(dir, r, res.ReportInputs(popt), popt); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{"index.html", "report.json", "model.png", "coverage.png", "views.png", "scores-1.png", "scores-2.png", "openings.png"} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Error(err)
		}
	}
	data, err := os.ReadFile(filepath.Join(dir, "report.json"))
	if err != nil {
		t.Fatal(err)
	}
	var back Report
	if err := json.Unmarshal(data, &back); err != nil {
		t.Fatal(err)
	}
	if back.Verdict != res.Verdict || back.Check == nil || len(back.Check.Rankings) != 3 || back.Check.Openings == nil ||
		len(back.Check.Openings.List) != 2 || back.Check.RealFrames == nil || back.Coverage == nil {
		t.Errorf("report.json lacks figures: verdict %q, check %+v", back.Verdict, back.Check)
	}
	page, err := os.ReadFile(filepath.Join(dir, "index.html"))
	if err != nil {
		t.Fatal(err)
	}
	for _, w := range []string{"Recall side by side", "Openings of the model", "Real frames", "openings.png", SafetyCaution[:40]} {
		if !strings.Contains(string(page), w) {
			t.Errorf("the page lacks %q", w)
		}
	}
}
