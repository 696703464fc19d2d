package reconstruct

import (
	"context"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
	"github.com/scanfold/scanfold/mesh"
)

// sampler reads voxels of a Volume, caching the last block it used; one
// per goroutine.
type sampler struct {
	v       *Volume
	lastKey BlockKey
	last    *Block
	valid   bool
}

func floorDiv(i int) (q int32, r int) {
	q = int32(i >> 3) // BlockSide = 8: arithmetic shift floors for negatives
	return q, i & 7
}

// block returns the block holding voxel (i, j, k) and the voxel's index
// in it, or nil.
func (s *sampler) block(i, j, k int) (*Block, int) {
	bx, ri := floorDiv(i)
	by, rj := floorDiv(j)
	bz, rk := floorDiv(k)
	key := BlockKey{bx, by, bz}
	if !s.valid || key != s.lastKey {
		s.last = s.v.blocks[key]
		s.lastKey = key
		s.valid = true
	}
	return s.last, ri + BlockSide*(rj+BlockSide*rk)
}

// trilinear returns the field value at world point p by trilinear
// interpolation of the eight surrounding voxels, and false when any of
// them is unobserved.
func (s *sampler) trilinear(p r3.Vec) (float32, bool) {
	inv := 1 / s.v.opt.VoxelSize
	gx, gy, gz := p.X*inv, p.Y*inv, p.Z*inv
	fx, fy, fz := math.Floor(gx), math.Floor(gy), math.Floor(gz)
	i, j, k := int(fx), int(fy), int(fz)
	tx, ty, tz := float32(gx-fx), float32(gy-fy), float32(gz-fz)
	var c [8]float32
	if i&7 != 7 && j&7 != 7 && k&7 != 7 {
		// All eight corners lie in one block.
		b, idx := s.block(i, j, k)
		if b == nil {
			return 0, false
		}
		for n, off := range [8]int{0, 1, BlockSide, BlockSide + 1, BlockSide * BlockSide, BlockSide*BlockSide + 1, BlockSide*BlockSide + BlockSide, BlockSide*BlockSide + BlockSide + 1} {
			if b.W[idx+off] == 0 {
				return 0, false
			}
			c[n] = b.D[idx+off]
		}
	} else {
		for n := 0; n < 8; n++ {
			b, idx := s.block(i+n&1, j+(n>>1)&1, k+(n>>2)&1)
			if b == nil || b.W[idx] == 0 {
				return 0, false
			}
			c[n] = b.D[idx]
		}
	}
	x0 := c[0] + tx*(c[1]-c[0])
	x1 := c[2] + tx*(c[3]-c[2])
	x2 := c[4] + tx*(c[5]-c[4])
	x3 := c[6] + tx*(c[7]-c[6])
	y0 := x0 + ty*(x1-x0)
	y1 := x2 + ty*(x3-x2)
	return y0 + tz*(y1-y0), true
}

// gradient returns the outward unit normal at p from central differences
// of the trilinear field, or false where a sample is unobserved.
func (s *sampler) gradient(p r3.Vec) (r3.Vec, bool) {
	h := s.v.opt.VoxelSize
	var g [3]float64
	for a, e := range [3]r3.Vec{{X: h}, {Y: h}, {Z: h}} {
		f1, ok1 := s.trilinear(r3.Add(p, e))
		f0, ok0 := s.trilinear(r3.Sub(p, e))
		if !ok0 || !ok1 {
			return r3.Vec{}, false
		}
		g[a] = float64(f1 - f0)
	}
	n := mesh.Normalize(r3.Vec{X: g[0], Y: g[1], Z: g[2]})
	return n, n != r3.Vec{}
}

// Sample returns the truncated signed distance (metres, in [−μ, μ]) at
// world point p by trilinear interpolation, and false where the field is
// unobserved.
func (v *Volume) Sample(p r3.Vec) (float64, bool) {
	s := sampler{v: v}
	d, ok := s.trilinear(p)
	return float64(d) * v.mu, ok
}

// ModelMap is a raycast of the volume from one camera: per pixel the
// first surface point along the pixel's ray and its outward normal, both
// in the world frame. Normals of pixels that hit nothing are zero.
type ModelMap struct {
	Intr    mesh.Intrinsics
	Points  []r3.Vec
	Normals []r3.Vec
}

// Valid reports whether pixel i holds a surface point.
func (m *ModelMap) Valid(i int) bool { return m.Normals[i] != r3.Vec{} }

