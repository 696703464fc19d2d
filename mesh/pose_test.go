package mesh

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/num/quat"
	"gonum.org/v1/gonum/spatial/r3"
)

// The reference for rotations is gonum: num/quat arithmetic for the
// Hamilton product and conjugate, and spatial/r3.Rotation for rotating a
// vector by an angle about an axis. A unit quaternion q rotates v as
// q·(0, v)·q* (Hamilton's rotation formula).
//
// Tolerances: every rotation entry and every vector below has magnitude
// ≤ about 3, and each result is a short chain of products and sums of
// such numbers, so its rounding error is a few tens of ulps of 1
// (2.2e-16 each): 1e-14 covers them with room to spare.
const psTol = 1e-14

func psRandomQuat(rng *rand.Rand) quat.Number {
	for {
		q := quat.Number{Real: rng.NormFloat64(), Imag: rng.NormFloat64(), Jmag: rng.NormFloat64(), Kmag: rng.NormFloat64()}
		if n := quat.Abs(q); n > 0.1 {
			return quat.Scale(1/n, q)
		}
	}
}

func psRandomVec(rng *rand.Rand) r3.Vec {
	return r3.Vec{X: rng.Float64()*2 - 1, Y: rng.Float64()*2 - 1, Z: rng.Float64()*2 - 1}
}

func psVecClose(a, b r3.Vec, tol float64) bool { return r3.Norm(r3.Sub(a, b)) <= tol }

func psMatClose(a, b Mat3, tol float64) bool {
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			if math.Abs(a[i][j]-b[i][j]) > tol {
				return false
			}
		}
	}
	return true
}

// psQuatRotate rotates v by unit quaternion q with gonum's quaternion
// arithmetic: q·(0, v)·q*.
func psQuatRotate(q quat.Number, v r3.Vec) r3.Vec {
	p := quat.Mul(quat.Mul(q, quat.Number{Imag: v.X, Jmag: v.Y, Kmag: v.Z}), quat.Conj(q))
	return r3.Vec{X: p.Imag, Y: p.Jmag, Z: p.Kmag}
}

func TestRotationFromQuatMatchesQuaternionProduct(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	for trial := 0; trial < 200; trial++ {
		q := psRandomQuat(rng)
		r := RotationFromQuat(q)
		for k := 0; k < 5; k++ {
			v := psRandomVec(rng)
			if got, want := r.MulVec(v), psQuatRotate(q, v); !psVecClose(got, want, psTol) {
				t.Fatalf("q = %v: R·v = %v, q·v·q* = %v", q, got, want)
			}
		}
		// A non-unit quaternion is normalised first, and −q is the same
		// rotation.
		if got := RotationFromQuat(quat.Scale(-3.5, q)); !psMatClose(got, r, psTol) {
			t.Fatalf("RotationFromQuat(−3.5q) = %v, want %v", got, r)
		}
		// Quat recovers q up to sign, with a non-negative real part.
		got := r.Quat()
		want := q
		if want.Real < 0 {
			want = quat.Scale(-1, want)
		}
		if got.Real < 0 || quat.Abs(quat.Sub(got, want)) > psTol {
			t.Fatalf("Quat() = %v, want %v", got, want)
		}
	}
	if got := RotationFromQuat(quat.Number{}); got != Identity3() {
		t.Errorf("RotationFromQuat(0) = %v, want identity", got)
	}
}

// TestPoseMulMatchesQuaternionProduct: composing poses composes their
// rotations as the Hamilton product q1·q2 (apply q2 first), and their
// translations as R1·t2 + t1.
func TestPoseMulMatchesQuaternionProduct(t *testing.T) {
	rng := rand.New(rand.NewPCG(43, 44))
	for trial := 0; trial < 200; trial++ {
		q1, q2 := psRandomQuat(rng), psRandomQuat(rng)
		t1, t2 := psRandomVec(rng), psRandomVec(rng)
		p := PoseFromQuat(q1, t1).Mul(PoseFromQuat(q2, t2))
		if want := RotationFromQuat(quat.Mul(q1, q2)); !psMatClose(p.R, want, psTol) {
			t.Fatalf("R of product = %v, from q1·q2 = %v", p.R, want)
		}
		if want := r3.Add(psQuatRotate(q1, t2), t1); !psVecClose(p.T, want, psTol) {
			t.Fatalf("T of product = %v, want %v", p.T, want)
		}
		x := psRandomVec(rng)
		if got, want := p.Apply(x), PoseFromQuat(q1, t1).Apply(PoseFromQuat(q2, t2).Apply(x)); !psVecClose(got, want, psTol) {
			t.Fatalf("(p∘q)(x) = %v, p(q(x)) = %v", got, want)
		}
	}
}

