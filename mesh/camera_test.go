package mesh

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// The pinhole model u = fx·X/Z + cx, v = fy·Y/Z + cy and its inverse
// X = (u − cx)·Z/fx, Y = (v − cy)·Z/fy (Hartley & Zisserman, "Multiple
// View Geometry", 2nd ed., 2004, ch. 6, the basic pinhole camera) are
// checked here as round trips and on hand-worked pixels.

func TestProjectBackProjectRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(61, 62))
	k := Intrinsics{Width: 1280, Height: 720, Fx: 912.3, Fy: 910.7, Cx: 641.2, Cy: 356.9}
	if err := k.Validate(); err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 1000; i++ {
		p := r3.Vec{X: rng.Float64() - 0.5, Y: rng.Float64() - 0.5, Z: 0.2 + 2*rng.Float64()}
		u, v := k.Project(p)
		back := k.BackProject(u, v, p.Z)
		// Each coordinate passes through one multiply–divide–add and
		// back: a few ulps of values below 1.5 m, so 1e-14 m.
		if !psVecClose(back, p, 1e-14) {
			t.Fatalf("BackProject(Project(%v)) = %v", p, back)
		}
		if ray := r3.Scale(p.Z, k.Ray(u, v)); !psVecClose(ray, p, 1e-14) {
			t.Fatalf("Z·Ray(Project(%v)) = %v", p, ray)
		}
	}
}

// TestPixelCentreConvention works the documented convention by hand:
// the centre of pixel (i, j) is (u, v) = (i, j), so a 640×480 image's
// optical axis at its centre has cx = 319.5, cy = 239.5, and the point
// on the optical axis lands there.
func TestPixelCentreConvention(t *testing.T) {
	k := DefaultIntrinsics()
	if k.Cx != float64(k.Width-1)/2 || k.Cy != float64(k.Height-1)/2 {
		t.Errorf("default principal point (%v, %v), want the image centre (%v, %v)", k.Cx, k.Cy, float64(k.Width-1)/2, float64(k.Height-1)/2)
	}
	if u, v := k.Project(r3.Vec{Z: 1.7}); u != k.Cx || v != k.Cy {
		t.Errorf("optical axis projects to (%v, %v), want (%v, %v)", u, v, k.Cx, k.Cy)
	}
	// Worked example: X = 0.1 m, Y = −0.05 m, Z = 1 m with fx = fy = 525
	// lands at u = 52.5 + 319.5 = 372, v = −26.25 + 239.5 = 213.25.
	if u, v := k.Project(r3.Vec{X: 0.1, Y: -0.05, Z: 1}); math.Abs(u-372) > 1e-12 || math.Abs(v-213.25) > 1e-12 {
		t.Errorf("Project = (%v, %v), want (372, 213.25)", u, v)
	}
}

// TestScaledKeepsPixelCentres: downsampling by s averages s×s blocks,
// so full-resolution pixel centres s·i … s·i + s − 1 average to
// s·i + (s−1)/2, which must be the centre of pixel i at the lower
// resolution: u_s = (u + 0.5)/s − 0.5. The image edges (u = −0.5 and
// u = W − 0.5) must map to the edges.
func TestScaledKeepsPixelCentres(t *testing.T) {
	rng := rand.New(rand.NewPCG(63, 64))
	k := DefaultIntrinsics()
	for _, s := range []int{1, 2, 4} {
		ks := k.Scaled(s)
		if ks.Width != k.Width/s || ks.Height != k.Height/s {
			t.Errorf("Scaled(%d) size %d×%d", s, ks.Width, ks.Height)
		}
		if err := ks.Validate(); err != nil {
			t.Errorf("Scaled(%d): %v", s, err)
		}
		fs := float64(s)
		for i := 0; i < 200; i++ {
			p := r3.Vec{X: rng.Float64() - 0.5, Y: rng.Float64() - 0.5, Z: 0.3 + rng.Float64()}
			u, v := k.Project(p)
			us, vs := ks.Project(p)
			// Values up to ~700 px: a few ulps are ~1e-13.
			if math.Abs(us-((u+0.5)/fs-0.5)) > 1e-12 || math.Abs(vs-((v+0.5)/fs-0.5)) > 1e-12 {
				t.Fatalf("Scaled(%d).Project = (%v, %v), want (%v, %v)", s, us, vs, (u+0.5)/fs-0.5, (v+0.5)/fs-0.5)
			}
		}
	}
	// For s = 2 the centre of the 320×240 image is (159.5, 119.5), and the
	// block of full-resolution pixels 0 and 1 (centres 0 and 1) has its
	// centre 0.5 at pixel 0 of the half image.
	h := k.Scaled(2)
	if h.Cx != 159.5 || h.Cy != 119.5 || h.Fx != 262.5 {
		t.Errorf("Scaled(2) = %+v, want cx 159.5, cy 119.5, fx 262.5", h)
	}
	p := k.BackProject(0.5, 0.5, 1)
	if u, v := h.Project(p); math.Abs(u) > 1e-12 || math.Abs(v) > 1e-12 {
		t.Errorf("centre of the top-left 2×2 block lands at (%v, %v) in the half image, want (0, 0)", u, v)
	}
	left := k.BackProject(-0.5, -0.5, 1)
	if u, v := h.Project(left); math.Abs(u+0.5) > 1e-12 || math.Abs(v+0.5) > 1e-12 {
		t.Errorf("image corner lands at (%v, %v), want (-0.5, -0.5)", u, v)
	}
}

