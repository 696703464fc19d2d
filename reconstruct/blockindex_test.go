package reconstruct

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// oracleRaycast marches every pixel's ray from the start of the blocks'
// box to its end (no per-pixel intervals): the slow form that Raycast
// must reproduce bit for bit.
func oracleRaycast(v *Volume, intr mesh.Intrinsics, camToWorld mesh.Pose) *ModelMap {
	n := intr.Width * intr.Height
	m := &ModelMap{Intr: intr, Points: make([]r3.Vec, n), Normals: make([]r3.Vec, n)}
	lo, hi, ok := v.bounds()
	if !ok {
		return m
	}
	s := sampler{v: v}
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			ray := camToWorld.Rotate(mesh.Normalize(intr.Ray(float64(x), float64(y))))
			if p, nrm, hit := s.castRay(camToWorld.T, ray, lo, hi, 0, math.Inf(1), 0); hit {
				m.Points[y*intr.Width+x], m.Normals[y*intr.Width+x] = p, nrm
			}
		}
	}
	return m
}

func sameModelMaps(t *testing.T, name string, got, want *ModelMap) {
	t.Helper()
	hits := 0
	for i := range want.Points {
		if got.Points[i] != want.Points[i] || got.Normals[i] != want.Normals[i] {
			t.Fatalf("%s: pixel %d: got %v %v, want %v %v", name, i, got.Points[i], got.Normals[i], want.Points[i], want.Normals[i])
		}
		if want.Valid(i) {
			hits++
		}
	}
	if hits == 0 {
		t.Fatalf("%s: no pixel hit the surface", name)
	}
}

// TestRaycastIntervalsExact checks that starting and stopping rays at
// the projected blocks' distances changes nothing: Raycast equals the
// full march from several views, one of them so close that blocks reach
// behind the camera's near plane (those cover the whole image).
func TestRaycastIntervalsExact(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	const r = 0.04
	vol := fuseSphere(t, DefaultTSDFOptions(), c, r, orbitPoses(t, 12, c, 0.45, 0.3))
	views := orbitPoses(t, 3, c, 0.45, -0.2)
	near, err := mesh.LookAt(r3.Add(c, r3.Vec{X: 0.03, Y: -0.02, Z: -0.15}), c, r3.Vec{Y: -1})
	if err != nil {
		t.Fatal(err)
	}
	views = append(views, near)
	opt := vol.Options()
	opt.MinDepth = 0.12 // the near view's closest blocks lie nearer than this
	vol.opt = opt
	for i, view := range views {
		got := vol.Raycast(context.Background(), testIntr, view, nil)
		sameModelMaps(t, "view "+string(rune('0'+i)), got, oracleRaycast(vol, testIntr, view))
	}
}