func TestPoseInverse(t *testing.T) {
	rng := rand.New(rand.NewPCG(45, 46))
	for trial := 0; trial < 200; trial++ {
		p := PoseFromQuat(psRandomQuat(rng), r3.Scale(3, psRandomVec(rng)))
		for _, id := range []Pose{p.Inv().Mul(p), p.Mul(p.Inv())} {
			if !psMatClose(id.R, Identity3(), psTol) || r3.Norm(id.T) > psTol {
				t.Fatalf("p⁻¹∘p or p∘p⁻¹ = %+v, want identity", id)
			}
		}
		x := psRandomVec(rng)
		if got := p.Inv().Apply(p.Apply(x)); !psVecClose(got, x, psTol) {
			t.Fatalf("p⁻¹(p(x)) = %v, want %v", got, x)
		}
		// Inverse rotation is the conjugate quaternion (gonum quat.Conj;
		// for a unit quaternion also quat.Inv).
		q := p.Quat()
		if want := RotationFromQuat(quat.Inv(q)); !psMatClose(p.Inv().R, want, psTol) {
			t.Fatalf("Inv().R = %v, from q⁻¹ = %v", p.Inv().R, want)
		}
	}
}

// TestAxisAngleMatchesGonumRotation compares Rodrigues' formula with
// gonum's r3.Rotation (built from the half-angle quaternion) and checks
// the round trip through AxisAngle, including angles near 0 and π.
func TestAxisAngleMatchesGonumRotation(t *testing.T) {
	rng := rand.New(rand.NewPCG(47, 48))
	angles := []float64{0, 1e-12, 1e-8, 1e-4, 0.3, 1, math.Pi / 2, 2, 3, math.Pi - 1e-4, math.Pi - 1e-8, math.Pi}
	axes := []r3.Vec{{X: 1}, {Y: 1}, {Z: 1}, {X: -1}, {X: 1, Y: 1, Z: 1}}
	for i := 0; i < 20; i++ {
		axes = append(axes, psRandomVec(rng))
	}
	for _, axis := range axes {
		k := Normalize(axis)
		for _, angle := range angles {
			r := RotationFromAxisAngle(axis, angle)
			g := r3.NewRotation(angle, axis)
			for j := 0; j < 3; j++ {
				v := psRandomVec(rng)
				if got, want := r.MulVec(v), g.Rotate(v); !psVecClose(got, want, psTol) {
					t.Fatalf("axis %v angle %g: R·v = %v, gonum %v", axis, angle, got, want)
				}
			}
			if err := r.checkRotation(psTol); err != nil {
				t.Fatalf("axis %v angle %g: %v", axis, angle, err)
			}
			gotAxis, gotAngle := r.AxisAngle()
			// The angle comes back to within rounding of the matrix
			// entries (absolute, about 1e-16 per entry, times a few).
			if math.Abs(gotAngle-angle) > psTol {
				t.Fatalf("axis %v angle %.17g: AxisAngle angle %.17g", axis, angle, gotAngle)
			}
			if angle == 0 {
				if gotAxis != (r3.Vec{Z: 1}) {
					t.Errorf("identity: axis %v, want +z", gotAxis)
				}
				continue
			}
			// The axis is read from sin(θ/2)·k, whose entries carry an
			// absolute error of about 1e-16; divided by sin(θ/2) ≈ θ/2 this
			// is a relative error of about 2e-16/θ. Near π the quaternion's
			// vector part is the large one and the axis is accurate, but its
			// sign is free only at exactly π (both ±k give the same
			// rotation).
			tol := psTol + 1e-15/angle
			if angle == math.Pi && r3.Dot(gotAxis, k) < 0 {
				gotAxis = r3.Scale(-1, gotAxis)
			}
			if !psVecClose(gotAxis, k, tol) {
				t.Errorf("axis %v angle %.17g: AxisAngle axis %v, want %v (tol %.2g)", axis, angle, gotAxis, k, tol)
			}
		}
	}
	if got := RotationFromAxisAngle(r3.Vec{}, 1); got != Identity3() {
		t.Errorf("zero axis: %v, want identity", got)
	}
}

// TestQuatNearHalfTurn exercises each branch of Shepperd's method: half
// turns about each coordinate axis (trace −1; the largest diagonal
// entry picks the branch) and near-half turns about random axes; R must
// come back from its quaternion.
func TestQuatNearHalfTurn(t *testing.T) {
	rng := rand.New(rand.NewPCG(49, 50))
	axes := []r3.Vec{{X: 1}, {Y: 1}, {Z: 1}, {X: 1, Y: 1}, {Y: 1, Z: -1}}
	for i := 0; i < 30; i++ {
		axes = append(axes, psRandomVec(rng))
	}
	for _, axis := range axes {
		for _, angle := range []float64{math.Pi, math.Pi - 1e-9, math.Pi - 1e-3, 2.5} {
			r := RotationFromAxisAngle(axis, angle)
			q := r.Quat()
			if math.Abs(quat.Abs(q)-1) > psTol || q.Real < 0 {
				t.Fatalf("axis %v angle %g: Quat() = %v, not unit with Real ≥ 0", axis, angle, q)
			}
			if back := RotationFromQuat(q); !psMatClose(back, r, psTol) {
				t.Fatalf("axis %v angle %g: R from Quat() = %v, want %v", axis, angle, back, r)
			}
			if got := RotationAngle(Identity(), Pose{R: r}); math.Abs(got-angle) > psTol {
				t.Fatalf("RotationAngle(I, R(%g)) = %.17g", angle, got)
			}
		}
	}
}

