package mesh

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/num/quat"
	"gonum.org/v1/gonum/spatial/r3"
)

// Mat3 is a 3×3 matrix in row-major order: M[row][col].
type Mat3 [3][3]float64

// Identity3 returns the 3×3 identity matrix.
func Identity3() Mat3 { return Mat3{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}} }

// MulVec returns M·v.
func (m Mat3) MulVec(v r3.Vec) r3.Vec {
	return r3.Vec{
		X: m[0][0]*v.X + m[0][1]*v.Y + m[0][2]*v.Z,
		Y: m[1][0]*v.X + m[1][1]*v.Y + m[1][2]*v.Z,
		Z: m[2][0]*v.X + m[2][1]*v.Y + m[2][2]*v.Z,
	}
}

// Mul returns M·B.
func (m Mat3) Mul(b Mat3) Mat3 {
	var out Mat3
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			out[i][j] = m[i][0]*b[0][j] + m[i][1]*b[1][j] + m[i][2]*b[2][j]
		}
	}
	return out
}

// T returns the transpose of M.
func (m Mat3) T() Mat3 {
	return Mat3{
		{m[0][0], m[1][0], m[2][0]},
		{m[0][1], m[1][1], m[2][1]},
		{m[0][2], m[1][2], m[2][2]},
	}
}

// Det returns the determinant of M.
func (m Mat3) Det() float64 {
	return m[0][0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) -
		m[0][1]*(m[1][0]*m[2][2]-m[1][2]*m[2][0]) +
		m[0][2]*(m[1][0]*m[2][1]-m[1][1]*m[2][0])
}

// Col returns column j of M.
func (m Mat3) Col(j int) r3.Vec { return r3.Vec{X: m[0][j], Y: m[1][j], Z: m[2][j]} }

// Pose is a rigid transform x ↦ R·x + T. Name every Pose variable by the
// frames it maps between, source to destination: ModelToCam, CamToWorld.
// The zero Pose is not valid (R = 0); use Identity.
type Pose struct {
	R Mat3
	T r3.Vec
}

// Identity returns the identity pose.
func Identity() Pose { return Pose{R: Identity3()} }

// Apply maps point x: R·x + T.
func (p Pose) Apply(x r3.Vec) r3.Vec { return r3.Add(p.R.MulVec(x), p.T) }

// Rotate maps direction v: R·v (normals, axes; no translation).
func (p Pose) Rotate(v r3.Vec) r3.Vec { return p.R.MulVec(v) }

// Mul returns the composition p∘q, the pose that applies q first and then
// p: (p.Mul(q)).Apply(x) == p.Apply(q.Apply(x)). So
// WorldToCam.Mul(ModelToWorld) is ModelToCam.
func (p Pose) Mul(q Pose) Pose {
	return Pose{R: p.R.Mul(q.R), T: p.Apply(q.T)}
}

// Inv returns the inverse pose x ↦ Rᵀ·(x − T).
func (p Pose) Inv() Pose {
	rt := p.R.T()
	return Pose{R: rt, T: r3.Scale(-1, rt.MulVec(p.T))}
}

// Mat4 returns the pose as a row-major homogeneous 4×4 matrix.
func (p Pose) Mat4() [16]float64 {
	return [16]float64{
		p.R[0][0], p.R[0][1], p.R[0][2], p.T.X,
		p.R[1][0], p.R[1][1], p.R[1][2], p.T.Y,
		p.R[2][0], p.R[2][1], p.R[2][2], p.T.Z,
		0, 0, 0, 1,
	}
}

