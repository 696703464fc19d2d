package validate

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// TestCanonicalFrame: a box 60 × 40 × 20 mm standing on z = 0, turned
// and moved at random, comes back to the frame the rules define: origin
// at its area centroid (the box's centre, by symmetry), z along the
// given up, x along its 60 mm side. A box is symmetric, so the sign of
// x falls to the tie rule (a non-negative component along the input x
// axis).
func TestCanonicalFrame(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	box := boxMesh(0.06, 0.04, 0.02, 4)
	for trial := 0; trial < 5; trial++ {
		move := mesh.PoseFromAxisAngle(randomUnit(rng), 2*math.Pi*rng.Float64(), r3.Vec{X: rng.Float64(), Y: rng.Float64(), Z: rng.Float64()})
		m := box.Transform(move)
		up := move.Rotate(r3.Vec{Z: 1})
		partToInput, err := CanonicalFrame(m, up)
		if err != nil {
			t.Fatal(err)
		}
		// Tolerance: closed-form moments in float64 on metre-sized
		// coordinates, 1e-9 m and 1e-9 rad.
		if d := r3.Norm(r3.Sub(partToInput.T, move.Apply(r3.Vec{Z: 0.01}))); d > 1e-9 {
			t.Errorf("trial %d: origin %.3g m from the box centre", trial, d)
		}
		z := partToInput.R.Col(2)
		if math.Abs(r3.Dot(z, up)-1) > 1e-9 {
			t.Errorf("trial %d: z %v, want up %v", trial, z, up)
		}
		x := partToInput.R.Col(0)
		long := move.Rotate(r3.Vec{X: 1})
		if math.Abs(math.Abs(r3.Dot(x, long))-1) > 1e-9 {
			t.Errorf("trial %d: x %v not along the long side %v", trial, x, long)
		}
		if x.X < -1e-9 {
			t.Errorf("trial %d: x %v breaks the tie rule", trial, x)
		}
		// The box in its canonical frame is centred and axis-aligned.
		b := m.Transform(partToInput.Inv()).Bounds()
		if s := b.Size(); math.Abs(s.X-0.06) > 1e-9 || math.Abs(s.Y-0.04) > 1e-9 || math.Abs(s.Z-0.02) > 1e-9 {
			t.Errorf("trial %d: canonical box %v", trial, s)
		}
	}
}

// TestCanonicalFrameThirdMoment: a wedge (a right triangle extruded)
// has more surface on one side of its centroid along its long axis;
// the x axis points to the heavier tail whatever the input's
// orientation, so two copies turned by 180° about up get the same
// canonical shape.
func TestCanonicalFrameThirdMoment(t *testing.T) {
	wedge := &mesh.Mesh{
		Vertices: []r3.Vec{{X: 0, Y: 0}, {X: 0.08, Y: 0}, {X: 0, Y: 0.03}, {X: 0, Y: 0, Z: 0.02}, {X: 0.08, Y: 0, Z: 0.02}, {X: 0, Y: 0.03, Z: 0.02}},
		Faces:    []mesh.Face{{0, 2, 1}, {3, 4, 5}, {0, 1, 4}, {0, 4, 3}, {1, 2, 5}, {1, 5, 4}, {2, 0, 3}, {2, 3, 5}},
	}
	up := r3.Vec{Z: 1}
	a, err := CanonicalFrame(wedge, up)
	if err != nil {
		t.Fatal(err)
	}
	turned := wedge.Transform(mesh.PoseFromAxisAngle(up, math.Pi, r3.Vec{X: 0.3}))
	b, err := CanonicalFrame(turned, up)
	if err != nil {
		t.Fatal(err)
	}
	ma := wedge.Transform(a.Inv())
	mb := turned.Transform(b.Inv())
	for i := range ma.Vertices {
		if d := r3.Norm(r3.Sub(ma.Vertices[i], mb.Vertices[i])); d > 1e-9 {
			t.Fatalf("vertex %d: %v and %v in the two canonical frames", i, ma.Vertices[i], mb.Vertices[i])
		}
	}
	if _, err := CanonicalFrame(&mesh.Mesh{}, up); err == nil {
		t.Error("an empty mesh has a canonical frame")
	}
}

// TestPlaneHeight: the support z = 0 of a part whose canonical origin is
// 10 mm above it lies at z = −0.01 in the part frame.
func TestPlaneHeight(t *testing.T) {
	box := boxMesh(0.06, 0.04, 0.02, 1)
	p, err := CanonicalFrame(box, r3.Vec{Z: 1})
	if err != nil {
		t.Fatal(err)
	}
	if h := PlaneHeight(p, r3.Vec{Z: 1}, 0); math.Abs(h+0.01) > 1e-12 {
		t.Errorf("support height %v, want −0.01", h)
	}
}

