package mesh

// Wavefront OBJ, the polygon subset: one statement per line, a keyword
// followed by its arguments, "#" starting a comment. Indices are
// 1-based; a negative index counts back from the last element of its
// kind defined so far (-1 is the latest).

import (
	"bufio"
	"bytes"
	"fmt"
	"io"
	"math"
	"strconv"
	"unicode/utf8"

	"gonum.org/v1/gonum/spatial/r3"
)

// ReadOBJ reads a mesh from a Wavefront OBJ file.
//
// Statements read: "v x y z" (optionally "v x y z w", w ignored, or
// "v x y z r g b" with colour components in [0, 1], scaled to 0..255,
// rounded and clamped), "vn x y z" and "f" with corners in the forms
// v, v/vt, v//vn and v/vt/vn; polygons are fanned into triangles
// (v0, vi, vi+1). Every other statement (vt, o, g, s, usemtl, mtllib,
// l, p, curves and surfaces ...) is skipped, though its keyword must be
// a word. An index must refer to an element defined on an earlier
// line. Colours are kept only when every vertex has one.
//
// Normals: OBJ attaches normals to face corners, the mesh to vertices.
// A vertex takes the normal of the corners that use it when they all
// agree; when a vertex is used with different normals (a hard edge) it
// takes the normalised sum of its corners' unit normals, their mean
// direction. A
// vertex that no corner gives a normal gets the zero vector. When no
// face refers to normals, the file has no faces and it has exactly as
// many vn as v lines, the i-th normal goes to the i-th vertex (a point
// cloud, as several tools write them). Otherwise the mesh has no
// Normals.
//
// A file with no vertex is an error, and more than 2²⁸ triangles is
// ErrUnsupported. Errors are *FileError values that name the line and
// wrap ErrInvalid or ErrUnsupported.
func ReadOBJ(r io.Reader) (*Mesh, error) {
	data, err := readAllLimited(r, "obj")
	if err != nil {
		return nil, err
	}
	return decodeOBJ(data)
}

// objNormal accumulates the normals of one vertex's face corners.
type objNormal struct {
	first, sum r3.Vec
	has        bool
	differs    bool
}

// objCorner is one face corner: a vertex index and a normal index (or
// -1), both 0-based.
type objCorner struct{ v, n int }

// ioNextField splits off the first white-space separated field of b.
func ioNextField(b []byte) (field, rest []byte) {
	i := 0
	for i < len(b) && ioIsSpace(b[i]) {
		i++
	}
	j := i
	for j < len(b) && !ioIsSpace(b[j]) {
		j++
	}
	return b[i:j], b[j:]
}

func ioIsSpace(c byte) bool { return c == ' ' || c == '\t' || c == '\r' || c == '\v' || c == '\f' }

// objIsWord reports whether b looks like an OBJ keyword: a letter or
// underscore, then letters, digits or underscores.
func objIsWord(b []byte) bool {
	for i, c := range b {
		letter := c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c == '_'
		if !letter && (i == 0 || c < '0' || c > '9') {
			return false
		}
	}
	return len(b) > 0
}

