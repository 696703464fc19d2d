package mesh

import (
	"gonum.org/v1/gonum/spatial/r3"
)

// ClipPlane keeps the part of m on the positive side of the plane
// {x : normal·x + offset = 0} (normal·x + offset ≥ 0) and cuts the
// triangles that cross it along the plane: each crossed edge gets one
// new vertex, shared by the triangles on both sides of the edge, with
// its normal and colour interpolated linearly, so the cut leaves a clean
// rim exactly on the plane and no cracks. Triangles wholly on the
// negative side are removed; vertices are kept (remove them with
// RemoveUnreferencedVertices). It returns the number of triangles
// removed or replaced.
func (m *Mesh) ClipPlane(normal r3.Vec, offset float64) int {
	dist := make([]float64, len(m.Vertices))
	for i, v := range m.Vertices {
		dist[i] = r3.Dot(normal, v) + offset
	}
	type edgeKey struct{ a, b uint32 }
	cut := map[edgeKey]uint32{}
	// cross returns the vertex where edge (a, b), with a inside and b
	// outside, meets the plane.
	cross := func(a, b uint32) uint32 {
		k := edgeKey{min(a, b), max(a, b)}
		if v, ok := cut[k]; ok {
			return v
		}
		t := dist[a] / (dist[a] - dist[b])
		lerp := func(p, q r3.Vec) r3.Vec { return r3.Add(p, r3.Scale(t, r3.Sub(q, p))) }
		v := uint32(len(m.Vertices))
		m.Vertices = append(m.Vertices, lerp(m.Vertices[a], m.Vertices[b]))
		if m.Normals != nil {
			m.Normals = append(m.Normals, Normalize(lerp(m.Normals[a], m.Normals[b])))
		}
		if m.Colors != nil {
			ca, cb := m.Colors[a], m.Colors[b]
			mix := func(x, y uint8) uint8 { return uint8(float64(x) + t*(float64(y)-float64(x)) + 0.5) }
			m.Colors = append(m.Colors, RGB{R: mix(ca.R, cb.R), G: mix(ca.G, cb.G), B: mix(ca.B, cb.B)})
		}
		dist = append(dist, 0)
		cut[k] = v
		return v
	}
	changed := 0
	out := m.Faces[:0:0]
	for _, f := range m.Faces {
		var in [3]bool
		n := 0
		for k, v := range f {
			in[k] = dist[v] >= 0
			if in[k] {
				n++
			}
		}
		switch n {
		case 3:
			out = append(out, f)
		case 0:
			changed++
		case 1:
			// Rotate so that the inside corner comes first; the winding is
			// kept.
			for !in[0] {
				f, in = Face{f[1], f[2], f[0]}, [3]bool{in[1], in[2], in[0]}
			}
			out = append(out, Face{f[0], cross(f[0], f[1]), cross(f[0], f[2])})
			changed++
		case 2:
			// Rotate so that the outside corner comes last.
			for in[2] {
				f, in = Face{f[1], f[2], f[0]}, [3]bool{in[1], in[2], in[0]}
			}
			p, q := cross(f[1], f[2]), cross(f[0], f[2])
			out = append(out, Face{f[0], f[1], p}, Face{f[0], p, q})
			changed++
		}
	}
	m.Faces = out
	return changed
}
