package mesh

// PLY, after Greg Turk, "The PLY Polygon File Format" (Stanford
// University, 1994). A file is an ASCII header followed by element
// data:
//
//	ply
//	format ascii 1.0 | binary_little_endian 1.0 | binary_big_endian 1.0
//	comment ... / obj_info ...           (any number, ignored)
//	element <name> <count>
//	property <type> <name>               (scalar)
//	property list <count type> <item type> <name>
//	...
//	end_header
//
// followed by each element's records in header order: in ASCII one
// record per line, values separated by white space; in binary the
// values packed without padding in the declared byte order. Scalar
// types are char/int8, uchar/uint8, short/int16, ushort/uint16,
// int/int32, uint/uint32 (two's complement integers) and
// float/float32, double/float64 (IEEE 754).

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"unicode/utf8"

	"gonum.org/v1/gonum/spatial/r3"
)

// Limits of the PLY reader. Counts above them are refused with an
// error wrapping ErrUnsupported; they are far above what a scanned part
// needs, and with MaxFileBytes they bound what a header can make the
// reader allocate.
const (
	maxPLYHeaderBytes = 1 << 20 // the header, end_header included
	maxPLYElements    = 256     // element declarations in a header
	maxPLYProperties  = 1024    // property declarations in one element
	maxPLYCount       = 1 << 28 // records in one element, and triangles after fanning
	maxPLYListLength  = 1 << 16 // items in one list value
)

// PLYFormat is the encoding of a PLY file's element data.
type PLYFormat int

// The PLY encodings.
const (
	PLYBinaryLE PLYFormat = iota // format binary_little_endian 1.0
	PLYASCII                     // format ascii 1.0
	PLYBinaryBE                  // format binary_big_endian 1.0
)

// String returns the format's keyword as it appears in a PLY header.
func (f PLYFormat) String() string {
	switch f {
	case PLYBinaryLE:
		return "binary_little_endian"
	case PLYASCII:
		return "ascii"
	case PLYBinaryBE:
		return "binary_big_endian"
	}
	return "PLYFormat(" + strconv.Itoa(int(f)) + ")"
}

// NamedScalars is an extra per-vertex float property of a PLY file,
// such as a per-vertex "deviation" or "confidence": one value per
// vertex.
type NamedScalars struct {
	Name   string
	Values []float32
}

// PLYOptions controls WritePLY and WritePLYCloud.
type PLYOptions struct {
	// Format is the encoding of the element data.
	// DEFAULT: PLYBinaryLE.
	Format PLYFormat

	// Comments are written as "comment" lines of the header, one line
	// per entry; an entry must not contain a line break.
	// DEFAULT: none.
	Comments []string

	// VertexScalars are written as extra float properties of the
	// vertex element, after the positions, normals and colours, in
	// this order. Each needs a name that is a single word other than
	// x, y, z, nx, ny, nz, red, green, blue and alpha, unique among
	// them, and exactly one value per vertex.
	// DEFAULT: none.
	VertexScalars []NamedScalars
}

// DefaultPLYOptions returns the default PLYOptions: binary
// little-endian, no comments, no extra scalars.
func DefaultPLYOptions() PLYOptions { return PLYOptions{Format: PLYBinaryLE} }

// ReadPLY reads a mesh from a PLY file in any of the three encodings.
//
// The "vertex" element must have properties x, y and z; nx, ny, nz
// (all three) become Normals and red, green, blue (all three) become
// Colors: uchar values are taken as they are, float and double values
// are scaled from [0, 1] to [0, 255] and rounded (out-of-range values
// are clamped). An alpha property is ignored. The "face" element's
// vertex_indices (or vertex_index) list gives polygons, which are
// fanned into triangles (v0, vi, vi+1); a face with fewer than three
// vertices or an index outside the vertex element is an error. Other
// properties and elements, scalar or list, are skipped. Faces may be
// absent: a point cloud reads as a mesh without faces. Normals are
// returned as stored (not renormalised).
//
// ReadPLY holds the whole file in memory (at most MaxFileBytes), and
// checks every count in the header against the bytes that follow it
// before it allocates. It takes at most 2²⁸ records per element, 2²⁸
// triangles and 65536 items per list; more is ErrUnsupported. In ASCII
// every record must be on one line.
// Bytes after the last element are ignored. Errors are *FileError
// values that name the element, record, property and line (ASCII and
// header) or byte offset (binary), and wrap ErrInvalid or
// ErrUnsupported, plus io.ErrUnexpectedEOF for a file cut short.
func ReadPLY(r io.Reader) (*Mesh, error) {
	data, err := readAllLimited(r, "ply")
	if err != nil {
		return nil, err
	}
	m, _, err := decodePLY(data, false, false)
	return m, err
}

// ReadPLYScalars reads a mesh as ReadPLY does and also returns the
// vertex element's other scalar properties (every scalar property but
// x, y, z, nx, ny, nz, red, green, blue and alpha), in header order,
// converted to float32. It reads back the VertexScalars that WritePLY
// wrote.
func ReadPLYScalars(r io.Reader) (*Mesh, []NamedScalars, error) {
	data, err := readAllLimited(r, "ply")
	if err != nil {
		return nil, nil, err
	}
	return decodePLY(data, false, true)
}

// ReadPLYCloud reads a point cloud from a PLY file: the vertex element
// as ReadPLY reads it. Faces, if any, are skipped unread (their
// indices are not checked).
func ReadPLYCloud(r io.Reader) (*Cloud, error) {
	data, err := readAllLimited(r, "ply")
	if err != nil {
		return nil, err
	}
	m, _, err := decodePLY(data, true, false)
	if err != nil {
		return nil, err
	}
	return &Cloud{Points: m.Vertices, Normals: m.Normals, Colors: m.Colors}, nil
}

