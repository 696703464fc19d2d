package reconstruct

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Plane is the set of points x with Normal·x + Offset = 0, Normal a unit
// vector. Distance returns the signed distance, positive on the side the
// normal points to.
type Plane struct {
	Normal r3.Vec
	Offset float64
}

// Distance returns the signed distance of p from the plane.
func (pl Plane) Distance(p r3.Vec) float64 { return r3.Dot(pl.Normal, p) + pl.Offset }

// Flip returns the same plane with the opposite normal.
func (pl Plane) Flip() Plane { return Plane{Normal: r3.Scale(-1, pl.Normal), Offset: -pl.Offset} }

// Transform returns the plane in the frame that p maps into.
func (pl Plane) Transform(p mesh.Pose) Plane {
	n := p.Rotate(pl.Normal)
	return Plane{Normal: n, Offset: pl.Offset - r3.Dot(n, p.T)}
}

// RANSACOptions tunes FitPlaneRANSAC.
type RANSACOptions struct {
	// Threshold is the largest distance of an inlier (metres).
	// DEFAULT: 0.004
	Threshold float64
	// Confidence is the probability p that some sample is all inliers.
	// DEFAULT: 0.999
	Confidence float64
	// MaxIterations bounds the samples drawn.
	// DEFAULT: 2000
	MaxIterations int
	// Seed makes the sampling reproducible.
	// DEFAULT: 1
	Seed uint64
}

// DefaultRANSACOptions returns the documented defaults.
func DefaultRANSACOptions() RANSACOptions {
	return RANSACOptions{Threshold: 0.004, Confidence: 0.999, MaxIterations: 2000, Seed: 1}
}

// PlaneFit is the outcome of FitPlaneRANSAC.
type PlaneFit struct {
	Plane      Plane
	Inliers    []int   // indices of the inliers of the refined plane, ascending
	RMS        float64 // root-mean-square distance of the inliers (metres)
	Iterations int     // samples drawn
}

// FitPlaneRANSAC finds the plane with the most inliers by RANSAC
// (Fischler & Bolles 1981, CACM 24(6), DOI 10.1145/358669.358692):
// minimal samples of three points, stopping after
// N = log(1 − p)/log(1 − w³) samples for the best inlier ratio w so far,
// then refines the winner by least squares on its inliers (the normal is
// the eigenvector of the smallest eigenvalue of their covariance) and
// takes the inliers of the refined plane. It returns an error wrapping
// mesh.ErrDegenerate when fewer than three points are given or no sample
// spans a plane.
func FitPlaneRANSAC(points []r3.Vec, opt RANSACOptions) (PlaneFit, error) {
	n := len(points)
	if n < 3 {
		return PlaneFit{}, fmt.Errorf("reconstruct: plane fit needs 3 points, have %d: %w", n, mesh.ErrDegenerate)
	}
	if !(opt.Threshold > 0) || !(opt.Confidence > 0 && opt.Confidence < 1) || opt.MaxIterations < 1 {
		return PlaneFit{}, fmt.Errorf("reconstruct: bad RANSAC options %+v", opt)
	}
	rng := rand.New(rand.NewPCG(opt.Seed, 0x9e3779b97f4a7c15))
	best, bestCount := Plane{}, -1
	needed := opt.MaxIterations
	it := 0
	for ; it < needed && it < opt.MaxIterations; it++ {
		a, b, c := points[rng.IntN(n)], points[rng.IntN(n)], points[rng.IntN(n)]
		nrm := mesh.Normalize(r3.Cross(r3.Sub(b, a), r3.Sub(c, a)))
		if nrm == (r3.Vec{}) {
			continue
		}
		pl := Plane{Normal: nrm, Offset: -r3.Dot(nrm, a)}
		count := 0
		for _, p := range points {
			if math.Abs(pl.Distance(p)) <= opt.Threshold {
				count++
			}
		}
		if count > bestCount {
			best, bestCount = pl, count
			w := float64(count) / float64(n)
			if w >= 1 {
				needed = it + 1
			} else if w > 0 {
				k := math.Log(1-opt.Confidence) / math.Log(1-w*w*w)
				if k < float64(needed) {
					needed = int(math.Ceil(k))
				}
			}
		}
	}
	if bestCount < 3 {
		return PlaneFit{}, fmt.Errorf("reconstruct: no three points span a plane: %w", mesh.ErrDegenerate)
	}
	inl := planeInliers(points, best, opt.Threshold, nil)
	// Two rounds of refinement: the least-squares plane of the inliers can
	// gain or lose a few points at the threshold.
	for round := 0; round < 2; round++ {
		pl, err := LeastSquaresPlane(points, inl)
		if err != nil {
			break
		}
		best = pl
		inl = planeInliers(points, best, opt.Threshold, inl[:0])
	}
	var sse float64
	for _, i := range inl {
		d := best.Distance(points[i])
		sse += d * d
	}
	return PlaneFit{Plane: best, Inliers: inl, RMS: math.Sqrt(sse / float64(max(1, len(inl)))), Iterations: it}, nil
}

func planeInliers(points []r3.Vec, pl Plane, thr float64, dst []int) []int {
	for i, p := range points {
		if math.Abs(pl.Distance(p)) <= thr {
			dst = append(dst, i)
		}
	}
	return dst
}

// LeastSquaresPlane returns the plane minimising the sum of squared
// orthogonal distances of points[idx] (all points when idx is nil): it
// passes through their centroid with the normal along the eigenvector of
// the smallest eigenvalue of their covariance (total least squares).
func LeastSquaresPlane(points []r3.Vec, idx []int) (Plane, error) {
	count := len(idx)
	at := func(k int) r3.Vec { return points[idx[k]] }
	if idx == nil {
		count = len(points)
		at = func(k int) r3.Vec { return points[k] }
	}
	if count < 3 {
		return Plane{}, fmt.Errorf("reconstruct: least-squares plane needs 3 points, have %d: %w", count, mesh.ErrDegenerate)
	}
	var c r3.Vec
	for k := 0; k < count; k++ {
		c = r3.Add(c, at(k))
	}
	c = r3.Scale(1/float64(count), c)
	var cov [6]float64 // xx xy xz yy yz zz
	for k := 0; k < count; k++ {
		d := r3.Sub(at(k), c)
		cov[0] += d.X * d.X
		cov[1] += d.X * d.Y
		cov[2] += d.X * d.Z
		cov[3] += d.Y * d.Y
		cov[4] += d.Y * d.Z
		cov[5] += d.Z * d.Z
	}
	sym := mat.NewSymDense(3, []float64{cov[0], cov[1], cov[2], cov[1], cov[3], cov[4], cov[2], cov[4], cov[5]})
	var eig mat.EigenSym
	if !eig.Factorize(sym, true) {
		return Plane{}, fmt.Errorf("reconstruct: plane eigen-decomposition failed: %w", mesh.ErrDegenerate)
	}
	vals := eig.Values(nil) // ascending
	if vals[1] <= 1e-12*vals[2] {
		return Plane{}, fmt.Errorf("reconstruct: points are collinear: %w", mesh.ErrDegenerate)
	}
	var vec mat.Dense
	eig.VectorsTo(&vec)
	nrm := mesh.Normalize(r3.Vec{X: vec.At(0, 0), Y: vec.At(1, 0), Z: vec.At(2, 0)})
	return Plane{Normal: nrm, Offset: -r3.Dot(nrm, c)}, nil
}
