package mesh_test

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

func ExampleReadPLY() {
	// A unit square as one quad, fanned into two triangles.
	src := `ply
format ascii 1.0
comment a unit square
element vertex 4
property float x
property float y
property float z
element face 1
property list uchar int vertex_indices
end_header
0 0 0
1 0 0
1 1 0
0 1 0
4 0 1 2 3
`
	m, err := mesh.ReadPLY(strings.NewReader(src))
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(len(m.Vertices), "vertices, triangles", m.Faces)
	// Output: 4 vertices, triangles [[0 1 2] [0 2 3]]
}

func ExampleReadPLY_error() {
	// Errors name the element, record, property and line, and tell
	// invalid input from unsupported input.
	src := "ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float y\nproperty float z\n" +
		"element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n3 0 0 7\n"
	_, err := mesh.ReadPLY(strings.NewReader(src))
	fmt.Println(err)
	fmt.Println(errors.Is(err, mesh.ErrInvalid), errors.Is(err, mesh.ErrUnsupported))
	// Output:
	// mesh: ply: face element: record 0: property vertex_indices: line 11: vertex index 7 is outside [0, 1)
	// true false
}

func ExampleWritePLY() {
	// A triangle with a per-vertex deviation, as ASCII.
	m := &mesh.Mesh{
		Vertices: []r3.Vec{{X: 0, Y: 0, Z: 0}, {X: 0.01, Y: 0, Z: 0}, {X: 0, Y: 0.01, Z: 0}},
		Faces:    []mesh.Face{{0, 1, 2}},
	}
	var buf bytes.Buffer
	err := mesh.WritePLY(&buf, m, mesh.PLYOptions{
		Format:        mesh.PLYASCII,
		VertexScalars: []mesh.NamedScalars{{Name: "deviation", Values: []float32{0, 0.0005, -0.001}}},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Print(buf.String())
	// Output:
	// ply
	// format ascii 1.0
	// element vertex 3
	// property float x
	// property float y
	// property float z
	// property float deviation
	// element face 1
	// property list uchar int vertex_indices
	// end_header
	// 0 0 0 0
	// 0.01 0 0 0.0005
	// 0 0.01 0 -0.001
	// 3 0 1 2
}

func ExampleSaveMesh() {
	dir, err := os.MkdirTemp("", "scanfold-example")
	if err != nil {
		fmt.Println(err)
		return
	}
	defer os.RemoveAll(dir)
	m := &mesh.Mesh{
		Vertices: []r3.Vec{{X: 0, Y: 0, Z: 0}, {X: 1, Y: 0, Z: 0}, {X: 0, Y: 1, Z: 0}, {X: 0, Y: 0, Z: 1}},
		Faces:    []mesh.Face{{0, 2, 1}, {0, 1, 3}, {0, 3, 2}, {1, 2, 3}},
	}
	// The extension picks the format; each file is replaced atomically.
	for _, name := range []string{"part.ply", "part.stl", "part.obj"} {
		path := filepath.Join(dir, name)
		if err := mesh.SaveMesh(path, m); err != nil {
			fmt.Println(err)
			return
		}
		back, err := mesh.LoadMesh(path)
		if err != nil {
			fmt.Println(err)
			return
		}
		fmt.Println(name, len(back.Vertices), "vertices,", len(back.Faces), "triangles")
	}
	// Output:
	// part.ply 4 vertices, 4 triangles
	// part.stl 4 vertices, 4 triangles
	// part.obj 4 vertices, 4 triangles
}
