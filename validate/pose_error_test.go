package validate

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

// Worked examples computed by hand from the published definitions of
// ADD and ADD-S (Hinterstoisser et al. 2012, ACCV, DOI
// 10.1007/978-3-642-37331-2_42) and MSSD (Hodaň et al. 2020, BOP, DOI
// 10.1007/978-3-030-66096-3_39). Tolerance 1e-12 m: a handful of
// additions of numbers of size ≤ 1.
func TestPoseErrorsWorked(t *testing.T) {
	// A 3-point model translated by 1 cm: every point moves 1 cm, so
	// ADD = (0.01 + 0.01 + 0.01)/3 = 0.01 m, and MSSD (max) = 0.01 m.
	pts := []r3.Vec{{X: 0}, {X: 0.05}, {Y: 0.05}}
	m, err := NewErrorModel(pts, nil)
	if err != nil {
		t.Fatal(err)
	}
	truth := mesh.Identity()
	est := mesh.Pose{R: mesh.Identity3(), T: r3.Vec{Z: 0.01}}
	if got := m.ADD(truth, est); !near(got, 0.01, 1e-12) {
		t.Errorf("ADD translated: got %v, want 0.01", got)
	}
	if got := m.MSSD(truth, est); !near(got, 0.01, 1e-12) {
		t.Errorf("MSSD translated: got %v, want 0.01", got)
	}
	// ADD-S of the same: each moved point's nearest model point. The
	// points are 5 cm apart, so the nearest is its own image at 1 cm:
	// ADD-S = 0.01 m.
	if got := m.ADDS(truth, est); !near(got, 0.01, 1e-12) {
		t.Errorf("ADD-S translated: got %v, want 0.01", got)
	}

	// A symmetric pair x₁ = (−a, 0, 0), x₂ = (a, 0, 0), a = 2 cm, and
	// the estimate rotated by π about z, which swaps them: ADD = mean
	// of |x₁ − (−x₁)| = 2a = 0.04 m; ADD-S = 0 (each point lands on the
	// other); MSSD with the half turn as a symmetry = 0, without it 2a.
	pair := []r3.Vec{{X: -0.02}, {X: 0.02}}
	half := mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{Z: 1}, math.Pi)}
	plain, _ := NewErrorModel(pair, nil)
	sym, _ := NewErrorModel(pair, []mesh.Pose{mesh.Identity(), half})
	if got := plain.ADD(truth, half); !near(got, 0.04, 1e-12) {
		t.Errorf("ADD swapped pair: got %v, want 0.04", got)
	}
	if got := plain.ADDS(truth, half); !near(got, 0, 1e-12) {
		t.Errorf("ADD-S swapped pair: got %v, want 0", got)
	}
	if got := plain.MSSD(truth, half); !near(got, 0.04, 1e-12) {
		t.Errorf("MSSD without symmetry: got %v, want 0.04", got)
	}
	if got := sym.MSSD(truth, half); !near(got, 0, 1e-12) {
		t.Errorf("MSSD with the half turn: got %v, want 0", got)
	}

	// A rotation by θ = 90° about z of points at radius r = 3 cm moves
	// each by the chord 2r·sin(θ/2) = r·√2: ADD = MSSD = 0.03·√2.
	ring := []r3.Vec{{X: 0.03}, {Y: 0.03}, {X: -0.03}}
	rm, _ := NewErrorModel(ring, nil)
	quarter := mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{Z: 1}, math.Pi/2)}
	if got := rm.ADD(truth, quarter); !near(got, 0.03*math.Sqrt2, 1e-12) {
		t.Errorf("ADD quarter turn: got %v, want %v", got, 0.03*math.Sqrt2)
	}
	if got := rm.MSSD(truth, quarter); !near(got, 0.03*math.Sqrt2, 1e-12) {
		t.Errorf("MSSD quarter turn: got %v", got)
	}
	// ADD-S: (3,0)→(0,3) lands on a model point (0), (0,3)→(−3,0) too
	// (0), (−3,0)→(0,−3) whose nearest model points (±3,0) are at
	// 3√2 cm: ADD-S = 0.03·√2/3.
	if got := rm.ADDS(truth, quarter); !near(got, 0.03*math.Sqrt2/3, 1e-12) {
		t.Errorf("ADD-S quarter turn: got %v, want %v", got, 0.03*math.Sqrt2/3)
	}

	// MSPD: a 3-point model 0.5 m in front of a camera with f = 500 px,
	// shifted by 1 mm along x: every projection moves 500·0.001/0.5 = 1 px.
	intr := mesh.Intrinsics{Width: 640, Height: 480, Fx: 500, Fy: 500, Cx: 319.5, Cy: 239.5}
	at := mesh.Pose{R: mesh.Identity3(), T: r3.Vec{Z: 0.5}}
	shifted := mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: 0.001, Z: 0.5}}
	flat := []r3.Vec{{X: -0.01}, {X: 0.01}, {Y: 0.01}} // z = 0: all at depth 0.5
	fm, _ := NewErrorModel(flat, nil)
	if got := fm.MSPD(at, shifted, intr); !near(got, 1, 1e-9) {
		t.Errorf("MSPD: got %v px, want 1", got)
	}
	if got := fm.MSPD(at, mesh.Pose{R: mesh.Identity3(), T: r3.Vec{Z: -0.5}}, intr); !math.IsInf(got, 1) {
		t.Errorf("MSPD behind the camera: got %v, want +Inf", got)
	}
}

