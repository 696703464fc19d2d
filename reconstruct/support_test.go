package reconstruct

import (
	"errors"
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// planeSphereDepth renders exact depth of a ground plane (world y = 0,
// y down so "up" is −y) with an optional sphere of radius r resting on it
// at the world origin, seen from camToWorld.
func planeSphereDepth(intr mesh.Intrinsics, camToWorld mesh.Pose, r float64) []float32 {
	depth := make([]float32, intr.Width*intr.Height)
	o := camToWorld.T
	c := r3.Vec{Y: -r}
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			rc := intr.Ray(float64(x), float64(y)) // unit z: t is depth
			d := camToWorld.Rotate(rc)
			best := math.Inf(1)
			if d.Y > 0 { // plane y = 0 below the camera
				best = -o.Y / d.Y
			}
			if r > 0 {
				oc := r3.Sub(o, c)
				a, b, q := r3.Dot(d, d), 2*r3.Dot(d, oc), r3.Dot(oc, oc)-r*r
				if disc := b*b - 4*a*q; disc >= 0 {
					if t := (-b - math.Sqrt(disc)) / (2 * a); t > 0 && t < best {
						best = t
					}
				}
			}
			if !math.IsInf(best, 1) && best < 3 {
				depth[y*intr.Width+x] = float32(best)
			}
		}
	}
	return depth
}

func TestFindSupportSphereOnPlane(t *testing.T) {
	intr := mesh.DefaultIntrinsics()
	// Camera 0.5 m from the origin, 35° above the plane.
	el := 35 * math.Pi / 180
	eye := r3.Vec{Y: -0.5 * math.Sin(el), Z: -0.5 * math.Cos(el)}
	camToWorld, err := mesh.LookAt(eye, r3.Vec{}, r3.Vec{Y: -1})
	if err != nil {
		t.Fatal(err)
	}
	const r = 0.03
	sup, err := FindSupport(planeSphereDepth(intr, camToWorld, r), intr, DefaultSupportOptions())
	if err != nil {
		t.Fatal(err)
	}
	worldToCam := camToWorld.Inv()
	want := Plane{Normal: r3.Vec{Y: -1}, Offset: 0}.Transform(worldToCam)
	a, o := samePlane(sup.Plane, want)
	// Exact depth: the plane fit is exact up to rounding.
	if a > 1e-6 || o > 1e-6 {
		t.Errorf("support plane off by %.3g rad, %.3g m", a, o)
	}
	if r3.Dot(sup.Plane.Normal, want.Normal) < 0 {
		t.Error("support normal points down, away from the camera")
	}
	foot := worldToCam.Apply(r3.Vec{})
	// The visible points of a sphere are the near hemisphere: their
	// centroid's foot lies toward the camera by up to r/2 (the centroid of
	// a hemispherical shell sits at r/2), and the stride-4 grid drops the
	// points below MinHeight; so the foot is within 0.6 r of the true one.
	if d := r3.Norm(r3.Sub(sup.Centre, foot)); d > 0.6*r {
		t.Errorf("part foot %.1f mm from the sphere's", d*1000)
	}
	// The 98th-percentile height of a sphere's visible surface is close
	// to its top 2r; the visible cap seen from 35° reaches within a few
	// mm of it.
	if sup.Height < 1.7*r || sup.Height > 2*r+0.001 {
		t.Errorf("height %.1f mm, want near %.1f mm", sup.Height*1000, 2*r*1000)
	}
}

func TestFindSupportNoPart(t *testing.T) {
	intr := mesh.DefaultIntrinsics()
	el := 35 * math.Pi / 180
	camToWorld, _ := mesh.LookAt(r3.Vec{Y: -0.5 * math.Sin(el), Z: -0.5 * math.Cos(el)}, r3.Vec{}, r3.Vec{Y: -1})
	_, err := FindSupport(planeSphereDepth(intr, camToWorld, 0), intr, DefaultSupportOptions())
	if !errors.Is(err, ErrNoPart) {
		t.Fatalf("bare plane: err = %v, want ErrNoPart", err)
	}
	if _, err := FindSupport(make([]float32, intr.Width*intr.Height), intr, DefaultSupportOptions()); !errors.Is(err, ErrNoPart) {
		t.Fatalf("empty depth: err = %v, want ErrNoPart", err)
	}
}

// TestFindSupportSmallPartOnPlate: the demo M16 hex nut on
// the turntable plate, which stands on a table, seen from 0.55 m: the
// support is the plate, not the table, and the part is the nut, not
// the plate (the plate is 280 mm across). With a stride of 4 pixels the
// nut of this sweep gave fewer grid points than MinPoints, and the
// plate was taken for the part.
func TestFindSupportSmallPartOnPlate(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a frame")
	}
	opt := DefaultSynthOptions()
	opt.Frames, opt.Seed, opt.PartName = 2, 21, "nut"
	sw, err := LoadSweep(synthSweep(t, "nut", opt))
	if err != nil {
		t.Fatal(err)
	}
	fr, err := sw.Frame(0)
	if err != nil {
		t.Fatal(err)
	}
	s, err := FindSupport(fr.Depth, fr.Intr, DefaultSupportOptions())
	if err != nil {
		t.Fatal(err)
	}
	// The nut's drawing: 24 mm across flats, 27.7 mm across corners
	// (radius 13.9 mm), 13 mm high; 20 mm bounds both with room for
	// noise at the rim.
	if s.Radius > 0.02 || s.Height > 0.02 {
		t.Errorf("part radius %.1f mm, height %.1f mm: not the nut", s.Radius*1000, s.Height*1000)
	}
	// Every fourth pixel leaves the nut under MinPoints: the plate, with
	// nothing found on it, is refused rather than taken for the part.
	four := DefaultSupportOptions()
	four.Stride = 4
	if s4, err := FindSupport(fr.Depth, fr.Intr, four); !errors.Is(err, ErrNoPart) || !strings.Contains(err.Error(), "flat plate") {
		t.Errorf("stride 4: part radius %.1f mm, height %.1f mm, err %v; want the plate refused", s4.Radius*1000, s4.Height*1000, err)
	}
}
