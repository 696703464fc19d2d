package reconstruct

import (
	"context"
	"math"
	"slices"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// sphereDepth renders the exact depth image of a sphere (centre c,
// radius r, world frame) seen from camToWorld: the nearer root of the
// ray–sphere quadratic along each pixel's ray.
func sphereDepth(intr mesh.Intrinsics, camToWorld mesh.Pose, c r3.Vec, r float64) []float32 {
	cc := camToWorld.Inv().Apply(c)
	depth := make([]float32, intr.Width*intr.Height)
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			d := intr.Ray(float64(x), float64(y)) // z component 1: t is depth
			a := r3.Dot(d, d)
			b := -2 * r3.Dot(d, cc)
			q := r3.Dot(cc, cc) - r*r
			disc := b*b - 4*a*q
			if disc < 0 {
				continue
			}
			depth[y*intr.Width+x] = float32((-b - math.Sqrt(disc)) / (2 * a))
		}
	}
	return depth
}

// orbitPoses returns n camera poses on a circle of radius dist around c,
// at elevation el (radians above the horizontal plane y = c.Y; y down).
func orbitPoses(t *testing.T, n int, c r3.Vec, dist, el float64) []mesh.Pose {
	var poses []mesh.Pose
	for i := 0; i < n; i++ {
		a := 2 * math.Pi * float64(i) / float64(n)
		eye := r3.Add(c, r3.Vec{X: dist * math.Cos(el) * math.Sin(a), Y: -dist * math.Sin(el), Z: -dist * math.Cos(el) * math.Cos(a)})
		p, err := mesh.LookAt(eye, c, r3.Vec{Y: -1})
		if err != nil {
			t.Fatal(err)
		}
		poses = append(poses, p)
	}
	return poses
}

func fuseSphere(t *testing.T, opt TSDFOptions, c r3.Vec, r float64, poses []mesh.Pose) *Volume {
	t.Helper()
	intr := testIntr
	vol, err := NewVolume(opt)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range poses {
		depth := sphereDepth(intr, p, c, r)
		im := &DepthImage{Intr: intr, Depth: depth, Weight: MeasurementWeights(depth, intr, DefaultWeightOptions(), nil)}
		if _, err := vol.Integrate(context.Background(), im, p); err != nil {
			t.Fatal(err)
		}
	}
	return vol
}

// TestTSDFSphereField fuses exact depth images of a sphere and checks
// the field against the sphere's signed distance ‖p − c‖ − r (the
// Euclidean distance function of a sphere, a closed form).
func TestTSDFSphereField(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	const r = 0.04
	opt := DefaultTSDFOptions()
	opt.VoxelSize = 0.002
	// Rings at ±35° elevation and at the equator see every point of the
	// sphere within 55° of face-on.
	poses := append(orbitPoses(t, 12, c, 0.45, 0.6), orbitPoses(t, 12, c, 0.45, -0.6)...)
	poses = append(poses, orbitPoses(t, 8, c, 0.45, 0)...)
	vol := fuseSphere(t, opt, c, r, poses)
	if vol.NumBlocks() == 0 {
		t.Fatal("no blocks allocated")
	}
	mu := opt.VoxelSize * 4
	dirs := []r3.Vec{{X: 1}, {X: -1}, {Y: 1}, {Y: -1}, {Z: 1}, {Z: -1}, {X: 1, Y: 1, Z: 1}, {X: -1, Y: 0.5, Z: 0.3}}
	for _, dir := range dirs {
		n := mesh.Normalize(dir)
		// On the surface every view measures a projective distance of
		// exactly 0 at the surface point itself; the field there is a
		// trilinear blend of voxels within √3 voxels, whose projective
		// distances exceed the true ones by at most 1/cos θ − 1 for the
		// views that see them (θ ≤ 75° after weighting ⇒ ≤ 2.9×). Half
		// a voxel holds that blend comfortably for a sphere of 20 voxels'
		// radius, where the curvature term h²/(2r) is 0.05 mm.
		if d, ok := vol.Sample(r3.Add(c, r3.Scale(r, n))); !ok || math.Abs(d) > opt.VoxelSize/2 {
			t.Errorf("dir %v: field at the surface = %.4f m (ok=%v), want |d| ≤ %.4f", dir, d, ok, opt.VoxelSize/2)
		}
		// One voxel outside: positive; half a truncation inside:
		// negative. (Farther outside, at the poles, no view sees surface
		// behind a voxel, so free space there stays unobserved.)
		if d, ok := vol.Sample(r3.Add(c, r3.Scale(r+opt.VoxelSize, n))); !ok || d <= 0 {
			t.Errorf("dir %v: field outside = %.4f (ok=%v), want > 0", dir, d, ok)
		}
		if d, ok := vol.Sample(r3.Add(c, r3.Scale(r-mu/2, n))); !ok || d >= 0 {
			t.Errorf("dir %v: field inside = %.4f (ok=%v), want < 0", dir, d, ok)
		}
	}
	// Far outside the band nothing is allocated.
	if _, ok := vol.Sample(r3.Vec{Z: 0.2}); ok {
		t.Error("field observed far in front of the surface")
	}
}

