package reconstruct

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

type testSphere struct {
	c r3.Vec
	r float64
}

// sphereCloud ray-casts spheres (camera frame) through every pixel and
// returns the visible surface points with their exact normals.
func sphereCloud(intr mesh.Intrinsics, spheres []testSphere) *mesh.Cloud {
	c := &mesh.Cloud{}
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			d := intr.Ray(float64(x), float64(y))
			best, bi := math.Inf(1), -1
			for i, s := range spheres {
				a, b, q := r3.Dot(d, d), -2*r3.Dot(d, s.c), r3.Dot(s.c, s.c)-s.r*s.r
				if disc := b*b - 4*a*q; disc >= 0 {
					if t := (-b - math.Sqrt(disc)) / (2 * a); t > 0 && t < best {
						best, bi = t, i
					}
				}
			}
			if bi < 0 {
				continue
			}
			p := r3.Scale(best, d)
			c.Points = append(c.Points, p)
			c.Normals = append(c.Normals, mesh.Normalize(r3.Sub(p, spheres[bi].c)))
		}
	}
	return c
}

func TestEstimateAxisPoint(t *testing.T) {
	intr := mesh.Intrinsics{Width: 320, Height: 240, Fx: 262.5, Fy: 262.5, Cx: 159.5, Cy: 119.5}
	el := 30 * math.Pi / 180
	camToTable, err := mesh.LookAt(r3.Vec{Y: -0.5 * math.Sin(el), Z: -0.5 * math.Cos(el)}, r3.Vec{}, r3.Vec{Y: -1})
	if err != nil {
		t.Fatal(err)
	}
	tableToCam := camToTable.Inv()
	axisT := r3.Vec{X: 0.012, Z: -0.007} // true axis point on the plate (table frame)
	upT := r3.Vec{Y: -1}
	objs := []testSphere{{r3.Vec{X: 0.03, Y: -0.02}, 0.02}, {r3.Vec{X: -0.025, Y: -0.015, Z: 0.02}, 0.015}, {r3.Vec{X: 0.0, Y: -0.01, Z: -0.03}, 0.01}}
	view := func(angle float64) *mesh.Cloud {
		rot := mesh.PoseFromAxisAngle(upT, angle, r3.Vec{})
		var ss []testSphere
		for _, o := range objs {
			moved := r3.Add(rot.Apply(r3.Sub(o.c, axisT)), axisT)
			ss = append(ss, testSphere{tableToCam.Apply(moved), o.r})
		}
		return sphereCloud(intr, ss)
	}
	var angles []float64
	for k := 0; k < 36; k++ {
		angles = append(angles, float64(k)*10*math.Pi/180)
	}
	picked := PickAxisViews(angles, 6)
	if len(picked) != 6 {
		t.Fatalf("picked %v", picked)
	}
	var pairs []AxisPair
	ref := view(0)
	for _, k := range picked {
		pairs = append(pairs, AxisPair{From: ref, To: view(angles[k]), Angle: angles[k]})
	}
	up := tableToCam.Rotate(upT)
	truth := tableToCam.Apply(axisT)
	guess := tableToCam.Apply(r3.Vec{X: -0.01, Z: 0.01}) // 2.8 cm off
	fit, err := EstimateAxisPoint(up, guess, pairs, DefaultAxisOptions())
	if err != nil {
		t.Fatal(err)
	}
	// Compare across the axis only: the estimate may slide along it.
	off := r3.Sub(fit.Point, truth)
	off = r3.Sub(off, r3.Scale(r3.Dot(off, up), up))
	// Exact, noise-free surfaces sampled at ~2 mm pixel spacing: pairing
	// with nearest samples (not the surface) leaves a bias well under the
	// sample spacing; 0.2 mm is a tenth of it.
	if d := r3.Norm(off); d > 0.0002 {
		t.Errorf("axis point off by %.3f mm across the axis (rms %.3f mm, %d pairs)", d*1000, fit.RMS*1000, fit.Pairs)
	}
	// The frame poses built from it map each view's points onto frame 0's
	// world: check a sphere centre through TurntablePose.
	a := angles[picked[2]]
	camToWorld := TurntablePose(truth, up, a)
	rot := mesh.PoseFromAxisAngle(upT, a, r3.Vec{})
	moved := tableToCam.Apply(r3.Add(rot.Apply(r3.Sub(objs[0].c, axisT)), axisT))
	if d := r3.Norm(r3.Sub(camToWorld.Apply(moved), tableToCam.Apply(objs[0].c))); d > 1e-12 {
		t.Errorf("TurntablePose maps a moved centre %.3g m from its frame-0 place", d)
	}
}

func TestPickAxisViews(t *testing.T) {
	var angles []float64
	for k := 0; k < 72; k++ {
		angles = append(angles, float64(k)*5*math.Pi/180)
	}
	got := PickAxisViews(angles, 6)
	if len(got) != 6 {
		t.Fatalf("got %v", got)
	}
	for _, k := range got {
		d := math.Abs(math.Remainder(angles[k], 2*math.Pi)) * 180 / math.Pi
		if d < 20-1e-9 || d > 120+1e-9 {
			t.Errorf("frame %d turns %.0f°", k, d)
		}
	}
}
