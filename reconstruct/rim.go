package reconstruct

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Circle is a circle in 3-D: its centre, its plane's unit normal and
// its radius.
type Circle struct {
	Centre r3.Vec
	Normal r3.Vec
	Radius float64
}

// RimOptions tunes FitPlateRim.
type RimOptions struct {
	// PlaneBand is how far from the plate's plane a pixel may lie to
	// count as plate (metres).
	// DEFAULT: 0.003
	PlaneBand float64
	// Drop is how far the surface beyond the rim must fall below the
	// plate's plane (or how much farther from the camera it must be) for
	// the plate's edge to count as its rim (metres).
	// DEFAULT: 0.01
	Drop float64
	// Threshold is the largest distance of a rim point from the circle
	// to count as an inlier (metres).
	// DEFAULT: 0.0015
	Threshold float64
	// MinRadius rejects circles smaller than this (metres): the part's
	// own footprint also borders the plate.
	// DEFAULT: 0.05
	MinRadius float64
	// Iterations of RANSAC, and its seed.
	// DEFAULT: 500, 1
	Iterations int
	Seed       uint64
}

// DefaultRimOptions returns the documented defaults.
func DefaultRimOptions() RimOptions {
	return RimOptions{PlaneBand: 0.003, Drop: 0.01, Threshold: 0.0015, MinRadius: 0.05, Iterations: 500, Seed: 1}
}

// RimPoints returns the points of a turntable plate's rim seen in one
// depth image: pixels on the plate's plane (within PlaneBand) with a
// 4-neighbour that lies more than Drop below the plane or beyond it,
// where the plate's edge falls away to its side, the table or the room.
func RimPoints(depth []float32, intr mesh.Intrinsics, plate Plane, opt RimOptions) []r3.Vec {
	w, h := intr.Width, intr.Height
	onPlate := func(x, y int) (r3.Vec, bool) {
		z := depth[y*w+x]
		if z <= 0 {
			return r3.Vec{}, false
		}
		p := intr.BackProject(float64(x), float64(y), float64(z))
		return p, math.Abs(plate.Distance(p)) <= opt.PlaneBand
	}
	var rim []r3.Vec
	for y := 1; y < h-1; y++ {
		for x := 1; x < w-1; x++ {
			p, ok := onPlate(x, y)
			if !ok {
				continue
			}
			for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				nx, ny := x+d[0], y+d[1]
				z := depth[ny*w+nx]
				if z <= 0 {
					continue
				}
				q := intr.BackProject(float64(nx), float64(ny), float64(z))
				if plate.Distance(q) < -opt.Drop || float64(z) > p.Z+opt.Drop {
					rim = append(rim, p)
					break
				}
			}
		}
	}
	return rim
}