// TestFindOpenings: a closed box has none; the box without its top (two
// triangles of a 60 × 40 mm face, n = 1) has one, whose patch is the
// missing face exactly (a planar rectangle: 2400 mm², perimeter 200
// mm, normal +z); without its bottom the opening lies on the support.
func TestFindOpenings(t *testing.T) {
	box := boxMesh(0.06, 0.04, 0.02, 1)
	o, err := FindOpenings(box, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(o.List) != 0 || o.HoleArea != 0 {
		t.Fatalf("closed box: %d openings", len(o.List))
	}
	for _, tc := range []struct {
		name      string
		keep      func(n r3.Vec) bool
		normal    r3.Vec
		onSupport bool
	}{
		{"no top", func(n r3.Vec) bool { return n.Z < 0.5 }, r3.Vec{Z: 1}, false},
		{"no bottom", func(n r3.Vec) bool { return n.Z > -0.5 }, r3.Vec{Z: -1}, true},
	} {
		m := box.Clone()
		kept := m.Faces[:0]
		for _, f := range m.Faces {
			if tc.keep(m.FaceNormal(f)) {
				kept = append(kept, f)
			}
		}
		m.Faces = kept
		o, err := FindOpenings(m, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		if len(o.List) != 1 {
			t.Fatalf("%s: %d openings", tc.name, len(o.List))
		}
		op := o.List[0]
		// Exact up to rounding: the fan of a planar convex loop covers
		// it once.
		if math.Abs(op.Area-0.0024) > 1e-12 || math.Abs(op.Perimeter-0.2) > 1e-12 || !op.Closed {
			t.Errorf("%s: area %v perimeter %v closed %v", tc.name, op.Area, op.Perimeter, op.Closed)
		}
		if r3.Norm(r3.Sub(op.Normal, tc.normal)) > 1e-9 {
			t.Errorf("%s: normal %v, want %v", tc.name, op.Normal, tc.normal)
		}
		if op.OnSupport != tc.onSupport {
			t.Errorf("%s: on support %v", tc.name, op.OnSupport)
		}
		closed := o.PatchedMesh(m, mesh.RGB{}, mesh.RGB{R: 255})
		if math.Abs(closed.Area()-box.Area()) > 1e-12 {
			t.Errorf("%s: patched area %v, box %v", tc.name, closed.Area(), box.Area())
		}
	}
}

// TestCalibrateWeightsGroups: the shared calibration gives, for each
// group, what CalibrateWeights gives on that group alone (the oracle).
func TestCalibrateWeightsGroups(t *testing.T) {
	if testing.Short() {
		t.Skip("renders scenes")
	}
	opt := DefaultSceneOptions()
	opt.MaxOcclusion = 0.3
	g, m := sceneGen(t, "valve", opt)
	sm, _ := scoreModel(t, m)
	em, err := NewErrorModel(sm.Points, nil)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	var set []Labelled
	var groups [3][]int
	for i := 0; i < 4; i++ {
		sc, err := g.Scene(i)
		if err != nil {
			t.Fatal(err)
		}
		obs, err := ObservationFromFrame(sc.Frame)
		if err != nil {
			t.Fatal(err)
		}
		hyps := PerturbedHypotheses(sc.ModelToCam, m.Bounds().Center(), em.Diameter(), 12, rng)
		for k, right := range LabelHypotheses(em, sc.ModelToCam, hyps, false) {
			groups[0] = append(groups[0], len(set))
			groups[1+i%2] = append(groups[1+i%2], len(set))
			set = append(set, Labelled{Obs: obs, ModelToCam: hyps[k], Right: right})
		}
	}
	grid := CheckWeightGrid()
	got, errs := calibrateWeightsGroups(sm, set, groups[:], DefaultPointScoreOptions(), grid, 2)
	for k, idx := range groups {
		var sub []Labelled
		for _, i := range idx {
			sub = append(sub, set[i])
		}
		want, _, err := CalibrateWeights(sm, sub, DefaultPointScoreOptions(), grid)
		if (err == nil) != (errs[k] == nil) {
			t.Errorf("group %d: error %v, CalibrateWeights %v", k, errs[k], err)
		}
		if got[k] != want {
			t.Errorf("group %d: %+v, CalibrateWeights %+v", k, got[k], want)
		}
	}
}

// TestCropObservation: both scorers give the same score on the cropped
// observation as on the whole one, for the poses the crop was made for
// (the oracle).
func TestCropObservation(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a scene")
	}
	g, m := sceneGen(t, "labelbox", DefaultSceneOptions())
	sm, _ := scoreModel(t, m)
	sc, err := g.Scene(2)
	if err != nil {
		t.Fatal(err)
	}
	obs, err := ObservationFromFrame(sc.Frame)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(8, 9))
	poses := append([]mesh.Pose{sc.ModelToCam}, PerturbedHypotheses(sc.ModelToCam, m.Bounds().Center(), m.Diameter(), 9, rng)...)
	crop := cropObservation(obs, sm, poses)
	if crop.Intr.Width*crop.Intr.Height >= obs.Intr.Width*obs.Intr.Height {
		t.Errorf("crop %d×%d is not smaller than the image", crop.Intr.Width, crop.Intr.Height)
	}
	for i, p := range poses {
		a, b := PointScore(sm, p, obs, DefaultPointScoreOptions()), PointScore(sm, p, crop, DefaultPointScoreOptions())
		if a != b {
			t.Errorf("pose %d: point score %+v whole, %+v cropped", i, a, b)
		}
		c, d := BaselineScore(sm, p, obs, DefaultBaselineOptions()), BaselineScore(sm, p, crop, DefaultBaselineOptions())
		if c != d {
			t.Errorf("pose %d: baseline %+v whole, %+v cropped", i, c, d)
		}
	}
}

