package features

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

const deg = math.Pi / 180

func randUnit(rng *rand.Rand) r3.Vec {
	for {
		v := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		if n := r3.Norm(v); n > 1e-3 {
			return r3.Scale(1/n, v)
		}
	}
}

func randPose(rng *rand.Rand, shift float64) mesh.Pose {
	return mesh.PoseFromAxisAngle(randUnit(rng), rng.Float64()*math.Pi,
		r3.Vec{X: shift * rng.NormFloat64(), Y: shift * rng.NormFloat64(), Z: shift * rng.NormFloat64()})
}

// TestPairFeatureWorkedExample checks F and α on a pair worked by hand
// from the definition of Drost et al. (2010):
//
//	m1 = (0, 0, 0), n1 = (0, 0, 1); m2 = (−3, 0, 4), n2 = (0.6, 0, 0.8).
//	d = m2 − m1 = (−3, 0, 4), ‖d‖ = √(9 + 16) = 5.
//	cos∠(n1, d) = (0·−3 + 0·0 + 1·4)/5 = 0.8  → ∠ = acos 0.8 = 36.8699°.
//	cos∠(n2, d) = (0.6·−3 + 0 + 0.8·4)/5 = (−1.8 + 3.2)/5 = 0.28 → 73.7398°.
//	cos∠(n1, n2) = 0.8 → 36.8699°.
//
// α: n1 = +z, so AlignToX is the smallest rotation taking z to x: 90°
// about n1 × x = (0, 1, 0), i.e. (x, y, z) ↦ (z, y, −x). It maps d to
// (4, 0, 3): the paired point lies at φ = atan2(3, 0) = 90° about x, and
// α = −φ = −90° brings it to (4, 3, 0), in the half-plane y > 0, z = 0.
//
// Quantised with diameter 10 (step 0.5) and 12° angles: distance bin
// ⌊5/0.5⌋ = 10; angle bins ⌊36.87/12⌋ = 3, ⌊73.74/12⌋ = 6, 3; fine φ
// level ⌊(90° + 180°)/1.5°⌋ = 180.
func TestPairFeatureWorkedExample(t *testing.T) {
	m1, n1 := r3.Vec{}, r3.Vec{Z: 1}
	m2, n2 := r3.Vec{X: -3, Z: 4}, r3.Vec{X: 0.6, Z: 0.8}
	f := PairFeature(m1, n1, m2, n2)
	// Tolerance: a few ulps of the hand values' doubles.
	const tol = 1e-12
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"dist", f.Dist, 5},
		{"angle1", f.Angle1, math.Acos(0.8)},
		{"angle2", f.Angle2, math.Acos(0.28)},
		{"angle3", f.Angle3, math.Acos(0.8)},
		{"alpha", Alpha(m1, n1, m2), -math.Pi / 2},
	} {
		if math.Abs(c.got-c.want) > tol {
			t.Errorf("%s = %.15g, want %.15g", c.name, c.got, c.want)
		}
	}
	if math.Abs(f.Angle1/deg-36.8699) > 1e-4 || math.Abs(f.Angle2/deg-73.7398) > 1e-4 {
		t.Errorf("angles %.4f° %.4f°, hand values 36.8699° 73.7398°", f.Angle1/deg, f.Angle2/deg)
	}
	r := AlignToX(n1)
	if v := r.MulVec(r3.Sub(m2, m1)); r3.Norm(r3.Sub(v, r3.Vec{X: 4, Z: 3})) > tol {
		t.Errorf("AlignToX(z)·d = %v, want (4, 0, 3)", v)
	}
	q := newQuantizer(DefaultParams(), 10)
	db, _ := q.distBin(f.Dist)
	d := r3.Sub(m2, m1)
	a1 := q.feat.bin(r3.Dot(n1, d) / 5)
	a2 := q.feat.bin(r3.Dot(n2, d) / 5)
	a3 := q.feat.bin(r3.Dot(n1, n2))
	v := r.MulVec(d)
	if db != 10 || a1 != 3 || a2 != 6 || a3 != 3 {
		t.Errorf("bins %d %d %d %d, want 10 3 6 3", db, a1, a2, a3)
	}
	if p := q.phi(v.Y, v.Z); p != 180 {
		t.Errorf("φ level %d, want 180", p)
	}
}