// plyType is a PLY scalar type.
type plyType uint8

const (
	plyNoType plyType = iota
	plyInt8
	plyUint8
	plyInt16
	plyUint16
	plyInt32
	plyUint32
	plyFloat32
	plyFloat64
)

var plyTypeByName = map[string]plyType{
	"char": plyInt8, "int8": plyInt8,
	"uchar": plyUint8, "uint8": plyUint8,
	"short": plyInt16, "int16": plyInt16,
	"ushort": plyUint16, "uint16": plyUint16,
	"int": plyInt32, "int32": plyInt32,
	"uint": plyUint32, "uint32": plyUint32,
	"float": plyFloat32, "float32": plyFloat32,
	"double": plyFloat64, "float64": plyFloat64,
}

// plyUnsupportedTypes are type names seen in the wild that this reader
// does not handle (they are not in Turk's description).
var plyUnsupportedTypes = map[string]bool{
	"int64": true, "uint64": true, "long": true, "ulong": true, "half": true, "float16": true,
}

var plyTypeSize = [...]int{0, 1, 1, 2, 2, 4, 4, 4, 8}

var plyTypeName = [...]string{"none", "char", "uchar", "short", "ushort", "int", "uint", "float", "double"}

func (t plyType) size() int      { return plyTypeSize[t] }
func (t plyType) String() string { return plyTypeName[t] }
func (t plyType) isInt() bool    { return t >= plyInt8 && t <= plyUint32 }

// plyProperty is one property declaration.
type plyProperty struct {
	name      string
	typ       plyType // the value type; for a list, the item type
	countType plyType // for a list, the length type; plyNoType for a scalar
	line      int     // header line of the declaration
}

func (p *plyProperty) isList() bool { return p.countType != plyNoType }

// plyElement is one element declaration.
type plyElement struct {
	name  string
	count int64
	props []plyProperty
	line  int
}

// minRecordBytes is the fewest bytes one record of e can take: in
// binary the scalars and list lengths (a list may be empty); in ASCII
// one character and one separator per value.
func (e *plyElement) minRecordBytes(f PLYFormat) int64 {
	var n int64
	for i := range e.props {
		p := &e.props[i]
		if f == PLYASCII {
			n += 2
		} else if p.isList() {
			n += int64(p.countType.size())
		} else {
			n += int64(p.typ.size())
		}
	}
	return n
}

// fixedStride is the size of every binary record of e, or 0 when e has
// a list property (records vary in size) or no properties.
func (e *plyElement) fixedStride() int {
	n := 0
	for i := range e.props {
		if e.props[i].isList() {
			return 0
		}
		n += e.props[i].typ.size()
	}
	return n
}

// plyHeader is a parsed header.
type plyHeader struct {
	format    PLYFormat
	elements  []plyElement
	bodyStart int // byte offset of the first byte after end_header's line
	bodyLine  int // line number of the first line after end_header
}

func plyHeaderError(kind error, line int, msg string) *FileError {
	e := newFileError("ply", kind, msg)
	e.Line = line
	return e
}