// TestSegmentMasks: two boxes 10 mm apart on a table, the table removed
// by the plane mask, come out as two pieces, and a box seen in front of
// another (a 50 mm depth step) as two pieces as well.
func TestSegmentMasks(t *testing.T) {
	intr := mesh.DefaultIntrinsics()
	camToWorld, err := mesh.LookAt(r3.Vec{Y: -0.3, Z: 0.4}, r3.Vec{}, r3.Vec{Z: 1})
	if err != nil {
		t.Fatal(err)
	}
	worldToCam := camToWorld.Inv()
	table := boxMesh(0.6, 0.6, 0.001, 1).Transform(mesh.Pose{R: mesh.Identity3(), T: r3.Vec{Z: -0.001}})
	a := boxMesh(0.04, 0.04, 0.03, 1).Transform(mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: -0.025}})
	b := boxMesh(0.04, 0.04, 0.03, 1).Transform(mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: 0.025}})
	f, err := render.Render(intr, []render.Object{{Mesh: table, ModelToCam: worldToCam}, {Mesh: a, ModelToCam: worldToCam}, {Mesh: b, ModelToCam: worldToCam}}, render.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	up := worldToCam.Rotate(r3.Vec{Z: 1})
	mask := planeMask(f.Depth, intr, up, -r3.Dot(up, worldToCam.T), 0.0025)
	segs := segmentMasks(f.Depth, intr, mask, 40)
	if len(segs) != 2 {
		t.Fatalf("%d pieces, want 2", len(segs))
	}
	for i, s := range segs {
		objs := map[int32]int{}
		for k, on := range s {
			if on {
				objs[f.Object[k]]++
			}
		}
		if len(objs) != 1 {
			t.Errorf("piece %d holds objects %v", i, objs)
		}
	}
}

// TestScenePlanes: the table under a box in a rendered view is found
// within a millimetre and a degree of its true plane, and the box's own
// faces are not taken for planes.
func TestScenePlanes(t *testing.T) {
	intr := mesh.DefaultIntrinsics()
	camToWorld, err := mesh.LookAt(r3.Vec{Y: -0.3, Z: 0.4}, r3.Vec{}, r3.Vec{Z: 1})
	if err != nil {
		t.Fatal(err)
	}
	worldToCam := camToWorld.Inv()
	table := boxMesh(1, 1, 0.001, 1).Transform(mesh.Pose{R: mesh.Identity3(), T: r3.Vec{Z: -0.001}})
	box := boxMesh(0.05, 0.04, 0.03, 1)
	f, err := render.Render(intr, []render.Object{{Mesh: table, ModelToCam: worldToCam}, {Mesh: box, ModelToCam: worldToCam}}, render.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	planes, err := scenePlanes(f.Depth, intr, 0.004, 0.0025, 1)
	if err != nil || len(planes) != 1 {
		t.Fatalf("%d planes: %v", len(planes), err)
	}
	up, d := planes[0].up, planes[0].d
	wantUp := worldToCam.Rotate(r3.Vec{Z: 1})
	wantD := -r3.Dot(wantUp, worldToCam.T)
	// Noise-free render: the least-squares plane is exact up to the
	// depth's float32 rounding (1e-7 relative at 0.5 m).
	if ang := math.Acos(math.Min(1, r3.Dot(up, wantUp))); ang > math.Pi/180 || math.Abs(d-wantD) > 0.001 {
		t.Errorf("plane normal off by %.3g°, offset %v want %v", ang*180/math.Pi, d, wantD)
	}
}

// TestAddsBelow: the early-exit test agrees with ErrorModel.ADDS (the
// oracle) on hypotheses near and far from the truth.
func TestAddsBelow(t *testing.T) {
	m := boxMesh(0.06, 0.04, 0.02, 6)
	em, err := NewErrorModel(m.Vertices, nil)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(11, 12))
	truth := mesh.PoseFromAxisAngle(randomUnit(rng), 1, r3.Vec{Z: 0.5})
	lim := 0.1 * em.Diameter()
	agree, below := 0, 0
	for _, h := range PerturbedHypotheses(truth, m.Bounds().Center(), em.Diameter(), 60, rng) {
		want := em.ADDS(truth, h) < lim
		if got := addsBelow(em, truth, h, lim); got != want {
			t.Errorf("addsBelow %v, ADDS %.4g against the limit %.4g", got, em.ADDS(truth, h), lim)
		} else {
			agree++
		}
		if want {
			below++
		}
	}
	if below == 0 || below == 60 {
		t.Errorf("%d of 60 hypotheses below the limit: the test does not see both sides", below)
	}
}