func TestIntrinsicsValidate(t *testing.T) {
	good := DefaultIntrinsics()
	if err := good.Validate(); err != nil {
		t.Fatalf("default: %v", err)
	}
	with := func(edit func(k *Intrinsics)) Intrinsics {
		k := good
		edit(&k)
		return k
	}
	for _, c := range []struct {
		name string
		k    Intrinsics
		want string
	}{
		{"zero width", with(func(k *Intrinsics) { k.Width = 0 }), "width 0"},
		{"negative height", with(func(k *Intrinsics) { k.Height = -4 }), "height -4"},
		{"huge width", with(func(k *Intrinsics) { k.Width = MaxImageSide + 1 }), "width"},
		{"zero fx", with(func(k *Intrinsics) { k.Fx = 0 }), "fx = 0"},
		{"negative fy", with(func(k *Intrinsics) { k.Fy = -525 }), "fy = -525"},
		{"NaN fx", with(func(k *Intrinsics) { k.Fx = math.NaN() }), "fx = NaN"},
		{"Inf fy", with(func(k *Intrinsics) { k.Fy = math.Inf(1) }), "fy = +Inf"},
		{"cx left of image", with(func(k *Intrinsics) { k.Cx = -0.6 }), "cx = -0.6"},
		{"cx right of image", with(func(k *Intrinsics) { k.Cx = 640 }), "cx = 640"},
		{"NaN cy", with(func(k *Intrinsics) { k.Cy = math.NaN() }), "cy = NaN"},
		{"cy below image", with(func(k *Intrinsics) { k.Cy = 480 }), "cy = 480"},
	} {
		err := c.k.Validate()
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: Validate() = %v, want an error containing %q", c.name, err, c.want)
		}
	}
	// The image's edges are the limits: a principal point on the edge of
	// the outermost pixel is still accepted.
	edge := with(func(k *Intrinsics) { k.Cx, k.Cy = -0.5, 479.5 })
	if err := edge.Validate(); err != nil {
		t.Errorf("principal point on the image edge: %v", err)
	}
}

// TestIntrinsicsPixel: pixel centres sit at integer coordinates (the
// render package's convention), so a point projecting to u = 319.5
// rounds up to pixel 320 and one at u = −0.6 is outside. Worked by
// hand from u = fx·X/Z + cx.
func TestIntrinsicsPixel(t *testing.T) {
	k := Intrinsics{Width: 640, Height: 480, Fx: 500, Fy: 500, Cx: 319.5, Cy: 239.5}
	for _, c := range []struct {
		p      r3.Vec
		x, y   int
		inside bool
	}{
		{r3.Vec{Z: 1}, 320, 240, true},                          // (319.5, 239.5)
		{r3.Vec{X: 0.001, Y: -0.002, Z: 0.5}, 321, 238, true},   // (320.5, 237.5): halves round up
		{r3.Vec{X: -0.3199, Z: 0.5}, 0, 240, true},              // u = −0.4: still pixel 0
		{r3.Vec{X: -0.3202, Y: 0, Z: 0.5}, -1, 240, false},      // u = −0.7
		{r3.Vec{X: 0.3202, Y: 0.2402, Z: 0.5}, 640, 480, false}, // (639.7, 479.7)
	} {
		x, y, in := k.Pixel(c.p)
		if x != c.x || y != c.y || in != c.inside {
			t.Errorf("Pixel(%v) = (%d, %d, %v), want (%d, %d, %v)", c.p, x, y, in, c.x, c.y, c.inside)
		}
	}
}
