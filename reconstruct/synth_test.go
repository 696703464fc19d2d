package reconstruct

import (
	"bytes"
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"sort"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// Test sweeps are small: odd image sizes put the principal point on a
// pixel centre (cx = (W−1)/2 is an integer), and the part is meshed at
// 2 mm.
func smallSynthOptions(rig Rig, frames int) SynthOptions {
	o := DefaultSynthOptions()
	o.Rig = rig
	o.Frames = frames
	f := 525.0 * 161 / 640
	o.Intrinsics = mesh.Intrinsics{Width: 161, Height: 121, Fx: f, Fy: f, Cx: 80, Cy: 60}
	return o
}

var testPartCache = map[string]*mesh.Mesh{}

func testPart(t testing.TB, name string) *mesh.Mesh {
	t.Helper()
	if m := testPartCache[name]; m != nil {
		return m
	}
	m, err := SynthPartMesh(name, 0.002)
	if err != nil {
		t.Fatal(err)
	}
	testPartCache[name] = m
	return m
}

func synthSmall(t *testing.T, part string, opt SynthOptions) (string, *SynthReport) {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "sweep")
	rep, err := Synth(context.Background(), dir, testPart(t, part), opt)
	if err != nil {
		t.Fatal(err)
	}
	return dir, rep
}

func TestSynthTurntableTruth(t *testing.T) {
	const n = 8
	dir, rep := synthSmall(t, "bracket", smallSynthOptions(RigTurntable, n))
	s, err := LoadSweepWith(context.Background(), dir, LoadOptions{Strict: true, CheckPixels: true})
	if err != nil {
		t.Fatal(err)
	}
	if s.NumFrames() != n || s.Manifest.Rig != RigTurntable || s.Manifest.Turntable.Axis != nil {
		t.Fatalf("manifest: %d frames, rig %s, axis %v", s.NumFrames(), s.Manifest.Rig, s.Manifest.Turntable.Axis)
	}
	if rep.SeenTriangles == 0 || rep.SeenTriangles > rep.PartTriangles || rep.PartFraction <= 0 {
		t.Errorf("report: %+v", rep)
	}
	tr, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
	if err != nil {
		t.Fatal(err)
	}
	// The world frame is frame 0's camera frame (DESIGN.md "Frames").
	// Poses go through JSON with shortest-exact floats, so only the
	// re-orthonormalisation moves them: 1e-12.
	if d := poseDiff(tr.CamToWorld[0], mesh.Identity()); d > 1e-12 {
		t.Errorf("truth pose 0 differs from the identity by %g", d)
	}
	if tr.Axis == nil || len(tr.AnglesRad) != n {
		t.Fatalf("turntable truth lacks the axis or angles: %+v", tr)
	}
	// The axis is the plate's upward normal through its centre, which
	// frame 0's camera sees straight ahead at the configured distance
	// (the camera aims at the plate centre).
	opt := smallSynthOptions(RigTurntable, n)
	if d := r3.Norm(r3.Sub(tr.Axis.Point, r3.Vec{Z: opt.Distance})); d > 1e-9 {
		t.Errorf("axis point %v, want (0, 0, %v)", tr.Axis.Point, opt.Distance)
	}
	// Looking down at the elevation angle, the up axis makes that angle
	// with −y (image up) in the camera frame: direction (0, −cos e, −sin e).
	wantDir := r3.Vec{Y: -math.Cos(opt.Elevation), Z: -math.Sin(opt.Elevation)}
	if d := r3.Norm(r3.Sub(tr.Axis.Direction, wantDir)); d > 1e-9 {
		t.Errorf("axis direction %v, want %v", tr.Axis.Direction, wantDir)
	}
	// Every truth pose is TurntablePose of its angle, and consecutive
	// steps compose to one full turn: the product of the n relative
	// steps (frame i to i+1, wrapping) is the identity and each is a
	// 360°/n rotation about the axis.
	for i, p := range tr.CamToWorld {
		want := TurntablePose(tr.Axis.Point, tr.Axis.Direction, tr.AnglesRad[i]-tr.AnglesRad[0])
		if d := poseDiff(p, want); d > 1e-9 {
			t.Errorf("frame %d: truth pose differs from TurntablePose by %g", i, d)
		}
	}
	total := mesh.Identity()
	sum := 0.0
	for i := 0; i < n; i++ {
		step := tr.CamToWorld[i].Inv().Mul(tr.CamToWorld[(i+1)%n]) // camera i+1 → camera i
		axis, angle := step.AxisAngle()
		if math.Abs(angle-2*math.Pi/n) > 1e-9 {
			t.Errorf("step %d turns %.9f°, want %.9f°", i, angle*180/math.Pi, 360.0/n)
		}
		if math.Abs(math.Abs(r3.Dot(axis, tr.Axis.Direction))-1) > 1e-9 {
			t.Errorf("step %d turns about %v, not the axis %v", i, axis, tr.Axis.Direction)
		}
		sum += angle
		total = total.Mul(step)
	}
	if d := poseDiff(total, mesh.Identity()); d > 1e-9 || math.Abs(sum-2*math.Pi) > 1e-9 {
		t.Errorf("the %d steps compose to %g from the identity, turning %.9f° in all", n, d, sum*180/math.Pi)
	}
	// The manifest's angles are the truth's.
	for i := range s.Manifest.Frames {
		if got := *s.Manifest.Frames[i].Angle; math.Abs(got-tr.AnglesRad[i]) > 1e-10 {
			t.Errorf("frame %d: manifest angle %v, truth %v", i, got, tr.AnglesRad[i])
		}
	}
}

