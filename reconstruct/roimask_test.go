package reconstruct

import (
	"math"
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