// TestRaycastSphere checks the raycast surface against the sphere: hit
// points lie on it and normals point radially outward.
func TestRaycastSphere(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	const r = 0.04
	opt := DefaultTSDFOptions()
	poses := orbitPoses(t, 16, c, 0.45, 0.2)
	vol := fuseSphere(t, opt, c, r, poses)
	intr := testIntr
	view := poses[3]
	m := vol.Raycast(context.Background(), intr, view, nil)
	want := sphereDepth(intr, view, c, r)
	hits, misses := 0, 0
	var worstD, worstA float64
	extra := 0
	for i := range m.Points {
		if want[i] != 0 && !m.Valid(i) {
			misses++
		}
		if !m.Valid(i) {
			continue
		}
		// A fused surface is slightly fatter than the object at its
		// silhouette (voxels beside the rim take the rim's depth), so a
		// hit just outside the exact silhouette is allowed; its distance
		// to the sphere is bounded below like every other hit.
		if want[i] == 0 {
			extra++
		} else {
			hits++
		}
		p := m.Points[i]
		worstD = math.Max(worstD, math.Abs(r3.Norm(r3.Sub(p, c))-r))
		radial := mesh.Normalize(r3.Sub(p, c))
		worstA = math.Max(worstA, math.Acos(math.Min(1, r3.Dot(radial, m.Normals[i]))))
	}
	// The silhouette's outermost ring of pixels meets the band at grazing
	// angles; allow it to miss (≤ 15% of the disc).
	if float64(misses) > 0.15*float64(hits+misses) {
		t.Errorf("%d of %d sphere pixels missed", misses, hits+misses)
	}
	if float64(extra) > 0.15*float64(hits) {
		t.Errorf("%d hits outside the silhouette for %d inside", extra, hits)
	}
	// Surface within half a voxel (see TestTSDFSphereField); normals from
	// central differences over ±1 voxel of a field that is the sphere's
	// distance up to that error: within a few degrees away from the rim.
	if worstD > opt.VoxelSize/2 {
		t.Errorf("worst surface error %.3f mm, want ≤ %.3f mm", worstD*1000, opt.VoxelSize/2*1000)
	}
	if worstA > 10*math.Pi/180 {
		t.Errorf("worst normal error %.1f°, want ≤ 10°", worstA*180/math.Pi)
	}
}

func TestVolumeOptionsErrors(t *testing.T) {
	for name, mod := range map[string]func(*TSDFOptions){
		"zero voxel":      func(o *TSDFOptions) { o.VoxelSize = 0 },
		"huge voxel":      func(o *TSDFOptions) { o.VoxelSize = 1 },
		"truncation tiny": func(o *TSDFOptions) { o.Truncation = 0.0001 },
		"truncation huge": func(o *TSDFOptions) { o.Truncation = 0.1 },
		"weight":          func(o *TSDFOptions) { o.MaxWeight = 0 },
		"depth range":     func(o *TSDFOptions) { o.MinDepth, o.MaxDepth = 1, 0.5 },
	} {
		o := DefaultTSDFOptions()
		mod(&o)
		if _, err := NewVolume(o); err == nil {
			t.Errorf("%s: want an error", name)
		}
	}
	vol, _ := NewVolume(DefaultTSDFOptions())
	intr := mesh.Intrinsics{Width: 4, Height: 4, Fx: 4, Fy: 4, Cx: 1.5, Cy: 1.5}
	if _, err := vol.Integrate(context.Background(), &DepthImage{Intr: intr, Depth: make([]float32, 15)}, mesh.Identity()); err == nil {
		t.Error("short depth: want an error")
	}
	if _, err := vol.Integrate(context.Background(), &DepthImage{Intr: intr, Depth: make([]float32, 16), Color: make([]uint8, 16)}, mesh.Identity()); err == nil {
		t.Error("short colour: want an error")
	}
}

// TestIntegrateDeterministic checks that the worker count does not change
// a single bit of the volume.
func TestIntegrateDeterministic(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	poses := orbitPoses(t, 6, c, 0.45, 0.3)
	o1 := DefaultTSDFOptions()
	o1.Workers = 1
	o4 := o1
	o4.Workers = 4
	a := fuseSphere(t, o1, c, 0.03, poses)
	b := fuseSphere(t, o4, c, 0.03, poses)
	if a.NumBlocks() != b.NumBlocks() {
		t.Fatalf("%d vs %d blocks", a.NumBlocks(), b.NumBlocks())
	}
	// the same blocks in the same order (allocate shares rows among
	// the workers, then allocates the keys they found sorted)
	if !slices.Equal(a.keys, b.keys) {
		t.Fatal("blocks allocated in a different order with 4 workers")
	}
	for _, k := range a.Keys() {
		if *a.Block(k) != *b.Block(k) {
			t.Fatalf("block %v differs between 1 and 4 workers", k)
		}
	}
}