// poseDiff is the largest entry difference of two poses' matrices.
func poseDiff(a, b mesh.Pose) float64 {
	ma, mb := a.Mat4(), b.Mat4()
	d := 0.0
	for i := range ma {
		d = math.Max(d, math.Abs(ma[i]-mb[i]))
	}
	return d
}

func TestSynthTurntableWithAxis(t *testing.T) {
	opt := smallSynthOptions(RigTurntable, 3)
	opt.WriteAxis = true
	opt.Noise = render.NoNoise()
	dir, _ := synthSmall(t, "nut", opt)
	s, err := LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 3; i++ {
		f, err := s.Frame(i)
		if err != nil {
			t.Fatal(err)
		}
		// The manifest's axis and angles give the loader the true pose.
		if !f.HasPose || poseDiff(f.CamToWorld, tr.CamToWorld[i]) > 1e-9 {
			t.Errorf("frame %d: loader pose %v (known %v), truth %v", i, f.CamToWorld, f.HasPose, tr.CamToWorld[i])
		}
	}
}

// TestSynthSurfaceInWorld checks the world frame end to end: every
// depth pixel that measures the part, back-projected and mapped to the
// world by its frame's truth pose, lies on truth/part.ply. Noise is off
// so that the tolerance is the depth PNG's rounding: half a count
// (0.5 mm) along z, at most 0.5 mm·|ray|/z ≈ 0.55 mm from the surface
// for the rays of this camera (|ray| ≤ 1.1 z), plus float32 rounding.
func TestSynthSurfaceInWorld(t *testing.T) {
	for _, rig := range []Rig{RigTurntable, RigHandheld} {
		t.Run(string(rig), func(t *testing.T) {
			opt := smallSynthOptions(rig, 4)
			opt.Noise = render.NoNoise()
			dir, _ := synthSmall(t, "bracket", opt)
			s, err := LoadSweep(dir)
			if err != nil {
				t.Fatal(err)
			}
			tr, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
			if err != nil {
				t.Fatal(err)
			}
			part, err := mesh.LoadMesh(filepath.Join(dir, TruthDir, TruthPartName))
			if err != nil {
				t.Fatal(err)
			}
			// Part pixels: world points that, in the part's own frame, lie
			// inside its extent and at least 3 mm above the support.
			worldToPart := tr.PartToWorld.Inv()
			_, size, _ := partOffset(testPart(t, "bracket"))
			const tol = 0.6e-3
			checked := 0
			for i := 0; i < s.NumFrames(); i++ {
				f, err := s.Frame(i)
				if err != nil {
					t.Fatal(err)
				}
				k := f.Intr
				for v := 0; v < k.Height; v += 2 {
					for u := 0; u < k.Width; u += 2 {
						z := f.Depth[v*k.Width+u]
						if z == 0 {
							continue
						}
						w := tr.CamToWorld[i].Apply(k.BackProject(float64(u), float64(v), float64(z)))
						q := worldToPart.Apply(w)
						if q.Z < 3e-3 || math.Abs(q.X) > size.X/2+1e-3 || math.Abs(q.Y) > size.Y/2+1e-3 || q.Z > size.Z+1e-3 {
							continue
						}
						if d := meshDistance(part, w); d > tol {
							t.Fatalf("frame %d pixel (%d, %d): measured point %v is %.3f mm from the truth mesh", i, u, v, w, d*1e3)
						}
						checked++
					}
				}
			}
			if checked < 50 {
				t.Fatalf("only %d part pixels checked", checked)
			}
		})
	}
}

