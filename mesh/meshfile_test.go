package mesh

import (
	"bytes"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// ioTestArea is the surface area of m as the sum of its triangles'
// areas, |(b−a)×(c−a)|/2 (the cross-product formula, common practice);
// written here so the file tests do not depend on the metrics code.
func ioTestArea(m *Mesh) float64 {
	var a float64
	for _, f := range m.Faces {
		p, q, r := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
		a += r3.Norm(r3.Cross(r3.Sub(q, p), r3.Sub(r, p))) / 2
	}
	return a
}

// ioTestVolume is the signed volume enclosed by a closed, consistently
// oriented m: Σ a·(b×c)/6 over its triangles, from the divergence
// theorem (common practice); positive when the faces wind outward.
// The triple products are summed before the one division, so that a
// mesh with small integer coordinates gives an exact result.
func ioTestVolume(m *Mesh) float64 {
	var v float64
	for _, f := range m.Faces {
		p, q, r := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
		v += r3.Dot(p, r3.Cross(q, r))
	}
	return v / 6
}

// round32 rounds every coordinate of v to float32, as the binary and
// STL encodings store it.
func round32(v r3.Vec) r3.Vec {
	return r3.Vec{X: float64(float32(v.X)), Y: float64(float32(v.Y)), Z: float64(float32(v.Z))}
}

// ioTestMesh is a random mesh with normals and colours: n vertices in a
// 0.2 m box (a part's size), unit normals, random colours and 2n random
// triangles. Fixed seed, so runs repeat.
func ioTestMesh(seed uint64, n int) *Mesh {
	rng := rand.New(rand.NewPCG(seed, 1))
	m := &Mesh{
		Vertices: make([]r3.Vec, n),
		Normals:  make([]r3.Vec, n),
		Colors:   make([]RGB, n),
	}
	for i := range n {
		m.Vertices[i] = r3.Vec{X: rng.Float64()*0.2 - 0.1, Y: rng.Float64()*0.2 - 0.1, Z: rng.Float64() * 0.2}
		m.Normals[i] = Normalize(r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()})
		m.Colors[i] = RGB{uint8(rng.IntN(256)), uint8(rng.IntN(256)), uint8(rng.IntN(256))}
	}
	for range 2 * n {
		m.Faces = append(m.Faces, Face{uint32(rng.IntN(n)), uint32(rng.IntN(n)), uint32(rng.IntN(n))})
	}
	return m
}

// ioTestGrid is a height-field grid mesh of k×k vertices with normals
// and colours: the shape of a scanned surface patch, for benchmarks.
func ioTestGrid(k int) *Mesh {
	m := &Mesh{}
	for i := range k {
		for j := range k {
			x, y := float64(i)/float64(k)*0.2, float64(j)/float64(k)*0.2
			z := 0.01 * math.Sin(40*x) * math.Cos(30*y)
			m.Vertices = append(m.Vertices, r3.Vec{X: x, Y: y, Z: z})
			m.Normals = append(m.Normals, Normalize(r3.Vec{X: -0.4 * math.Cos(40*x) * math.Cos(30*y), Y: 0.3 * math.Sin(40*x) * math.Sin(30*y), Z: 1}))
			m.Colors = append(m.Colors, RGB{uint8(i), uint8(j), 128})
		}
	}
	for i := range k - 1 {
		for j := range k - 1 {
			a := uint32(i*k + j)
			b, c, d := a+1, a+uint32(k), a+uint32(k)+1
			m.Faces = append(m.Faces, Face{a, c, b}, Face{b, c, d})
		}
	}
	return m
}

// checkMeshEqual32 checks that got is want with positions and normals
// rounded to float32 (exactly: the round trip of a float32 through
// float64 is exact) and faces and colours unchanged.
func checkMeshEqual32(t *testing.T, got, want *Mesh) {
	t.Helper()
	checkMeshEqualRounded(t, got, want, round32)
}

// checkMeshEqualExact checks that got is want, bit for bit.
func checkMeshEqualExact(t *testing.T, got, want *Mesh) {
	t.Helper()
	checkMeshEqualRounded(t, got, want, func(v r3.Vec) r3.Vec { return v })
}