func decodeOBJ(data []byte) (*Mesh, error) {
	var (
		m        Mesh
		colors   []RGB
		normals  []r3.Vec // vn lines
		acc      []objNormal
		nTex     int // vt lines
		corners  []objCorner
		anyFaceN bool
		vals     [8]float64
	)
	// Capacities from a count of the statements (bounded by the file's
	// size), so the slices do not grow step by step.
	m.Vertices = make([]r3.Vec, 0, bytes.Count(data, []byte("\nv "))+1)
	m.Faces = make([]Face, 0, bytes.Count(data, []byte("\nf "))+1)
	normals = make([]r3.Vec, 0, bytes.Count(data, []byte("\nvn "))+1)
	line := 0
	fail := func(kind error, format string, args ...any) error {
		e := newFileError("obj", kind, fmt.Sprintf(format, args...))
		e.Line = line
		return e
	}
	// floats parses the rest of a line into vals.
	floats := func(rest []byte) (int, error) {
		n := 0
		for {
			var tok []byte
			tok, rest = ioNextField(rest)
			if len(tok) == 0 {
				return n, nil
			}
			if n == len(vals) {
				return n, fail(ErrInvalid, "too many values")
			}
			f, err := strconv.ParseFloat(string(tok), 64)
			if err != nil {
				return n, fail(ErrInvalid, "%q is not a number", ioTruncate(tok))
			}
			if math.IsNaN(f) || math.IsInf(f, 0) {
				return n, fail(ErrInvalid, "value %q is not finite", ioTruncate(tok))
			}
			vals[n] = f
			n++
		}
	}
	// index resolves an OBJ index against n elements defined so far.
	index := func(tok []byte, n int, what, plural string) (int, error) {
		i, err := strconv.ParseInt(string(tok), 10, 64)
		if err != nil {
			return 0, fail(ErrInvalid, "%s index %q is not an integer", what, ioTruncate(tok))
		}
		switch {
		case i > 0 && i <= int64(n):
			return int(i - 1), nil
		case i < 0 && -i <= int64(n):
			return n + int(i), nil
		}
		return 0, fail(ErrInvalid, "%s index %d is out of range: %d %s defined so far", what, i, n, plural)
	}

	for off := 0; off < len(data); {
		raw, next := data[off:], len(data)
		if nl := bytes.IndexByte(raw, '\n'); nl >= 0 {
			raw, next = raw[:nl], off+nl+1
		}
		off = next
		line++
		if c := bytes.IndexByte(raw, '#'); c >= 0 {
			raw = raw[:c]
		}
		if !utf8.Valid(raw) {
			return nil, fail(ErrInvalid, "line is not UTF-8 text")
		}
		kw, rest := ioNextField(raw)
		switch string(kw) {
		case "":
		case "v":
			n, err := floats(rest)
			if err != nil {
				return nil, err
			}
			switch n {
			case 3, 4:
			case 6:
				colors = append(colors, RGB{objColor(vals[3]), objColor(vals[4]), objColor(vals[5])})
			default:
				return nil, fail(ErrInvalid, "vertex has %d values (3, 4 or 6 expected)", n)
			}
			if len(m.Vertices) == math.MaxUint32 {
				return nil, fail(ErrUnsupported, "more than 2³²-1 vertices")
			}
			m.Vertices = append(m.Vertices, r3.Vec{X: vals[0], Y: vals[1], Z: vals[2]})
		case "vn":
			n, err := floats(rest)
			if err != nil {
				return nil, err
			}
			if n != 3 {
				return nil, fail(ErrInvalid, "normal has %d values (3 expected)", n)
			}
			normals = append(normals, r3.Vec{X: vals[0], Y: vals[1], Z: vals[2]})
		case "vt":
			nTex++
		case "f":
			corners = corners[:0]
			for {
				var tok []byte
				tok, rest = ioNextField(rest)
				if len(tok) == 0 {
					break
				}
				c := objCorner{n: -1}
				// v, v/vt, v//vn or v/vt/vn, split without allocating.
				var parts [3][]byte
				np := 0
				for rest := tok; ; np++ {
					if np == 3 {
						return nil, fail(ErrInvalid, "face corner %q has more than three parts", ioTruncate(tok))
					}
					i := bytes.IndexByte(rest, '/')
					if i < 0 {
						parts[np] = rest
						np++
						break
					}
					parts[np], rest = rest[:i], rest[i+1:]
				}
				var err error
				if c.v, err = index(parts[0], len(m.Vertices), "vertex", "vertices"); err != nil {
					return nil, err
				}
				if np > 1 && len(parts[1]) > 0 {
					if _, err = index(parts[1], nTex, "texture coordinate", "texture coordinates"); err != nil {
						return nil, err
					}
				}
				if np > 2 {
					if c.n, err = index(parts[2], len(normals), "normal", "normals"); err != nil {
						return nil, err
					}
				}
				corners = append(corners, c)
			}
			if len(corners) < 3 {
				return nil, fail(ErrInvalid, "face has %d corners; at least 3 are needed", len(corners))
			}
			if len(m.Faces)+len(corners)-2 > maxPLYCount {
				return nil, fail(ErrUnsupported, "more than %d triangles", maxPLYCount)
			}
			for k := 2; k < len(corners); k++ {
				m.Faces = append(m.Faces, Face{uint32(corners[0].v), uint32(corners[k-1].v), uint32(corners[k].v)})
			}
			for _, c := range corners {
				if c.n < 0 {
					continue
				}
				anyFaceN = true
				if len(acc) < len(m.Vertices) {
					if cap(acc) < cap(m.Vertices) {
						acc = append(make([]objNormal, 0, cap(m.Vertices)), acc...)
					}
					acc = acc[:len(m.Vertices)] // the new entries are zero
				}
				a, n := &acc[c.v], normals[c.n]
				if !a.has {
					a.first, a.has = n, true
				} else if n != a.first {
					a.differs = true
				}
				// Unit vectors: every corner weighs the same, and the
				// sum of finitely many stays finite.
				a.sum = r3.Add(a.sum, Normalize(n))
			}
		default:
			if !objIsWord(kw) {
				return nil, fail(ErrInvalid, "unknown statement %q", ioTruncate(kw))
			}
			// Another statement: skipped.
		}
	}
	line = 0
	if len(m.Vertices) == 0 {
		return nil, fail(ErrInvalid, "no vertices")
	}
	if len(colors) == len(m.Vertices) {
		m.Colors = colors
	}
	switch {
	case anyFaceN:
		m.Normals = make([]r3.Vec, len(m.Vertices))
		for i, a := range acc {
			switch {
			case !a.has:
			case a.differs:
				m.Normals[i] = Normalize(a.sum)
			default:
				m.Normals[i] = a.first
			}
		}
	case len(m.Faces) == 0 && len(normals) == len(m.Vertices):
		m.Normals = normals
	}
	return &m, nil
}