// FitPlateRim fits the circle of a turntable plate's rim to rim points
// in the plate's plane: RANSAC over triples (Fischler & Bolles 1981)
// with circles smaller than MinRadius refused, then a geometric
// least-squares refinement of centre and radius (Gauss–Newton on the
// distances to the circle) over the inliers. A turntable's plate turns
// about its own centre, so the circle's centre is a point of the axis.
func FitPlateRim(points []r3.Vec, plate Plane, opt RimOptions) (Circle, int, error) {
	if len(points) < 3 {
		return Circle{}, 0, fmt.Errorf("reconstruct: %d rim points, need 3: %w", len(points), mesh.ErrDegenerate)
	}
	n := plate.Normal
	u := mesh.Normalize(r3.Cross(n, r3.Vec{X: 1}))
	if u == (r3.Vec{}) {
		u = mesh.Normalize(r3.Cross(n, r3.Vec{Y: 1}))
	}
	v := r3.Cross(n, u)
	// 2-D coordinates in the plate's plane.
	xy := make([][2]float64, len(points))
	for i, p := range points {
		xy[i] = [2]float64{r3.Dot(p, u), r3.Dot(p, v)}
	}
	rng := rand.New(rand.NewPCG(opt.Seed, 0x5eed))
	bestCount := 0
	var bc [2]float64
	var br float64
	for it := 0; it < opt.Iterations; it++ {
		a, b, c := xy[rng.IntN(len(xy))], xy[rng.IntN(len(xy))], xy[rng.IntN(len(xy))]
		cc, r, ok := circleThrough(a, b, c)
		if !ok || r < opt.MinRadius {
			continue
		}
		count := 0
		for _, q := range xy {
			if math.Abs(math.Hypot(q[0]-cc[0], q[1]-cc[1])-r) <= opt.Threshold {
				count++
			}
		}
		if count > bestCount {
			bestCount, bc, br = count, cc, r
		}
	}
	if bestCount < 3 {
		return Circle{}, 0, fmt.Errorf("reconstruct: no circle of radius ≥ %.0f mm through the rim points: %w", opt.MinRadius*1000, mesh.ErrDegenerate)
	}
	// Geometric refinement: minimise Σ(‖q − c‖ − r)² over the inliers.
	var in [][2]float64
	for round := 0; round < 3; round++ {
		in = in[:0]
		for _, q := range xy {
			if math.Abs(math.Hypot(q[0]-bc[0], q[1]-bc[1])-br) <= opt.Threshold {
				in = append(in, q)
			}
		}
		for it := 0; it < 10; it++ {
			var jtj [3][3]float64
			var jtr [3]float64
			for _, q := range in {
				dx, dy := q[0]-bc[0], q[1]-bc[1]
				d := math.Hypot(dx, dy)
				if d == 0 {
					continue
				}
				res := d - br
				j := [3]float64{-dx / d, -dy / d, -1}
				for a := 0; a < 3; a++ {
					for b := 0; b < 3; b++ {
						jtj[a][b] += j[a] * j[b]
					}
					jtr[a] += j[a] * res
				}
			}
			step, ok := solve3(jtj, jtr)
			if !ok {
				break
			}
			bc[0] -= step[0]
			bc[1] -= step[1]
			br -= step[2]
			if math.Abs(step[0])+math.Abs(step[1])+math.Abs(step[2]) < 1e-9 {
				break
			}
		}
	}
	// Back to 3-D: the plane's point nearest the origin plus the in-plane
	// coordinates.
	origin := r3.Scale(-plate.Offset, n)
	centre := r3.Add(origin, r3.Add(r3.Scale(bc[0]-r3.Dot(origin, u), u), r3.Scale(bc[1]-r3.Dot(origin, v), v)))
	return Circle{Centre: centre, Normal: n, Radius: br}, len(in), nil
}

// circleThrough returns the circle through three 2-D points, false when
// they are (nearly) collinear.
func circleThrough(a, b, c [2]float64) ([2]float64, float64, bool) {
	bx, by := b[0]-a[0], b[1]-a[1]
	cx, cy := c[0]-a[0], c[1]-a[1]
	d := 2 * (bx*cy - by*cx)
	if math.Abs(d) < 1e-12 {
		return [2]float64{}, 0, false
	}
	b2, c2 := bx*bx+by*by, cx*cx+cy*cy
	ux := (cy*b2 - by*c2) / d
	uy := (bx*c2 - cx*b2) / d
	return [2]float64{a[0] + ux, a[1] + uy}, math.Hypot(ux, uy), true
}

// solve3 solves the 3×3 system A·x = b by Gaussian elimination with
// partial pivoting.
func solve3(a [3][3]float64, b [3]float64) ([3]float64, bool) {
	for col := 0; col < 3; col++ {
		p := col
		for r := col + 1; r < 3; r++ {
			if math.Abs(a[r][col]) > math.Abs(a[p][col]) {
				p = r
			}
		}
		if math.Abs(a[p][col]) < 1e-300 {
			return [3]float64{}, false
		}
		a[col], a[p] = a[p], a[col]
		b[col], b[p] = b[p], b[col]
		for r := col + 1; r < 3; r++ {
			f := a[r][col] / a[col][col]
			for c := col; c < 3; c++ {
				a[r][c] -= f * a[col][c]
			}
			b[r] -= f * b[col]
		}
	}
	var x [3]float64
	for r := 2; r >= 0; r-- {
		s := b[r]
		for c := r + 1; c < 3; c++ {
			s -= a[r][c] * x[c]
		}
		x[r] = s / a[r][r]
	}
	return x, true
}
