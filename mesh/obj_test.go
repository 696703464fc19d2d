package mesh

import (
	"bytes"
	"errors"
	"io"
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// objCube is Turk's PLY cube (1994) written by hand as OBJ: vertex
// colours, per-face normals, every face-corner form, negative indices,
// comments and statements a mesh reader skips.
const objCube = `# the unit cube of Turk's PLY description, as OBJ
mtllib cube.mtl
o cube
v 0 0 0 1 0 0
v 0 0 1 1 0 0
v 0 1 1 1 0 0
v 0 1 0 1 0 0
v 1 0 0 0 0 1
v 1 0 1 0 0 1
v 1 1 1 0 0 1
v 1 1 0 0 0 1
vt 0 0
vt 1 0
vt 1 1
vn -1 0 0
vn 1 0 0
vn 0 -1 0
vn 0 1 0
vn 0 0 -1
vn 0 0 1
g sides
usemtl grey
s off
f 1//1 2//1 3//1 4//1
f 8/1/2 7/2/2 6/3/2 5/1/2
f 1/1/3 5/2/3 6/3/3 2/1/3  # y = 0
s 1
f -7//6 -3//6 -2//6 -6//6
f 3//4 7//4 8//4 4//4
f 4//5 8//5 5//5 1//5
l 1 2
p 3
`

func TestReadOBJCube(t *testing.T) {
	m, err := ReadOBJ(strings.NewReader(objCube))
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Vertices) != 8 || len(m.Faces) != 12 || len(m.Colors) != 8 || len(m.Normals) != 8 {
		t.Fatalf("got %d vertices, %d faces, %d colours, %d normals; want 8, 12, 8, 8",
			len(m.Vertices), len(m.Faces), len(m.Colors), len(m.Normals))
	}
	for i, v := range turkCubeVertices {
		if m.Vertices[i] != v {
			t.Errorf("vertex %d = %v, want %v", i, m.Vertices[i], v)
		}
		want := RGB{255, 0, 0}
		if i >= 4 {
			want = RGB{0, 0, 255}
		}
		if m.Colors[i] != want {
			t.Errorf("colour %d = %v, want %v", i, m.Colors[i], want)
		}
		// Every corner of a cube meets three faces with different
		// normals: the mean direction of the three axis normals points
		// away from the centre, (2p − 1)/√3 (cube geometry). Tolerance:
		// one normalisation, a few ulps.
		w := r3.Scale(1/math.Sqrt(3), r3.Sub(r3.Scale(2, v), r3.Vec{X: 1, Y: 1, Z: 1}))
		if d := r3.Norm(r3.Sub(m.Normals[i], w)); d > 1e-15 {
			t.Errorf("normal %d = %v, want %v", i, m.Normals[i], w)
		}
	}
	// The first quad fans as the PLY one does; the fourth, written with
	// negative indices, is Turk's face "1 5 6 2".
	if m.Faces[0] != (Face{0, 1, 2}) || m.Faces[1] != (Face{0, 2, 3}) || m.Faces[6] != (Face{1, 5, 6}) || m.Faces[7] != (Face{1, 6, 2}) {
		t.Errorf("faces %v", m.Faces)
	}
	// Turk (1994): the cube has area 6 and volume 1.
	if a, v := ioTestArea(m), ioTestVolume(m); a != 6 || v != 1 {
		t.Errorf("area %v, volume %v; want 6, 1", a, v)
	}
}

