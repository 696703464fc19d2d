package render

import (
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Test geometry built here, so the tests depend on nothing but the core
// mesh types.

// quadMesh returns a rectangle in the plane z = 0 spanning
// [−hx, hx]×[−hy, hy] as two triangles, with its outward normal along −z
// (so that, placed in front of the camera with an identity rotation, it
// faces the camera).
func quadMesh(hx, hy float64) *mesh.Mesh {
	return &mesh.Mesh{
		Vertices: []r3.Vec{{X: -hx, Y: -hy}, {X: hx, Y: -hy}, {X: hx, Y: hy}, {X: -hx, Y: hy}},
		// (b−a)×(c−a) for (0, 3, 2): (0, 2hy, 0)×(2hx, 2hy, 0) = (0, 0, −4hxhy).
		Faces: []mesh.Face{{0, 3, 2}, {0, 2, 1}},
	}
}

// icosphere returns a sphere of radius r about the origin: an
// icosahedron subdivided n times with every vertex pushed onto the
// sphere, faces counter-clockwise from outside, with exact unit normals.
func icosphere(r float64, n int) *mesh.Mesh {
	t := (1 + math.Sqrt(5)) / 2
	verts := []r3.Vec{
		{X: -1, Y: t}, {X: 1, Y: t}, {X: -1, Y: -t}, {X: 1, Y: -t},
		{Y: -1, Z: t}, {Y: 1, Z: t}, {Y: -1, Z: -t}, {Y: 1, Z: -t},
		{X: t, Z: -1}, {X: t, Z: 1}, {X: -t, Z: -1}, {X: -t, Z: 1},
	}
	faces := []mesh.Face{
		{0, 11, 5}, {0, 5, 1}, {0, 1, 7}, {0, 7, 10}, {0, 10, 11},
		{1, 5, 9}, {5, 11, 4}, {11, 10, 2}, {10, 7, 6}, {7, 1, 8},
		{3, 9, 4}, {3, 4, 2}, {3, 2, 6}, {3, 6, 8}, {3, 8, 9},
		{4, 9, 5}, {2, 4, 11}, {6, 2, 10}, {8, 6, 7}, {9, 8, 1},
	}
	for i := range verts {
		verts[i] = mesh.Normalize(verts[i])
	}
	for s := 0; s < n; s++ {
		mid := map[[2]uint32]uint32{}
		midpoint := func(a, b uint32) uint32 {
			key := [2]uint32{min(a, b), max(a, b)}
			if m, ok := mid[key]; ok {
				return m
			}
			verts = append(verts, mesh.Normalize(r3.Add(verts[a], verts[b])))
			mid[key] = uint32(len(verts) - 1)
			return mid[key]
		}
		next := make([]mesh.Face, 0, 4*len(faces))
		for _, f := range faces {
			a, b, c := midpoint(f[0], f[1]), midpoint(f[1], f[2]), midpoint(f[2], f[0])
			next = append(next, mesh.Face{f[0], a, c}, mesh.Face{f[1], b, a}, mesh.Face{f[2], c, b}, mesh.Face{a, b, c})
		}
		faces = next
	}
	m := &mesh.Mesh{Faces: faces, Normals: make([]r3.Vec, len(verts)), Vertices: make([]r3.Vec, len(verts))}
	for i, v := range verts {
		m.Normals[i] = v
		m.Vertices[i] = r3.Scale(r, v)
	}
	return m
}

// uvSphere returns a sphere of radius r with the given number of stacks
// and slices (2·slices·(stacks−1) triangles), without normals.
func uvSphere(r float64, stacks, slices int) *mesh.Mesh {
	m := &mesh.Mesh{}
	m.Vertices = append(m.Vertices, r3.Vec{Z: r})
	for i := 1; i < stacks; i++ {
		th := math.Pi * float64(i) / float64(stacks)
		for j := 0; j < slices; j++ {
			ph := 2 * math.Pi * float64(j) / float64(slices)
			m.Vertices = append(m.Vertices, r3.Vec{X: r * math.Sin(th) * math.Cos(ph), Y: r * math.Sin(th) * math.Sin(ph), Z: r * math.Cos(th)})
		}
	}
	m.Vertices = append(m.Vertices, r3.Vec{Z: -r})
	ring := func(i, j int) uint32 { return uint32(1 + (i-1)*slices + (j % slices)) }
	last := uint32(len(m.Vertices) - 1)
	for j := 0; j < slices; j++ {
		m.Faces = append(m.Faces, mesh.Face{0, ring(1, j), ring(1, j+1)})
		m.Faces = append(m.Faces, mesh.Face{last, ring(stacks-1, j+1), ring(stacks-1, j)})
	}
	for i := 1; i < stacks-1; i++ {
		for j := 0; j < slices; j++ {
			a, b, c, d := ring(i, j), ring(i, j+1), ring(i+1, j+1), ring(i+1, j)
			m.Faces = append(m.Faces, mesh.Face{a, d, c}, mesh.Face{a, c, b})
		}
	}
	return m
}

// translate returns the pose that only translates by t.
func translate(x, y, z float64) mesh.Pose {
	p := mesh.Identity()
	p.T = r3.Vec{X: x, Y: y, Z: z}
	return p
}
