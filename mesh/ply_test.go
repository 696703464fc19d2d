package mesh

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

var plyFormats = []PLYFormat{PLYBinaryLE, PLYASCII, PLYBinaryBE}

func readTestFile(t testing.TB, name string) []byte {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// The unit cube of Turk's PLY description (1994), first example.
var turkCubeVertices = []r3.Vec{
	{X: 0, Y: 0, Z: 0}, {X: 0, Y: 0, Z: 1}, {X: 0, Y: 1, Z: 1}, {X: 0, Y: 1, Z: 0},
	{X: 1, Y: 0, Z: 0}, {X: 1, Y: 0, Z: 1}, {X: 1, Y: 1, Z: 1}, {X: 1, Y: 1, Z: 0},
}

func TestReadPLYTurkCube(t *testing.T) {
	// Source: G. Turk, "The PLY Polygon File Format" (1994), the cube
	// example, transcribed in testdata/turk_cube.ply. A unit cube:
	// 8 vertices, 6 quads → 12 triangles, area 6, volume 1.
	m, err := ReadPLY(bytes.NewReader(readTestFile(t, "turk_cube.ply")))
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Vertices) != 8 || len(m.Faces) != 12 || m.Normals != nil || m.Colors != nil {
		t.Fatalf("got %d vertices, %d faces, normals %v, colours %v; want 8, 12, none, none",
			len(m.Vertices), len(m.Faces), m.Normals != nil, m.Colors != nil)
	}
	for i, v := range turkCubeVertices {
		if m.Vertices[i] != v {
			t.Errorf("vertex %d = %v, want %v", i, m.Vertices[i], v)
		}
	}
	// The first quad "4 0 1 2 3" fans into (0,1,2), (0,2,3).
	if m.Faces[0] != (Face{0, 1, 2}) || m.Faces[1] != (Face{0, 2, 3}) {
		t.Errorf("first quad fans into %v %v, want [0 1 2] [0 2 3]", m.Faces[0], m.Faces[1])
	}
	// Exact: all coordinates are 0 or 1, so every term is a small
	// integer over 2 or 6, exactly representable.
	if a := ioTestArea(m); a != 6 {
		t.Errorf("area = %v, want 6", a)
	}
	if v := ioTestVolume(m); v != 1 {
		t.Errorf("volume = %v, want 1 (faces wind outward)", v)
	}
	// The package's metrics agree. Tolerance: a dozen terms of size ≤ 1
	// summed in an order the metrics code chooses, a few ulps.
	if a, v := m.Area(), m.SignedVolume(); math.Abs(a-6) > 1e-14 || math.Abs(v-1) > 1e-14 {
		t.Errorf("Mesh.Area %v, Mesh.SignedVolume %v; want 6, 1", a, v)
	}
}

func TestReadPLYTurkColourCube(t *testing.T) {
	// Source: Turk (1994), second example: vertex colours, a quad split
	// into two triangles, and an "edge" element to skip.
	m, err := ReadPLY(bytes.NewReader(readTestFile(t, "turk_cube_colour.ply")))
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Vertices) != 8 || len(m.Faces) != 12 || len(m.Colors) != 8 {
		t.Fatalf("got %d vertices, %d faces, %d colours; want 8, 12, 8", len(m.Vertices), len(m.Faces), len(m.Colors))
	}
	for i, c := range m.Colors {
		want := RGB{255, 0, 0}
		if i >= 4 {
			want = RGB{0, 0, 255}
		}
		if c != want {
			t.Errorf("colour %d = %v, want %v", i, c, want)
		}
	}
	if a, v := ioTestArea(m), ioTestVolume(m); a != 6 || v != 1 {
		t.Errorf("area %v, volume %v; want 6, 1", a, v)
	}
}

func TestPLYRoundTripTurkCube(t *testing.T) {
	want, err := ReadPLY(bytes.NewReader(readTestFile(t, "turk_cube.ply")))
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range plyFormats {
		t.Run(f.String(), func(t *testing.T) {
			var buf bytes.Buffer
			if err := WritePLY(&buf, want, PLYOptions{Format: f, Comments: []string{"made by Greg Turk", "this file is a cube"}}); err != nil {
				t.Fatal(err)
			}
			if !bytes.Contains(buf.Bytes(), []byte("format "+f.String()+" 1.0\ncomment made by Greg Turk\n")) {
				t.Errorf("header lacks the format or the comments:\n%s", buf.Bytes()[:120])
			}
			got, err := ReadPLY(&buf)
			if err != nil {
				t.Fatal(err)
			}
			checkMeshEqual32(t, got, want)
			if a, v := ioTestArea(got), ioTestVolume(got); a != 6 || v != 1 {
				t.Errorf("area %v, volume %v; want 6, 1", a, v)
			}
		})
	}
}