func checkMeshEqualRounded(t *testing.T, got, want *Mesh, round func(r3.Vec) r3.Vec) {
	t.Helper()
	if len(got.Vertices) != len(want.Vertices) || len(got.Faces) != len(want.Faces) {
		t.Fatalf("got %d vertices, %d faces; want %d, %d", len(got.Vertices), len(got.Faces), len(want.Vertices), len(want.Faces))
	}
	for i := range want.Vertices {
		if g, w := got.Vertices[i], round(want.Vertices[i]); g != w {
			t.Fatalf("vertex %d = %v, want %v", i, g, w)
		}
	}
	if (got.Normals == nil) != (want.Normals == nil) {
		t.Fatalf("normals present = %v, want %v", got.Normals != nil, want.Normals != nil)
	}
	for i := range want.Normals {
		if g, w := got.Normals[i], round(want.Normals[i]); g != w {
			t.Fatalf("normal %d = %v, want %v", i, g, w)
		}
	}
	if (got.Colors == nil) != (want.Colors == nil) {
		t.Fatalf("colours present = %v, want %v", got.Colors != nil, want.Colors != nil)
	}
	for i := range want.Colors {
		if got.Colors[i] != want.Colors[i] {
			t.Fatalf("colour %d = %v, want %v", i, got.Colors[i], want.Colors[i])
		}
	}
	for i := range want.Faces {
		if got.Faces[i] != want.Faces[i] {
			t.Fatalf("face %d = %v, want %v", i, got.Faces[i], want.Faces[i])
		}
	}
}

// checkFileError checks that err is a *FileError of the wanted kind,
// wrapping io.ErrUnexpectedEOF when eof is set, whose text contains
// every string in want.
func checkFileError(t *testing.T, err error, kind error, eof bool, want ...string) {
	t.Helper()
	if err == nil {
		t.Fatalf("no error; want %v", kind)
	}
	var fe *FileError
	if !errors.As(err, &fe) {
		t.Fatalf("error %q (%T) is not a *FileError", err, err)
	}
	if !errors.Is(err, kind) {
		t.Errorf("error %q does not wrap %v", err, kind)
	}
	if other := map[error]error{ErrInvalid: ErrUnsupported, ErrUnsupported: ErrInvalid}[kind]; errors.Is(err, other) {
		t.Errorf("error %q wraps %v as well", err, other)
	}
	if got := errors.Is(err, io.ErrUnexpectedEOF); got != eof {
		t.Errorf("error %q: wraps io.ErrUnexpectedEOF = %v, want %v", err, got, eof)
	}
	if !strings.HasPrefix(err.Error(), "mesh: ") {
		t.Errorf("error %q lacks the package prefix", err)
	}
	for _, s := range want {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("error %q does not contain %q", err, s)
		}
	}
}