func TestPoseFromMat4(t *testing.T) {
	rng := rand.New(rand.NewPCG(51, 52))
	for trial := 0; trial < 50; trial++ {
		p := PoseFromQuat(psRandomQuat(rng), psRandomVec(rng))
		got, err := PoseFromMat4(p.Mat4(), 1e-9)
		if err != nil {
			t.Fatalf("PoseFromMat4(valid) error: %v", err)
		}
		if got != p {
			t.Fatalf("Mat4 round trip: %+v, want %+v", got, p)
		}
	}
	rot := PoseFromAxisAngle(r3.Vec{X: 1, Y: 2, Z: 3}, 0.8, r3.Vec{X: 1, Y: 2, Z: 3}).Mat4()
	with := func(edit func(m *[16]float64)) [16]float64 {
		m := rot
		edit(&m)
		return m
	}
	for _, c := range []struct {
		name string
		m    [16]float64
		want string
	}{
		{"reflection", with(func(m *[16]float64) { m[0], m[4], m[8] = -m[0], -m[4], -m[8] }), "determinant"},
		{"scaled", with(func(m *[16]float64) {
			for _, i := range []int{0, 1, 2, 4, 5, 6, 8, 9, 10} {
				m[i] *= 1.01
			}
		}), "not orthonormal"},
		{"sheared", with(func(m *[16]float64) { m[1] += 0.01 }), "not orthonormal"},
		{"zero", [16]float64{15: 1}, "not orthonormal"},
		{"bottom row", with(func(m *[16]float64) { m[12] = 0.5 }), "bottom row"},
		{"projective", with(func(m *[16]float64) { m[15] = 2 }), "bottom row"},
		{"NaN", with(func(m *[16]float64) { m[5] = math.NaN() }), "entry 5"},
		{"Inf", with(func(m *[16]float64) { m[3] = math.Inf(1) }), "entry 3"},
	} {
		_, err := PoseFromMat4(c.m, 1e-6)
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.HasPrefix(err.Error(), "mesh: ") {
			t.Errorf("%s: error %v, want one containing %q with the mesh: prefix", c.name, err, c.want)
		}
	}
}

func TestOrthonormalize(t *testing.T) {
	rng := rand.New(rand.NewPCG(53, 54))
	p := PoseFromQuat(psRandomQuat(rng), r3.Vec{X: 1})
	// A long chain of products drifts; emulate it with a perturbation of
	// 1e-6 per entry.
	drift := p
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			drift.R[i][j] += 1e-6 * rng.NormFloat64()
		}
	}
	if drift.R.checkRotation(1e-9) == nil {
		t.Fatal("perturbed rotation passes the 1e-9 check; perturbation too small to test")
	}
	fixed := drift.Orthonormalize()
	if err := fixed.R.checkRotation(psTol); err != nil {
		t.Errorf("Orthonormalize: %v", err)
	}
	// The nearest rotation moves each entry by about the perturbation.
	if !psMatClose(fixed.R, p.R, 1e-5) || fixed.T != p.T {
		t.Errorf("Orthonormalize moved the pose too far: %+v vs %+v", fixed, p)
	}
}

func TestLookAt(t *testing.T) {
	eye, target, up := r3.Vec{X: 1, Y: -2, Z: 0.5}, r3.Vec{X: 0.1, Y: 0.2, Z: 0}, r3.Vec{Z: 1}
	p, err := LookAt(eye, target, up)
	if err != nil {
		t.Fatal(err)
	}
	if err := p.R.checkRotation(psTol); err != nil {
		t.Fatal(err)
	}
	// The camera sits at eye, the target is straight ahead (camera
	// x = y = 0, z = distance), and world up points to the image's top
	// (camera −y) with no sideways part.
	if p.T != eye {
		t.Errorf("T = %v, want eye %v", p.T, eye)
	}
	c := p.Inv().Apply(target)
	if math.Abs(c.X) > psTol || math.Abs(c.Y) > psTol || math.Abs(c.Z-r3.Norm(r3.Sub(target, eye))) > psTol {
		t.Errorf("target in camera frame = %v, want (0, 0, %v)", c, r3.Norm(r3.Sub(target, eye)))
	}
	u := p.Inv().Rotate(up)
	if math.Abs(u.X) > psTol || u.Y >= 0 {
		t.Errorf("up in camera frame = %v, want x = 0 and y < 0", u)
	}
	if _, err := LookAt(eye, eye, up); !errors.Is(err, ErrDegenerate) {
		t.Errorf("LookAt(eye, eye): %v, want ErrDegenerate", err)
	}
	if _, err := LookAt(r3.Vec{}, r3.Vec{Z: 2}, r3.Vec{Z: -1}); !errors.Is(err, ErrDegenerate) {
		t.Errorf("LookAt with up parallel to the view: %v, want ErrDegenerate", err)
	}
}