// objColor converts an OBJ colour component in [0, 1] to 0..255.
func objColor(c float64) uint8 {
	return uint8(math.Round(math.Max(0, math.Min(1, c)) * 255))
}

// WriteOBJ writes m as OBJ: "v x y z" lines (with "r g b" in [0, 1]
// when m has colours), "vn" lines when m has normals (one per vertex,
// in vertex order), and "f" lines, "f a//a b//b c//c" with normals and
// "f a b c" without. Coordinates are written with the fewest digits
// that read back to the same float64, so ReadOBJ returns m exactly,
// except that vertices used by no face lose their normals (see
// ReadOBJ). NaN or infinite coordinates, a mesh with no vertices and
// one that fails Validate are errors.
func WriteOBJ(w io.Writer, m *Mesh) error {
	if err := m.Validate(); err != nil {
		return err
	}
	if len(m.Vertices) == 0 {
		return fmt.Errorf("mesh: obj: mesh has no vertices: %w", ErrInvalid)
	}
	check := func(what string, vs []r3.Vec) error {
		for i, v := range vs {
			if !ioFinite(v) {
				return fmt.Errorf("mesh: obj: %s %d (%g, %g, %g) is not finite: %w", what, i, v.X, v.Y, v.Z, ErrInvalid)
			}
		}
		return nil
	}
	if err := check("vertex", m.Vertices); err != nil {
		return err
	}
	if err := check("normal", m.Normals); err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	buf := make([]byte, 0, 128)
	bw.WriteString("# OBJ written by scanfold\n")
	vec := func(key string, v r3.Vec) {
		buf = append(buf[:0], key...)
		for _, x := range [3]float64{v.X, v.Y, v.Z} {
			buf = append(buf, ' ')
			buf = strconv.AppendFloat(buf, x, 'g', -1, 64)
		}
	}
	for i, v := range m.Vertices {
		vec("v", v)
		if m.Colors != nil {
			c := m.Colors[i]
			for _, x := range [3]uint8{c.R, c.G, c.B} {
				buf = append(buf, ' ')
				buf = strconv.AppendFloat(buf, float64(x)/255, 'g', -1, 64)
			}
		}
		buf = append(buf, '\n')
		bw.Write(buf) // errors are sticky in bufio.Writer; Flush reports them
	}
	for _, n := range m.Normals {
		vec("vn", n)
		buf = append(buf, '\n')
		bw.Write(buf)
	}
	for _, f := range m.Faces {
		buf = append(buf[:0], 'f')
		for _, v := range f {
			buf = append(buf, ' ')
			buf = strconv.AppendUint(buf, uint64(v)+1, 10)
			if m.Normals != nil {
				buf = append(buf, '/', '/')
				buf = strconv.AppendUint(buf, uint64(v)+1, 10)
			}
		}
		buf = append(buf, '\n')
		bw.Write(buf)
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("mesh: obj: %w", err)
	}
	return nil
}
