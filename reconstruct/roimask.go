package reconstruct

import (
	"image"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
	"github.com/scanfold/scanfold/mesh"
)

// Mask marks the pixels of a depth image taken from camToWorld whose
// back-projected point lies in the region (Contains); pixels without
// depth are false. dst is reused when it has the right length. The test
// runs in the camera frame, so a pixel costs a few multiplications: the
// point is z·ray with ray = ((x − cx)/fx, (y − cy)/fy, 1), its height
// above the plane z·(n_c·ray) + h₀, and its squared distance from the
// axis |z·ray − c_c|² minus the square of its component along n_c
// (n_c, c_c: the plane normal and the centre in the camera frame).
// Rows are shared among all cores; each pixel's answer depends on that
// pixel alone.
func (r ROI) Mask(depth []float32, intr mesh.Intrinsics, camToWorld mesh.Pose, dst []bool) []bool {
	w, h := intr.Width, intr.Height
	if len(dst) != w*h {
		dst = make([]bool, w*h)
	}
	worldToCam := camToWorld.Inv()
	nc := worldToCam.Rotate(r.Plane.Normal)
	cc := worldToCam.Apply(r.Centre)
	h0 := r.Plane.Distance(camToWorld.T) // height of the camera centre
	r2 := r.Radius * r.Radius
	const rows = 16
	par.For((h+rows-1)/rows, 0, func(band int) {
		for y := band * rows; y < min(h, (band+1)*rows); y++ {
			ry := (float64(y) - intr.Cy) / intr.Fy
			out := dst[y*w : (y+1)*w]
			in := depth[y*w : (y+1)*w]
			for x := range out {
				z := float64(in[x])
				out[x] = false
				if !(z > 0) {
					continue
				}
				p := r3.Vec{X: (float64(x) - intr.Cx) / intr.Fx * z, Y: ry * z, Z: z}
				ht := r3.Dot(nc, p) + h0
				if ht < r.Bottom || ht > r.Top {
					continue
				}
				d := r3.Sub(p, cc)
				a := r3.Dot(d, nc)
				out[x] = r3.Dot(d, d)-a*a <= r2
			}
		}
	})
	return dst
}

// ImageRect returns the pixels that a point within margin of the region
// can project to, seen from camToWorld, by the nearest-pixel rule
// floor(f·x/z + c + 0.5) that Integrate uses: the bounding rectangle of
// the projected corners of a square prism around the region's cylinder,
// widened by margin on every side (the prism is convex and holds the
// cylinder, so its projection holds the cylinder's). When a corner lies
// nearer than minZ in depth, where a projection no longer bounds
// anything, it returns the whole image.
func (r ROI) ImageRect(intr mesh.Intrinsics, camToWorld mesh.Pose, margin, minZ float64) image.Rectangle {
	whole := image.Rect(0, 0, intr.Width, intr.Height)
	n := r.Plane.Normal
	// Two unit vectors across the axis.
	u := r3.Cross(n, r3.Vec{X: 1})
	if r3.Norm2(u) < 0.1 {
		u = r3.Cross(n, r3.Vec{Y: 1})
	}
	u = mesh.Normalize(u)
	w := r3.Cross(n, u)
	rad := r.Radius + margin
	foot := r3.Sub(r.Centre, r3.Scale(r.Plane.Distance(r.Centre), n))
	worldToCam := camToWorld.Inv()
	u0, u1, v0, v1 := math.Inf(1), math.Inf(-1), math.Inf(1), math.Inf(-1)
	for c := 0; c < 8; c++ {
		h := r.Bottom - margin
		if c&4 != 0 {
			h = r.Top + margin
		}
		su, sw := -rad, -rad
		if c&1 != 0 {
			su = rad
		}
		if c&2 != 0 {
			sw = rad
		}
		p := worldToCam.Apply(r3.Add(foot, r3.Add(r3.Scale(h, n), r3.Add(r3.Scale(su, u), r3.Scale(sw, w)))))
		if p.Z < minZ {
			return whole
		}
		x, y := intr.Fx*p.X/p.Z+intr.Cx+0.5, intr.Fy*p.Y/p.Z+intr.Cy+0.5
		u0, u1 = math.Min(u0, x), math.Max(u1, x)
		v0, v1 = math.Min(v0, y), math.Max(v1, y)
	}
	// Clamp in floating point first: a corner just in front of the
	// camera projects far beyond any int.
	clampTo := func(v float64, hi int) int { return int(math.Max(-1, math.Min(float64(hi), math.Floor(v)))) }
	rect := image.Rect(clampTo(u0, intr.Width), clampTo(v0, intr.Height), clampTo(u1, intr.Width)+1, clampTo(v1, intr.Height)+1)
	return rect.Intersect(whole)
}
