package reconstruct

import (
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