// meshDistance is the distance from p to the nearest triangle of m,
// by brute force.
func meshDistance(m *mesh.Mesh, p r3.Vec) float64 {
	best := math.Inf(1)
	for _, f := range m.Faces {
		q := closestOnTriangle(p, m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]])
		best = math.Min(best, r3.Norm(r3.Sub(p, q)))
	}
	return best
}

// closestOnTriangle returns the point of triangle abc nearest p, by the
// Voronoi-region method of Ericson (2005), Real-Time Collision
// Detection, §5.1.5.
func closestOnTriangle(p, a, b, c r3.Vec) r3.Vec {
	ab, ac, ap := r3.Sub(b, a), r3.Sub(c, a), r3.Sub(p, a)
	d1, d2 := r3.Dot(ab, ap), r3.Dot(ac, ap)
	if d1 <= 0 && d2 <= 0 {
		return a
	}
	bp := r3.Sub(p, b)
	d3, d4 := r3.Dot(ab, bp), r3.Dot(ac, bp)
	if d3 >= 0 && d4 <= d3 {
		return b
	}
	vc := d1*d4 - d3*d2
	if vc <= 0 && d1 >= 0 && d3 <= 0 {
		return r3.Add(a, r3.Scale(d1/(d1-d3), ab))
	}
	cp := r3.Sub(p, c)
	d5, d6 := r3.Dot(ab, cp), r3.Dot(ac, cp)
	if d6 >= 0 && d5 <= d6 {
		return c
	}
	vb := d5*d2 - d1*d6
	if vb <= 0 && d2 >= 0 && d6 <= 0 {
		return r3.Add(a, r3.Scale(d2/(d2-d6), ac))
	}
	va := d3*d6 - d5*d4
	if va <= 0 && d4-d3 >= 0 && d5-d6 >= 0 {
		return r3.Add(b, r3.Scale((d4-d3)/((d4-d3)+(d5-d6)), r3.Sub(c, b)))
	}
	den := 1 / (va + vb + vc)
	return r3.Add(a, r3.Add(r3.Scale(vb*den, ab), r3.Scale(vc*den, ac)))
}