func TestReadOBJNormalRules(t *testing.T) {
	// Corners that agree pass their normal on as written (here not of
	// unit length); a vertex no corner gives a normal gets zero.
	src := "v 0 0 0\nv 1 0 0\nv 1 1 0\nv 0 1 0\nv 5 5 5\nvn 0 0 2\nf 1//1 2//1 3//1 4//1\n"
	m, err := ReadOBJ(strings.NewReader(src))
	if err != nil {
		t.Fatal(err)
	}
	for i, want := range []r3.Vec{{Z: 2}, {Z: 2}, {Z: 2}, {Z: 2}, {}} {
		if m.Normals[i] != want {
			t.Errorf("normal %d = %v, want %v", i, m.Normals[i], want)
		}
	}
	// No face refers to a normal: none.
	m, err = ReadOBJ(strings.NewReader("v 0 0 0\nv 1 0 0\nv 0 1 0\nvn 0 0 1\nvn 0 0 1\nvn 0 0 1\nf 1 2 3\n"))
	if err != nil || m.Normals != nil {
		t.Errorf("faces without normals: normals %v, %v", m.Normals, err)
	}
	// A point cloud: v and vn paired in order.
	m, err = ReadOBJ(strings.NewReader("v 0 0 0\nvn 1 0 0\nv 1 0 0\nvn 0 1 0\n"))
	if err != nil || len(m.Normals) != 2 || m.Normals[1] != (r3.Vec{Y: 1}) || len(m.Faces) != 0 {
		t.Errorf("point cloud: %v, %v", m, err)
	}
	// Colours on some vertices only: dropped.
	m, err = ReadOBJ(strings.NewReader("v 0 0 0 1 1 1\nv 1 0 0\nv 0 1 0\nf 1 2 3\n"))
	if err != nil || m.Colors != nil {
		t.Errorf("partial colours: %v, %v", m.Colors, err)
	}
	// The homogeneous w is ignored; colours clamp to [0, 1].
	m, err = ReadOBJ(strings.NewReader("v 1 2 3 0.5\nv 0 0 0 2 -1 0.5\nv 0 1 0 0 0 0\n"))
	if err != nil || m.Vertices[0] != (r3.Vec{X: 1, Y: 2, Z: 3}) || m.Colors != nil {
		t.Errorf("w: %v, %v", m, err)
	}
	m, err = ReadOBJ(strings.NewReader("v 0 0 0 2 -1 0.5\n"))
	if err != nil || m.Colors[0] != (RGB{255, 0, 128}) {
		t.Errorf("clamped colour: %v, %v", m, err)
	}
}

func TestReadOBJFaceForms(t *testing.T) {
	src := "v 0 0 0\nv 1 0 0\nv 1 1 0\nv 0 1 0\nvt 0 0\nvt 1 1\nvn 0 0 1\n" +
		"f 1 2 3\nf 1/1 3/2 4/1\nf 1//1 2//1 4//1\nf 2/2/1 3/1/1 4/2/1\nf -4 -3 -2 -1\r\n"
	m, err := ReadOBJ(strings.NewReader(src))
	if err != nil {
		t.Fatal(err)
	}
	want := []Face{{0, 1, 2}, {0, 2, 3}, {0, 1, 3}, {1, 2, 3}, {0, 1, 2}, {0, 2, 3}}
	if len(m.Faces) != len(want) {
		t.Fatalf("faces %v, want %v", m.Faces, want)
	}
	for i := range want {
		if m.Faces[i] != want[i] {
			t.Errorf("face %d = %v, want %v", i, m.Faces[i], want[i])
		}
	}
	for i, n := range m.Normals {
		if n != (r3.Vec{Z: 1}) {
			t.Errorf("normal %d = %v", i, n)
		}
	}
}

var objInvalidCases = []struct {
	name string
	data string
	want []string
}{
	{"empty file", "", []string{"obj: no vertices"}},
	{"only comments and groups", "# nothing\ng empty\n", []string{"no vertices"}},
	{"index 0", "v 0 0 0\nv 1 0 0\nv 0 1 0\nf 0 1 2\n", []string{"line 4", "vertex index 0 is out of range: 3 vertices defined so far"}},
	{"index past the end", "v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 4\n", []string{"line 4", "vertex index 4 is out of range"}},
	{"negative index past the start", "v 0 0 0\nv 1 0 0\nv 0 1 0\nf -1 -2 -4\n", []string{"line 4", "vertex index -4"}},
	{"forward reference", "f 1 2 3\nv 0 0 0\nv 1 0 0\nv 0 1 0\n", []string{"line 1", "0 vertices defined so far"}},
	{"index not an integer", "v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3.0\n", []string{"line 4", `vertex index "3.0" is not an integer`}},
	{"texture index out of range", "v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1/1 2/1 3/1\n", []string{"line 4", "texture coordinate index 1 is out of range"}},
	{"normal index out of range", "v 0 0 0\nv 1 0 0\nv 0 1 0\nvn 0 0 1\nf 1//1 2//2 3//1\n", []string{"line 5", "normal index 2"}},
	{"corner with four parts", "v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1/1/1/1 2 3\n", []string{"more than three parts"}},
	{"two corners", "v 0 0 0\nv 1 0 0\nf 1 2\n", []string{"line 3", "face has 2 corners"}},
	{"vertex not a number", "v 1 2 x\n", []string{"line 1", `"x" is not a number`}},
	{"NaN vertex", "v 0 0 0\nv nan 0 0\n", []string{"line 2", "not finite"}},
	{"infinite normal", "v 0 0 0\nvn 0 -inf 0\n", []string{"line 2", "not finite"}},
	{"two values", "v 1 2\n", []string{"vertex has 2 values"}},
	{"five values", "v 1 2 3 4 5\n", []string{"vertex has 5 values"}},
	{"too many values", "v 1 2 3 4 5 6 7 8 9\n", []string{"too many values"}},
	{"normal with two values", "v 0 0 0\nvn 0 1\n", []string{"normal has 2 values"}},
	{"non-UTF-8 line", "v 0 0 0\nv 1 0 \xff\n", []string{"line 2", "not UTF-8"}},
	{"binary junk", "\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", []string{"line 1", "not UTF-8"}},
	{"not a keyword", "v 0 0 0\n3ds junk\n", []string{"line 2", `unknown statement "3ds"`}},
}

