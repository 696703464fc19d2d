package reconstruct

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// noisyPlaneScene returns nIn points on the plane through c with normal n
// (Gaussian noise σ along the normal) followed by nOut outliers spread in
// a 0.5 m cube.
func noisyPlaneScene(rng *rand.Rand, n, c r3.Vec, sigma float64, nIn, nOut int) []r3.Vec {
	n = mesh.Normalize(n)
	u := mesh.Normalize(r3.Cross(n, r3.Vec{X: 0.3, Y: 1, Z: 0.1}))
	v := r3.Cross(n, u)
	var pts []r3.Vec
	for i := 0; i < nIn; i++ {
		p := r3.Add(c, r3.Add(r3.Scale(rng.Float64()*0.4-0.2, u), r3.Scale(rng.Float64()*0.4-0.2, v)))
		pts = append(pts, r3.Add(p, r3.Scale(sigma*rng.NormFloat64(), n)))
	}
	for i := 0; i < nOut; i++ {
		pts = append(pts, r3.Add(c, r3.Vec{X: rng.Float64()*0.5 - 0.25, Y: rng.Float64()*0.5 - 0.25, Z: rng.Float64()*0.5 - 0.25}))
	}
	return pts
}

// gonumPlane fits a total-least-squares plane by the SVD of the centred
// data matrix with gonum's mat.SVD: the normal is the right singular
// vector of the smallest singular value (a general-purpose reference
// path, independent of our eigen-decomposition of the covariance).
func gonumPlane(t *testing.T, pts []r3.Vec) Plane {
	var c r3.Vec
	for _, p := range pts {
		c = r3.Add(c, p)
	}
	c = r3.Scale(1/float64(len(pts)), c)
	a := mat.NewDense(len(pts), 3, nil)
	for i, p := range pts {
		d := r3.Sub(p, c)
		a.SetRow(i, []float64{d.X, d.Y, d.Z})
	}
	var svd mat.SVD
	if !svd.Factorize(a, mat.SVDThin) {
		t.Fatal("gonum SVD failed")
	}
	var v mat.Dense
	svd.VTo(&v)
	n := r3.Vec{X: v.At(0, 2), Y: v.At(1, 2), Z: v.At(2, 2)}
	return Plane{Normal: n, Offset: -r3.Dot(n, c)}
}

func samePlane(a, b Plane) (angle, offset float64) {
	if r3.Dot(a.Normal, b.Normal) < 0 {
		b = b.Flip()
	}
	return math.Acos(math.Min(1, r3.Dot(a.Normal, b.Normal))), math.Abs(a.Offset - b.Offset)
}

func TestRANSACPlaneAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for trial := 0; trial < 5; trial++ {
		n := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		c := r3.Vec{Z: 0.6}
		const sigma = 0.001
		pts := noisyPlaneScene(rng, n, c, sigma, 3000, 2000) // 40% outliers
		fit, err := FitPlaneRANSAC(pts, DefaultRANSACOptions())
		if err != nil {
			t.Fatal(err)
		}
		ref := gonumPlane(t, pts[:3000])
		a, o := samePlane(fit.Plane, ref)
		// Our refit uses our inlier set (threshold 4σ, which keeps the true
		// inliers and the few outliers that happen to lie within 4 mm of the
		// plane); the plane of 3,000 points with σ = 1 mm is determined to
		// ~σ/√n ≈ 0.02 mm in offset and ~σ/(L√n) ≈ 1e-4 rad in tilt over
		// L = 0.2 m, so the two fits agree far within 0.002 rad / 0.2 mm.
		if a > 0.002 || o > 0.0002 {
			t.Errorf("trial %d: RANSAC plane differs from gonum's least squares by %.4g rad, %.4g m", trial, a, o)
		}
		if len(fit.Inliers) < 2900 {
			t.Errorf("trial %d: %d inliers, want ≥ 2900 of the 3000 on the plane", trial, len(fit.Inliers))
		}
		// Fischler & Bolles's stopping rule: with w ≈ 0.6 and p = 0.999 it
		// needs log(0.001)/log(1 − 0.216) ≈ 28 samples.
		if fit.Iterations > 200 {
			t.Errorf("trial %d: %d iterations for a 60%% inlier ratio", trial, fit.Iterations)
		}
	}
}

func TestRANSACDegenerate(t *testing.T) {
	if _, err := FitPlaneRANSAC([]r3.Vec{{X: 1}, {X: 2}}, DefaultRANSACOptions()); !errors.Is(err, mesh.ErrDegenerate) {
		t.Errorf("two points: %v", err)
	}
	line := []r3.Vec{{X: 1}, {X: 2}, {X: 3}, {X: 4}, {X: 5}}
	if _, err := FitPlaneRANSAC(line, DefaultRANSACOptions()); !errors.Is(err, mesh.ErrDegenerate) {
		t.Errorf("collinear: %v", err)
	}
}

func TestPlaneTransform(t *testing.T) {
	pl := Plane{Normal: r3.Vec{Z: 1}, Offset: -0.5}
	p := mesh.PoseFromAxisAngle(r3.Vec{X: 1, Y: 1}, 0.7, r3.Vec{X: 0.1, Y: -0.2, Z: 0.3})
	q := r3.Vec{X: 0.2, Y: 0.1, Z: 0.5} // on pl
	if d := pl.Transform(p).Distance(p.Apply(q)); math.Abs(d) > 1e-12 {
		t.Errorf("transformed point off the transformed plane by %v", d)
	}
}