// parsePLYHeader parses the header at the start of data.
func parsePLYHeader(data []byte) (*plyHeader, error) {
	h := &plyHeader{}
	formatSeen := false
	off, line := 0, 0
	for {
		if off >= len(data) {
			e := plyHeaderError(ErrInvalid, line, "header ends without end_header")
			e.Err = io.ErrUnexpectedEOF
			return nil, e
		}
		if off >= maxPLYHeaderBytes {
			return nil, plyHeaderError(ErrInvalid, line,
				fmt.Sprintf("no end_header in the first %d bytes", maxPLYHeaderBytes))
		}
		raw, next := data[off:min(len(data), maxPLYHeaderBytes)], len(data)
		if nl := bytes.IndexByte(raw, '\n'); nl >= 0 {
			raw, next = raw[:nl], off+nl+1
		} else if len(data) > maxPLYHeaderBytes {
			return nil, plyHeaderError(ErrInvalid, line+1,
				fmt.Sprintf("no end_header in the first %d bytes", maxPLYHeaderBytes))
		}
		line++
		raw = bytes.TrimRight(raw, " \t\r")
		if line == 1 {
			if string(raw) != "ply" {
				return nil, plyHeaderError(ErrInvalid, 1, `not a PLY file: the first line is not "ply"`)
			}
			off = next
			continue
		}
		keyword, rest := plyKeyword(raw)
		if keyword == "comment" || keyword == "obj_info" {
			off = next
			continue // free text, ignored
		}
		if !utf8.Valid(raw) {
			return nil, plyHeaderError(ErrInvalid, line, "header line is not UTF-8 text")
		}
		fields := strings.Fields(rest)
		switch keyword {
		case "":
			// A blank line; not in Turk's description, but harmless.
		case "format":
			if formatSeen {
				return nil, plyHeaderError(ErrInvalid, line, "second format line")
			}
			if len(h.elements) > 0 {
				return nil, plyHeaderError(ErrInvalid, line, "format line after an element")
			}
			if len(fields) != 2 {
				return nil, plyHeaderError(ErrInvalid, line, `format line is not "format <encoding> <version>"`)
			}
			switch fields[0] {
			case "ascii":
				h.format = PLYASCII
			case "binary_little_endian":
				h.format = PLYBinaryLE
			case "binary_big_endian":
				h.format = PLYBinaryBE
			default:
				return nil, plyHeaderError(ErrUnsupported, line, fmt.Sprintf("unknown encoding %q", fields[0]))
			}
			if v, err := strconv.ParseFloat(fields[1], 64); err != nil || v != 1 {
				return nil, plyHeaderError(ErrUnsupported, line, fmt.Sprintf("PLY version %q (only 1.0 is known)", fields[1]))
			}
			formatSeen = true
		case "element":
			if !formatSeen {
				return nil, plyHeaderError(ErrInvalid, line, "element before the format line")
			}
			if len(fields) != 2 {
				return nil, plyHeaderError(ErrInvalid, line, `element line is not "element <name> <count>"`)
			}
			name := fields[0]
			for i := range h.elements {
				if h.elements[i].name == name {
					return nil, plyHeaderError(ErrInvalid, line, fmt.Sprintf("second %q element (first on line %d)", name, h.elements[i].line))
				}
			}
			if len(h.elements) >= maxPLYElements {
				return nil, plyHeaderError(ErrUnsupported, line, fmt.Sprintf("more than %d elements", maxPLYElements))
			}
			count, err := strconv.ParseInt(fields[1], 10, 64)
			if err != nil || count < 0 {
				e := plyHeaderError(ErrInvalid, line, fmt.Sprintf("element count %q is not a non-negative integer", fields[1]))
				e.Element = name
				return nil, e
			}
			if count > maxPLYCount {
				e := plyHeaderError(ErrUnsupported, line, fmt.Sprintf("%d records is more than the limit of %d", count, maxPLYCount))
				e.Element = name
				return nil, e
			}
			h.elements = append(h.elements, plyElement{name: name, count: count, line: line})
		case "property":
			if len(h.elements) == 0 {
				return nil, plyHeaderError(ErrInvalid, line, "property before any element")
			}
			el := &h.elements[len(h.elements)-1]
			p, err := parsePLYProperty(fields, line)
			if err != nil {
				err.Element = el.name
				return nil, err
			}
			for i := range el.props {
				if el.props[i].name == p.name {
					e := plyHeaderError(ErrInvalid, line, fmt.Sprintf("second declaration (first on line %d)", el.props[i].line))
					e.Element, e.Property = el.name, p.name
					return nil, e
				}
			}
			if len(el.props) >= maxPLYProperties {
				e := plyHeaderError(ErrUnsupported, line, fmt.Sprintf("more than %d properties", maxPLYProperties))
				e.Element = el.name
				return nil, e
			}
			el.props = append(el.props, p)
		case "end_header":
			if len(fields) != 0 {
				return nil, plyHeaderError(ErrInvalid, line, "text after end_header")
			}
			if !formatSeen {
				return nil, plyHeaderError(ErrInvalid, line, "no format line")
			}
			h.bodyStart, h.bodyLine = next, line+1
			return h, nil
		default:
			return nil, plyHeaderError(ErrInvalid, line, fmt.Sprintf("unknown header keyword %q", keyword))
		}
		off = next
	}
}

// plyKeyword splits a header line into its first word and the rest.
func plyKeyword(raw []byte) (keyword, rest string) {
	s := strings.TrimLeft(string(raw), " \t")
	i := strings.IndexAny(s, " \t")
	if i < 0 {
		return s, ""
	}
	return s[:i], s[i+1:]
}

// parsePLYProperty parses the words after "property".
func parsePLYProperty(fields []string, line int) (plyProperty, *FileError) {
	typeOf := func(name, what string) (plyType, *FileError) {
		if t, ok := plyTypeByName[name]; ok {
			return t, nil
		}
		if plyUnsupportedTypes[name] {
			return 0, plyHeaderError(ErrUnsupported, line, fmt.Sprintf("%s type %q is not supported", what, name))
		}
		return 0, plyHeaderError(ErrInvalid, line, fmt.Sprintf("unknown %s type %q", what, name))
	}
	if len(fields) >= 1 && fields[0] == "list" {
		if len(fields) != 4 {
			return plyProperty{}, plyHeaderError(ErrInvalid, line, `list property is not "property list <count type> <item type> <name>"`)
		}
		p := plyProperty{name: fields[3], line: line}
		var err *FileError
		if p.countType, err = typeOf(fields[1], "list length"); err != nil {
			err.Property = p.name
			return p, err
		}
		if !p.countType.isInt() {
			e := plyHeaderError(ErrInvalid, line, fmt.Sprintf("list length type %s is not an integer type", p.countType))
			e.Property = p.name
			return p, e
		}
		if p.typ, err = typeOf(fields[2], "list item"); err != nil {
			err.Property = p.name
			return p, err
		}
		return p, nil
	}
	if len(fields) != 2 {
		return plyProperty{}, plyHeaderError(ErrInvalid, line, `property is not "property <type> <name>"`)
	}
	p := plyProperty{name: fields[1], line: line}
	var err *FileError
	if p.typ, err = typeOf(fields[0], "scalar"); err != nil {
		err.Property = p.name
		return p, err
	}
	return p, nil
}

// What the decoder does with each property.
const (
	roleSkip uint8 = iota
	roleX
	roleY
	roleZ
	roleNX
	roleNY
	roleNZ
	roleRed
	roleGreen
	roleBlue
	roleScalar
	roleIndices
)

// plyPlan says what the decoder takes from each property of each
// element.
type plyPlan struct {
	roles       [][]uint8
	vertex      int // index of the vertex element
	face        int // index of the face element, or -1
	hasNormals  bool
	hasColors   bool
	scalarNames []string
}