// PoseFromMat4 reads a row-major homogeneous 4×4 matrix. It returns an
// error when the bottom row is not (0 0 0 1) or the upper-left block is
// not a rotation within tol (orthonormality and determinant +1, each
// entry of RᵀR − I within tol).
func PoseFromMat4(m [16]float64, tol float64) (Pose, error) {
	for i, v := range m {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Pose{}, fmt.Errorf("mesh: pose matrix entry %d is %v", i, v)
		}
	}
	if m[12] != 0 || m[13] != 0 || m[14] != 0 || m[15] != 1 {
		return Pose{}, fmt.Errorf("mesh: pose matrix bottom row is %v, want [0 0 0 1]", m[12:16])
	}
	p := Pose{
		R: Mat3{{m[0], m[1], m[2]}, {m[4], m[5], m[6]}, {m[8], m[9], m[10]}},
		T: r3.Vec{X: m[3], Y: m[7], Z: m[11]},
	}
	if err := p.R.checkRotation(tol); err != nil {
		return Pose{}, err
	}
	return p, nil
}

func (m Mat3) checkRotation(tol float64) error {
	g := m.T().Mul(m)
	id := Identity3()
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			if d := math.Abs(g[i][j] - id[i][j]); d > tol {
				return fmt.Errorf("mesh: rotation is not orthonormal (RᵀR deviates from I by %.3g at [%d][%d])", d, i, j)
			}
		}
	}
	if d := m.Det(); math.Abs(d-1) > tol {
		return fmt.Errorf("mesh: rotation determinant is %.6g, want +1", d)
	}
	return nil
}

// Quat returns R as a unit quaternion with non-negative real part
// (Shepperd's method: pick the largest of the four squared components to
// divide by, which keeps it stable near 180° rotations).
func (p Pose) Quat() quat.Number { return p.R.Quat() }

// Quat returns the rotation M as a unit quaternion with non-negative real
// part.
func (m Mat3) Quat() quat.Number {
	tr := m[0][0] + m[1][1] + m[2][2]
	var q quat.Number
	switch {
	case tr >= m[0][0] && tr >= m[1][1] && tr >= m[2][2]:
		s := math.Sqrt(1+tr) * 2
		q = quat.Number{Real: s / 4, Imag: (m[2][1] - m[1][2]) / s, Jmag: (m[0][2] - m[2][0]) / s, Kmag: (m[1][0] - m[0][1]) / s}
	case m[0][0] >= m[1][1] && m[0][0] >= m[2][2]:
		s := math.Sqrt(1+m[0][0]-m[1][1]-m[2][2]) * 2
		q = quat.Number{Real: (m[2][1] - m[1][2]) / s, Imag: s / 4, Jmag: (m[0][1] + m[1][0]) / s, Kmag: (m[0][2] + m[2][0]) / s}
	case m[1][1] >= m[2][2]:
		s := math.Sqrt(1+m[1][1]-m[0][0]-m[2][2]) * 2
		q = quat.Number{Real: (m[0][2] - m[2][0]) / s, Imag: (m[0][1] + m[1][0]) / s, Jmag: s / 4, Kmag: (m[1][2] + m[2][1]) / s}
	default:
		s := math.Sqrt(1+m[2][2]-m[0][0]-m[1][1]) * 2
		q = quat.Number{Real: (m[1][0] - m[0][1]) / s, Imag: (m[0][2] + m[2][0]) / s, Jmag: (m[1][2] + m[2][1]) / s, Kmag: s / 4}
	}
	if q.Real < 0 {
		q = quat.Scale(-1, q)
	}
	return quat.Scale(1/quat.Abs(q), q)
}

// RotationFromQuat returns the rotation matrix of quaternion q, which is
// normalised first. A zero quaternion gives the identity.
func RotationFromQuat(q quat.Number) Mat3 {
	n := quat.Abs(q)
	if n == 0 {
		return Identity3()
	}
	q = quat.Scale(1/n, q)
	w, x, y, z := q.Real, q.Imag, q.Jmag, q.Kmag
	return Mat3{
		{1 - 2*(y*y+z*z), 2 * (x*y - w*z), 2 * (x*z + w*y)},
		{2 * (x*y + w*z), 1 - 2*(x*x+z*z), 2 * (y*z - w*x)},
		{2 * (x*z - w*y), 2 * (y*z + w*x), 1 - 2*(x*x+y*y)},
	}
}