func TestSynthTruthMeshes(t *testing.T) {
	dir, rep := synthSmall(t, "bushing", smallSynthOptions(RigTurntable, 3))
	part, err := mesh.LoadMesh(filepath.Join(dir, TruthDir, TruthPartName))
	if err != nil {
		t.Fatal(err)
	}
	seen, err := mesh.LoadMesh(filepath.Join(dir, TruthDir, TruthSeenName))
	if err != nil {
		t.Fatal(err)
	}
	tr, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
	if err != nil {
		t.Fatal(err)
	}
	src := testPart(t, "bushing")
	if len(part.Faces) != len(src.Faces) || len(part.Vertices) != len(src.Vertices) {
		t.Fatalf("part.ply has %d faces, %d vertices; the part has %d, %d", len(part.Faces), len(part.Vertices), len(src.Faces), len(src.Vertices))
	}
	// part.ply is the part mesh placed by PartToWorld; PLY stores
	// float32 positions, so 1e-6 m (float32 spacing near 0.6 m is 6e-8).
	for i, v := range src.Vertices {
		if d := r3.Norm(r3.Sub(part.Vertices[i], tr.PartToWorld.Apply(v))); d > 1e-6 {
			t.Fatalf("vertex %d: %v, want %v", i, part.Vertices[i], tr.PartToWorld.Apply(v))
		}
	}
	// Three frames from one side cannot see the whole bushing (its
	// underside rests on the plate) but see a good part of it.
	if got := len(seen.Faces); got != rep.SeenTriangles || got == 0 || got >= len(part.Faces) {
		t.Errorf("seen.ply has %d faces (report %d) of %d", got, rep.SeenTriangles, len(part.Faces))
	}
	// Every seen triangle is a triangle of the part.
	key := func(m *mesh.Mesh, f mesh.Face) [3][3]float32 {
		var k [3][3]float32
		for c, vi := range f {
			v := m.Vertices[vi]
			k[c] = [3]float32{float32(v.X), float32(v.Y), float32(v.Z)}
		}
		return k
	}
	faces := map[[3][3]float32]bool{}
	for _, f := range part.Faces {
		faces[key(part, f)] = true
	}
	for i, f := range seen.Faces {
		if !faces[key(seen, f)] {
			t.Fatalf("seen face %d is not a face of part.ply", i)
		}
	}
}

func TestSynthHandheld(t *testing.T) {
	const n = 6
	opt := smallSynthOptions(RigHandheld, n)
	dir, rep := synthSmall(t, "valve", opt)
	s, err := LoadSweepWith(context.Background(), dir, LoadOptions{Strict: true, CheckPixels: true})
	if err != nil {
		t.Fatal(err)
	}
	if s.Manifest.Turntable != nil {
		t.Error("handheld manifest has a turntable")
	}
	for i, e := range s.Manifest.Frames {
		if e.CamToWorld != nil || e.Angle != nil {
			t.Errorf("frame %d: manifest gives a pose or angle; handheld poses belong to the truth only", i)
		}
	}
	tr, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
	if err != nil {
		t.Fatal(err)
	}
	if d := poseDiff(tr.CamToWorld[0], mesh.Identity()); d > 1e-12 {
		t.Errorf("truth pose 0 differs from the identity by %g", d)
	}
	if tr.Axis != nil || tr.AnglesRad != nil {
		t.Error("handheld truth has a turntable axis")
	}
	// The camera circles the part: distance to the part's mid-height
	// within the orbit's ±20 % swing plus 2 cm of wobble, the part's
	// centre in view, and the camera's azimuth about the part covering
	// most of a turn.
	centre := tr.PartToWorld.Apply(r3.Vec{Z: rep.PartSize.Z / 2})
	up := tr.PartToWorld.Rotate(r3.Vec{Z: 1})
	var azimuths []float64
	ref := r3.Sub(tr.CamToWorld[0].T, centre)
	ref = mesh.Normalize(r3.Sub(ref, r3.Scale(r3.Dot(ref, up), up)))
	side := r3.Cross(up, ref)
	for i, p := range tr.CamToWorld {
		d := r3.Norm(r3.Sub(p.T, centre))
		if d < 0.8*opt.Distance-0.02 || d > 1.2*opt.Distance+0.02 {
			t.Errorf("frame %d: camera %.3f m from the part, want %.3f ± 20 %%", i, d, opt.Distance)
		}
		c := p.Inv().Apply(centre)
		u, v := opt.Intrinsics.Project(c)
		if c.Z <= 0 || u < 0 || v < 0 || u > float64(opt.Intrinsics.Width-1) || v > float64(opt.Intrinsics.Height-1) {
			t.Errorf("frame %d: part centre at (%.1f, %.1f), z %.3f, out of view", i, u, v, c.Z)
		}
		r := r3.Sub(p.T, centre)
		azimuths = append(azimuths, math.Atan2(r3.Dot(r, side), r3.Dot(r, ref)))
	}
	for i := range azimuths {
		if azimuths[i] < 0 {
			azimuths[i] += 2 * math.Pi
		}
	}
	sort.Float64s(azimuths)
	if span := azimuths[n-1] - azimuths[0]; span < 2*math.Pi*(n-2)/n {
		t.Errorf("camera azimuths span %.0f°, want most of a turn", span*180/math.Pi)
	}
}