func (h *plyHeader) plan(cloud, withScalars bool) (*plyPlan, error) {
	pl := &plyPlan{roles: make([][]uint8, len(h.elements)), vertex: -1, face: -1}
	for i := range h.elements {
		pl.roles[i] = make([]uint8, len(h.elements[i].props))
		switch h.elements[i].name {
		case "vertex":
			pl.vertex = i
		case "face":
			if !cloud {
				pl.face = i
			}
		}
	}
	if pl.vertex < 0 {
		return nil, newFileError("ply", ErrInvalid, "no vertex element")
	}
	ve := &h.elements[pl.vertex]
	var seen [roleBlue + 1]bool
	for i := range ve.props {
		p := &ve.props[i]
		role := roleSkip
		switch p.name {
		case "x":
			role = roleX
		case "y":
			role = roleY
		case "z":
			role = roleZ
		case "nx":
			role = roleNX
		case "ny":
			role = roleNY
		case "nz":
			role = roleNZ
		case "red":
			role = roleRed
		case "green":
			role = roleGreen
		case "blue":
			role = roleBlue
		case "alpha":
		default:
			if withScalars && !p.isList() {
				role = roleScalar
				pl.scalarNames = append(pl.scalarNames, p.name)
			}
		}
		if role >= roleX && role <= roleBlue {
			if p.isList() {
				e := plyHeaderError(ErrInvalid, p.line, "is a list; a scalar is needed")
				e.Element, e.Property = ve.name, p.name
				return nil, e
			}
			if role >= roleRed && p.typ != plyUint8 && p.typ != plyFloat32 && p.typ != plyFloat64 {
				e := plyHeaderError(ErrUnsupported, p.line, fmt.Sprintf("colour of type %s (uchar, float or double expected)", p.typ))
				e.Element, e.Property = ve.name, p.name
				return nil, e
			}
			seen[role] = true
		}
		pl.roles[pl.vertex][i] = role
	}
	for _, group := range [][3]uint8{{roleX, roleY, roleZ}, {roleNX, roleNY, roleNZ}, {roleRed, roleGreen, roleBlue}} {
		n := 0
		for _, r := range group {
			if seen[r] {
				n++
			}
		}
		if n == 3 || (n == 0 && group[0] != roleX) {
			continue
		}
		names := map[uint8]string{roleX: "x", roleY: "y", roleZ: "z", roleNX: "nx", roleNY: "ny", roleNZ: "nz",
			roleRed: "red", roleGreen: "green", roleBlue: "blue"}
		for _, r := range group {
			if !seen[r] {
				e := plyHeaderError(ErrInvalid, ve.line, fmt.Sprintf("no property %s (%s, %s and %s go together)",
					names[r], names[group[0]], names[group[1]], names[group[2]]))
				e.Element = ve.name
				return nil, e
			}
		}
	}
	pl.hasNormals, pl.hasColors = seen[roleNX], seen[roleRed]
	if pl.face >= 0 {
		fe := &h.elements[pl.face]
		found := -1
		for i := range fe.props {
			p := &fe.props[i]
			if p.name != "vertex_indices" && p.name != "vertex_index" {
				continue
			}
			if found >= 0 {
				e := plyHeaderError(ErrInvalid, p.line, "both vertex_indices and vertex_index")
				e.Element, e.Property = fe.name, p.name
				return nil, e
			}
			if !p.isList() {
				e := plyHeaderError(ErrInvalid, p.line, "is a scalar; a list is needed")
				e.Element, e.Property = fe.name, p.name
				return nil, e
			}
			if !p.typ.isInt() {
				e := plyHeaderError(ErrUnsupported, p.line, fmt.Sprintf("vertex indices of type %s (an integer type is needed)", p.typ))
				e.Element, e.Property = fe.name, p.name
				return nil, e
			}
			found = i
			pl.roles[pl.face][i] = roleIndices
		}
		if found < 0 {
			e := plyHeaderError(ErrInvalid, fe.line, "no vertex_indices list")
			e.Element = fe.name
			return nil, e
		}
	}
	return pl, nil
}

// checkBodySize checks that the records every element declares could
// fit in the bytes after the header, before anything is allocated.
func (h *plyHeader) checkBodySize(size int) error {
	left := int64(size - h.bodyStart)
	if h.format == PLYASCII {
		left++ // the last line needs no line break
	}
	var need int64 // counts ≤ 2^28, records ≤ 8·1024 bytes, ≤ 256 elements: no overflow
	for i := range h.elements {
		e := &h.elements[i]
		rec := e.minRecordBytes(h.format)
		if need+e.count*rec > left {
			fe := newFileError("ply", ErrInvalid, fmt.Sprintf(
				"header declares %d records of at least %d bytes, but only %d bytes are left for them",
				e.count, rec, max(left-need, 0)))
			fe.Element, fe.Line, fe.Err = e.name, e.line, io.ErrUnexpectedEOF
			return fe
		}
		need += e.count * rec
	}
	return nil
}

// plyBody reads the values of the element data in one encoding.
type plyBody interface {
	// startRecord moves to the next record.
	startRecord() error
	// value reads the next value of type t; on error the position is
	// left at that value.
	value(t plyType) (float64, error)
	// skip skips n values of type t.
	skip(t plyType, n int64) error
	// endRecord checks that the record has no values left.
	endRecord() error
	// skipRecords skips n whole records of e, whose properties are all
	// unused.
	skipRecords(e *plyElement, n int64) error
	// where sets the position of the last value read or failed in fe;
	// record true gives the start of the record instead.
	where(fe *FileError, record bool)
}