// TestBlockGridMatchesIndex checks the dense block index against the
// hash index, and that a volume without the grid raycasts identically.
func TestBlockGridMatchesIndex(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	vol := fuseSphere(t, DefaultTSDFOptions(), c, 0.04, orbitPoses(t, 8, c, 0.45, 0.3))
	if !vol.grid.ok {
		t.Fatal("a sphere's volume should have a dense grid")
	}
	for i, k := range vol.keys {
		if vol.Block(k) != vol.blocks[i] {
			t.Fatalf("block %v: grid and index disagree", k)
		}
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for n := 0; n < 10000; n++ {
		k := BlockKey{vol.lo.X - 3 + rng.Int32N(vol.hi.X-vol.lo.X+7), vol.lo.Y - 3 + rng.Int32N(vol.hi.Y-vol.lo.Y+7), vol.lo.Z - 3 + rng.Int32N(vol.hi.Z-vol.lo.Z+7)}
		var want *Block
		if i, ok := vol.index[k]; ok {
			want = vol.blocks[i]
		}
		if got := vol.Block(k); got != want {
			t.Fatalf("key %v: grid gives %p, index %p", k, got, want)
		}
	}
	view := orbitPoses(t, 5, c, 0.45, 0.1)[2]
	withGrid := vol.Raycast(context.Background(), testIntr, view, nil)
	vol.grid.ok = false
	sameModelMaps(t, "without grid", vol.Raycast(context.Background(), testIntr, view, nil), withGrid)
}

// TestBlockGridGrowsAndGivesUp adds blocks outside the grid's box (it
// must be rebuilt) and then so far away that the box would pass
// maxGridCells (the grid must be dropped, the hash index answering).
func TestBlockGridGrowsAndGivesUp(t *testing.T) {
	vol, err := NewVolume(DefaultTSDFOptions())
	if err != nil {
		t.Fatal(err)
	}
	add := func(keys ...BlockKey) {
		t.Helper()
		if err := vol.addBlocks(keys); err != nil {
			t.Fatal(err)
		}
	}
	add(BlockKey{0, 0, 0}, BlockKey{1, 0, 0})
	add(BlockKey{40, -30, 5})
	if !vol.grid.ok {
		t.Fatal("grid dropped for a small box")
	}
	far := BlockKey{400, 400, 400}
	add(far)
	if vol.grid.ok {
		t.Fatalf("grid kept for a box of %d³ blocks", 400)
	}
	for i, k := range vol.keys {
		if vol.Block(k) != vol.blocks[i] {
			t.Fatalf("block %v not found", k)
		}
	}
	if vol.Block(BlockKey{2, 0, 0}) != nil {
		t.Fatal("an unallocated block was found")
	}
}

// TestVoxelMasksMatchWeights checks the invariant raycasting relies on:
// a voxel's mask bit is set exactly when its weight is positive.
func TestVoxelMasksMatchWeights(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	vol := fuseSphere(t, DefaultTSDFOptions(), c, 0.04, orbitPoses(t, 6, c, 0.45, 0.3))
	set := 0
	for bi, b := range vol.blocks {
		for i := range b.W {
			bit := vol.masks[bi][i>>6]&(1<<(i&63)) != 0
			if bit != (b.W[i] > 0) {
				t.Fatalf("block %v voxel %d: mask %v, weight %g", vol.keys[bi], i, bit, b.W[i])
			}
			if bit {
				set++
			}
		}
	}
	if set == 0 {
		t.Fatal("no voxel observed")
	}
}

// TestCullingChangesNothing integrates the same views with and without
// culling the blocks that a frame sees from behind: every voxel must be
// identical, and some blocks must have been culled for the test to
// mean anything.
func TestCullingChangesNothing(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	poses := orbitPoses(t, 8, c, 0.45, 0.3)
	culled := 0
	build := func(noCull bool) *Volume {
		vol, err := NewVolume(DefaultTSDFOptions())
		if err != nil {
			t.Fatal(err)
		}
		vol.noCull = noCull
		for _, p := range poses {
			depth := sphereDepth(testIntr, p, c, 0.04)
			im := &DepthImage{Intr: testIntr, Depth: depth, Weight: MeasurementWeights(depth, testIntr, DefaultWeightOptions(), nil)}
			if _, err := vol.Integrate(context.Background(), im, p); err != nil {
				t.Fatal(err)
			}
			if !noCull {
				pr := vol.newProjector(im, p.Inv())
				for _, k := range vol.keys {
					o := r3.Scale(vol.opt.VoxelSize*BlockSide, r3.Vec{X: float64(k.X), Y: float64(k.Y), Z: float64(k.Z)})
					if pr.behindAll(pr.worldToCam.Apply(o)) {
						culled++
					}
				}
			}
		}
		return vol
	}
	a, b := build(false), build(true)
	if culled == 0 {
		t.Fatal("no block was culled: the test does not exercise culling")
	}
	for i, k := range a.keys {
		if *a.blocks[i] != *b.Block(k) || a.masks[i] != b.masks[b.index[k]] {
			t.Fatalf("block %v differs with culling", k)
		}
	}
}

// TestRaycastHint checks the depth hint of the tracker's raycast
// against the full march. With the sphere's true depth as the hint,
// every ray must hit where the full march hits, within a fifth of a
// voxel and 5° of normal: both interpolate the same trilinear field's
// zero crossing linearly between samples at most half a voxel apart
// near it, so they differ by the field's curvature over that step
// (common practice for a marching raycast). With a hint 6 cm behind
// the surface (rays would start inside the sphere, behind its front
// face, or behind it) on half the pixels and none on the others, the
// hinted rays find nothing near their hint, or march in full where the
// hint lies beyond the volume along their ray (it is ignored there),
// and the others march in full: no point, or the full march's point to
// the bit.
func TestRaycastHint(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	const r = 0.04
	vol := fuseSphere(t, DefaultTSDFOptions(), c, r, orbitPoses(t, 12, c, 0.45, 0.3))
	view := orbitPoses(t, 5, c, 0.45, 0.1)[2]
	ctx := context.Background()
	want := vol.Raycast(ctx, testIntr, view, nil)
	hint := sphereDepth(testIntr, view, c, r)
	got := vol.raycast(ctx, testIntr, view, nil, hint)
	hits, maxD, maxA := 0, 0.0, 0.0
	for i := range want.Points {
		if got.Valid(i) != want.Valid(i) {
			t.Fatalf("pixel %d: hit %v with the hint, %v without", i, got.Valid(i), want.Valid(i))
		}
		if !want.Valid(i) {
			continue
		}
		hits++
		maxD = math.Max(maxD, r3.Norm(r3.Sub(got.Points[i], want.Points[i])))
		maxA = math.Max(maxA, math.Acos(math.Min(1, r3.Dot(got.Normals[i], want.Normals[i]))))
	}
	if hits == 0 {
		t.Fatal("no pixel hit the sphere")
	}
	if vs := vol.opt.VoxelSize; maxD > vs/5 || maxA > 5*math.Pi/180 {
		t.Errorf("hinted raycast: points up to %.3f mm (≤ %.3f), normals up to %.2f° (≤ 5) from the full march", maxD*1000, vs/5*1000, maxA*180/math.Pi)
	}
	for i := range hint {
		if hint[i] > 0 {
			hint[i] += 0.06
		}
		if i%2 == 0 {
			hint[i] = 0
		}
	}
	got = vol.raycast(ctx, testIntr, view, nil, hint)
	missed := 0
	for i := range want.Points {
		same := got.Points[i] == want.Points[i] && got.Normals[i] == want.Normals[i]
		switch {
		case hint[i] > 0 && got.Valid(i):
			if !same {
				t.Fatalf("pixel %d: hinted 6 cm behind the surface, hit %v; the full march %v", i, got.Points[i], want.Points[i])
			}
		case hint[i] > 0:
			if want.Valid(i) {
				missed++
			}
		case !same:
			t.Fatalf("pixel %d without a hint: %v %v, the full march %v %v", i, got.Points[i], got.Normals[i], want.Points[i], want.Normals[i])
		}
	}
	if missed == 0 {
		t.Fatal("no pixel hinted behind the sphere missed it")
	}
}
