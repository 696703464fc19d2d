package validate

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// CanonicalFrame returns PartToInput, the pose that maps the canonical
// part frame of the surface m into m's own (input) frame; m mapped by
// PartToInput.Inv() is the part in its canonical frame. The catalog
// stores a part in this frame and keeps PartToInput as the transform
// back to the sweep's frame.
//
// The canonical frame of a surface:
//
//   - Origin: the area centroid of the surface (∫x dA / A over its
//     triangles, in closed form). It is used rather than the solid's
//     centre of mass because a fused scan is usually open where it stood
//     on its support, and an open surface has no solid.
//   - z: up, the unit normal of the support the part stood on during the
//     sweep, pointing away from it (into the half space the part was
//     in). When up is the zero vector, z is instead the principal axis of
//     least spread of the surface's area second moment.
//   - x: the principal axis of largest spread of the area second moment
//     projected into the plane perpendicular to z (the eigenvector of
//     the larger eigenvalue of its 2×2 block); y = z × x.
//   - Signs: x (and, when up is zero, z) points toward the side where
//     the surface's third central moment along it, ∫(x·d)³ dA, is
//     positive: the heavier tail of the surface. When that moment is
//     below 10⁻⁶ of A·s³ (s the RMS radius: a part symmetric along the
//     axis, for which either sign is as good) the axis is chosen to have
//     a non-negative component along the input frame's x, then its y,
//     then its z axis (the first that is not nearly perpendicular).
//     For z in the up-less case the same rule applies.
//
// The third moment over a triangle with corners whose values of the
// linear function f are f₁, f₂, f₃ is ∫f³ dA = A/10·Σ f₁^a f₂^b f₃^c
// over a + b + c = 3 (the integrals of barycentric monomials, ∫λ₁^a
// λ₂^b λ₃^c dA = 2A·a!b!c!/(a+b+c+2)!; handbook formula).
//
// Degenerate input: a surface without area, a non-finite up vector, or
// one whose principal axes are undetermined (all three spreads equal,
// as for a sphere: any frame would do and the rule picks the input's
// axes) — the last is not an error: the input's axes projected are
// used. A surface of zero area gives an error wrapping
// mesh.ErrDegenerate.
func CanonicalFrame(m *mesh.Mesh, up r3.Vec) (mesh.Pose, error) {
	if m == nil {
		return mesh.Pose{}, fmt.Errorf("validate: canonical frame of a nil mesh")
	}
	if err := m.Validate(); err != nil {
		return mesh.Pose{}, fmt.Errorf("validate: canonical frame: %w", err)
	}
	if !vecFinite(up) {
		return mesh.Pose{}, fmt.Errorf("validate: canonical frame: up %v is not finite", up)
	}
	c, cov, area := surfaceMoments(m)
	if !(area > 0) {
		return mesh.Pose{}, fmt.Errorf("validate: canonical frame: the surface has no area: %w", mesh.ErrDegenerate)
	}
	rms := math.Sqrt(cov[0][0] + cov[1][1] + cov[2][2])
	third := func(dir r3.Vec) float64 { return thirdMoment(m, c, dir) }
	signed := func(dir r3.Vec) r3.Vec {
		t := third(dir)
		if math.Abs(t) > 1e-6*area*rms*rms*rms {
			if t < 0 {
				return r3.Scale(-1, dir)
			}
			return dir
		}
		for _, e := range []r3.Vec{{X: 1}, {Y: 1}, {Z: 1}} {
			if d := r3.Dot(dir, e); math.Abs(d) > 1e-6 {
				if d < 0 {
					return r3.Scale(-1, dir)
				}
				return dir
			}
		}
		return dir
	}
	var z r3.Vec
	if r3.Norm(up) > 0 {
		z = mesh.Normalize(up)
	} else {
		ev := eigenSym3(cov)
		z = signed(ev[0]) // smallest spread
	}
	// The 2×2 block of the covariance in a basis (u, w) of the plane
	// perpendicular to z.
	u, w := planeBasis(z)
	quad := func(a, b r3.Vec) float64 {
		av := [3]float64{a.X, a.Y, a.Z}
		bv := [3]float64{b.X, b.Y, b.Z}
		var s float64
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				s += av[i] * cov[i][j] * bv[j]
			}
		}
		return s
	}
	suu, sww, suw := quad(u, u), quad(w, w), quad(u, w)
	// Angle of the major axis of a symmetric 2×2 matrix.
	phi := 0.5 * math.Atan2(2*suw, suu-sww)
	x := r3.Add(r3.Scale(math.Cos(phi), u), r3.Scale(math.Sin(phi), w))
	if math.Abs(suu-sww) < 1e-9*(suu+sww) && math.Abs(suw) < 1e-9*(suu+sww) {
		// Round in the plane: no principal direction; start from the
		// input's x axis projected (or y when x is along z).
		e := r3.Vec{X: 1}
		if math.Abs(r3.Dot(e, z)) > 0.9 {
			e = r3.Vec{Y: 1}
		}
		x = mesh.Normalize(r3.Sub(e, r3.Scale(r3.Dot(e, z), z)))
	}
	x = signed(mesh.Normalize(x))
	y := r3.Cross(z, x)
	var r mesh.Mat3
	for i, col := range []r3.Vec{x, y, z} {
		r[0][i], r[1][i], r[2][i] = col.X, col.Y, col.Z
	}
	return mesh.Pose{R: r, T: c}.Orthonormalize(), nil
}