// decodePLY decodes a PLY file held in data. cloud skips faces;
// withScalars collects the extra vertex scalars.
func decodePLY(data []byte, cloud, withScalars bool) (*Mesh, []NamedScalars, error) {
	h, err := parsePLYHeader(data)
	if err != nil {
		return nil, nil, err
	}
	pl, err := h.plan(cloud, withScalars)
	if err != nil {
		return nil, nil, err
	}
	if err := h.checkBodySize(len(data)); err != nil {
		return nil, nil, err
	}
	var body plyBody
	switch h.format {
	case PLYASCII:
		body = &plyASCIIBody{data: data, off: h.bodyStart, line: h.bodyLine - 1}
	default:
		body = &plyBinaryBody{data: data, off: h.bodyStart, big: h.format == PLYBinaryBE}
	}

	// Allocations below are bounded by checkBodySize.
	ve := &h.elements[pl.vertex]
	nv := int(ve.count)
	m := &Mesh{Vertices: make([]r3.Vec, nv)}
	if pl.hasNormals {
		m.Normals = make([]r3.Vec, nv)
	}
	if pl.hasColors {
		m.Colors = make([]RGB, nv)
	}
	var scalars []NamedScalars
	for _, name := range pl.scalarNames {
		scalars = append(scalars, NamedScalars{Name: name, Values: make([]float32, nv)})
	}
	if pl.face >= 0 {
		m.Faces = make([]Face, 0, h.elements[pl.face].count)
	}

	for ei := range h.elements {
		e := &h.elements[ei]
		switch ei {
		case pl.vertex:
			err = decodePLYVertices(body, e, pl.roles[ei], m, scalars)
		case pl.face:
			m.Faces, err = decodePLYFaces(body, e, pl.roles[ei], nv, m.Faces)
		default:
			err = body.skipRecords(e, e.count)
		}
		if err != nil {
			return nil, nil, err
		}
	}
	return m, scalars, nil
}

// plyRecordError builds the error for a value of record rec of e.
func plyRecordError(body plyBody, e *plyElement, rec int64, prop string, cause error, atRecord bool) *FileError {
	fe := newFileError("ply", ErrInvalid, "")
	fe.Element, fe.Record, fe.Property = e.name, rec, prop
	if errors.Is(cause, io.ErrUnexpectedEOF) {
		fe.Msg, fe.Err = "file ends inside the record", io.ErrUnexpectedEOF
		if atRecord {
			fe.Msg = "file ends before the record"
		}
	} else {
		fe.Msg = cause.Error()
	}
	body.where(fe, atRecord)
	return fe
}

// plyListLength reads and checks a list length.
func plyListLength(body plyBody, e *plyElement, rec int64, p *plyProperty) (int64, error) {
	v, err := body.value(p.countType)
	if err != nil {
		return 0, plyRecordError(body, e, rec, p.name, err, false)
	}
	if v < 0 || v > maxPLYListLength {
		return 0, plyRecordError(body, e, rec, p.name,
			fmt.Errorf("list length %v is outside [0, %d]", v, maxPLYListLength), false)
	}
	return int64(v), nil
}

func decodePLYVertices(body plyBody, e *plyElement, roles []uint8, m *Mesh, scalars []NamedScalars) error {
	var rgb [3]float64
	for i := range e.count {
		if err := body.startRecord(); err != nil {
			return plyRecordError(body, e, i, "", err, true)
		}
		var v, n r3.Vec
		k := 0 // next scalar
		for pi := range e.props {
			p := &e.props[pi]
			if p.isList() {
				c, err := plyListLength(body, e, i, p)
				if err != nil {
					return err
				}
				if err := body.skip(p.typ, c); err != nil {
					return plyRecordError(body, e, i, p.name, err, false)
				}
				continue
			}
			x, err := body.value(p.typ)
			if err != nil {
				return plyRecordError(body, e, i, p.name, err, false)
			}
			switch roles[pi] {
			case roleX:
				v.X = x
			case roleY:
				v.Y = x
			case roleZ:
				v.Z = x
			case roleNX:
				n.X = x
			case roleNY:
				n.Y = x
			case roleNZ:
				n.Z = x
			case roleRed, roleGreen, roleBlue:
				if p.typ != plyUint8 {
					if math.IsNaN(x) {
						return plyRecordError(body, e, i, p.name, errors.New("colour is NaN"), false)
					}
					x = math.Round(math.Max(0, math.Min(1, x)) * 255)
				}
				rgb[roles[pi]-roleRed] = x
			case roleScalar:
				scalars[k].Values[i] = float32(x)
				k++
			}
		}
		if err := body.endRecord(); err != nil {
			return plyRecordError(body, e, i, "", err, false)
		}
		if !ioFinite(v) {
			return plyRecordError(body, e, i, "", fmt.Errorf("position (%g, %g, %g) is not finite", v.X, v.Y, v.Z), true)
		}
		m.Vertices[i] = v
		if m.Normals != nil {
			if !ioFinite(n) {
				return plyRecordError(body, e, i, "", fmt.Errorf("normal (%g, %g, %g) is not finite", n.X, n.Y, n.Z), true)
			}
			m.Normals[i] = n
		}
		if m.Colors != nil {
			m.Colors[i] = RGB{uint8(rgb[0]), uint8(rgb[1]), uint8(rgb[2])}
		}
	}
	return nil
}