// TestSynthNoiseStatistics compares the empirical depth noise on the
// turntable plate with the model of Nguyen, Izadi & Lovell (2012,
// 3DIMPVT, DOI 10.1109/3DIMPVT.2012.84), σ_z(z, θ) = render.AxialSigma,
// and checks that the plate centre is seen at the configured distance.
func TestSynthNoiseStatistics(t *testing.T) {
	opt := smallSynthOptions(RigTurntable, 1)
	opt.Noise = render.DefaultNoiseOptions()
	opt.Noise.LateralScale = 0 // isolate the axial term; see below for both
	sc, err := buildScene(testPart(t, "nut"), opt)
	if err != nil {
		t.Fatal(err)
	}
	// Drop the part so the whole plate is visible around its centre.
	sc.objects = append(sc.objects[:sc.part], sc.objects[sc.part+1:]...)
	sc.part = -1
	sy := &synthesizer{sc: sc, opt: opt, part: &mesh.Mesh{}}
	wk, err := sy.newWorker()
	if err != nil {
		t.Fatal(err)
	}
	k := opt.Intrinsics
	// The plate's top plane in the camera frame: normal up, through the
	// plate centre, which the camera aims at from opt.Distance.
	sToCam := sc.camToS[0].Inv()
	centre := sToCam.Apply(r3.Vec{})
	normal := sToCam.Rotate(r3.Vec{Z: 1})
	planeDepth := func(u, v float64) (float64, float64) {
		ray := k.Ray(u, v)
		z := r3.Dot(normal, centre) / r3.Dot(normal, ray)
		cosT := -r3.Dot(normal, ray) / r3.Norm(ray)
		return z, math.Acos(cosT)
	}
	// onPlate keeps pixels whose ray meets the plate within 9 cm of its
	// centre (the plate's radius is 14 cm): well inside its rim.
	onPlate := func(u, v int) bool {
		z, _ := planeDepth(float64(u), float64(v))
		return r3.Norm(r3.Sub(r3.Scale(z, k.Ray(float64(u), float64(v))), centre)) < 0.09
	}
	if z, _ := planeDepth(k.Cx, k.Cy); math.Abs(z-opt.Distance) > 1e-12 {
		t.Fatalf("plane model puts the centre at %v m, want %v", z, opt.Distance)
	}

	// Residuals over a window of the plate around its centre, from many
	// noisy renders (each frame draws its own noise), normalised by the
	// model's σ including the 16-bit PNG rounding (uniform over one
	// count: variance unit²/12) that the written sweep adds.
	var sumSq, centreSum float64
	var n, centreN int
	const frames = 6
	unit := opt.DepthUnit
	for i := 0; i < frames; i++ {
		sy.opt.Seed = uint64(100 + i)
		if _, err := sy.frame(0, wk, false); err != nil {
			t.Fatal(err)
		}
		for v := int(k.Cy) - 12; v <= int(k.Cy)+12; v++ {
			for u := int(k.Cx) - 25; u <= int(k.Cx)+25; u++ {
				zm := float64(wk.noisy.Depth[v*k.Width+u])
				if zm == 0 || !onPlate(u, v) {
					continue
				}
				zm = math.Round(zm/unit) * unit // as written to the PNG
				z, th := planeDepth(float64(u), float64(v))
				sigma := math.Sqrt(math.Pow(render.AxialSigma(z, th), 2) + unit*unit/12)
				r := (zm - z) / sigma
				sumSq += r * r
				n++
				if u == int(k.Cx) && v == int(k.Cy) {
					centreSum += zm - z
					centreN++
				}
			}
		}
	}
	// Var of the normalised residuals is 1 under the model; its sample
	// estimate from n normal draws has standard error √(2/(n−1))
	// (chi-square with n−1 degrees of freedom); allow 4 of them.
	ratio := sumSq / float64(n)
	t.Logf("axial only: normalised residual variance %.4f over %d pixels", ratio, n)
	if se := math.Sqrt(2 / float64(n-1)); math.Abs(ratio-1) > 4*se {
		t.Errorf("normalised residual variance %.3f over %d pixels, want 1 ± %.3f", ratio, n, 4*se)
	}
	// The centre pixel's depth, averaged over the frames, is the camera
	// distance within 4 standard errors of the mean.
	_, th := planeDepth(k.Cx, k.Cy)
	sc0 := math.Sqrt(math.Pow(render.AxialSigma(opt.Distance, th), 2) + unit*unit/12)
	t.Logf("plate centre: mean depth error %.3f mm over %d frames (σ %.2f mm per frame)", 1e3*centreSum/float64(max(centreN, 1)), centreN, sc0*1e3)
	if centreN < frames-1 || math.Abs(centreSum/float64(centreN)) > 4*sc0/math.Sqrt(float64(centreN)) {
		t.Errorf("plate centre depth off by %.2f mm on average over %d frames (σ %.2f mm)", 1e3*centreSum/float64(max(centreN, 1)), centreN, sc0*1e3)
	}

	// With lateral noise on, each pixel takes the depth of a pixel
	// displaced by round(N(0, σ_L²)) in u and v (σ_L from
	// render.LateralSigmaPixels), so on the tilted plate the residual
	// also carries g_u·du + g_v·dv, g the plane's depth gradient per
	// pixel: Var = σ_z² + Var(round)·(g_u² + g_v²) + unit²/12.
	sy.opt.Noise.LateralScale = 1
	wk, err = sy.newWorker()
	if err != nil {
		t.Fatal(err)
	}
	sumSq, n = 0, 0
	for i := 0; i < frames; i++ {
		sy.opt.Seed = uint64(200 + i)
		if _, err := sy.frame(0, wk, false); err != nil {
			t.Fatal(err)
		}
		for v := int(k.Cy) - 12; v <= int(k.Cy)+12; v++ {
			for u := int(k.Cx) - 25; u <= int(k.Cx)+25; u++ {
				zm := float64(wk.noisy.Depth[v*k.Width+u])
				if zm == 0 || !onPlate(u, v) {
					continue
				}
				zm = math.Round(zm/unit) * unit
				z, th := planeDepth(float64(u), float64(v))
				zu, _ := planeDepth(float64(u)+1, float64(v))
				zv, _ := planeDepth(float64(u), float64(v)+1)
				vr := roundedNormalVariance(render.LateralSigmaPixels(th))
				variance := math.Pow(render.AxialSigma(z, th), 2) + vr*((zu-z)*(zu-z)+(zv-z)*(zv-z)) + unit*unit/12
				r := zm - z
				sumSq += r * r / variance
				n++
			}
		}
	}
	ratio = sumSq / float64(n)
	t.Logf("axial and lateral: normalised residual variance %.4f over %d pixels", ratio, n)
	// The linearised gradient and the axial σ taken at the source pixel
	// rather than at the displaced one add a few per cent; the bound is
	// the same 4 standard errors plus 5 %.
	if se := math.Sqrt(2 / float64(n-1)); math.Abs(ratio-1) > 4*se+0.05 {
		t.Errorf("with lateral noise: normalised residual variance %.3f over %d pixels, want 1 ± %.3f", ratio, n, 4*se+0.05)
	}
}