func TestPLYRoundTripNormalsColoursScalars(t *testing.T) {
	want := ioTestMesh(1, 200)
	dev := NamedScalars{Name: "deviation", Values: make([]float32, 200)}
	conf := NamedScalars{Name: "confidence", Values: make([]float32, 200)}
	for i := range 200 {
		dev.Values[i] = float32(i)*1e-4 - 0.01
		conf.Values[i] = float32(i) / 199
	}
	dev.Values[7] = float32(math.NaN()) // "no measurement" must survive too
	for _, f := range plyFormats {
		t.Run(f.String(), func(t *testing.T) {
			var buf bytes.Buffer
			if err := WritePLY(&buf, want, PLYOptions{Format: f, VertexScalars: []NamedScalars{dev, conf}}); err != nil {
				t.Fatal(err)
			}
			got, scalars, err := ReadPLYScalars(bytes.NewReader(buf.Bytes()))
			if err != nil {
				t.Fatal(err)
			}
			checkMeshEqual32(t, got, want)
			if len(scalars) != 2 || scalars[0].Name != "deviation" || scalars[1].Name != "confidence" {
				t.Fatalf("scalars %v, want deviation and confidence", scalars)
			}
			for k, s := range []NamedScalars{dev, conf} {
				for i, v := range s.Values {
					if g := scalars[k].Values[i]; math.Float32bits(g) != math.Float32bits(v) && !(g != g && v != v) {
						t.Fatalf("%s[%d] = %v, want %v", s.Name, i, g, v)
					}
				}
			}
			// ReadPLY reads the same file and drops the scalars.
			m2, err := ReadPLY(bytes.NewReader(buf.Bytes()))
			if err != nil {
				t.Fatal(err)
			}
			checkMeshEqual32(t, m2, want)
		})
	}
}

func TestPLYCloudRoundTrip(t *testing.T) {
	m := ioTestMesh(2, 64)
	want := &Cloud{Points: m.Vertices, Normals: m.Normals}
	for _, f := range plyFormats {
		var buf bytes.Buffer
		if err := WritePLYCloud(&buf, want, PLYOptions{Format: f}); err != nil {
			t.Fatal(err)
		}
		if bytes.Contains(buf.Bytes(), []byte("element face")) {
			t.Error("a cloud file has a face element")
		}
		got, err := ReadPLYCloud(bytes.NewReader(buf.Bytes()))
		if err != nil {
			t.Fatal(err)
		}
		checkMeshEqual32(t, &Mesh{Vertices: got.Points, Normals: got.Normals, Colors: got.Colors},
			&Mesh{Vertices: want.Points, Normals: want.Normals})
		// Read as a mesh, a cloud file is a mesh without faces.
		asMesh, err := ReadPLY(bytes.NewReader(buf.Bytes()))
		if err != nil || len(asMesh.Faces) != 0 || len(asMesh.Vertices) != 64 {
			t.Errorf("ReadPLY of a cloud: %v, %v", asMesh, err)
		}
	}
	// ReadPLYCloud of a mesh file skips its faces.
	c, err := ReadPLYCloud(bytes.NewReader(readTestFile(t, "turk_cube_colour.ply")))
	if err != nil || len(c.Points) != 8 || len(c.Colors) != 8 {
		t.Errorf("ReadPLYCloud of a mesh: %v, %v", c, err)
	}
}

func TestWritePLYASCIILayout(t *testing.T) {
	// The exact text for a one-triangle mesh: the layout the
	// description prescribes, one record per line.
	m := &Mesh{
		Vertices: []r3.Vec{{X: 0, Y: 0, Z: 0}, {X: 1, Y: 0, Z: 0}, {X: 0, Y: 0.5, Z: 0}},
		Colors:   []RGB{{255, 0, 0}, {0, 255, 0}, {0, 0, 255}},
		Faces:    []Face{{0, 1, 2}},
	}
	var buf bytes.Buffer
	if err := WritePLY(&buf, m, PLYOptions{Format: PLYASCII, Comments: []string{"one triangle"}}); err != nil {
		t.Fatal(err)
	}
	want := `ply
format ascii 1.0
comment one triangle
element vertex 3
property float x
property float y
property float z
property uchar red
property uchar green
property uchar blue
element face 1
property list uchar int vertex_indices
end_header
0 0 0 255 0 0
1 0 0 0 255 0
0 0.5 0 0 0 255
3 0 1 2
`
	if buf.String() != want {
		t.Errorf("got\n%s\nwant\n%s", buf.String(), want)
	}
	// Binary record sizes: 8 vertices × (3 floats + 3 uchars) and
	// 12 faces × (uchar + 3 ints), after the header.
	var bin bytes.Buffer
	cube, _ := ReadPLY(bytes.NewReader(readTestFile(t, "turk_cube_colour.ply")))
	if err := WritePLY(&bin, cube, PLYOptions{}); err != nil {
		t.Fatal(err)
	}
	body := bin.Len() - (bytes.Index(bin.Bytes(), []byte("end_header\n")) + len("end_header\n"))
	if want := 8*15 + 12*13; body != want {
		t.Errorf("binary body is %d bytes, want %d", body, want)
	}
}

