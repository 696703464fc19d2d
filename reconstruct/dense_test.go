package reconstruct

import (
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// denseTSDF is the textbook integrator the sparse Volume is measured
// against: a fixed cube of voxels, every one projected into every frame
// (Curless & Levoy 1996 on a dense grid). It lives in a test file because
// it exists only to justify the sparse design in the benchmarks.
type denseTSDF struct {
	origin r3.Vec
	vs, mu float64
	n      int
	d, w   []float32
	c      [][3]float32
}

func newDenseTSDF(origin r3.Vec, side, vs float64) *denseTSDF {
	n := int(math.Ceil(side / vs))
	return &denseTSDF{origin: origin, vs: vs, mu: 4 * vs, n: n,
		d: make([]float32, n*n*n), w: make([]float32, n*n*n), c: make([][3]float32, n*n*n)}
}

// integrate projects every voxel into the image and applies the same
// weighted running average as Volume.Integrate.
func (g *denseTSDF) integrate(im *DepthImage, camToWorld mesh.Pose) int {
	k := im.Intr
	worldToCam := camToWorld.Inv()
	ex := r3.Scale(g.vs, worldToCam.R.Col(0))
	ey := r3.Scale(g.vs, worldToCam.R.Col(1))
	ez := r3.Scale(g.vs, worldToCam.R.Col(2))
	base := worldToCam.Apply(g.origin)
	updates := 0
	idx := 0
	for z := 0; z < g.n; z++ {
		pz := r3.Add(base, r3.Scale(float64(z), ez))
		for y := 0; y < g.n; y++ {
			p := r3.Add(pz, r3.Scale(float64(y), ey))
			for x := 0; x < g.n; x, idx, p = x+1, idx+1, r3.Add(p, ex) {
				if p.Z <= 0.1 {
					continue
				}
				xn, yn := p.X/p.Z, p.Y/p.Z
				u := int(math.Floor(k.Fx*xn + k.Cx + 0.5))
				v := int(math.Floor(k.Fy*yn + k.Cy + 0.5))
				if u < 0 || v < 0 || u >= k.Width || v >= k.Height {
					continue
				}
				pix := v*k.Width + u
				d := float64(im.Depth[pix])
				if d <= 0 {
					continue
				}
				sdf := (d - p.Z) * math.Sqrt(1+xn*xn+yn*yn)
				if sdf < -g.mu {
					continue
				}
				wt := float32(1)
				if im.Weight != nil {
					if wt = im.Weight[pix]; wt <= 0 {
						continue
					}
				}
				t := min(float32(sdf/g.mu), 1)
				W := g.w[idx]
				nw := W + wt
				g.d[idx] = (W*g.d[idx] + wt*t) / nw
				if im.Color != nil {
					c := im.Color[3*pix : 3*pix+3]
					cc := &g.c[idx]
					for ch := 0; ch < 3; ch++ {
						cc[ch] = (W*cc[ch] + wt*float32(c[ch])) / nw
					}
				}
				g.w[idx] = min(nw, 128)
				updates++
			}
		}
	}
	return updates
}
