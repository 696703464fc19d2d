package mesh

// STL through github.com/hschendel/stl, which parses and writes both
// encodings; this wrapper owns the checks the library leaves out. The
// binary encoding is an 80-byte header, a little-endian uint32
// triangle count at byte 80, and 50 bytes per triangle from byte 84: a
// float32 normal, three float32 vertices and a uint16 attribute.

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"
	"unicode/utf8"

	"github.com/hschendel/stl"
	"gonum.org/v1/gonum/spatial/r3"
)

const (
	stlHeaderBytes   = 84
	stlTriangleBytes = 50
)

// ReadSTL reads a mesh from a binary or ASCII STL file.
//
// STL stores every triangle with its own three vertices, so ReadSTL
// welds them: vertices with exactly equal float32 coordinates become
// one shared vertex (numbered in order of first appearance), which lets
// metrics such as the volume, manifoldness and components see the
// connectivity. Nearly equal vertices are not merged. The facet
// normals and binary attribute bytes are dropped (the mesh has no
// Normals or Colors); triangles keep their vertex order.
//
// A file is binary when its size is exactly 84 + 50·n bytes for the
// triangle count n at byte 80 (whatever its header says), and ASCII
// when it starts with "solid" (after an optional byte-order mark and
// white space) and is not binary; anything else is an error, as is a binary file
// whose declared count does not match its size (checked before
// anything is allocated), a NaN or infinite coordinate, and a solid
// with no triangles. Only the first solid of an ASCII file is read.
// The whole file is held in memory (at most MaxFileBytes).
func ReadSTL(r io.Reader) (*Mesh, error) {
	data, err := readAllLimited(r, "stl")
	if err != nil {
		return nil, err
	}
	return decodeSTL(data)
}

func stlError(kind error, msg string) *FileError { return newFileError("stl", kind, msg) }

// stlIsASCII reports whether data starts with the keyword "solid".
func stlIsASCII(data []byte) bool {
	if !bytes.HasPrefix(data, []byte("solid")) {
		return false
	}
	return len(data) == 5 || strings.IndexByte(" \t\r\n", data[5]) >= 0
}

func decodeSTL(data []byte) (*Mesh, error) {
	binaryOK := false
	var count uint32
	if len(data) >= stlHeaderBytes {
		count = binary.LittleEndian.Uint32(data[80:84])
		binaryOK = int64(len(data)) == stlHeaderBytes+int64(count)*stlTriangleBytes
	}
	if !binaryOK {
		// A byte-order mark or white space before "solid" is not in
		// the format, but is harmless; the library does not allow it.
		trimmed := bytes.TrimLeft(bytes.TrimPrefix(data, []byte("\xef\xbb\xbf")), " \t\r\n")
		if stlIsASCII(trimmed) {
			data = trimmed
		}
	}
	ascii := !binaryOK && stlIsASCII(data)
	if !binaryOK && !ascii {
		return nil, stlBinarySizeError(data, count)
	}
	if ascii && (len(data) == 5 || data[5] != ' ') {
		// The library wants "solid " with a space; "solid" alone on
		// its line is common and means a solid without a name.
		data = append([]byte("solid "), data[5:]...)
	}
	c := &stlCollector{binary: binaryOK}
	if binaryOK {
		// Bounded: count·50 bytes are present.
		c.m.Vertices = make([]r3.Vec, 0, count/2+3)
		c.m.Faces = make([]Face, 0, count)
		c.index = make(map[stlKey]uint32, count/2+3)
	} else {
		c.index = make(map[stlKey]uint32)
	}
	err := stl.CopyAll(bytes.NewReader(data), c)
	if c.err != nil {
		return nil, c.err
	}
	if err != nil {
		if binaryOK {
			fe := stlError(ErrInvalid, "binary")
			fe.Err = err
			return nil, fe
		}
		return nil, stlASCIIError(data, count, err)
	}
	if len(c.m.Faces) == 0 {
		return nil, stlError(ErrInvalid, "solid has no triangles")
	}
	return &c.m, nil
}

// stlBinarySizeError explains why data is neither ASCII nor a binary
// STL of consistent size.
func stlBinarySizeError(data []byte, count uint32) error {
	if len(data) < stlHeaderBytes {
		fe := stlError(ErrInvalid, fmt.Sprintf("binary header needs %d bytes, file has %d", stlHeaderBytes, len(data)))
		fe.Offset, fe.Err = int64(len(data)), io.ErrUnexpectedEOF
		return fe
	}
	want := stlHeaderBytes + int64(count)*stlTriangleBytes
	have := int64(len(data))
	if want > have {
		complete := (have - stlHeaderBytes) / stlTriangleBytes
		fe := stlError(ErrInvalid, fmt.Sprintf("header declares %d triangles (%d bytes) but the file has %d bytes",
			count, want, have))
		fe.Element, fe.Record = "triangle", complete
		fe.Offset, fe.Err = stlHeaderBytes+complete*stlTriangleBytes, io.ErrUnexpectedEOF
		return fe
	}
	fe := stlError(ErrInvalid, fmt.Sprintf("%d bytes after the %d triangles the header declares", have-want, count))
	fe.Offset = want
	return fe
}

var stlLineRE = regexp.MustCompile(`^(\d+): (.*)$`)