// plyBuilder writes PLY element data with encoding/binary (the Go
// standard library as an independent encoder) or as text.
type plyBuilder struct {
	buf   bytes.Buffer
	order binary.ByteOrder // nil for ASCII
}

func (b *plyBuilder) put(vals ...any) {
	if b.order == nil {
		for i, v := range vals {
			if i > 0 {
				b.buf.WriteByte(' ')
			}
			fmt.Fprint(&b.buf, v)
		}
		b.buf.WriteByte('\n')
		return
	}
	for _, v := range vals {
		if err := binary.Write(&b.buf, b.order, v); err != nil {
			panic(err)
		}
	}
}

func TestReadPLYEveryScalarTypeAnyOrder(t *testing.T) {
	// Every type name of Turk's description and its sized alias, the
	// standard properties out of their usual order, unknown scalar and
	// list properties, an unknown element before the faces, faces
	// before vertices, float colours (scaled from [0, 1]) and alpha.
	header := `ply
format %s 1.0
comment every scalar type
obj_info generated by the scanfold tests
element material 2
property uchar ambient_red
property list ushort double coefficients
element face 2
property char flags
property list int uint vertex_indices
property list uchar float texcoord
element vertex 4
property char c8
property float64 z
property uchar u8
property short s16
property float32 y
property ushort u16
property list uint8 int16 unknown_list
property int i32
property float blue
property uint u32
property double x
property double green
property int8 a8
property uint8 b8
property int16 nx
property uint16 ny
property int32 nz
property uint32 w32
property float red
property uchar alpha
end_header
`
	type vert struct {
		x, y, z    float64
		n          [3]float64
		rgb        [3]float64
		c8         int8
		u8         uint8
		s16        int16
		u16        uint16
		i32        int32
		u32        uint32
		a8         int8
		b8         uint8
		w32        uint32
		unknownLen uint8
	}
	verts := []vert{
		{x: 0, y: 0, z: 0, n: [3]float64{1, 0, 0}, rgb: [3]float64{1, 0.5, 0}, c8: -128, u8: 255, s16: -32768, u16: 65535,
			i32: math.MinInt32, u32: math.MaxUint32, a8: 127, b8: 0, w32: 7, unknownLen: 0},
		{x: 0.25, y: -1.5, z: 3, n: [3]float64{-1, 0, 0}, rgb: [3]float64{-0.2, 1.7, 0.2}, c8: 1, u8: 2, s16: 3, u16: 4,
			i32: 5, u32: 6, a8: -1, b8: 9, w32: 8, unknownLen: 2},
		{x: 1, y: 2, z: 1e-3, n: [3]float64{0, 0, 1}, rgb: [3]float64{0, 0, 1}, c8: 0, u8: 0, s16: 0, u16: 0, unknownLen: 1},
		{x: -7, y: 8.5, z: -9, n: [3]float64{0, 0, 0}, rgb: [3]float64{0.25, 0.75, 1}, unknownLen: 0},
	}
	for _, enc := range []struct {
		name  string
		order binary.ByteOrder
	}{{"binary_little_endian", binary.LittleEndian}, {"binary_big_endian", binary.BigEndian}, {"ascii", nil}} {
		t.Run(enc.name, func(t *testing.T) {
			b := &plyBuilder{order: enc.order}
			b.buf.WriteString(fmt.Sprintf(header, enc.name))
			if enc.order == nil {
				b.put(10, 2, 0.5, 1.5)
				b.put(0, 0)
				b.put(-3, 3, 0, 1, 2, 2, 0.5, 0.25)
				b.put(5, 4, 3, 2, 1, 0, 0)
			} else {
				b.put(uint8(10), uint16(2), 0.5, 1.5)
				b.put(uint8(0), uint16(0))
				b.put(int8(-3), int32(3), uint32(0), uint32(1), uint32(2), uint8(2), float32(0.5), float32(0.25))
				b.put(int8(5), int32(4), uint32(3), uint32(2), uint32(1), uint32(0), uint8(0))
			}
			for _, v := range verts {
				unknown := make([]any, v.unknownLen)
				for k := range unknown {
					unknown[k] = int16(-k)
				}
				if enc.order == nil {
					vals := []any{v.c8, v.z, v.u8, v.s16, float32(v.y), v.u16, v.unknownLen}
					vals = append(vals, unknown...)
					vals = append(vals, v.i32, float32(v.rgb[2]), v.u32, v.x, v.rgb[1], v.a8, v.b8,
						int16(v.n[0]), uint16(v.n[1]), int32(v.n[2]), v.w32, float32(v.rgb[0]), uint8(200))
					b.put(vals...)
					continue
				}
				b.put(v.c8, v.z, v.u8, v.s16, float32(v.y), v.u16, v.unknownLen)
				b.put(unknown...)
				b.put(v.i32, float32(v.rgb[2]), v.u32, v.x, v.rgb[1], v.a8, v.b8,
					int16(v.n[0]), uint16(v.n[1]), int32(v.n[2]), v.w32, float32(v.rgb[0]), uint8(200))
			}
			m, scalars, err := ReadPLYScalars(bytes.NewReader(b.buf.Bytes()))
			if err != nil {
				t.Fatal(err)
			}
			if len(m.Vertices) != 4 || len(m.Normals) != 4 || len(m.Colors) != 4 {
				t.Fatalf("got %d vertices, %d normals, %d colours", len(m.Vertices), len(m.Normals), len(m.Colors))
			}
			// Quad "3 2 1 0" fans into (3,2,1), (3,1,0); "0 1 2" is one triangle.
			wantFaces := []Face{{0, 1, 2}, {3, 2, 1}, {3, 1, 0}}
			if len(m.Faces) != 3 || m.Faces[0] != wantFaces[0] || m.Faces[1] != wantFaces[1] || m.Faces[2] != wantFaces[2] {
				t.Errorf("faces %v, want %v", m.Faces, wantFaces)
			}
			wantNames := []string{"c8", "u8", "s16", "u16", "i32", "u32", "a8", "b8", "w32"}
			if len(scalars) != len(wantNames) {
				t.Fatalf("got %d scalars, want %v", len(scalars), wantNames)
			}
			for i, v := range verts {
				if want := (r3.Vec{X: v.x, Y: float64(float32(v.y)), Z: v.z}); m.Vertices[i] != want {
					t.Errorf("vertex %d = %v, want %v", i, m.Vertices[i], want)
				}
				if want := (r3.Vec{X: v.n[0], Y: v.n[1], Z: v.n[2]}); m.Normals[i] != want {
					t.Errorf("normal %d = %v, want %v", i, m.Normals[i], want)
				}
				// Float colours scale by 255, round and clamp to [0, 255].
				var want RGB
				for k, c := range v.rgb {
					stored := float64(float32(c)) // red and blue are floats
					if k == 1 {
						stored = c // green is a double
					}
					*[]*uint8{&want.R, &want.G, &want.B}[k] = uint8(math.Round(math.Max(0, math.Min(1, stored)) * 255))
				}
				if m.Colors[i] != want {
					t.Errorf("colour %d = %v, want %v", i, m.Colors[i], want)
				}
				wantVals := []float64{float64(v.c8), float64(v.u8), float64(v.s16), float64(v.u16), float64(v.i32),
					float64(v.u32), float64(v.a8), float64(v.b8), float64(v.w32)}
				for k, s := range scalars {
					if s.Name != wantNames[k] || s.Values[i] != float32(wantVals[k]) {
						t.Errorf("scalar %s[%d] = %v, want %s = %v", s.Name, i, s.Values[i], wantNames[k], float32(wantVals[k]))
					}
				}
			}
		})
	}
}

