package features

import (
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Feature is the point-pair feature of Drost, Ulrich, Navab & Ilic
// (2010, CVPR, "Model globally, match locally", DOI
// 10.1109/CVPR.2010.5540108) for points m1, m2 with unit normals n1, n2
// and d = m2 − m1:
//
//	F(m1, m2) = (‖d‖, ∠(n1, d), ∠(n2, d), ∠(n1, n2)),
//
// lengths in metres and angles in radians in [0, π]. The feature is not
// symmetric: F(m1, m2) ≠ F(m2, m1) in general.
type Feature struct {
	Dist   float64 // ‖d‖
	Angle1 float64 // ∠(n1, d)
	Angle2 float64 // ∠(n2, d)
	Angle3 float64 // ∠(n1, n2)
}

// PairFeature returns F(m1, m2) computed directly from the definition
// (with acos; the tables never call it, they quantise cosines). For
// coincident points the two angles with d are undefined and returned as
// π/2.
func PairFeature(m1, n1, m2, n2 r3.Vec) Feature {
	d := r3.Sub(m2, m1)
	dist := r3.Norm(d)
	f := Feature{Dist: dist, Angle1: math.Pi / 2, Angle2: math.Pi / 2}
	if dist > 0 {
		f.Angle1 = angleOf(r3.Dot(n1, d) / dist)
		f.Angle2 = angleOf(r3.Dot(n2, d) / dist)
	}
	f.Angle3 = angleOf(r3.Dot(n1, n2))
	return f
}

func angleOf(c float64) float64 { return math.Acos(math.Max(-1, math.Min(1, c))) }

// AlignToX returns the rotation R with R·n = +x for a unit normal n:
// the rotational part of the transform T_m→g of Drost et al. (2010)
// that moves a reference point's normal onto the x-axis. Any such
// rotation would do as long as model and scene use the same one (the
// remaining freedom about x is what α measures); this one is fixed as
// follows. When n.X ≥ 0 it is the smallest rotation, about the axis
// n × x by the angle acos(n.X), in closed form
//
//	R = I + [k]× + [k]×²/(1 + n.X),  k = n × x = (0, n.Z, −n.Y)
//
// (Rodrigues' formula with sin θ·u = k and (1 − cos θ)/sin²θ = 1/(1 + cos θ)).
// When n.X < 0 that form loses precision as n.X → −1, so n is first
// turned by π about z, which maps it to (−n.X, −n.Y, n.Z) with a
// positive x component, and the smallest rotation of that is applied.
// A zero normal gives the identity.
func AlignToX(n r3.Vec) mesh.Mat3 {
	if n == (r3.Vec{}) {
		return mesh.Identity3()
	}
	if n.X >= 0 {
		return minimalToX(n)
	}
	r := minimalToX(r3.Vec{X: -n.X, Y: -n.Y, Z: n.Z})
	// R·Rz(π), with Rz(π) = diag(−1, −1, 1): negate the first two columns.
	for i := 0; i < 3; i++ {
		r[i][0], r[i][1] = -r[i][0], -r[i][1]
	}
	return r
}

// minimalToX is the smallest rotation taking unit n (n.X ≥ 0) to +x.
func minimalToX(n r3.Vec) mesh.Mat3 {
	y, z := n.Y, n.Z
	s := 1 / (1 + n.X)
	return mesh.Mat3{
		{1 - (y*y+z*z)*s, y, z},
		{-y, 1 - y*y*s, -y * z * s},
		{-z, -y * z * s, 1 - z*z*s},
	}
}

// Alpha returns the angle α (radians, in (−π, π]) of the pair (m1, m2)
// with reference m1 and unit normal n1: after T_m→g (translate m1 to the
// origin, rotate by AlignToX(n1)), α is the rotation about +x that
// brings m2 into the half-plane y > 0, z = 0 (Drost et al. 2010). For a
// scene pair (s1, s2) matching a model pair (m1, m2), the model-to-scene
// pose is T_s→g⁻¹ · Rx(α_m − α_s) · T_m→g. A paired point on the line of
// the normal gives 0.
func Alpha(m1, n1, m2 r3.Vec) float64 {
	v := AlignToX(n1).MulVec(r3.Sub(m2, m1))
	if v.Y == 0 && v.Z == 0 {
		return 0
	}
	return math.Atan2(-v.Z, v.Y)
}

// rotX returns the rotation by angle a about +x.
func rotX(a float64) mesh.Mat3 {
	s, c := math.Sincos(a)
	return mesh.Mat3{{1, 0, 0}, {0, c, -s}, {0, s, c}}
}

// poseFromPair returns the model-to-scene pose that maps model reference
// point mr (aligned by rm) onto scene reference point sr (aligned by
// rs) and turns it by alpha about the common normal:
// T_s→g⁻¹ · Rx(α) · T_m→g, where T_m→g(x) = rm·(x − mr).
func poseFromPair(mr r3.Vec, rm mesh.Mat3, sr r3.Vec, rs mesh.Mat3, alpha float64) mesh.Pose {
	r := rs.T().Mul(rotX(alpha)).Mul(rm)
	return mesh.Pose{R: r, T: r3.Sub(sr, r.MulVec(mr))}
}