// PoseFromQuat returns the pose with rotation q (normalised) and
// translation t.
func PoseFromQuat(q quat.Number, t r3.Vec) Pose {
	return Pose{R: RotationFromQuat(q), T: t}
}

// RotationFromAxisAngle returns the rotation by angle radians about axis
// (right-hand rule; Rodrigues' formula). A zero axis gives the identity.
func RotationFromAxisAngle(axis r3.Vec, angle float64) Mat3 {
	k := Normalize(axis)
	if k == (r3.Vec{}) {
		return Identity3()
	}
	s, c := math.Sincos(angle)
	v := 1 - c
	return Mat3{
		{c + k.X*k.X*v, k.X*k.Y*v - k.Z*s, k.X*k.Z*v + k.Y*s},
		{k.Y*k.X*v + k.Z*s, c + k.Y*k.Y*v, k.Y*k.Z*v - k.X*s},
		{k.Z*k.X*v - k.Y*s, k.Z*k.Y*v + k.X*s, c + k.Z*k.Z*v},
	}
}

// PoseFromAxisAngle returns the pose rotating by angle about axis, then
// translating by t.
func PoseFromAxisAngle(axis r3.Vec, angle float64, t r3.Vec) Pose {
	return Pose{R: RotationFromAxisAngle(axis, angle), T: t}
}

// AxisAngle returns M as a unit axis and an angle in [0, π]. For the
// identity the axis is +z and the angle 0. Computed through the
// quaternion, which stays accurate near 0 and π where the trace formula
// loses precision.
func (m Mat3) AxisAngle() (axis r3.Vec, angle float64) {
	q := m.Quat() // Real ≥ 0, so the angle is in [0, π]
	v := r3.Vec{X: q.Imag, Y: q.Jmag, Z: q.Kmag}
	s := r3.Norm(v)
	if s == 0 {
		return r3.Vec{Z: 1}, 0
	}
	return r3.Scale(1/s, v), 2 * math.Atan2(s, q.Real)
}

// AxisAngle returns the pose's rotation as a unit axis and an angle in
// [0, π].
func (p Pose) AxisAngle() (axis r3.Vec, angle float64) { return p.R.AxisAngle() }

// RotationAngle returns the angle in [0, π] of the relative rotation
// between p and q: the geodesic distance on SO(3).
func RotationAngle(p, q Pose) float64 {
	_, a := p.R.T().Mul(q.R).AxisAngle()
	return a
}

// Orthonormalize returns p with R replaced by the nearest rotation
// (through its quaternion), undoing drift from long chains of products.
func (p Pose) Orthonormalize() Pose {
	return Pose{R: RotationFromQuat(p.R.Quat()), T: p.T}
}

// LookAt returns the CamToWorld pose of a camera at eye looking at
// target, with the image's up direction (−y in the camera frame) as close
// to up as possible. It returns an error when eye and target coincide or
// up is parallel to the viewing direction.
func LookAt(eye, target, up r3.Vec) (Pose, error) {
	z := Normalize(r3.Sub(target, eye))
	if z == (r3.Vec{}) {
		return Pose{}, fmt.Errorf("mesh: LookAt eye and target coincide: %w", ErrDegenerate)
	}
	x := Normalize(r3.Cross(z, up)) // camera x: right; y: down = z × x
	if x == (r3.Vec{}) {
		return Pose{}, fmt.Errorf("mesh: LookAt up is parallel to the viewing direction: %w", ErrDegenerate)
	}
	y := r3.Cross(z, x)
	return Pose{
		R: Mat3{{x.X, y.X, z.X}, {x.Y, y.Y, z.Y}, {x.Z, y.Z, z.Z}},
		T: eye,
	}, nil
}