func TestReadPLYVertexIndexAliasAndPolygons(t *testing.T) {
	// A pentagon and a hexagon fan into 3 and 4 triangles around their
	// first vertex; vertex_index is the name Turk's examples use.
	for _, name := range []string{"vertex_indices", "vertex_index"} {
		src := "ply\nformat ascii 1.0\nelement vertex 6\nproperty float x\nproperty float y\nproperty float z\n" +
			"element face 2\nproperty list uchar uint " + name + "\nend_header\n" +
			"0 0 0\n1 0 0\n2 1 0\n1 2 0\n0 2 0\n-1 1 0\n5 0 1 2 3 4\n6 5 4 3 2 1 0\n"
		m, err := ReadPLY(strings.NewReader(src))
		if err != nil {
			t.Fatal(err)
		}
		want := []Face{{0, 1, 2}, {0, 2, 3}, {0, 3, 4}, {5, 4, 3}, {5, 3, 2}, {5, 2, 1}, {5, 1, 0}}
		if len(m.Faces) != len(want) {
			t.Fatalf("%s: faces %v, want %v", name, m.Faces, want)
		}
		for i := range want {
			if m.Faces[i] != want[i] {
				t.Errorf("%s: face %d = %v, want %v", name, i, m.Faces[i], want[i])
			}
		}
	}
}

func TestReadPLYTolerates(t *testing.T) {
	// CRLF line ends, blank lines in the header and between records,
	// tabs, trailing data after the last element, an element with no
	// properties, and a missing final newline are all accepted.
	src := "ply\r\nformat ascii 1.0\r\n\r\ncomment\tcrlf\r\nelement nothing 3\r\nelement vertex 2\r\nproperty float x\r\nproperty float y\r\nproperty float z\r\nend_header\r\n" +
		"1\t2 3\r\n\r\n  4 5 6"
	m, err := ReadPLY(strings.NewReader(src))
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Vertices) != 2 || m.Vertices[1] != (r3.Vec{X: 4, Y: 5, Z: 6}) {
		t.Errorf("vertices %v", m.Vertices)
	}
	var buf bytes.Buffer
	if err := WritePLY(&buf, m, PLYOptions{}); err != nil {
		t.Fatal(err)
	}
	buf.WriteString("trailing bytes are ignored")
	if _, err := ReadPLY(&buf); err != nil {
		t.Errorf("trailing data: %v", err)
	}
	// An empty vertex element is an empty mesh.
	if m, err := ReadPLY(strings.NewReader("ply\nformat binary_little_endian 1.0\nelement vertex 0\nproperty float x\nproperty float y\nproperty float z\nend_header\n")); err != nil || len(m.Vertices) != 0 {
		t.Errorf("empty vertex element: %v, %v", m, err)
	}
}