func decodePLYFaces(body plyBody, e *plyElement, roles []uint8, nv int, faces []Face) ([]Face, error) {
	for i := range e.count {
		if err := body.startRecord(); err != nil {
			return nil, plyRecordError(body, e, i, "", err, true)
		}
		for pi := range e.props {
			p := &e.props[pi]
			if !p.isList() {
				if err := body.skip(p.typ, 1); err != nil {
					return nil, plyRecordError(body, e, i, p.name, err, false)
				}
				continue
			}
			c, err := plyListLength(body, e, i, p)
			if err != nil {
				return nil, err
			}
			if roles[pi] != roleIndices {
				if err := body.skip(p.typ, c); err != nil {
					return nil, plyRecordError(body, e, i, p.name, err, false)
				}
				continue
			}
			if c < 3 {
				return nil, plyRecordError(body, e, i, p.name,
					fmt.Errorf("face has %d vertices; at least 3 are needed", c), false)
			}
			var first, prev uint32
			for k := range c {
				x, err := body.value(p.typ)
				if err != nil {
					return nil, plyRecordError(body, e, i, p.name, err, false)
				}
				if x < 0 || x >= float64(nv) {
					return nil, plyRecordError(body, e, i, p.name,
						fmt.Errorf("vertex index %v is outside [0, %d)", x, nv), false)
				}
				idx := uint32(x)
				switch k {
				case 0:
					first = idx
				case 1:
					prev = idx
				default:
					if len(faces) >= maxPLYCount {
						fe := plyRecordError(body, e, i, p.name,
							fmt.Errorf("more than %d triangles", maxPLYCount), false)
						fe.Kind = ErrUnsupported
						return nil, fe
					}
					faces = append(faces, Face{first, prev, idx})
					prev = idx
				}
			}
		}
		if err := body.endRecord(); err != nil {
			return nil, plyRecordError(body, e, i, "", err, false)
		}
	}
	return faces, nil
}

func ioFinite(v r3.Vec) bool {
	return !math.IsNaN(v.X) && !math.IsNaN(v.Y) && !math.IsNaN(v.Z) &&
		!math.IsInf(v.X, 0) && !math.IsInf(v.Y, 0) && !math.IsInf(v.Z, 0)
}

// plyBinaryBody reads binary element data.
type plyBinaryBody struct {
	data      []byte
	off       int
	recStart  int
	big       bool
	lastStart int
}

func (b *plyBinaryBody) startRecord() error {
	b.recStart, b.lastStart = b.off, b.off
	if b.off >= len(b.data) {
		return io.ErrUnexpectedEOF
	}
	return nil
}

func (b *plyBinaryBody) value(t plyType) (float64, error) {
	n := plyTypeSize[t]
	b.lastStart = b.off
	if len(b.data)-b.off < n {
		return 0, io.ErrUnexpectedEOF
	}
	p := b.data[b.off : b.off+n]
	b.off += n
	switch t {
	case plyInt8:
		return float64(int8(p[0])), nil
	case plyUint8:
		return float64(p[0]), nil
	}
	if b.big {
		switch t {
		case plyInt16:
			return float64(int16(binary.BigEndian.Uint16(p))), nil
		case plyUint16:
			return float64(binary.BigEndian.Uint16(p)), nil
		case plyInt32:
			return float64(int32(binary.BigEndian.Uint32(p))), nil
		case plyUint32:
			return float64(binary.BigEndian.Uint32(p)), nil
		case plyFloat32:
			return float64(math.Float32frombits(binary.BigEndian.Uint32(p))), nil
		case plyFloat64:
			return math.Float64frombits(binary.BigEndian.Uint64(p)), nil
		}
	}
	switch t {
	case plyInt16:
		return float64(int16(binary.LittleEndian.Uint16(p))), nil
	case plyUint16:
		return float64(binary.LittleEndian.Uint16(p)), nil
	case plyInt32:
		return float64(int32(binary.LittleEndian.Uint32(p))), nil
	case plyUint32:
		return float64(binary.LittleEndian.Uint32(p)), nil
	case plyFloat32:
		return float64(math.Float32frombits(binary.LittleEndian.Uint32(p))), nil
	case plyFloat64:
		return math.Float64frombits(binary.LittleEndian.Uint64(p)), nil
	}
	panic("mesh: bad plyType") // unreachable: types come from plyTypeByName
}

func (b *plyBinaryBody) skip(t plyType, n int64) error {
	b.lastStart = b.off
	if int64(len(b.data)-b.off) < n*int64(t.size()) {
		return io.ErrUnexpectedEOF
	}
	b.off += int(n) * t.size()
	return nil
}

func (b *plyBinaryBody) endRecord() error { return nil }

func (b *plyBinaryBody) skipRecords(e *plyElement, n int64) error {
	if s := e.fixedStride(); s > 0 || len(e.props) == 0 {
		b.recStart, b.lastStart = b.off, b.off
		if int64(len(b.data)-b.off) < n*int64(s) {
			fe := newFileError("ply", ErrInvalid, "file ends inside the element")
			fe.Element, fe.Err, fe.Offset = e.name, io.ErrUnexpectedEOF, int64(b.off)
			return fe
		}
		b.off += int(n) * s
		return nil
	}
	for i := range n {
		b.recStart, b.lastStart = b.off, b.off
		for pi := range e.props {
			p := &e.props[pi]
			c := int64(1)
			if p.isList() {
				var err error
				if c, err = plyListLength(b, e, i, p); err != nil {
					return err
				}
			}
			if err := b.skip(p.typ, c); err != nil {
				return plyRecordError(b, e, i, p.name, err, false)
			}
		}
	}
	return nil
}

func (b *plyBinaryBody) where(fe *FileError, record bool) {
	if record {
		fe.Offset = int64(b.recStart)
	} else {
		fe.Offset = int64(b.lastStart)
	}
}

// plyASCIIBody reads ASCII element data: one record per line, values
// separated by spaces or tabs; blank lines are skipped.
type plyASCIIBody struct {
	data []byte
	off  int    // start of the next line
	line int    // number of the current line
	rest []byte // what is left of the current line
}