func TestSaveLoadMeshByExtension(t *testing.T) {
	dir := t.TempDir()
	want := ioTestGrid(6)
	for _, name := range []string{"part.ply", "part.PLY", "part.stl", "part.obj"} {
		t.Run(name, func(t *testing.T) {
			path := filepath.Join(dir, name)
			if err := SaveMesh(path, want); err != nil {
				t.Fatal(err)
			}
			got, err := LoadMesh(path)
			if err != nil {
				t.Fatal(err)
			}
			switch fileKindOf(name) {
			case kindPLY:
				checkMeshEqual32(t, got, want)
			case kindOBJ:
				checkMeshEqualExact(t, got, want) // OBJ keeps every float64 digit
			case kindSTL:
				// STL keeps geometry only; the grid has no repeated
				// positions and every vertex is used, so welding
				// gives back as many vertices.
				if len(got.Vertices) != len(want.Vertices) || got.Normals != nil || got.Colors != nil {
					t.Fatalf("got %d vertices (normals %v, colours %v), want %d without attributes",
						len(got.Vertices), got.Normals != nil, got.Colors != nil, len(want.Vertices))
				}
				checkSameTriangles(t, got, want)
			}
			// The mode is the usual one for a data file, not CreateTemp's 0600.
			if fi, err := os.Stat(path); err != nil || fi.Mode().Perm() != 0o644 {
				t.Errorf("mode = %v, %v; want 0644", fi.Mode().Perm(), err)
			}
			cloud, err := LoadCloud(path)
			if err != nil {
				t.Fatal(err)
			}
			if len(cloud.Points) != len(got.Vertices) || (cloud.Normals == nil) != (got.Normals == nil) {
				t.Errorf("LoadCloud: %d points, normals %v; want %d, %v", len(cloud.Points), cloud.Normals != nil,
					len(got.Vertices), got.Normals != nil)
			}
		})
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 4 {
		t.Errorf("directory holds %d entries, want the 4 files and no temporary ones", len(entries))
	}
}

func TestSaveLoadCloud(t *testing.T) {
	dir := t.TempDir()
	m := ioTestMesh(3, 50)
	c := &Cloud{Points: m.Vertices, Normals: m.Normals, Colors: m.Colors}
	path := filepath.Join(dir, "cloud.ply")
	if err := SaveCloud(path, c); err != nil {
		t.Fatal(err)
	}
	got, err := LoadCloud(path)
	if err != nil {
		t.Fatal(err)
	}
	checkMeshEqual32(t, &Mesh{Vertices: got.Points, Normals: got.Normals, Colors: got.Colors},
		&Mesh{Vertices: c.Points, Normals: c.Normals, Colors: c.Colors})
	if err := SaveCloud(filepath.Join(dir, "cloud.stl"), c); !errors.Is(err, ErrUnsupported) {
		t.Errorf("SaveCloud to .stl: %v, want ErrUnsupported", err)
	}
}

func TestLoadMeshErrorsNameThePath(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "part.ply")
	bad := "ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float y\nproperty float z\nend_header\n0 0 zero\n"
	if err := os.WriteFile(path, []byte(bad), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := LoadMesh(path)
	checkFileError(t, err, ErrInvalid, false)
	if want := "mesh: " + path + `: vertex element: record 0: property z: line 8: "zero" is not a valid float`; err.Error() != want {
		t.Errorf("error\n%q\nwant\n%q", err, want)
	}
	if _, err := LoadCloud(path); err == nil || !strings.HasPrefix(err.Error(), "mesh: "+path+": vertex element") {
		t.Errorf("LoadCloud error %v does not start with the path and element", err)
	}
	if _, err := LoadMesh(filepath.Join(dir, "missing.obj")); !errors.Is(err, os.ErrNotExist) ||
		!strings.HasPrefix(err.Error(), "mesh: ") || !strings.Contains(err.Error(), "missing.obj") {
		t.Errorf("missing file: %v", err)
	}
	if _, err := LoadMesh(filepath.Join(dir, "part.dae")); !errors.Is(err, ErrUnsupported) || !strings.Contains(err.Error(), "part.dae") {
		t.Errorf("unknown extension: %v", err)
	}
}

func TestSaveMeshIsAtomic(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "part.ply")
	good := ioTestGrid(4)
	if err := SaveMesh(path, good); err != nil {
		t.Fatal(err)
	}
	before, _ := os.ReadFile(path)
	// The writer fails after the header is out (the bad vertex is the
	// last): the old file must stay as it was and no temporary file
	// may be left behind.
	bad := good.Clone()
	bad.Vertices[len(bad.Vertices)-1].X = math.NaN()
	for _, p := range []string{path, filepath.Join(dir, "part.stl"), filepath.Join(dir, "part.obj")} {
		if err := SaveMesh(p, bad); !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), p) {
			t.Errorf("SaveMesh(%s) of a NaN vertex: %v; want ErrInvalid naming the path", p, err)
		}
	}
	after, _ := os.ReadFile(path)
	if !bytes.Equal(before, after) {
		t.Error("a failed SaveMesh changed the existing file")
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 1 {
		var names []string
		for _, e := range entries {
			names = append(names, e.Name())
		}
		t.Errorf("directory holds %v; want only part.ply", names)
	}
	if err := SaveMesh(filepath.Join(dir, "no-such-dir", "x.ply"), good); err == nil {
		t.Error("SaveMesh into a missing directory succeeded")
	}
}

// fakeSize is a reader that claims a size, as *bytes.Reader does.
type fakeSize struct {
	io.Reader
	n int
}

func (f fakeSize) Len() int { return f.n }

func TestReadersRefuseOversizedInput(t *testing.T) {
	r := fakeSize{strings.NewReader("ply\n"), MaxFileBytes + 1}
	_, err := ReadPLY(r)
	checkFileError(t, err, ErrUnsupported, false, "limit")
	_, err = ReadSTL(r)
	checkFileError(t, err, ErrUnsupported, false, "limit")
	_, err = ReadOBJ(r)
	checkFileError(t, err, ErrUnsupported, false, "limit")
}

func TestFileErrorText(t *testing.T) {
	// The parts appear in a fixed order, whichever are set.
	e := &FileError{Format: "ply", Element: "face", Record: 7, Property: "vertex_indices", Offset: 1234,
		Kind: ErrInvalid, Err: io.ErrUnexpectedEOF, Msg: "file ends inside the record"}
	want := "mesh: ply: face element: record 7: property vertex_indices: byte 1234: file ends inside the record: unexpected EOF"
	if e.Error() != want {
		t.Errorf("got  %q\nwant %q", e.Error(), want)
	}
	if !errors.Is(e, ErrInvalid) || !errors.Is(e, io.ErrUnexpectedEOF) || errors.Is(e, ErrUnsupported) {
		t.Error("Unwrap does not give the kind and the cause")
	}
}