// ADD-S through the k-d tree equals the brute-force double loop of its
// definition on random poses; ADD-S ≤ ADD always (the min over x₂
// includes x₂ = x₁).
func TestADDSAgainstBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	pts := make([]r3.Vec, 300)
	for i := range pts {
		pts[i] = r3.Vec{X: rng.Float64() * 0.1, Y: rng.Float64() * 0.05, Z: rng.Float64() * 0.02}
	}
	m, _ := NewErrorModel(pts, nil)
	for trial := 0; trial < 10; trial++ {
		truth := randomPose(rng, 0.5)
		est := randomPose(rng, 0.5)
		if trial%2 == 0 {
			est = truth.Mul(mesh.Pose{R: mesh.RotationFromAxisAngle(randomUnit(rng), 0.1), T: r3.Vec{X: 0.003}})
		}
		var want float64
		for _, x1 := range pts {
			best := math.Inf(1)
			a := truth.Apply(x1)
			for _, x2 := range pts {
				best = math.Min(best, r3.Norm(r3.Sub(a, est.Apply(x2))))
			}
			want += best
		}
		want /= float64(len(pts))
		got := m.ADDS(truth, est)
		// Rounding: one pose product and a square root per point, ~1e-15
		// relative on distances ≤ 1 m.
		if !near(got, want, 1e-12) {
			t.Errorf("trial %d: ADD-S %v, brute force %v", trial, got, want)
		}
		if add := m.ADD(truth, est); got > add+1e-12 {
			t.Errorf("trial %d: ADD-S %v > ADD %v", trial, got, add)
		}
	}
}

func TestSymmetryPosesClosure(t *testing.T) {
	// Two half turns about perpendicular axes generate the four-element
	// group {I, Rx(π), Ry(π), Rz(π)} (the box's rotations; Klein
	// four-group, handbook group theory).
	rx := mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{X: 1}, math.Pi)}
	ry := mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{Y: 1}, math.Pi)}
	g, err := SymmetryPoses([]mesh.Pose{rx, ry}, 1e-6, 1e-9)
	if err != nil {
		t.Fatal(err)
	}
	if len(g) != 4 {
		t.Fatalf("box group has %d elements, want 4", len(g))
	}
	// Six-fold about z with a half turn about x: the dihedral group D6
	// of order 12 (the hex nut's rotations).
	r6 := mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{Z: 1}, math.Pi/3)}
	g, err = SymmetryPoses([]mesh.Pose{r6, rx}, 1e-6, 1e-9)
	if err != nil {
		t.Fatal(err)
	}
	if len(g) != 12 {
		t.Fatalf("D6 has %d elements, want 12", len(g))
	}
	// An irrational angle never closes: the group must be refused.
	if _, err := SymmetryPoses([]mesh.Pose{{R: mesh.RotationFromAxisAngle(r3.Vec{Z: 1}, 1)}}, 1e-9, 1e-9); err == nil {
		t.Error("rotation by 1 rad: want an error, the group is infinite")
	}
}

func TestRecallAndThresholds(t *testing.T) {
	errs := []float64{0.001, 0.004, 0.02, math.NaN()}
	if got := Recall(errs, 0.005); got != 0.5 {
		t.Errorf("Recall: got %v, want 0.5", got)
	}
	th := MSSDThresholds(0.1)
	// BOP: τ = 0.05…0.5 of the diameter in steps of 0.05.
	if len(th) != 10 || !near(th[0], 0.005, 1e-15) || !near(th[9], 0.05, 1e-15) {
		t.Errorf("MSSD thresholds %v", th)
	}
	px := MSPDThresholds(1280)
	if !near(px[0], 10, 1e-12) || !near(px[9], 100, 1e-12) {
		t.Errorf("MSPD thresholds for 1280 px: %v", px)
	}
	// errs below 0.005: 2 of 4 → 0.5 at the first threshold, 2 of 4 up
	// to 0.02 (strict), 3 of 4 from 0.025: (3·0.5 + 7·0.75)/10 = 0.675.
	if got := AverageRecall(errs, th); !near(got, 0.675, 1e-12) {
		t.Errorf("AverageRecall: got %v, want 0.675", got)
	}
	// 2π·0.02/(0.01·0.05) = 251.3 → 252 steps.
	if n := ContinuousSymmetrySteps(0.02, 0.05, 0.01); n != 252 {
		t.Errorf("continuous steps: got %d, want 252", n)
	}
}

func TestErrorModelBadInput(t *testing.T) {
	if _, err := NewErrorModel(nil, nil); err == nil {
		t.Error("empty model: want an error")
	}
	if _, err := NewErrorModel([]r3.Vec{{X: math.NaN()}}, nil); err == nil {
		t.Error("NaN point: want an error")
	}
}

func randomPose(rng *rand.Rand, scale float64) mesh.Pose {
	return mesh.Pose{
		R: mesh.RotationFromAxisAngle(randomUnit(rng), rng.Float64()*math.Pi),
		T: r3.Vec{X: (rng.Float64() - 0.5) * scale, Y: (rng.Float64() - 0.5) * scale, Z: 0.3 + rng.Float64()*scale},
	}
}

func BenchmarkADDS2000(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	pts := make([]r3.Vec, 2000)
	for i := range pts {
		pts[i] = r3.Vec{X: rng.Float64() * 0.1, Y: rng.Float64() * 0.06, Z: rng.Float64() * 0.03}
	}
	m, _ := NewErrorModel(pts, nil)
	truth := randomPose(rng, 0.3)
	est := truth.Mul(mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{X: 1, Y: 1}, 0.2), T: r3.Vec{X: 0.004}})
	b.ReportAllocs()
	for b.Loop() {
		m.ADDS(truth, est)
	}
}