// roundedNormalVariance is Var(round(X)) for X ~ N(0, σ²): Σ k²·P(k)
// with P(k) = Φ((k+½)/σ) − Φ((k−½)/σ), Φ from gonum's distuv.
func roundedNormalVariance(sigma float64) float64 {
	nd := distuv.UnitNormal
	v := 0.0
	for k := 1; k <= 20; k++ {
		p := nd.CDF((float64(k)+0.5)/sigma) - nd.CDF((float64(k)-0.5)/sigma)
		v += 2 * float64(k*k) * p
	}
	return v
}

// TestSynthPartInEveryFrame checks that every frame's depth image
// measures the part (its object id in the render) over a plausible
// share of the image.
func TestSynthPartInEveryFrame(t *testing.T) {
	for _, rig := range []Rig{RigTurntable, RigHandheld} {
		opt := smallSynthOptions(rig, 6)
		sc, err := buildScene(testPart(t, "labelbox"), opt)
		if err != nil {
			t.Fatal(err)
		}
		sy := &synthesizer{sc: sc, opt: opt, part: testPart(t, "labelbox")}
		wk, err := sy.newWorker()
		if err != nil {
			t.Fatal(err)
		}
		for i := 0; i < opt.Frames; i++ {
			st, err := sy.frame(i, wk, false)
			if err != nil {
				t.Fatal(err)
			}
			// An 80 × 50 mm box at 0.44–0.66 m with f = 132 px spans
			// roughly 15–25 × 10–15 px: well over 40 pixels.
			if st.partPx < 40 {
				t.Errorf("%s frame %d: the part covers %d measured pixels", rig, i, st.partPx)
			}
			if float64(st.valid) < 0.3*float64(opt.Intrinsics.Width*opt.Intrinsics.Height) {
				t.Errorf("%s frame %d: only %d valid depth pixels", rig, i, st.valid)
			}
		}
	}
}