// thirdMoment returns ∫((p − c)·dir)³ dA over the surface, in closed
// form per triangle (see CanonicalFrame).
func thirdMoment(m *mesh.Mesh, c, dir r3.Vec) float64 {
	var s float64
	for _, f := range m.Faces {
		a, b, d := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
		ar := r3.Norm(r3.Cross(r3.Sub(b, a), r3.Sub(d, a))) / 2
		if !(ar > 0) {
			continue
		}
		f1 := r3.Dot(r3.Sub(a, c), dir)
		f2 := r3.Dot(r3.Sub(b, c), dir)
		f3 := r3.Dot(r3.Sub(d, c), dir)
		h3 := f1*f1*f1 + f2*f2*f2 + f3*f3*f3 +
			f1*f1*(f2+f3) + f2*f2*(f1+f3) + f3*f3*(f1+f2) + f1*f2*f3
		s += ar / 10 * h3
	}
	return s
}

// eigenSym3 returns the unit eigenvectors of a symmetric 3×3 matrix,
// smallest eigenvalue first; on failure the coordinate axes.
func eigenSym3(a [3][3]float64) [3]r3.Vec {
	var eig mat.EigenSym
	s := mat.NewSymDense(3, []float64{a[0][0], a[0][1], a[0][2], a[1][0], a[1][1], a[1][2], a[2][0], a[2][1], a[2][2]})
	if !eig.Factorize(s, true) {
		return [3]r3.Vec{{X: 1}, {Y: 1}, {Z: 1}}
	}
	var v mat.Dense
	eig.VectorsTo(&v)
	var out [3]r3.Vec
	for j := 0; j < 3; j++ {
		out[j] = mesh.Normalize(r3.Vec{X: v.At(0, j), Y: v.At(1, j), Z: v.At(2, j)})
	}
	return out
}

// PlaneHeight returns the height, along the canonical frame's z axis, of
// a plane given in the input frame as {x : normal·x + offset = 0}: the
// z at which the plane crosses the part frame's z axis. With normal
// along up (the support plane a part stood on), every point of the
// plane has this z in the part frame; CheckInput.SupportZ takes it.
func PlaneHeight(partToInput mesh.Pose, normal r3.Vec, offset float64) float64 {
	// Points c + t·z of the part's z axis: normal·(c + t·z) + offset = 0.
	z := partToInput.R.Col(2)
	den := r3.Dot(normal, z)
	if den == 0 {
		return math.NaN()
	}
	return -(r3.Dot(normal, partToInput.T) + offset) / den
}
