package mesh

import (
	"errors"
	"fmt"

	"gonum.org/v1/gonum/spatial/r3"
)

// ErrDegenerate is wrapped by errors for input that has no meaningful
// answer: too few points, collinear points, zero-area geometry.
var ErrDegenerate = errors.New("mesh: degenerate input")

// RGB is an 8-bit sRGB colour.
type RGB struct{ R, G, B uint8 }

// Face is a triangle as three indices into a Mesh's Vertices, counter-
// clockwise when seen from outside (the right-hand rule gives the
// outward normal).
type Face [3]uint32

// Mesh is an indexed triangle mesh with optional per-vertex normals and
// colours.
type Mesh struct {
	Vertices []r3.Vec
	Normals  []r3.Vec // nil, or one unit normal per vertex
	Colors   []RGB    // nil, or one colour per vertex
	Faces    []Face
}

// Cloud is a point cloud with optional per-point normals and colours.
type Cloud struct {
	Points  []r3.Vec
	Normals []r3.Vec // nil, or one unit normal per point
	Colors  []RGB    // nil, or one colour per point
}

// Validate reports the first broken invariant of m: attribute slices of
// the wrong length, or a face index out of range.
func (m *Mesh) Validate() error {
	n := len(m.Vertices)
	if m.Normals != nil && len(m.Normals) != n {
		return fmt.Errorf("mesh: %d normals for %d vertices", len(m.Normals), n)
	}
	if m.Colors != nil && len(m.Colors) != n {
		return fmt.Errorf("mesh: %d colours for %d vertices", len(m.Colors), n)
	}
	for i, f := range m.Faces {
		for _, v := range f {
			if int64(v) >= int64(n) {
				return fmt.Errorf("mesh: face %d references vertex %d of %d", i, v, n)
			}
		}
	}
	return nil
}

// Validate reports the first broken invariant of c.
func (c *Cloud) Validate() error {
	n := len(c.Points)
	if c.Normals != nil && len(c.Normals) != n {
		return fmt.Errorf("mesh: cloud has %d normals for %d points", len(c.Normals), n)
	}
	if c.Colors != nil && len(c.Colors) != n {
		return fmt.Errorf("mesh: cloud has %d colours for %d points", len(c.Colors), n)
	}
	return nil
}

// Clone returns a deep copy of m.
func (m *Mesh) Clone() *Mesh {
	return &Mesh{
		Vertices: cloneSlice(m.Vertices),
		Normals:  cloneSlice(m.Normals),
		Colors:   cloneSlice(m.Colors),
		Faces:    cloneSlice(m.Faces),
	}
}

// Clone returns a deep copy of c.
func (c *Cloud) Clone() *Cloud {
	return &Cloud{
		Points:  cloneSlice(c.Points),
		Normals: cloneSlice(c.Normals),
		Colors:  cloneSlice(c.Colors),
	}
}

func cloneSlice[T any](s []T) []T {
	if s == nil {
		return nil
	}
	return append([]T(nil), s...)
}

// Transform returns a copy of m with every vertex mapped by p and every
// normal rotated by p.R.
func (m *Mesh) Transform(p Pose) *Mesh {
	out := m.Clone()
	for i, v := range out.Vertices {
		out.Vertices[i] = p.Apply(v)
	}
	for i, n := range out.Normals {
		out.Normals[i] = p.Rotate(n)
	}
	return out
}

// Transform returns a copy of c with every point mapped by p and every
// normal rotated by p.R.
func (c *Cloud) Transform(p Pose) *Cloud {
	out := c.Clone()
	for i, v := range out.Points {
		out.Points[i] = p.Apply(v)
	}
	for i, n := range out.Normals {
		out.Normals[i] = p.Rotate(n)
	}
	return out
}

// FaceNormal returns the unit normal of face f by the right-hand rule,
// or the zero vector for a degenerate face.
func (m *Mesh) FaceNormal(f Face) r3.Vec {
	a, b, c := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
	return Normalize(r3.Cross(r3.Sub(b, a), r3.Sub(c, a)))
}

// Normalize returns v scaled to unit length, or the zero vector when v
// is zero (never NaN).
func Normalize(v r3.Vec) r3.Vec {
	n := r3.Norm(v)
	if n == 0 {
		return r3.Vec{}
	}
	return r3.Scale(1/n, v)
}
