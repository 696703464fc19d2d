package mesh

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/spatial/r3"
)

// Intrinsics is a pinhole camera: u = Fx·X/Z + Cx, v = Fy·Y/Z + Cy, with
// Z along the optical axis, x right and y down.
//
// Pixel-centre convention: the centre of pixel (i, j) (column i, row j)
// is at (u, v) = (i, j), so pixel (0, 0) covers [−0.5, 0.5]² and an
// image of width W has its centre at u = (W−1)/2. With this convention
// the commonly quoted 640×480 defaults are Cx = 319.5, Cy = 239.5.
type Intrinsics struct {
	Width  int     `json:"width"`
	Height int     `json:"height"`
	Fx     float64 `json:"fx"`
	Fy     float64 `json:"fy"`
	Cx     float64 `json:"cx"`
	Cy     float64 `json:"cy"`
}

// MaxImageSide bounds an image's width and height, so that a header or
// manifest can never make us allocate more than 16384² pixels.
const MaxImageSide = 16384

// DefaultIntrinsics returns a 640×480 structured-light camera with
// fx = fy = 525 and the principal point at the image centre (values
// commonly quoted for such sensors; recalled from memory, not measured).
func DefaultIntrinsics() Intrinsics {
	return Intrinsics{Width: 640, Height: 480, Fx: 525, Fy: 525, Cx: 319.5, Cy: 239.5}
}

// Validate reports intrinsics that cannot describe a camera: sizes out
// of (0, MaxImageSide], non-finite or non-positive focal lengths, or a
// principal point far outside the image.
func (k Intrinsics) Validate() error {
	if k.Width <= 0 || k.Width > MaxImageSide {
		return fmt.Errorf("intrinsics: width %d out of range 1..%d", k.Width, MaxImageSide)
	}
	if k.Height <= 0 || k.Height > MaxImageSide {
		return fmt.Errorf("intrinsics: height %d out of range 1..%d", k.Height, MaxImageSide)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"fx", k.Fx}, {"fy", k.Fy}} {
		if !(f.v > 0) || math.IsInf(f.v, 0) {
			return fmt.Errorf("intrinsics: %s = %v, want a positive finite focal length in pixels", f.name, f.v)
		}
	}
	if math.IsNaN(k.Cx) || k.Cx < -0.5 || k.Cx > float64(k.Width)-0.5 {
		return fmt.Errorf("intrinsics: cx = %v outside the image [-0.5, %v]", k.Cx, float64(k.Width)-0.5)
	}
	if math.IsNaN(k.Cy) || k.Cy < -0.5 || k.Cy > float64(k.Height)-0.5 {
		return fmt.Errorf("intrinsics: cy = %v outside the image [-0.5, %v]", k.Cy, float64(k.Height)-0.5)
	}
	return nil
}

// Project maps a camera-frame point to pixel coordinates. Points with
// Z ≤ 0 are behind the camera; callers check Z first.
func (k Intrinsics) Project(p r3.Vec) (u, v float64) {
	return k.Fx*p.X/p.Z + k.Cx, k.Fy*p.Y/p.Z + k.Cy
}

// Pixel returns the pixel whose centre is nearest to where the
// camera-frame point p projects (pixel centres at integer coordinates),
// and whether that pixel lies inside the image. p.Z must be positive.
func (k Intrinsics) Pixel(p r3.Vec) (x, y int, ok bool) {
	u, v := k.Project(p)
	x, y = int(math.Floor(u+0.5)), int(math.Floor(v+0.5))
	return x, y, x >= 0 && y >= 0 && x < k.Width && y < k.Height
}

// BackProject returns the camera-frame point at pixel (u, v) with depth
// z along the optical axis: X = (u − Cx)·z/Fx, Y = (v − Cy)·z/Fy.
func (k Intrinsics) BackProject(u, v, z float64) r3.Vec {
	return r3.Vec{X: (u - k.Cx) * z / k.Fx, Y: (v - k.Cy) * z / k.Fy, Z: z}
}

// Ray returns the direction through pixel (u, v) with unit Z component,
// so that a point at depth z is z·Ray(u, v).
func (k Intrinsics) Ray(u, v float64) r3.Vec {
	return r3.Vec{X: (u - k.Cx) / k.Fx, Y: (v - k.Cy) / k.Fy, Z: 1}
}

// Scaled returns the intrinsics of the image downsampled by factor s
// (s = 2 halves width and height), keeping the pixel-centre convention:
// a centre at u maps to (u + 0.5)/s − 0.5.
func (k Intrinsics) Scaled(s int) Intrinsics {
	f := float64(s)
	return Intrinsics{
		Width: k.Width / s, Height: k.Height / s,
		Fx: k.Fx / f, Fy: k.Fy / f,
		Cx: (k.Cx+0.5)/f - 0.5, Cy: (k.Cy+0.5)/f - 0.5,
	}
}