// plyCase is a PLY file that must fail, and how.
type plyCase struct {
	name string
	data string
	kind error
	eof  bool
	want []string // substrings of the message
}

const xyzHeader = "element vertex 1\nproperty float x\nproperty float y\nproperty float z\n"

func le32(vals ...any) string {
	var b bytes.Buffer
	for _, v := range vals {
		binary.Write(&b, binary.LittleEndian, v)
	}
	return b.String()
}

var plyInvalidCases = []plyCase{
	{"empty file", "", ErrInvalid, true, []string{"without end_header"}},
	{"not PLY: JPEG bytes", "\xff\xd8\xff\xe0\x00\x10JFIF\x00\x01", ErrInvalid, false, []string{"line 1", "not a PLY file"}},
	{"not PLY: text", "solid cube\nfacet normal 0 0 1\n", ErrInvalid, false, []string{"not a PLY file"}},
	{"truncated header", "ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\n", ErrInvalid, true, []string{"without end_header"}},
	{"end_header missing before data", "ply\nformat ascii 1.0\n" + xyzHeader + "0 0 0\n", ErrInvalid, false, []string{"line 7", `unknown header keyword "0"`}},
	{"end_header missing, header too long", "ply\nformat ascii 1.0\n" + strings.Repeat("comment padding the header past its limit\n", 30000), ErrInvalid, false, []string{"no end_header in the first 1048576 bytes"}},
	{"no format line", "ply\n" + xyzHeader + "end_header\n", ErrInvalid, false, []string{"line 2", "element before the format line"}},
	{"unknown format", "ply\nformat binary_middle_endian 1.0\n" + xyzHeader + "end_header\n", ErrUnsupported, false, []string{"line 2", `unknown encoding "binary_middle_endian"`}},
	{"unknown version", "ply\nformat ascii 2.0\n" + xyzHeader + "end_header\n", ErrUnsupported, false, []string{"line 2", "version"}},
	{"bad scalar type", "ply\nformat ascii 1.0\nelement vertex 1\nproperty flaot x\nend_header\n0\n", ErrInvalid, false, []string{"vertex element", "property x", "line 4", `unknown scalar type "flaot"`}},
	{"64-bit type", "ply\nformat ascii 1.0\nelement vertex 1\nproperty int64 x\nend_header\n0\n", ErrUnsupported, false, []string{"property x", "line 4", `"int64" is not supported`}},
	{"float list length", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list float int vertex_indices\nend_header\n", ErrInvalid, false, []string{"face element", "property vertex_indices", "line 8", "not an integer type"}},
	{"float vertex indices", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar float vertex_indices\nend_header\n0 0 0\n3 0 0 0\n", ErrUnsupported, false, []string{"face element", "property vertex_indices", "line 8"}},
	{"scalar vertex indices", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty int vertex_indices\nend_header\n0 0 0\n0\n", ErrInvalid, false, []string{"a list is needed"}},
	{"face without indices", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int corners\nend_header\n0 0 0\n3 0 0 0\n", ErrInvalid, false, []string{"face element", "line 7", "no vertex_indices list"}},
	{"both index names", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int vertex_indices\nproperty list uchar int vertex_index\nend_header\n", ErrInvalid, false, []string{"both"}},
	{"no vertex element", "ply\nformat ascii 1.0\nelement point 1\nproperty float x\nend_header\n0\n", ErrInvalid, false, []string{"no vertex element"}},
	{"missing z", "ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float y\nend_header\n0 0\n", ErrInvalid, false, []string{"vertex element", "line 3", "no property z"}},
	{"partial normal", "ply\nformat ascii 1.0\n" + xyzHeader + "property float nx\nend_header\n0 0 0 1\n", ErrInvalid, false, []string{"no property ny"}},
	{"list position", "ply\nformat ascii 1.0\nelement vertex 1\nproperty list uchar float x\nproperty float y\nproperty float z\nend_header\n", ErrInvalid, false, []string{"property x", "a scalar is needed"}},
	{"short colour", "ply\nformat ascii 1.0\n" + xyzHeader + "property short red\nproperty short green\nproperty short blue\nend_header\n", ErrUnsupported, false, []string{"property red", "line 7", "colour of type short"}},
	{"duplicate element", "ply\nformat ascii 1.0\n" + xyzHeader + xyzHeader + "end_header\n", ErrInvalid, false, []string{"line 7", `second "vertex" element (first on line 3)`}},
	{"duplicate property", "ply\nformat ascii 1.0\n" + xyzHeader + "property float x\nend_header\n", ErrInvalid, false, []string{"property x", "line 7", "second declaration"}},
	{"property before element", "ply\nformat ascii 1.0\nproperty float x\n", ErrInvalid, false, []string{"line 3", "property before any element"}},
	{"negative count", "ply\nformat ascii 1.0\nelement vertex -1\nproperty float x\n", ErrInvalid, false, []string{"vertex element", "line 3", "non-negative"}},
	{"count above the cap", "ply\nformat ascii 1.0\nelement vertex 300000000\nproperty float x\n", ErrUnsupported, false, []string{"vertex element", "300000000 records is more than the limit"}},
	{"non-UTF-8 header line", "ply\nformat ascii 1.0\nelement vert\xffex 1\n", ErrInvalid, false, []string{"line 3", "not UTF-8"}},
	{"binary count larger than the file", "ply\nformat binary_little_endian 1.0\nelement vertex 1000000\nproperty float x\nproperty float y\nproperty float z\nend_header\n" + le32(float32(0), float32(0), float32(0)),
		ErrInvalid, true, []string{"vertex element", "line 3", "1000000 records of at least 12 bytes, but only 12 bytes"}},
	{"ascii count larger than the file", "ply\nformat ascii 1.0\nelement vertex 100\nproperty float x\nproperty float y\nproperty float z\nend_header\n0 0 0\n",
		ErrInvalid, true, []string{"vertex element", "100 records of at least 6 bytes"}},
	{"faces larger than the file", "ply\nformat binary_big_endian 1.0\n" + xyzHeader + "element face 100\nproperty list uchar int vertex_indices\nend_header\n" + strings.Repeat("\x00", 12) + "\x03",
		ErrInvalid, true, []string{"face element", "line 7", "100 records of at least 1 bytes, but only 1 bytes"}},
	{"ascii record cut short", "ply\nformat ascii 1.0\n" + xyzHeader + "end_header\n0 0\n\n\n", ErrInvalid, false, []string{"vertex element: record 0: property z: line 8", "line ends"}},
	{"ascii extra value", "ply\nformat ascii 1.0\n" + xyzHeader + "end_header\n0 0 0 0\n", ErrInvalid, false, []string{"record 0", "line 8", `unexpected value "0"`}},
	{"ascii one property", "ply\nformat ascii 1.0\nelement vertex 2\nproperty float x\nend_header\n1\n\n\n", ErrInvalid, false, []string{"no property y"}},
	{"ascii records missing at the end", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 2\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n3 0 0 0\n\n\n\n\n\n\n\n\n",
		ErrInvalid, true, []string{"face element: record 1", "file ends before the record"}},
	{"ascii not a number", "ply\nformat ascii 1.0\n" + xyzHeader + "end_header\n0 0 1.2.3\n", ErrInvalid, false, []string{"property z", "line 8", `"1.2.3" is not a valid float`}},
	{"ascii uchar out of range", "ply\nformat ascii 1.0\n" + xyzHeader + "property uchar red\nproperty uchar green\nproperty uchar blue\nend_header\n0 0 0 300 0 0\n", ErrInvalid, false, []string{"property red", "line 11", `"300" is not a valid uchar`}},
	{"ascii float in an int", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n3 0 0.5 0\n", ErrInvalid, false, []string{"line 11", `"0.5" is not a valid int`}},
	{"ascii float32 overflow", "ply\nformat ascii 1.0\n" + xyzHeader + "end_header\n0 0 1e39\n", ErrInvalid, false, []string{"property z", `"1e39" is not a valid float`}},
	{"NaN position, ascii", "ply\nformat ascii 1.0\n" + xyzHeader + "end_header\nnan 0 0\n", ErrInvalid, false, []string{"record 0", "line 8", "not finite"}},
	{"infinite position, binary", "ply\nformat binary_little_endian 1.0\n" + xyzHeader + "end_header\n" + le32(float32(0), float32(math.Inf(1)), float32(0)),
		ErrInvalid, false, []string{"record 0", "byte 115", "not finite"}},
	{"NaN normal, binary", "ply\nformat binary_little_endian 1.0\n" + xyzHeader + "property float nx\nproperty float ny\nproperty float nz\nend_header\n" +
		le32(float32(0), float32(0), float32(0), float32(0), float32(math.NaN()), float32(1)), ErrInvalid, false, []string{"normal", "not finite"}},
	{"NaN float colour", "ply\nformat ascii 1.0\n" + xyzHeader + "property float red\nproperty float green\nproperty float blue\nend_header\n0 0 0 nan 0 0\n", ErrInvalid, false, []string{"property red", "colour is NaN"}},
	{"face index out of range", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n3 0 0 1\n",
		ErrInvalid, false, []string{"face element: record 0: property vertex_indices: line 11", "vertex index 1 is outside [0, 1)"}},
	{"negative face index", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n3 0 -1 0\n",
		ErrInvalid, false, []string{"vertex index -1 is outside"}},
	{"face index out of range, binary", "ply\nformat binary_little_endian 1.0\n" + xyzHeader + "element face 1\nproperty list uchar uint vertex_indices\nend_header\n" +
		le32(float32(0), float32(0), float32(0), uint8(3), uint32(0), uint32(0), uint32(4294967295)),
		ErrInvalid, false, []string{"face element: record 0: property vertex_indices: byte 191", "vertex index 4.294967295e+09 is outside [0, 1)"}},
	{"list length 0", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n0\n",
		ErrInvalid, false, []string{"face element", "line 11", "face has 0 vertices"}},
	{"list length 2", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n2 0 0\n",
		ErrInvalid, false, []string{"face has 2 vertices"}},
	{"list length above the cap", "ply\nformat ascii 1.0\n" + xyzHeader + "element face 1\nproperty list int int vertex_indices\nend_header\n0 0 0\n70000 0 0 0\n",
		ErrInvalid, false, []string{"list length 70000 is outside [0, 65536]"}},
	{"negative list length, binary", "ply\nformat binary_little_endian 1.0\n" + xyzHeader + "element face 1\nproperty list int int vertex_indices\nend_header\n" +
		le32(float32(0), float32(0), float32(0), int32(-3)), ErrInvalid, false, []string{"face element: record 0: property vertex_indices: byte", "list length -3"}},
	{"unknown list longer than the file, binary", "ply\nformat binary_little_endian 1.0\n" + xyzHeader + "property list ushort double extra\nend_header\n" +
		le32(float32(0), float32(0), float32(0), uint16(60000)), ErrInvalid, true, []string{"vertex element: record 0: property extra: byte 163", "file ends inside the record"}},
	{"binary face cut mid-record", "ply\nformat binary_little_endian 1.0\n" + xyzHeader + "element face 1\nproperty list uchar int vertex_indices\nend_header\n" +
		le32(float32(0), float32(0), float32(0), uint8(3), int32(0), int32(0)), ErrInvalid, true, []string{"face element: record 0: property vertex_indices: byte 190", "unexpected EOF"}},
	{"unknown element cut short, binary", "ply\nformat binary_little_endian 1.0\n" + xyzHeader + "element extra 1\nproperty list uchar double w\nend_header\n" +
		le32(float32(0), float32(0), float32(0), uint8(2), float64(1)), ErrInvalid, true, []string{"extra element: record 0: property w", "unexpected EOF"}},
}

func TestReadPLYInvalid(t *testing.T) {
	for _, c := range plyInvalidCases {
		t.Run(c.name, func(t *testing.T) {
			m, err := ReadPLY(strings.NewReader(c.data))
			if m != nil {
				t.Errorf("got a mesh with %d vertices and an error", len(m.Vertices))
			}
			checkFileError(t, err, c.kind, c.eof, c.want...)
		})
	}
}

func TestWritePLYRefuses(t *testing.T) {
	ok := ioTestMesh(4, 4)
	for _, c := range []struct {
		name string
		m    *Mesh
		opt  PLYOptions
		kind error // nil: any error
	}{
		{"NaN vertex", &Mesh{Vertices: []r3.Vec{{X: math.NaN()}}}, PLYOptions{}, ErrInvalid},
		{"vertex beyond float32", &Mesh{Vertices: []r3.Vec{{Z: 1e300}}}, PLYOptions{}, ErrUnsupported},
		{"infinite normal", &Mesh{Vertices: []r3.Vec{{}}, Normals: []r3.Vec{{X: math.Inf(-1)}}}, PLYOptions{}, ErrInvalid},
		{"face out of range", &Mesh{Vertices: []r3.Vec{{}}, Faces: []Face{{0, 0, 1}}}, PLYOptions{}, nil},
		{"unknown format", ok, PLYOptions{Format: 7}, nil},
		{"comment with a newline", ok, PLYOptions{Comments: []string{"a\nend_header"}}, nil},
		{"scalar of wrong length", ok, PLYOptions{VertexScalars: []NamedScalars{{Name: "d", Values: []float32{1}}}}, nil},
		{"reserved scalar name", ok, PLYOptions{VertexScalars: []NamedScalars{{Name: "red", Values: make([]float32, 4)}}}, nil},
		{"scalar name with a space", ok, PLYOptions{VertexScalars: []NamedScalars{{Name: "my dev", Values: make([]float32, 4)}}}, nil},
		{"scalar name twice", ok, PLYOptions{VertexScalars: []NamedScalars{{Name: "d", Values: make([]float32, 4)}, {Name: "d", Values: make([]float32, 4)}}}, nil},
	} {
		err := WritePLY(io.Discard, c.m, c.opt)
		if err == nil || !strings.HasPrefix(err.Error(), "mesh: ") || (c.kind != nil && !errors.Is(err, c.kind)) {
			t.Errorf("%s: error %v, want one wrapping %v", c.name, err, c.kind)
		}
	}
}

// failingWriter fails after n bytes.
type failingWriter struct{ n int }

var errDiskFull = errors.New("disk full")

func (w *failingWriter) Write(p []byte) (int, error) {
	if len(p) > w.n {
		k := w.n
		w.n = 0
		return k, errDiskFull
	}
	w.n -= len(p)
	return len(p), nil
}

func TestWritersReportWriteErrors(t *testing.T) {
	// A write error (here after 100 bytes, past the buffered header)
	// reaches the caller, through the final Flush if nowhere else.
	m := ioTestGrid(40)
	for _, f := range plyFormats {
		if err := WritePLY(&failingWriter{n: 100}, m, PLYOptions{Format: f}); !errors.Is(err, errDiskFull) {
			t.Errorf("WritePLY %v: %v, want disk full", f, err)
		}
	}
	if err := WriteSTL(&failingWriter{n: 100}, m, false); !errors.Is(err, errDiskFull) {
		t.Errorf("WriteSTL: %v", err)
	}
	if err := WriteSTL(&failingWriter{n: 100}, m, true); !errors.Is(err, errDiskFull) {
		t.Errorf("WriteSTL ascii: %v", err)
	}
	if err := WriteOBJ(&failingWriter{n: 100}, m); !errors.Is(err, errDiskFull) {
		t.Errorf("WriteOBJ: %v", err)
	}
}

// checkScalarsEqual compares extra scalars bit for bit (NaN payloads
// aside: any NaN equals any NaN).
func checkScalarsEqual(t *testing.T, got, want []NamedScalars) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%d scalars, want %d", len(got), len(want))
	}
	for k := range want {
		if got[k].Name != want[k].Name || len(got[k].Values) != len(want[k].Values) {
			t.Fatalf("scalar %d is %q with %d values, want %q with %d", k, got[k].Name, len(got[k].Values), want[k].Name, len(want[k].Values))
		}
		for i, w := range want[k].Values {
			g := got[k].Values[i]
			if math.Float32bits(g) != math.Float32bits(w) && !(g != g && w != w) {
				t.Fatalf("%s[%d] = %v, want %v", want[k].Name, i, g, w)
			}
		}
	}
}

func FuzzReadPLY(f *testing.F) {
	// Seeds: testdata/fuzz/FuzzReadPLY (loaded by the fuzzing engine
	// and by plain go test), the Turk cubes, and the invalid cases.
	for _, name := range []string{"turk_cube.ply", "turk_cube_colour.ply"} {
		f.Add(readTestFile(f, name))
	}
	for _, c := range plyInvalidCases {
		if len(c.data) < 4096 {
			f.Add([]byte(c.data))
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		m, scalars, err := ReadPLYScalars(bytes.NewReader(data))
		if err != nil {
			var fe *FileError
			if !errors.As(err, &fe) || !(errors.Is(err, ErrInvalid) || errors.Is(err, ErrUnsupported)) {
				t.Fatalf("error %q is not a *FileError of a known kind", err)
			}
			return
		}
		if err := m.Validate(); err != nil {
			t.Fatalf("decoded mesh is invalid: %v", err)
		}
		if _, err := ReadPLYCloud(bytes.NewReader(data)); err != nil {
			t.Fatalf("ReadPLYScalars accepts what ReadPLYCloud refuses: %v", err)
		}
		// Round trip: decode → encode → decode gives the first decode
		// rounded to float32, in every encoding.
		for _, format := range plyFormats {
			var buf bytes.Buffer
			if err := WritePLY(&buf, m, PLYOptions{Format: format, VertexScalars: scalars}); err != nil {
				if errors.Is(err, ErrUnsupported) {
					return // a double beyond float32's range
				}
				t.Fatalf("%v: cannot write what was read: %v", format, err)
			}
			m2, scalars2, err := ReadPLYScalars(&buf)
			if err != nil {
				t.Fatalf("%v: cannot read what was written: %v", format, err)
			}
			checkMeshEqual32(t, m2, m)
			checkScalarsEqual(t, scalars2, scalars)
		}
	})
}

// benchPLY is a ~100k-vertex grid (317² = 100,489 vertices, 200,256
// triangles) with normals and colours, encoded once.
func benchPLY(b *testing.B, format PLYFormat) (*Mesh, []byte) {
	b.Helper()
	m := ioTestGrid(317)
	var buf bytes.Buffer
	if err := WritePLY(&buf, m, PLYOptions{Format: format}); err != nil {
		b.Fatal(err)
	}
	return m, buf.Bytes()
}

func BenchmarkReadPLYBinary100k(b *testing.B) {
	_, data := benchPLY(b, PLYBinaryLE)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := ReadPLY(bytes.NewReader(data)); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkWritePLYBinary100k(b *testing.B) {
	m, data := benchPLY(b, PLYBinaryLE)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		if err := WritePLY(io.Discard, m, PLYOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkReadPLYASCII100k(b *testing.B) {
	_, data := benchPLY(b, PLYASCII)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := ReadPLY(bytes.NewReader(data)); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkWritePLYASCII100k(b *testing.B) {
	m, data := benchPLY(b, PLYASCII)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		if err := WritePLY(io.Discard, m, PLYOptions{Format: PLYASCII}); err != nil {
			b.Fatal(err)
		}
	}
}
