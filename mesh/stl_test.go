package mesh

import (
	"bytes"
	"encoding/binary"
	"errors"
	"io"
	"math"
	"strings"
	"testing"

	"github.com/hschendel/stl"
	"gonum.org/v1/gonum/spatial/r3"
)

// checkSameTriangles checks that got has want's triangles, in order,
// with positions rounded to float32, whatever the vertex numbering.
func checkSameTriangles(t *testing.T, got, want *Mesh) {
	t.Helper()
	if len(got.Faces) != len(want.Faces) {
		t.Fatalf("%d triangles, want %d", len(got.Faces), len(want.Faces))
	}
	for i := range want.Faces {
		for j := range 3 {
			g, w := got.Vertices[got.Faces[i][j]], round32(want.Vertices[want.Faces[i][j]])
			if g != w {
				t.Fatalf("triangle %d vertex %d = %v, want %v", i, j, g, w)
			}
		}
	}
}

// turkCubeMesh is the cube of Turk's PLY description as a mesh.
func turkCubeMesh(t testing.TB) *Mesh {
	t.Helper()
	m, err := ReadPLY(bytes.NewReader(readTestFile(t, "turk_cube.ply")))
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// libraryCube is the cube's 12 triangles as a solid built with
// github.com/hschendel/stl alone, normals computed by the library.
func libraryCube(t testing.TB) *stl.Solid {
	m := turkCubeMesh(t)
	s := &stl.Solid{Name: "cube"}
	for _, f := range m.Faces {
		var tr stl.Triangle
		for j, vi := range f {
			v := m.Vertices[vi]
			tr.Vertices[j] = stl.Vec3{float32(v.X), float32(v.Y), float32(v.Z)}
		}
		s.Triangles = append(s.Triangles, tr)
	}
	s.RecalculateNormals()
	return s
}

func TestReadSTLWrittenByLibrary(t *testing.T) {
	// Reference: files written by github.com/hschendel/stl itself, in
	// both encodings, read back as the triangles the library was given;
	// welding gives the cube's 8 corners back (Turk 1994: 8 vertices,
	// area 6, volume 1).
	for _, ascii := range []bool{false, true} {
		s := libraryCube(t)
		s.IsAscii = ascii
		var buf bytes.Buffer
		if err := s.WriteAll(&buf); err != nil {
			t.Fatal(err)
		}
		m, err := ReadSTL(&buf)
		if err != nil {
			t.Fatalf("ascii=%v: %v", ascii, err)
		}
		if len(m.Vertices) != 8 || len(m.Faces) != 12 || m.Normals != nil || m.Colors != nil {
			t.Fatalf("ascii=%v: %d vertices, %d faces (normals %v, colours %v); want 8, 12, none",
				ascii, len(m.Vertices), len(m.Faces), m.Normals != nil, m.Colors != nil)
		}
		for i, tr := range s.Triangles {
			for j := range 3 {
				v := m.Vertices[m.Faces[i][j]]
				if w := tr.Vertices[j]; v != (r3.Vec{X: float64(w[0]), Y: float64(w[1]), Z: float64(w[2])}) {
					t.Fatalf("ascii=%v: triangle %d vertex %d = %v, want %v", ascii, i, j, v, w)
				}
			}
		}
		if a, v := ioTestArea(m), ioTestVolume(m); a != 6 || v != 1 {
			t.Errorf("ascii=%v: area %v, volume %v; want 6, 1", ascii, a, v)
		}
	}
}

func TestWriteSTLReadByLibrary(t *testing.T) {
	// Reference: github.com/hschendel/stl's own reader yields our
	// triangles, with the right-hand-rule facet normals.
	m := ioTestMesh(5, 100)
	for _, ascii := range []bool{false, true} {
		var buf bytes.Buffer
		if err := WriteSTL(&buf, m, ascii); err != nil {
			t.Fatal(err)
		}
		if !ascii && bytes.HasPrefix(buf.Bytes(), []byte("solid")) {
			t.Error("binary header starts with \"solid\", which readers take for ASCII")
		}
		s, err := stl.ReadAll(bytes.NewReader(buf.Bytes()))
		if err != nil {
			t.Fatalf("ascii=%v: the library cannot read our file: %v", ascii, err)
		}
		if s.IsAscii != ascii || len(s.Triangles) != len(m.Faces) {
			t.Fatalf("library read ascii=%v with %d triangles; want ascii=%v, %d", s.IsAscii, len(s.Triangles), ascii, len(m.Faces))
		}
		for i, f := range m.Faces {
			tr := s.Triangles[i]
			for j, vi := range f {
				w := round32(m.Vertices[vi])
				if g := tr.Vertices[j]; (r3.Vec{X: float64(g[0]), Y: float64(g[1]), Z: float64(g[2])}) != w {
					t.Fatalf("triangle %d vertex %d = %v, want %v", i, j, g, w)
				}
			}
			n := m.FaceNormal(f)
			if g := tr.Normal; g != (stl.Vec3{float32(n.X), float32(n.Y), float32(n.Z)}) {
				t.Fatalf("triangle %d normal = %v, want %v", i, g, n)
			}
		}
	}
}

func TestSTLRoundTripAndWelding(t *testing.T) {
	// A mesh with normals and colours keeps its triangles; the
	// attributes are not part of STL.
	m := ioTestMesh(6, 300)
	for _, ascii := range []bool{false, true} {
		var buf bytes.Buffer
		if err := WriteSTL(&buf, m, ascii); err != nil {
			t.Fatal(err)
		}
		got, err := ReadSTL(&buf)
		if err != nil {
			t.Fatal(err)
		}
		checkSameTriangles(t, got, m)
		if got.Normals != nil || got.Colors != nil {
			t.Error("STL gave attributes")
		}
	}
	// Two copies of a vertex at distinct indices weld into one; a
	// vertex one float32 step away does not.
	x := float32(0.1)
	next := float64(math.Nextafter32(x, 1))
	m = &Mesh{
		Vertices: []r3.Vec{{}, {X: 1}, {Y: 1}, {X: 1}, {Y: 1}, {X: 1, Y: 1}, {X: float64(x)}, {X: next}, {Z: 1}},
		Faces:    []Face{{0, 1, 2}, {3, 5, 4}, {6, 7, 8}},
	}
	var buf bytes.Buffer
	if err := WriteSTL(&buf, m, false); err != nil {
		t.Fatal(err)
	}
	got, err := ReadSTL(&buf)
	if err != nil {
		t.Fatal(err)
	}
	want := []Face{{0, 1, 2}, {1, 3, 2}, {4, 5, 6}}
	negZero := math.Copysign(0, -1)
	m.Vertices[3] = r3.Vec{X: 1, Y: negZero, Z: negZero} // −0 welds with +0, as == has it
	if len(got.Vertices) != 7 || len(got.Faces) != 3 || got.Faces[0] != want[0] || got.Faces[1] != want[1] || got.Faces[2] != want[2] {
		t.Errorf("welded to %d vertices, faces %v; want 7, %v", len(got.Vertices), got.Faces, want)
	}
}

func TestReadSTLSolidWithoutName(t *testing.T) {
	src := "solid\nfacet normal 0 0 1\n outer loop\n  vertex 0 0 0\n  vertex 1 0 0\n  vertex 0 1 0\n endloop\nendfacet\nendsolid\n"
	m, err := ReadSTL(strings.NewReader(src))
	if err != nil || len(m.Faces) != 1 || m.Vertices[1] != (r3.Vec{X: 1}) {
		t.Fatalf("%v, %v", m, err)
	}
}

func TestReadSTLDetection(t *testing.T) {
	// A binary header that starts with "solid" is still binary when
	// the size matches the count: the rule github.com/hschendel/stl
	// applies too.
	m, err := ReadSTL(bytes.NewReader(stlBinary("solid confusing header", 1, stlTriangle)))
	if err != nil || len(m.Faces) != 1 || m.Vertices[1] != (r3.Vec{X: 1}) {
		t.Errorf("binary with a \"solid\" header: %v, %v", m, err)
	}
	// A byte-order mark and blank lines before an ASCII solid.
	src := "\xef\xbb\xbf\n  solid t\nfacet normal 0 0 1\nouter loop\nvertex 0 0 0\nvertex 1 0 0\nvertex 0 1 0\nendloop\nendfacet\nendsolid t\n"
	if m, err := ReadSTL(strings.NewReader(src)); err != nil || len(m.Faces) != 1 {
		t.Errorf("ASCII after a BOM: %v, %v", m, err)
	}
}

// stlBinary builds a binary STL with encoding/binary: an 80-byte
// header, the count, and the triangles' 12 float32s and attribute.
func stlBinary(header string, count uint32, tris ...[12]float32) []byte {
	var b bytes.Buffer
	h := make([]byte, 80)
	copy(h, header)
	b.Write(h)
	binary.Write(&b, binary.LittleEndian, count)
	for _, tr := range tris {
		binary.Write(&b, binary.LittleEndian, tr)
		binary.Write(&b, binary.LittleEndian, uint16(0))
	}
	return b.Bytes()
}

var stlTriangle = [12]float32{0, 0, 1, 0, 0, 0, 1, 0, 0, 0, 1, 0}

func stlInvalidCases() []struct {
	name string
	data []byte
	kind error
	eof  bool
	want []string
} {
	nan := stlTriangle
	nan[7] = float32(math.NaN()) // vertex 1, y
	return []struct {
		name string
		data []byte
		kind error
		eof  bool
		want []string
	}{
		{"empty file", nil, ErrInvalid, true, []string{"binary header needs 84 bytes, file has 0"}},
		{"short junk", []byte("\x89PNG\r\n\x1a\n"), ErrInvalid, true, []string{"byte 8", "binary header needs 84 bytes"}},
		{"count larger than the file", stlBinary("x", 1000, stlTriangle), ErrInvalid, true,
			[]string{"triangle element: record 1: byte 134", "header declares 1000 triangles (50084 bytes) but the file has 134 bytes"}},
		{"huge count", stlBinary("x", math.MaxUint32), ErrInvalid, true, []string{"4294967295 triangles"}},
		{"trailing bytes", append(stlBinary("x", 1, stlTriangle), 0), ErrInvalid, false, []string{"byte 134", "1 bytes after the 1 triangles"}},
		{"NaN coordinate", stlBinary("x", 1, nan), ErrInvalid, false, []string{"triangle element: record 0: byte 112", "vertex 1 coordinate 1 is NaN"}},
		{"infinite coordinate, ascii", []byte("solid t\nfacet normal 0 0 1\nouter loop\nvertex 0 0 0\nvertex inf 0 0\nvertex 0 1 0\nendloop\nendfacet\nendsolid t\n"),
			ErrInvalid, false, []string{"triangle element: record 0", "vertex 1 coordinate 0 is +Inf"}},
		{"empty solid, binary", stlBinary("x", 0), ErrInvalid, false, []string{"no triangles"}},
		{"empty solid, ascii", []byte("solid empty\nendsolid empty\n"), ErrInvalid, false, []string{"no triangles"}},
		{"ascii syntax error", []byte("solid t\nfacet normal 0 0 1\nouter loop\nvertex 0 0 0\nvertex 1 0\nendloop\nendfacet\nendsolid t\n"),
			ErrInvalid, false, []string{"stl: line 6: ascii: "}},
		{"ascii without endsolid", []byte("solid t\nfacet normal 0 0 1\nouter loop\nvertex 0 0 0\nvertex 1 0 0\nvertex 0 1 0\nendloop\nendfacet\n"),
			ErrInvalid, false, []string{"ascii"}},
		{"solid then binary junk", append([]byte("solid "), bytes.Repeat([]byte{0xff, 0x00}, 100)...), ErrInvalid, false,
			[]string{"starts with \"solid\" but is not ASCII text"}},
		{"non-UTF-8 junk", bytes.Repeat([]byte{0xfe, 0xed, 0xfa, 0xce}, 40), ErrInvalid, true, []string{"header declares"}},
	}
}

func TestReadSTLInvalid(t *testing.T) {
	for _, c := range stlInvalidCases() {
		t.Run(c.name, func(t *testing.T) {
			m, err := ReadSTL(bytes.NewReader(c.data))
			if m != nil {
				t.Error("got a mesh and an error")
			}
			checkFileError(t, err, c.kind, c.eof, c.want...)
		})
	}
}

func TestWriteSTLRefuses(t *testing.T) {
	for name, m := range map[string]*Mesh{
		"no faces":     {Vertices: []r3.Vec{{}}},
		"NaN vertex":   {Vertices: []r3.Vec{{}, {X: math.NaN()}, {}}, Faces: []Face{{0, 1, 2}}},
		"huge vertex":  {Vertices: []r3.Vec{{}, {X: 1e39}, {}}, Faces: []Face{{0, 1, 2}}},
		"bad face":     {Vertices: []r3.Vec{{}}, Faces: []Face{{0, 1, 2}}},
		"bad normals":  {Vertices: []r3.Vec{{}}, Normals: []r3.Vec{{}, {}}},
		"empty (zero)": {},
	} {
		if err := WriteSTL(io.Discard, m, false); err == nil || !strings.HasPrefix(err.Error(), "mesh: ") {
			t.Errorf("%s: %v", name, err)
		}
	}
	if err := WriteSTL(io.Discard, &Mesh{Vertices: []r3.Vec{{}, {X: math.NaN()}, {}}, Faces: []Face{{0, 1, 2}}}, true); !errors.Is(err, ErrInvalid) {
		t.Errorf("NaN: %v, want ErrInvalid", err)
	}
}

func FuzzReadSTL(f *testing.F) {
	// Seeds: testdata/fuzz/FuzzReadSTL, the cube written by the
	// library in both encodings, and the invalid cases.
	for _, ascii := range []bool{false, true} {
		s := libraryCube(f)
		s.IsAscii = ascii
		var buf bytes.Buffer
		if err := s.WriteAll(&buf); err != nil {
			f.Fatal(err)
		}
		f.Add(buf.Bytes())
	}
	for _, c := range stlInvalidCases() {
		f.Add(c.data)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ReadSTL(bytes.NewReader(data))
		if err != nil {
			var fe *FileError
			if !errors.As(err, &fe) || !(errors.Is(err, ErrInvalid) || errors.Is(err, ErrUnsupported)) {
				t.Fatalf("error %q is not a *FileError of a known kind", err)
			}
			return
		}
		if err := m.Validate(); err != nil || len(m.Faces) == 0 {
			t.Fatalf("decoded mesh is invalid or empty: %v", err)
		}
		// decode → encode → decode is exact: positions are float32
		// already, and welding numbers vertices by first appearance.
		for _, ascii := range []bool{false, true} {
			var buf bytes.Buffer
			if err := WriteSTL(&buf, m, ascii); err != nil {
				t.Fatalf("ascii=%v: cannot write what was read: %v", ascii, err)
			}
			m2, err := ReadSTL(&buf)
			if err != nil {
				t.Fatalf("ascii=%v: cannot read what was written: %v", ascii, err)
			}
			checkMeshEqualExact(t, m2, m)
		}
	})
}

func BenchmarkReadSTLBinary100k(b *testing.B) {
	var buf bytes.Buffer
	if err := WriteSTL(&buf, ioTestGrid(317), false); err != nil {
		b.Fatal(err)
	}
	data := buf.Bytes()
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := ReadSTL(bytes.NewReader(data)); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkWriteSTLBinary100k(b *testing.B) {
	m := ioTestGrid(317)
	b.ReportAllocs()
	for b.Loop() {
		if err := WriteSTL(io.Discard, m, false); err != nil {
			b.Fatal(err)
		}
	}
}