func TestReadOBJInvalid(t *testing.T) {
	for _, c := range objInvalidCases {
		t.Run(c.name, func(t *testing.T) {
			m, err := ReadOBJ(strings.NewReader(c.data))
			if m != nil {
				t.Error("got a mesh and an error")
			}
			checkFileError(t, err, ErrInvalid, false, c.want...)
		})
	}
}

func TestOBJRoundTrip(t *testing.T) {
	// Every vertex used: WriteOBJ → ReadOBJ gives the mesh back bit
	// for bit (shortest float64 digits, colours as c/255).
	want := ioTestGrid(9)
	var buf bytes.Buffer
	if err := WriteOBJ(&buf, want); err != nil {
		t.Fatal(err)
	}
	got, err := ReadOBJ(&buf)
	if err != nil {
		t.Fatal(err)
	}
	checkMeshEqualExact(t, got, want)
	// With unused vertices: theirs come back zero, the rest exact.
	want = ioTestMesh(7, 60)
	buf.Reset()
	if err := WriteOBJ(&buf, want); err != nil {
		t.Fatal(err)
	}
	if got, err = ReadOBJ(&buf); err != nil {
		t.Fatal(err)
	}
	used := make([]bool, 60)
	for _, f := range want.Faces {
		used[f[0]], used[f[1]], used[f[2]] = true, true, true
	}
	unused := 0
	for i := range want.Vertices {
		if got.Vertices[i] != want.Vertices[i] || got.Colors[i] != want.Colors[i] {
			t.Fatalf("vertex %d: %v %v, want %v %v", i, got.Vertices[i], got.Colors[i], want.Vertices[i], want.Colors[i])
		}
		wn := want.Normals[i]
		if !used[i] {
			wn = r3.Vec{}
			unused++
		}
		if got.Normals[i] != wn {
			t.Fatalf("normal %d = %v, want %v", i, got.Normals[i], wn)
		}
	}
	if unused == 0 {
		t.Log("the random mesh used every vertex; the unused-vertex rule went untested")
	}
	// Without normals or colours: plain "f a b c".
	buf.Reset()
	plain := &Mesh{Vertices: turkCubeVertices, Faces: turkCubeMesh(t).Faces}
	if err := WriteOBJ(&buf, plain); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(buf.String(), "\nf 1 2 3\n") || strings.Contains(buf.String(), "vn") {
		t.Errorf("plain OBJ:\n%s", buf.String())
	}
}

func TestWriteOBJRefuses(t *testing.T) {
	for name, m := range map[string]*Mesh{
		"empty":         {},
		"NaN vertex":    {Vertices: []r3.Vec{{Y: math.NaN()}}},
		"infinite norm": {Vertices: []r3.Vec{{}}, Normals: []r3.Vec{{Z: math.Inf(1)}}},
		"bad face":      {Vertices: []r3.Vec{{}}, Faces: []Face{{0, 0, 3}}},
	} {
		if err := WriteOBJ(io.Discard, m); err == nil || !strings.HasPrefix(err.Error(), "mesh: ") {
			t.Errorf("%s: %v", name, err)
		}
	}
}

func FuzzReadOBJ(f *testing.F) {
	// Seeds: testdata/fuzz/FuzzReadOBJ, the hand-written cube and the
	// invalid cases.
	f.Add([]byte(objCube))
	for _, c := range objInvalidCases {
		f.Add([]byte(c.data))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ReadOBJ(bytes.NewReader(data))
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
		// decode → encode → decode is exact (see WriteOBJ): vertices no
		// face uses have zero normals after the first decode already.
		var buf bytes.Buffer
		if err := WriteOBJ(&buf, m); err != nil {
			t.Fatalf("cannot write what was read: %v", err)
		}
		m2, err := ReadOBJ(&buf)
		if err != nil {
			t.Fatalf("cannot read what was written: %v\n%s", err, buf.Bytes())
		}
		checkMeshEqualExact(t, m2, m)
	})
}

func BenchmarkReadOBJ100k(b *testing.B) {
	var buf bytes.Buffer
	if err := WriteOBJ(&buf, ioTestGrid(317)); err != nil {
		b.Fatal(err)
	}
	data := buf.Bytes()
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := ReadOBJ(bytes.NewReader(data)); err != nil {
			b.Fatal(err)
		}
	}
}
