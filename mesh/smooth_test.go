package mesh

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// TestSmoothTaubinSphere adds radial noise to a marching-cubes sphere
// and checks that Taubin smoothing (Taubin 1995) brings the vertices
// back toward the sphere ‖x‖ = r (a closed form) without shrinking it:
// the spread of the radii falls by more than half while their mean stays
// within 0.3 % of r; plain Laplacian smoothing (μ = 0) of the same
// strength shrinks the mean radius by more, which is what the μ step is
// there to prevent.
func TestSmoothTaubinSphere(t *testing.T) {
	const r = 0.03
	g, err := SampleGrid(func(p r3.Vec) float64 { return r3.Norm(p) - r }, nil, r3.Vec{X: -0.04, Y: -0.04, Z: -0.04}, r3.Vec{X: 0.04, Y: 0.04, Z: 0.04}, 0.002)
	if err != nil {
		t.Fatal(err)
	}
	m, err := MarchingCubes(g, 0)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for i, v := range m.Vertices {
		m.Vertices[i] = r3.Scale(1+0.01*rng.NormFloat64(), v) // σ = 0.3 mm radially
	}
	stats := func(m *Mesh) (mean, sd float64) {
		for _, v := range m.Vertices {
			mean += r3.Norm(v)
		}
		mean /= float64(len(m.Vertices))
		for _, v := range m.Vertices {
			d := r3.Norm(v) - mean
			sd += d * d
		}
		return mean, math.Sqrt(sd / float64(len(m.Vertices)))
	}
	_, sd0 := stats(m)
	taubin := m.Clone()
	taubin.SmoothTaubin(0.5, -0.53, 10)
	mean1, sd1 := stats(taubin)
	lap := m.Clone()
	lap.SmoothTaubin(0.5, 0, 10)
	mean2, _ := stats(lap)
	if sd1 > sd0/2 {
		t.Errorf("radius spread %.3g → %.3g mm, want less than half", sd0*1000, sd1*1000)
	}
	if e := math.Abs(mean1-r) / r; e > 0.003 {
		t.Errorf("Taubin mean radius %.4f mm off by %.2f%%", mean1*1000, 100*e)
	}
	if r-mean2 < r-mean1 {
		t.Errorf("Laplacian mean %.4f shrank less than Taubin's %.4f", mean2*1000, mean1*1000)
	}
}
