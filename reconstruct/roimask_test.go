package reconstruct

import (
	"context"
	"image"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// TestROIMaskAgainstContains checks the camera-frame mask against
// ROI.Contains applied to every back-projected pixel (the oracle).
// The two forms round differently, so points within 1e-9 m of the
// region's surface may fall either way (a nanometre: float64 rounding of
// metre-scale coordinates is ~1e-16 m, far below it) and are not
// compared.
func TestROIMaskAgainstContains(t *testing.T) {
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131, Fy: 131, Cx: 79.5, Cy: 59.5}
	depth := bumpyDepth(intr, 5)
	camToWorld, err := mesh.LookAt(r3.Vec{X: 0.1, Y: -0.3, Z: -0.2}, r3.Vec{Z: 0.5}, r3.Vec{Y: -1})
	if err != nil {
		t.Fatal(err)
	}
	// A cylinder whose axis is tilted and passes near the centre of the
	// view (given in the camera frame, then moved to the world), so that
	// all four boundaries cut the image.
	nCam := mesh.Normalize(r3.Vec{X: 0.2, Y: -1, Z: 0.1})
	cCam := r3.Vec{X: 0.02, Y: 0.05, Z: 0.55}
	roi := ROI{
		Plane:  Plane{Normal: nCam, Offset: -r3.Dot(nCam, cCam)}.Transform(camToWorld),
		Centre: camToWorld.Apply(cCam),
		Radius: 0.1, Bottom: -0.04, Top: 0.04,
	}
	got := roi.Mask(depth, intr, camToWorld, nil)
	in, out := 0, 0
	for i, z := range depth {
		if z <= 0 {
			if got[i] {
				t.Fatalf("pixel %d without depth is in the mask", i)
			}
			continue
		}
		p := camToWorld.Apply(intr.BackProject(float64(i%intr.Width), float64(i/intr.Width), float64(z)))
		want := roi.Contains(p)
		if got[i] != want {
			h := roi.Plane.Distance(p)
			d := r3.Sub(p, roi.Centre)
			d = r3.Sub(d, r3.Scale(r3.Dot(d, roi.Plane.Normal), roi.Plane.Normal))
			margin := math.Min(math.Min(math.Abs(h-roi.Bottom), math.Abs(h-roi.Top)), math.Abs(r3.Norm(d)-roi.Radius))
			if margin > 1e-9 {
				t.Fatalf("pixel %d: mask %v, Contains %v (%.3g m from the boundary)", i, got[i], want, margin)
			}
		}
		if want {
			in++
		} else {
			out++
		}
	}
	if in < 500 || out < 500 {
		t.Fatalf("%d pixels in and %d out: the region does not cut the image", in, out)
	}
}

// TestWeightRegionChangesNothing integrates views of a sphere in front
// of a wall twice, with the weights of every pixel and with weights only
// inside ROI.ImageRect widened by AllocReach (as Fuse does for the part
// volume), allocating only from the region of interest: every voxel
// must come out identical, while the region leaves much of the image
// unweighed.
func TestWeightRegionChangesNothing(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	const r = 0.03
	poses := orbitPoses(t, 6, c, 0.45, 0.3)
	up := r3.Vec{Y: -1}
	roi := ROI{Plane: Plane{Normal: up, Offset: r3.Dot(up, c) * -1}, Centre: c, Radius: r + 0.005, Bottom: -r - 0.005, Top: r + 0.005}
	skipped := 0
	build := func(region bool) *Volume {
		vol, err := NewVolume(DefaultTSDFOptions())
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range poses {
			depth := sphereDepth(testIntr, p, c, r)
			for i, z := range depth {
				if z == 0 {
					depth[i] = 0.9 // a wall behind the sphere
				}
			}
			wo := DefaultWeightOptions()
			if region {
				wo.Region = roi.ImageRect(testIntr, p, vol.AllocReach(), vol.Options().MinDepth)
				skipped += testIntr.Width*testIntr.Height - wo.Region.Dx()*wo.Region.Dy()
			}
			wt, bh := MeasurementBands(depth, testIntr, wo, nil, nil, true)
			im := &DepthImage{Intr: testIntr, Depth: depth, Weight: wt, Behind: bh, Alloc: roi.Mask(depth, testIntr, p, nil)}
			if _, err := vol.Integrate(context.Background(), im, p); err != nil {
				t.Fatal(err)
			}
		}
		return vol
	}
	a, b := build(false), build(true)
	if skipped < len(poses)*testIntr.Width*testIntr.Height/2 {
		t.Fatalf("the region left out only %d pixels over %d views", skipped, len(poses))
	}
	if a.NumBlocks() != b.NumBlocks() || a.NumBlocks() == 0 {
		t.Fatalf("%d and %d blocks", a.NumBlocks(), b.NumBlocks())
	}
	for _, k := range a.Keys() {
		if *a.Block(k) != *b.Block(k) {
			t.Fatalf("block %v differs when weights are limited to the region", k)
		}
	}
}

// TestROIImageRectHoldsRegion projects random points within the margin
// of the region and checks that they land inside the rectangle by
// Integrate's nearest-pixel rule.
func TestROIImageRectHoldsRegion(t *testing.T) {
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131, Fy: 131, Cx: 79.5, Cy: 59.5}
	camToWorld, err := mesh.LookAt(r3.Vec{X: 0.1, Y: -0.3, Z: -0.2}, r3.Vec{Z: 0.5}, r3.Vec{Y: -1})
	if err != nil {
		t.Fatal(err)
	}
	n := mesh.Normalize(r3.Vec{X: 0.1, Y: -1, Z: 0.05})
	roi := ROI{Plane: Plane{Normal: n, Offset: -r3.Dot(n, r3.Vec{Z: 0.5})}, Centre: r3.Vec{Z: 0.5}, Radius: 0.04, Bottom: 0.002, Top: 0.05}
	const margin = 0.01
	rect := roi.ImageRect(intr, camToWorld, margin, 0.1)
	if rect.Dx() >= intr.Width && rect.Dy() >= intr.Height {
		t.Fatalf("rectangle %v is the whole image", rect)
	}
	u := mesh.Normalize(r3.Cross(n, r3.Vec{X: 1}))
	w := r3.Cross(n, u)
	worldToCam := camToWorld.Inv()
	rng := rand.New(rand.NewPCG(9, 9))
	for i := 0; i < 20000; i++ {
		// A point of the widened cylinder: radius, angle, height.
		rad := (roi.Radius + margin) * math.Sqrt(rng.Float64())
		a := 2 * math.Pi * rng.Float64()
		h := roi.Bottom - margin + (roi.Top-roi.Bottom+2*margin)*rng.Float64()
		p := r3.Add(roi.Centre, r3.Add(r3.Scale(h, n), r3.Add(r3.Scale(rad*math.Cos(a), u), r3.Scale(rad*math.Sin(a), w))))
		q := worldToCam.Apply(p)
		x := int(math.Floor(intr.Fx*q.X/q.Z + intr.Cx + 0.5))
		y := int(math.Floor(intr.Fy*q.Y/q.Z + intr.Cy + 0.5))
		if x < 0 || y < 0 || x >= intr.Width || y >= intr.Height {
			continue
		}
		if !(image.Point{X: x, Y: y}).In(rect) {
			t.Fatalf("point %v projects to (%d, %d), outside %v", p, x, y, rect)
		}
	}
}