func TestSynthDeterministic(t *testing.T) {
	opt := smallSynthOptions(RigHandheld, 4)
	opt.Workers = 1
	a, _ := synthSmall(t, "nut", opt)
	opt.Workers = 3
	b, _ := synthSmall(t, "nut", opt)
	files := 0
	err := filepath.WalkDir(a, func(p string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(a, p)
		x, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		y, err := os.ReadFile(filepath.Join(b, rel))
		if err != nil {
			return err
		}
		if !bytes.Equal(x, y) {
			t.Errorf("%s differs between 1 and 3 workers", rel)
		}
		files++
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if files != 2*4+4 {
		t.Errorf("compared %d files, want %d", files, 2*4+4)
	}
	// A different seed gives a different sweep.
	opt.Seed = 2
	c, _ := synthSmall(t, "nut", opt)
	x, _ := os.ReadFile(filepath.Join(a, "depth", "000001.png"))
	y, _ := os.ReadFile(filepath.Join(c, "depth", "000001.png"))
	if bytes.Equal(x, y) {
		t.Error("seeds 1 and 2 wrote the same depth image")
	}
}

func TestSynthCancelLeavesNothing(t *testing.T) {
	parent := t.TempDir()
	dir := filepath.Join(parent, "sweep")
	ctx, cancel := context.WithCancel(context.Background())
	opt := smallSynthOptions(RigTurntable, 6)
	opt.Workers = 1
	opt.Progress = func(done, total int) {
		if done == 2 {
			cancel()
		}
	}
	_, err := Synth(ctx, dir, testPart(t, "nut"), opt)
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("err = %v, want context.Canceled", err)
	}
	ents, _ := os.ReadDir(parent)
	if len(ents) != 0 {
		t.Errorf("cancelled synth left %v in %s", ents, parent)
	}
}

func TestSynthTarget(t *testing.T) {
	parent := t.TempDir()
	part := testPart(t, "nut")
	opt := smallSynthOptions(RigTurntable, 1)
	// A folder that holds something else is never touched.
	other := filepath.Join(parent, "other")
	writeFile(t, other, "notes.txt", []byte("keep me"))
	if _, err := Synth(context.Background(), other, part, opt); err == nil {
		t.Error("synth wrote into a non-sweep folder")
	}
	if b, _ := os.ReadFile(filepath.Join(other, "notes.txt")); string(b) != "keep me" {
		t.Error("synth touched a non-sweep folder")
	}
	// An existing sweep is replaced only with Overwrite.
	dir := filepath.Join(parent, "sweep")
	if _, err := Synth(context.Background(), dir, part, opt); err != nil {
		t.Fatal(err)
	}
	if _, err := Synth(context.Background(), dir, part, opt); err == nil {
		t.Error("synth replaced a sweep without Overwrite")
	}
	opt.Overwrite = true
	opt.Frames = 2
	if _, err := Synth(context.Background(), dir, part, opt); err != nil {
		t.Fatal(err)
	}
	s, err := LoadSweep(dir)
	if err != nil || s.NumFrames() != 2 {
		t.Fatalf("replaced sweep: %v", err)
	}
	ents, _ := os.ReadDir(parent)
	if len(ents) != 2 {
		t.Errorf("parent holds %d entries after overwrite, want 2 (other, sweep)", len(ents))
	}
}

func TestSynthOptionErrors(t *testing.T) {
	part := testPart(t, "nut")
	for _, c := range []struct {
		name string
		edit func(*SynthOptions)
	}{
		{"rig", func(o *SynthOptions) { o.Rig = "drone" }},
		{"frames", func(o *SynthOptions) { o.Frames = 0 }},
		{"distance", func(o *SynthOptions) { o.Distance = 0.05 }},
		{"elevation", func(o *SynthOptions) { o.Elevation = 0 }},
		{"intrinsics", func(o *SynthOptions) { o.Intrinsics.Fx = -1 }},
		{"noise", func(o *SynthOptions) { o.Noise.RandomDropout = 2 }},
		{"unit", func(o *SynthOptions) { o.DepthUnit = 0 }},
	} {
		opt := smallSynthOptions(RigTurntable, 1)
		c.edit(&opt)
		if _, err := Synth(context.Background(), filepath.Join(t.TempDir(), "s"), part, opt); err == nil {
			t.Errorf("%s: bad option accepted", c.name)
		}
	}
	// A mesh in millimetres read as metres is far too large.
	big := part.Transform(mesh.Identity())
	for i := range big.Vertices {
		big.Vertices[i] = r3.Scale(1000, big.Vertices[i])
	}
	if _, err := Synth(context.Background(), filepath.Join(t.TempDir(), "s"), big, smallSynthOptions(RigTurntable, 1)); err == nil {
		t.Error("a 27 m nut was accepted")
	}
}

// BenchmarkSynthFrame renders, degrades and encodes one 640×480
// turntable frame of the bracket (the work per frame of Synth).
func BenchmarkSynthFrame(b *testing.B) {
	opt := DefaultSynthOptions()
	part := testPart(b, "bracket")
	sc, err := buildScene(part, opt)
	if err != nil {
		b.Fatal(err)
	}
	sy := &synthesizer{sc: sc, opt: opt, part: part, dir: b.TempDir()}
	for _, sub := range []string{"color", "depth"} {
		os.Mkdir(filepath.Join(sy.dir, sub), 0o755)
	}
	wk, err := sy.newWorker()
	if err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := sy.frame(i%opt.Frames, wk, true); err != nil {
			b.Fatal(err)
		}
	}
}