func (a *plyASCIIBody) startRecord() error {
	for {
		if a.off >= len(a.data) {
			a.rest = nil
			return io.ErrUnexpectedEOF
		}
		raw, next := a.data[a.off:], len(a.data)
		if nl := bytes.IndexByte(raw, '\n'); nl >= 0 {
			raw, next = raw[:nl], a.off+nl+1
		}
		a.off = next
		a.line++
		for len(raw) > 0 && ioIsSpace(raw[0]) {
			raw = raw[1:]
		}
		if len(raw) > 0 {
			a.rest = raw
			return nil
		}
	}
}

// token returns the next value of the current line, or nil.
func (a *plyASCIIBody) token() []byte {
	tok, rest := ioNextField(a.rest)
	a.rest = rest
	if len(tok) == 0 {
		return nil
	}
	return tok
}

var errLineEnds = errors.New("line ends before the record does")

func (a *plyASCIIBody) value(t plyType) (float64, error) {
	tok := a.token()
	if tok == nil {
		return 0, errLineEnds
	}
	if t == plyFloat32 || t == plyFloat64 {
		bits := 64
		if t == plyFloat32 {
			bits = 32
		}
		f, err := strconv.ParseFloat(string(tok), bits)
		if err != nil {
			return 0, fmt.Errorf("%q is not a valid %s", ioTruncate(tok), t)
		}
		return f, nil
	}
	var lo, hi int64
	switch t {
	case plyInt8:
		lo, hi = math.MinInt8, math.MaxInt8
	case plyUint8:
		lo, hi = 0, math.MaxUint8
	case plyInt16:
		lo, hi = math.MinInt16, math.MaxInt16
	case plyUint16:
		lo, hi = 0, math.MaxUint16
	case plyInt32:
		lo, hi = math.MinInt32, math.MaxInt32
	case plyUint32:
		lo, hi = 0, math.MaxUint32
	}
	i, err := strconv.ParseInt(string(tok), 10, 64)
	if err != nil || i < lo || i > hi {
		return 0, fmt.Errorf("%q is not a valid %s", ioTruncate(tok), t)
	}
	return float64(i), nil
}

// ioTruncate shortens a token for an error message.
func ioTruncate(tok []byte) string {
	if len(tok) > 40 {
		return string(tok[:40]) + "..."
	}
	return string(tok)
}

func (a *plyASCIIBody) skip(t plyType, n int64) error {
	for range n {
		if a.token() == nil {
			return errLineEnds
		}
	}
	return nil
}

func (a *plyASCIIBody) endRecord() error {
	if tok := a.token(); tok != nil {
		return fmt.Errorf("unexpected value %q after the end of the record", ioTruncate(tok))
	}
	return nil
}

func (a *plyASCIIBody) skipRecords(e *plyElement, n int64) error {
	if len(e.props) == 0 {
		return nil
	}
	for i := range n {
		if err := a.startRecord(); err != nil {
			return plyRecordError(a, e, i, "", err, true)
		}
	}
	return nil
}

func (a *plyASCIIBody) where(fe *FileError, record bool) { fe.Line = a.line }

// WritePLY writes m as PLY: a vertex element with float x, y, z, then
// float nx, ny, nz if m has normals, uchar red, green, blue if m has
// colours, and opt.VertexScalars as float properties; and a face
// element with "property list uchar int vertex_indices", every face a
// triangle.
//
// Positions and normals are float64 in memory and float32 on disk, so
// a round trip through WritePLY and ReadPLY is exact only to float32
// rounding (a relative error of at most 2⁻²⁴ per coordinate); faces,
// colours and scalars come back exactly. A coordinate that is NaN,
// infinite or too large for float32 is an error, as is a mesh that
// fails Validate.
func WritePLY(w io.Writer, m *Mesh, opt PLYOptions) error {
	if err := m.Validate(); err != nil {
		return err
	}
	return writePLY(w, m.Vertices, m.Normals, m.Colors, m.Faces, true, opt)
}

// WritePLYCloud writes c as PLY as WritePLY does, with no face element.
func WritePLYCloud(w io.Writer, c *Cloud, opt PLYOptions) error {
	if err := c.Validate(); err != nil {
		return err
	}
	return writePLY(w, c.Points, c.Normals, c.Colors, nil, false, opt)
}

// plyReserved are the vertex property names that WritePLY writes
// itself or that ReadPLYScalars would not return.
var plyReserved = map[string]bool{"x": true, "y": true, "z": true, "nx": true, "ny": true, "nz": true,
	"red": true, "green": true, "blue": true, "alpha": true}

func checkPLYOptions(opt PLYOptions, nv int) error {
	if opt.Format < PLYBinaryLE || opt.Format > PLYBinaryBE {
		return fmt.Errorf("mesh: ply: unknown format %v", opt.Format)
	}
	for i, c := range opt.Comments {
		if strings.ContainsAny(c, "\r\n") || !utf8.ValidString(c) {
			return fmt.Errorf("mesh: ply: comment %d has a line break or is not UTF-8 text", i)
		}
	}
	seen := map[string]bool{}
	for i, s := range opt.VertexScalars {
		if s.Name == "" || strings.ContainsFunc(s.Name, func(r rune) bool { return r <= ' ' || r == 0x7f }) || !utf8.ValidString(s.Name) {
			return fmt.Errorf("mesh: ply: vertex scalar %d: name %q is not a single word", i, s.Name)
		}
		if plyReserved[s.Name] || seen[s.Name] {
			return fmt.Errorf("mesh: ply: vertex scalar %d: name %q is reserved or used twice", i, s.Name)
		}
		seen[s.Name] = true
		if len(s.Values) != nv {
			return fmt.Errorf("mesh: ply: vertex scalar %q has %d values for %d vertices", s.Name, len(s.Values), nv)
		}
	}
	return nil
}