// TestAlignToXMatchesGonum checks AlignToX against gonum's quaternion
// rotation (spatial/r3.NewRotation, built on num/quat): for n.X ≥ 0 it
// must equal the rotation by acos(n.X) about n × x; for n.X < 0, that
// rotation of Rz(π)·n composed with Rz(π). It also checks that α from
// Alpha, applied with gonum's rotation about +x, puts the paired point
// into the half-plane y > 0, z = 0.
func TestAlignToXMatchesGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	x := r3.Vec{X: 1}
	rz := r3.NewRotation(math.Pi, r3.Vec{Z: 1})
	// Tolerance: products of a few unit-magnitude doubles; 1e-12 is
	// thousands of ulps of slack and far below any quantisation step.
	const tol = 1e-12
	for i := 0; i < 2000; i++ {
		n := randUnit(rng)
		if i == 0 {
			n = r3.Vec{X: -1} // the antipode of x
		}
		if i == 1 {
			n = r3.Vec{X: 1}
		}
		r := AlignToX(n)
		if got := r.MulVec(n); r3.Norm(r3.Sub(got, x)) > tol {
			t.Fatalf("AlignToX(%v)·n = %v, want +x", n, got)
		}
		if d := r.Det(); math.Abs(d-1) > tol {
			t.Fatalf("det AlignToX(%v) = %v", n, d)
		}
		var g r3.Rotation
		pre := func(v r3.Vec) r3.Vec { return v }
		m := n
		if n.X < 0 {
			pre = rz.Rotate
			m = rz.Rotate(n)
		}
		axis := r3.Cross(m, x)
		if r3.Norm(axis) < 1e-9 {
			g = r3.NewRotation(0, x)
		} else {
			g = r3.NewRotation(math.Acos(math.Min(1, m.X)), mesh.Normalize(axis))
		}
		for k := 0; k < 3; k++ {
			v := randUnit(rng)
			want := g.Rotate(pre(v))
			if got := r.MulVec(v); r3.Norm(r3.Sub(got, want)) > 1e-9 {
				t.Fatalf("AlignToX(%v)·%v = %v, gonum gives %v", n, v, got, want)
			}
		}
		// α against gonum's rotation about x.
		m1 := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		m2 := r3.Add(m1, r3.Scale(1+rng.Float64(), randUnit(rng)))
		a := Alpha(m1, n, m2)
		v := r3.NewRotation(a, x).Rotate(r.MulVec(r3.Sub(m2, m1)))
		if math.Abs(v.Z) > 1e-9 || v.Y < 0 {
			t.Fatalf("Rx(α)·T·m2 = %v, want z = 0 and y ≥ 0", v)
		}
	}
}

// TestPoseFromPairRecoversMotion checks the voting identity of Drost et
// al. (2010): for a scene pair that is a rigid motion T of a model pair,
// T_s→g⁻¹ · Rx(α_m − α_s) · T_m→g equals T.
func TestPoseFromPairRecoversMotion(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	for i := 0; i < 500; i++ {
		tr := randPose(rng, 0.5)
		m1, n1 := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}, randUnit(rng)
		m2 := r3.Add(m1, randUnit(rng))
		s1, s2, sn1 := tr.Apply(m1), tr.Apply(m2), tr.Rotate(n1)
		alpha := Alpha(m1, n1, m2) - Alpha(s1, sn1, s2)
		p := poseFromPair(m1, AlignToX(n1), s1, AlignToX(sn1), alpha)
		if a := mesh.RotationAngle(p, tr); a > 1e-9 {
			t.Fatalf("rotation error %v rad", a)
		}
		if d := r3.Norm(r3.Sub(p.T, tr.T)); d > 1e-9 {
			t.Fatalf("translation error %v", d)
		}
	}
}