// stlASCIIError turns the library's multi-line ASCII error text into a
// FileError naming the first line it complains about.
func stlASCIIError(data []byte, count uint32, err error) error {
	if !utf8.Valid(data) {
		// Text that is not text: most likely a binary file whose
		// header happens to start with "solid" and whose size does
		// not match its count.
		fe := stlError(ErrInvalid, fmt.Sprintf(
			"starts with \"solid\" but is not ASCII text, and is not a binary STL either (header declares %d triangles, %d bytes; file has %d)",
			count, stlHeaderBytes+int64(count)*stlTriangleBytes, len(data)))
		return fe
	}
	fe := stlError(ErrInvalid, "")
	var msgs []string
	for _, l := range strings.Split(strings.TrimSpace(err.Error()), "\n") {
		if m := stlLineRE.FindStringSubmatch(l); m != nil {
			if fe.Line == 0 {
				fe.Line, _ = strconv.Atoi(m[1])
				msgs = append(msgs, m[2])
			}
			continue
		}
		if l != "" && !strings.HasPrefix(l, "Triangles had to be skipped") {
			msgs = append(msgs, l)
		}
	}
	if len(msgs) == 0 {
		msgs = append(msgs, "malformed ASCII STL")
	}
	fe.Msg = "ascii: " + strings.Join(msgs, "; ")
	return fe
}

// stlKey is a position's float32 bits, with −0 taken as +0 so that the
// two zeros weld as the == of floats would have them. Hashing the bits
// is several times faster than hashing floats (profiled).
type stlKey [3]uint32

func stlKeyOf(v stl.Vec3) stlKey {
	var k stlKey
	for i, x := range v {
		if x == 0 {
			x = 0 // −0 → +0
		}
		k[i] = math.Float32bits(x)
	}
	return k
}

// stlCollector receives the library's triangles, checks them and welds
// their vertices.
type stlCollector struct {
	m      Mesh
	index  map[stlKey]uint32
	binary bool
	n      int64 // triangles seen
	err    *FileError
}

func (c *stlCollector) SetName(string)         {}
func (c *stlCollector) SetBinaryHeader([]byte) {}
func (c *stlCollector) SetASCII(bool)          {}
func (c *stlCollector) SetTriangleCount(uint32) {
	// Ignored: decodeSTL preallocates from a count it has checked.
}

func (c *stlCollector) AppendTriangle(t stl.Triangle) {
	i := c.n
	c.n++
	if c.err != nil {
		return
	}
	var f Face
	for j, v := range t.Vertices {
		for k, x := range v {
			if math.IsNaN(float64(x)) || math.IsInf(float64(x), 0) {
				fe := stlError(ErrInvalid, fmt.Sprintf("vertex %d coordinate %d is %v", j, k, x))
				fe.Element, fe.Record = "triangle", i
				if c.binary {
					fe.Offset = stlHeaderBytes + i*stlTriangleBytes + 12 + int64(12*j+4*k)
				}
				c.err = fe
				return
			}
		}
		key := stlKeyOf(v)
		idx, ok := c.index[key]
		if !ok {
			if len(c.m.Vertices) >= math.MaxUint32 {
				c.err = stlError(ErrUnsupported, "more than 2³²-1 vertices")
				return
			}
			idx = uint32(len(c.m.Vertices))
			c.index[key] = idx
			c.m.Vertices = append(c.m.Vertices, r3.Vec{X: float64(v[0]), Y: float64(v[1]), Z: float64(v[2])})
		}
		f[j] = idx
	}
	c.m.Faces = append(c.m.Faces, f)
}

// WriteSTL writes m's faces as STL, binary or (ascii true) ASCII. Each
// facet's normal is computed from its vertices by the right-hand rule
// (zero for a degenerate triangle); vertex normals and colours are not
// stored, nor is connectivity: ReadSTL recovers it by welding equal
// positions. Coordinates are written as float32; a coordinate that is
// NaN, infinite or too large for float32 is an error, as is a mesh
// without faces (an empty solid) or one that fails Validate.
func WriteSTL(w io.Writer, m *Mesh, ascii bool) error {
	if err := m.Validate(); err != nil {
		return err
	}
	if len(m.Faces) == 0 {
		return fmt.Errorf("mesh: stl: mesh has no faces (an empty solid): %w", ErrInvalid)
	}
	if int64(len(m.Faces)) > (MaxFileBytes-stlHeaderBytes)/stlTriangleBytes {
		return fmt.Errorf("mesh: stl: %d faces is more than ReadSTL accepts: %w", len(m.Faces), ErrUnsupported)
	}
	s := stl.Solid{
		Name:         "scanfold",
		BinaryHeader: []byte("binary STL written by scanfold"),
		IsAscii:      ascii,
		Triangles:    make([]stl.Triangle, len(m.Faces)),
	}
	for i, f := range m.Faces {
		t := &s.Triangles[i]
		for j, vi := range f {
			v := m.Vertices[vi]
			for k, x := range [3]float64{v.X, v.Y, v.Z} {
				y, err := ioFloat32("stl: vertex", int(vi), x)
				if err != nil {
					return err
				}
				t.Vertices[j][k] = y
			}
		}
		n := m.FaceNormal(f)
		if !ioFinite(n) {
			n = r3.Vec{} // the cross product overflowed: no usable normal
		}
		t.Normal = stl.Vec3{float32(n.X), float32(n.Y), float32(n.Z)}
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	if err := s.WriteAll(bw); err != nil {
		return fmt.Errorf("mesh: stl: %w", err)
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("mesh: stl: %w", err)
	}
	return nil
}