// Raycast renders the zero crossing of the field seen from camToWorld
// (KinectFusion's surface prediction: Newcombe et al. 2011, ISMAR,
// DOI 10.1109/ISMAR.2011.6092378): each pixel's ray skips unallocated
// blocks, steps through allocated ones by a fraction of the truncated
// distance, and interpolates the crossing from positive (free space) to
// negative linearly between the last two samples. Only a crossing from
// front to back counts, so back faces are never returned. dst is reused
// when its size matches.
func (v *Volume) Raycast(ctx context.Context, intr mesh.Intrinsics, camToWorld mesh.Pose, dst *ModelMap) *ModelMap {
	n := intr.Width * intr.Height
	if dst == nil || len(dst.Points) != n {
		dst = &ModelMap{Points: make([]r3.Vec, n), Normals: make([]r3.Vec, n)}
	}
	dst.Intr = intr
	lo, hi, ok := v.bounds()
	par.For(intr.Height, v.opt.Workers, func(y int) {
		if ctx.Err() != nil {
			return
		}
		s := sampler{v: v}
		for x := 0; x < intr.Width; x++ {
			i := y*intr.Width + x
			dst.Points[i], dst.Normals[i] = r3.Vec{}, r3.Vec{}
			if !ok {
				continue
			}
			ray := camToWorld.Rotate(mesh.Normalize(intr.Ray(float64(x), float64(y))))
			if p, nrm, hit := s.castRay(camToWorld.T, ray, lo, hi); hit {
				dst.Points[i], dst.Normals[i] = p, nrm
			}
		}
	})
	return dst
}

// bounds returns the world-space box of all allocated blocks.
func (v *Volume) bounds() (lo, hi r3.Vec, ok bool) {
	if len(v.blocks) == 0 {
		return lo, hi, false
	}
	first := true
	var a, b BlockKey
	for k := range v.blocks {
		if first {
			a, b, first = k, k, false
			continue
		}
		a = BlockKey{min(a.X, k.X), min(a.Y, k.Y), min(a.Z, k.Z)}
		b = BlockKey{max(b.X, k.X), max(b.Y, k.Y), max(b.Z, k.Z)}
	}
	s := v.opt.VoxelSize * BlockSide
	lo = r3.Vec{X: float64(a.X) * s, Y: float64(a.Y) * s, Z: float64(a.Z) * s}
	hi = r3.Vec{X: float64(b.X+1) * s, Y: float64(b.Y+1) * s, Z: float64(b.Z+1) * s}
	return lo, hi, true
}

// castRay marches from origin o along unit direction d through the box
// [lo, hi] and returns the first front-to-back zero crossing.
func (s *sampler) castRay(o, d, lo, hi r3.Vec) (r3.Vec, r3.Vec, bool) {
	v := s.v
	t0, t1, hit := slab(o, d, lo, hi)
	if !hit {
		return r3.Vec{}, r3.Vec{}, false
	}
	t0 = math.Max(t0, v.opt.MinDepth)
	t1 = math.Min(t1, v.opt.MaxDepth*2)
	vs := v.opt.VoxelSize
	blockLen := vs * BlockSide
	mu := v.mu
	prevT, prevD := 0.0, float32(0)
	havePrev := false
	for t := t0; t <= t1; {
		p := r3.Add(o, r3.Scale(t, d))
		key := v.KeyOf(p)
		if !s.valid || key != s.lastKey {
			s.last, s.lastKey, s.valid = v.blocks[key], key, true
		}
		if s.last == nil {
			// Skip to where the ray leaves this empty block.
			bl := r3.Vec{X: float64(key.X) * blockLen, Y: float64(key.Y) * blockLen, Z: float64(key.Z) * blockLen}
			_, exit, _ := slab(o, d, bl, r3.Add(bl, r3.Vec{X: blockLen, Y: blockLen, Z: blockLen}))
			t = math.Max(exit, t) + vs*1e-3
			havePrev = false
			continue
		}
		D, ok := s.trilinear(p)
		if !ok {
			t += vs
			havePrev = false
			continue
		}
		if D < 0 {
			if !havePrev {
				return r3.Vec{}, r3.Vec{}, false // behind a surface seen from its back
			}
			tc := prevT + (t-prevT)*float64(prevD/(prevD-D))
			pc := r3.Add(o, r3.Scale(tc, d))
			n, ok := s.gradient(pc)
			if !ok || r3.Dot(n, d) >= 0 {
				return r3.Vec{}, r3.Vec{}, false
			}
			return pc, n, true
		}
		prevT, prevD, havePrev = t, D, true
		// The field is a distance in units of μ: stepping 0.8 of it cannot
		// jump over the crossing, and never less than half a voxel.
		t += math.Max(0.8*float64(D)*mu, vs/2)
	}
	return r3.Vec{}, r3.Vec{}, false
}

// slab intersects the ray o + t·d with the box [lo, hi] and returns the
// entry and exit parameters.
func slab(o, d, lo, hi r3.Vec) (t0, t1 float64, hit bool) {
	t0, t1 = math.Inf(-1), math.Inf(1)
	for _, a := range [3][4]float64{{o.X, d.X, lo.X, hi.X}, {o.Y, d.Y, lo.Y, hi.Y}, {o.Z, d.Z, lo.Z, hi.Z}} {
		if a[1] == 0 {
			if a[0] < a[2] || a[0] > a[3] {
				return 0, 0, false
			}
			continue
		}
		inv := 1 / a[1]
		ta, tb := (a[2]-a[0])*inv, (a[3]-a[0])*inv
		if ta > tb {
			ta, tb = tb, ta
		}
		t0, t1 = math.Max(t0, ta), math.Min(t1, tb)
	}
	return t0, t1, t0 <= t1 && t1 >= 0
}