// testIntr is a 320×240 camera: a 4 cm sphere at 0.45 m spans about 50
// pixels, enough that its poles are several pixels inside the silhouette.
var testIntr = mesh.Intrinsics{Width: 320, Height: 240, Fx: 280, Fy: 280, Cx: 159.5, Cy: 119.5}

// TestFusedSphereAreaVolume fuses exact depth images of a sphere seen
// from all around, extracts the surface and checks its area and enclosed
// volume against 4πr² and (4/3)πr³ (the sphere's closed forms).
func TestFusedSphereAreaVolume(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	const r = 0.04
	opt := DefaultTSDFOptions()
	opt.VoxelSize = 0.002
	var poses []mesh.Pose
	for _, el := range []float64{-1.2, -0.6, 0, 0.6, 1.2} {
		poses = append(poses, orbitPoses(t, 10, c, 0.45, el)...)
	}
	vol := fuseSphere(t, opt, c, r, poses)
	m, err := vol.Extract(0.5)
	if err != nil {
		t.Fatal(err)
	}
	if !m.IsWatertight() {
		t.Fatalf("fused sphere is not watertight: %d boundary edges", len(m.BoundaryEdges()))
	}
	area, volume := m.Area(), m.SignedVolume()
	wantA, wantV := 4*math.Pi*r*r, 4*math.Pi*r*r*r/3
	// Error budget, from the voxel size h = 2 mm: the fused zero crossing
	// lies within h/2 of the sphere (TestTSDFSphereField), a radius error
	// δ changes the area by 2δ/r and the volume by 3δ/r relatively; the
	// field error averages out over the surface, so the mean radius is
	// far better than h/2 — we allow δ = h/4 (1.25% area, 1.9% volume)
	// plus marching cubes' chordal loss of about h²/(8r)·2/r ≈ 0.3%.
	h := opt.VoxelSize
	if e := math.Abs(area-wantA) / wantA; e > 2*(h/4)/r+0.003 {
		t.Errorf("area %.6f m², want %.6f (error %.2f%%)", area, wantA, 100*e)
	}
	if e := math.Abs(volume-wantV) / wantV; e > 3*(h/4)/r+0.003 {
		t.Errorf("volume %.3g m³, want %.3g (error %.2f%%)", volume, wantV, 100*e)
	}
	t.Logf("area error %.2f%%, volume error %.2f%%, %d triangles", 100*(area-wantA)/wantA, 100*(volume-wantV)/wantV, len(m.Faces))
}

// TestSceneThinWall fuses a 3 mm plate seen face-on from both sides
// into the handheld rig's scene volume (4 mm voxels, 16 mm truncation)
// and raycasts its front face. Updating the whole truncation behind
// each surface, the back views write "inside" over the free space in
// front of the front face, up to the truncation minus the thickness
// (13 mm) away, and the front face moves or vanishes; with the scene's
// bands (FuseOptions.TrackBehind, 1 voxel = 4 mm across the surface)
// the back views reach at most 4 − 3 = 1 mm in front of it, so the face
// stays within that plus half a voxel (the TSDF's interpolation, as in
// TestRaycastSphere).
func TestSceneThinWall(t *testing.T) {
	const front, thick = 0.5, 0.003
	intr := testIntr
	frontView := mesh.Identity()
	// Looking along −z from 0.5 m behind the back face.
	backView := mesh.PoseFromAxisAngle(r3.Vec{Y: 1}, math.Pi, r3.Vec{Z: front + thick + 0.5})
	depth := make([]float32, intr.Width*intr.Height)
	for i := range depth {
		depth[i] = 0.5 // both faces 0.5 m away along each view's axis
	}
	faceError := func(fo FuseOptions) float64 {
		vol, err := NewVolume(fo.sceneTSDF())
		if err != nil {
			t.Fatal(err)
		}
		w, b := fo.sceneBands(depth, intr, nil, nil)
		for range 4 {
			for _, view := range []mesh.Pose{frontView, backView} {
				if _, err := vol.Integrate(context.Background(), &DepthImage{Intr: intr, Depth: depth, Weight: w, Behind: b}, view); err != nil {
					t.Fatal(err)
				}
			}
		}
		m := vol.Raycast(context.Background(), intr, frontView, nil)
		i := intr.Height/2*intr.Width + intr.Width/2
		if !m.Valid(i) {
			return math.Inf(1)
		}
		return math.Abs(m.Points[i].Z - front)
	}
	fo := DefaultFuseOptions()
	with := faceError(fo)
	fo.TrackBehind = 0
	without := faceError(fo)
	t.Logf("front face off by %.2f mm with the scene's bands, %.2f mm with the whole truncation", with*1000, without*1000)
	if bound := DefaultFuseOptions().TrackBehind*fo.TrackVoxel - thick + fo.TrackVoxel/2; with > bound {
		t.Errorf("front face off by %.2f mm with the scene's bands, want ≤ %.2f mm", with*1000, bound*1000)
	}
	if without < 2*with {
		t.Errorf("front face off by %.2f mm with the whole truncation: the thin wall should fare much worse than with bands (%.2f mm)", without*1000, with*1000)
	}
}