// ioFloat32 converts a coordinate for writing.
func ioFloat32(what string, i int, x float64) (float32, error) {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return 0, fmt.Errorf("mesh: %s %d: coordinate %g is not finite: %w", what, i, x, ErrInvalid)
	}
	f := float32(x)
	if math.IsInf(float64(f), 0) {
		return 0, fmt.Errorf("mesh: %s %d: coordinate %g is too large for float32: %w", what, i, x, ErrUnsupported)
	}
	return f, nil
}

func writePLY(w io.Writer, verts, normals []r3.Vec, colors []RGB, faces []Face, withFaces bool, opt PLYOptions) error {
	nv := len(verts)
	if err := checkPLYOptions(opt, nv); err != nil {
		return err
	}
	if nv > maxPLYCount || len(faces) > maxPLYCount {
		return fmt.Errorf("mesh: ply: %d vertices and %d faces: more than the limit of %d: %w",
			nv, len(faces), maxPLYCount, ErrUnsupported)
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	var hb strings.Builder
	hb.WriteString("ply\nformat ")
	hb.WriteString(opt.Format.String())
	hb.WriteString(" 1.0\n")
	for _, c := range opt.Comments {
		hb.WriteString("comment ")
		hb.WriteString(c)
		hb.WriteByte('\n')
	}
	fmt.Fprintf(&hb, "element vertex %d\nproperty float x\nproperty float y\nproperty float z\n", nv)
	if normals != nil {
		hb.WriteString("property float nx\nproperty float ny\nproperty float nz\n")
	}
	if colors != nil {
		hb.WriteString("property uchar red\nproperty uchar green\nproperty uchar blue\n")
	}
	for _, s := range opt.VertexScalars {
		hb.WriteString("property float ")
		hb.WriteString(s.Name)
		hb.WriteByte('\n')
	}
	if withFaces {
		fmt.Fprintf(&hb, "element face %d\nproperty list uchar int vertex_indices\n", len(faces))
	}
	hb.WriteString("end_header\n")
	if _, err := bw.WriteString(hb.String()); err != nil {
		return fmt.Errorf("mesh: ply: %w", err)
	}

	enc := plyEncoder{format: opt.Format}
	var xyz [3]float32
	for i, v := range verts {
		enc.buf = enc.buf[:0]
		var err error
		if xyz[0], err = ioFloat32("vertex", i, v.X); err != nil {
			return err
		}
		if xyz[1], err = ioFloat32("vertex", i, v.Y); err != nil {
			return err
		}
		if xyz[2], err = ioFloat32("vertex", i, v.Z); err != nil {
			return err
		}
		enc.float(xyz[0])
		enc.float(xyz[1])
		enc.float(xyz[2])
		if normals != nil {
			n := normals[i]
			if xyz[0], err = ioFloat32("normal", i, n.X); err != nil {
				return err
			}
			if xyz[1], err = ioFloat32("normal", i, n.Y); err != nil {
				return err
			}
			if xyz[2], err = ioFloat32("normal", i, n.Z); err != nil {
				return err
			}
			enc.float(xyz[0])
			enc.float(xyz[1])
			enc.float(xyz[2])
		}
		if colors != nil {
			c := colors[i]
			enc.uchar(c.R)
			enc.uchar(c.G)
			enc.uchar(c.B)
		}
		for _, s := range opt.VertexScalars {
			enc.float(s.Values[i])
		}
		enc.end()
		if _, err := bw.Write(enc.buf); err != nil {
			return fmt.Errorf("mesh: ply: %w", err)
		}
	}
	for _, f := range faces {
		enc.buf = enc.buf[:0]
		enc.uchar(3)
		for _, v := range f {
			enc.int(int32(v)) // v < nv ≤ maxPLYCount, checked above
		}
		enc.end()
		if _, err := bw.Write(enc.buf); err != nil {
			return fmt.Errorf("mesh: ply: %w", err)
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("mesh: ply: %w", err)
	}
	return nil
}

// plyEncoder appends one record's values to buf in a format.
type plyEncoder struct {
	format PLYFormat
	buf    []byte
}

func (e *plyEncoder) sep() {
	if len(e.buf) > 0 {
		e.buf = append(e.buf, ' ')
	}
}

func (e *plyEncoder) float(f float32) {
	switch e.format {
	case PLYASCII:
		e.sep()
		e.buf = strconv.AppendFloat(e.buf, float64(f), 'g', -1, 32)
	case PLYBinaryBE:
		e.buf = binary.BigEndian.AppendUint32(e.buf, math.Float32bits(f))
	default:
		e.buf = binary.LittleEndian.AppendUint32(e.buf, math.Float32bits(f))
	}
}

func (e *plyEncoder) uchar(c uint8) {
	if e.format == PLYASCII {
		e.sep()
		e.buf = strconv.AppendUint(e.buf, uint64(c), 10)
		return
	}
	e.buf = append(e.buf, c)
}

func (e *plyEncoder) int(v int32) {
	switch e.format {
	case PLYASCII:
		e.sep()
		e.buf = strconv.AppendInt(e.buf, int64(v), 10)
	case PLYBinaryBE:
		e.buf = binary.BigEndian.AppendUint32(e.buf, uint32(v))
	default:
		e.buf = binary.LittleEndian.AppendUint32(e.buf, uint32(v))
	}
}

func (e *plyEncoder) end() {
	if e.format == PLYASCII {
		e.buf = append(e.buf, '\n')
	}
}
