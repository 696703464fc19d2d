package mesh

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"
)

// Error kinds of the file readers, in the manner of image/png's
// FormatError and UnsupportedError. Every error that a reader returns
// for bad data wraps exactly one of them, so callers can tell a broken
// or truncated file (ErrInvalid) from a well-formed file that uses a
// feature or a size this package does not handle (ErrUnsupported):
//
//	if errors.Is(err, mesh.ErrUnsupported) { ... convert the file first ... }
//
// A file that ends in the middle of a record also wraps
// io.ErrUnexpectedEOF.
var (
	ErrInvalid     = errors.New("invalid file")
	ErrUnsupported = errors.New("unsupported feature")
)

// MaxFileBytes bounds the size of a mesh file that the readers accept.
// The readers hold the whole file in memory, which lets them check
// every count declared in a header against the bytes that follow it
// before they allocate anything; larger input fails with an error
// wrapping ErrUnsupported.
const MaxFileBytes = 2 << 30

// FileError describes bad data in a mesh file, with as much of its
// position as is known. Its Error text reads, for example,
//
//	mesh: part.ply: vertex element: record 3: property x: line 15: "1.2.3" is not a number
//
// Unwrap gives Kind (ErrInvalid or ErrUnsupported) and, when there is
// one, the underlying cause (io.ErrUnexpectedEOF for truncated input).
type FileError struct {
	Path     string // the file's path; empty when read from an io.Reader
	Format   string // "ply", "stl" or "obj"
	Element  string // the PLY element ("vertex", "face"), or "triangle" for STL; empty if none
	Record   int64  // 0-based record index within Element, or -1
	Property string // the PLY property; empty if none
	Line     int    // 1-based line of a text file or header, or 0
	Offset   int64  // byte offset from the start of the file, or -1
	Kind     error  // ErrInvalid or ErrUnsupported
	Err      error  // underlying cause, or nil
	Msg      string // what is wrong
}

// Error implements error.
func (e *FileError) Error() string {
	var b strings.Builder
	b.WriteString("mesh: ")
	if e.Path != "" {
		b.WriteString(e.Path)
	} else {
		b.WriteString(e.Format)
	}
	if e.Element != "" {
		b.WriteString(": ")
		b.WriteString(e.Element)
		b.WriteString(" element")
	}
	if e.Record >= 0 {
		b.WriteString(": record ")
		b.WriteString(strconv.FormatInt(e.Record, 10))
	}
	if e.Property != "" {
		b.WriteString(": property ")
		b.WriteString(e.Property)
	}
	if e.Line > 0 {
		b.WriteString(": line ")
		b.WriteString(strconv.Itoa(e.Line))
	}
	if e.Offset >= 0 {
		b.WriteString(": byte ")
		b.WriteString(strconv.FormatInt(e.Offset, 10))
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	if e.Err != nil {
		b.WriteString(": ")
		b.WriteString(e.Err.Error())
	}
	return b.String()
}

// Unwrap returns the error's kind and its cause, for errors.Is and
// errors.As.
func (e *FileError) Unwrap() []error {
	errs := make([]error, 0, 2)
	if e.Kind != nil {
		errs = append(errs, e.Kind)
	}
	if e.Err != nil {
		errs = append(errs, e.Err)
	}
	return errs
}

// newFileError returns a FileError of the given kind with no position;
// callers fill in what they know.
func newFileError(format string, kind error, msg string) *FileError {
	return &FileError{Format: format, Record: -1, Offset: -1, Kind: kind, Msg: msg}
}

// readAllLimited reads r to its end, refusing more than MaxFileBytes.
// When r can tell its size (an *os.File, a *bytes.Reader, ...) the
// buffer is allocated once; otherwise it grows with what was read, so
// its size never follows anything but the bytes actually present.
func readAllLimited(r io.Reader, format string) ([]byte, error) {
	size := int64(-1)
	switch v := r.(type) {
	case interface{ Stat() (fs.FileInfo, error) }:
		if fi, err := v.Stat(); err == nil && fi.Mode().IsRegular() {
			size = fi.Size()
		}
	case interface{ Len() int }:
		size = int64(v.Len())
	}
	if size > MaxFileBytes {
		return nil, newFileError(format, ErrUnsupported,
			fmt.Sprintf("file of %d bytes is larger than the limit of %d bytes", size, int64(MaxFileBytes)))
	}
	// One byte more than the size, so that the read that sees EOF does
	// not grow the buffer.
	buf := make([]byte, 0, max(size+1, 512))
	lr := io.LimitReader(r, MaxFileBytes+1)
	for {
		if len(buf) == cap(buf) {
			buf = append(buf, 0)[:len(buf)] // grow by append's policy
		}
		n, err := lr.Read(buf[len(buf):cap(buf)])
		buf = buf[:len(buf)+n]
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("mesh: %s: reading: %w", format, err)
		}
	}
	if len(buf) > MaxFileBytes {
		return nil, newFileError(format, ErrUnsupported,
			fmt.Sprintf("file is larger than the limit of %d bytes", int64(MaxFileBytes)))
	}
	return buf, nil
}

// ioWithPath returns err with the file's path added: a *FileError gets
// its Path set (so that the text reads "mesh: part.ply: ..."), any
// other error is wrapped with the path unless it already names it (as
// *fs.PathError does).
func ioWithPath(path string, err error) error {
	if err == nil {
		return nil
	}
	var fe *FileError
	if errors.As(err, &fe) {
		cp := *fe
		cp.Path = path
		return &cp
	}
	var pe *fs.PathError
	if errors.As(err, &pe) {
		if strings.HasPrefix(err.Error(), "mesh: ") {
			return err
		}
		return fmt.Errorf("mesh: %w", err)
	}
	msg := strings.TrimPrefix(err.Error(), "mesh: ")
	return &wrappedPathError{path: path, msg: msg, err: err}
}

// wrappedPathError prefixes an error with a file path while keeping the
// original in the chain.
type wrappedPathError struct {
	path, msg string
	err       error
}

func (e *wrappedPathError) Error() string { return "mesh: " + e.path + ": " + e.msg }
func (e *wrappedPathError) Unwrap() error { return e.err }

// fileKind is a mesh file format chosen by a path's extension.
type fileKind int

const (
	kindUnknown fileKind = iota
	kindPLY
	kindSTL
	kindOBJ
)

func fileKindOf(path string) fileKind {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".ply":
		return kindPLY
	case ".stl":
		return kindSTL
	case ".obj":
		return kindOBJ
	}
	return kindUnknown
}

func unknownExtension(path string) error {
	return &wrappedPathError{
		path: path,
		msg:  fmt.Sprintf("unknown file extension %q (want .ply, .stl or .obj)", filepath.Ext(path)),
		err:  ErrUnsupported,
	}
}

// ioReadFile reads the whole of path, bounded by MaxFileBytes.
func ioReadFile(path, format string) ([]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("mesh: %w", err)
	}
	defer f.Close()
	data, err := readAllLimited(f, format)
	if err != nil {
		return nil, ioWithPath(path, err)
	}
	return data, nil
}

// LoadMesh reads a triangle mesh from path, choosing the format by the
// extension (case-insensitive): .ply (any PLY encoding), .stl (binary
// or ASCII; positions are welded, see ReadSTL) or .obj. Errors carry
// the path: "mesh: part.ply: vertex element: ...".
func LoadMesh(path string) (*Mesh, error) {
	k := fileKindOf(path)
	if k == kindUnknown {
		return nil, unknownExtension(path)
	}
	data, err := ioReadFile(path, k.format())
	if err != nil {
		return nil, err
	}
	var m *Mesh
	switch k {
	case kindPLY:
		m, _, err = decodePLY(data, false, false)
	case kindSTL:
		m, err = decodeSTL(data)
	case kindOBJ:
		m, err = decodeOBJ(data)
	}
	if err != nil {
		return nil, ioWithPath(path, err)
	}
	return m, nil
}

func (k fileKind) format() string {
	switch k {
	case kindPLY:
		return "ply"
	case kindSTL:
		return "stl"
	case kindOBJ:
		return "obj"
	}
	return "unknown"
}

// SaveMesh writes m to path in the format its extension names: .ply as
// binary little-endian PLY with default options, .stl as binary STL,
// .obj as OBJ. The file is written to a temporary file in the same
// directory, synced and renamed over path, so a crash or an error never
// leaves a half-written file at path.
func SaveMesh(path string, m *Mesh) error {
	switch fileKindOf(path) {
	case kindPLY:
		return SaveMeshPLY(path, m, DefaultPLYOptions())
	case kindSTL:
		return writeFileAtomic(path, func(w io.Writer) error { return WriteSTL(w, m, false) })
	case kindOBJ:
		return writeFileAtomic(path, func(w io.Writer) error { return WriteOBJ(w, m) })
	}
	return unknownExtension(path)
}

// SaveMeshPLY writes m to path as PLY with the given options, replacing
// the file atomically as SaveMesh does, whatever path's extension.
func SaveMeshPLY(path string, m *Mesh, opt PLYOptions) error {
	return writeFileAtomic(path, func(w io.Writer) error { return WritePLY(w, m, opt) })
}

// LoadCloud reads a point cloud from path. A .ply file is read by
// ReadPLYCloud (its faces, if any, are skipped); a mesh file (.stl,
// .obj) loads as its vertices with their normals and colours.
func LoadCloud(path string) (*Cloud, error) {
	k := fileKindOf(path)
	if k == kindUnknown {
		return nil, unknownExtension(path)
	}
	if k != kindPLY {
		m, err := LoadMesh(path)
		if err != nil {
			return nil, err
		}
		return &Cloud{Points: m.Vertices, Normals: m.Normals, Colors: m.Colors}, nil
	}
	data, err := ioReadFile(path, "ply")
	if err != nil {
		return nil, err
	}
	m, _, err := decodePLY(data, true, false)
	if err != nil {
		return nil, ioWithPath(path, err)
	}
	return &Cloud{Points: m.Vertices, Normals: m.Normals, Colors: m.Colors}, nil
}

// SaveCloud writes c to path as binary little-endian PLY, atomically as
// SaveMesh does. The extension must be .ply.
func SaveCloud(path string, c *Cloud) error {
	if fileKindOf(path) != kindPLY {
		return &wrappedPathError{path: path,
			msg: fmt.Sprintf("a point cloud is saved as .ply, not %q", filepath.Ext(path)),
			err: ErrUnsupported}
	}
	return writeFileAtomic(path, func(w io.Writer) error { return WritePLYCloud(w, c, DefaultPLYOptions()) })
}

// writeFileAtomic writes a file through write into a temporary file in
// path's directory, syncs and closes it, and renames it over path; the
// directory is synced too so that the rename survives a crash. On any
// error the temporary file is removed and path is left as it was.
func writeFileAtomic(path string, write func(io.Writer) error) (err error) {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	f, err := os.CreateTemp(dir, "."+base+".tmp-*")
	if err != nil {
		return fmt.Errorf("mesh: %w", err)
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			f.Close() // already failed; its own error adds nothing
			os.Remove(tmp)
		}
	}()
	if err = write(f); err != nil {
		return ioWithPath(path, err)
	}
	if err = f.Chmod(0o644); err != nil {
		return fmt.Errorf("mesh: %w", err)
	}
	if err = f.Sync(); err != nil {
		return fmt.Errorf("mesh: %w", err)
	}
	if err = f.Close(); err != nil {
		return fmt.Errorf("mesh: %w", err)
	}
	if err = os.Rename(tmp, path); err != nil {
		return fmt.Errorf("mesh: %w", err)
	}
	// The file is in place; a failed directory sync only weakens the
	// crash guarantee, but it is still reported.
	d, derr := os.Open(dir)
	if derr != nil {
		return fmt.Errorf("mesh: syncing directory: %w", derr)
	}
	serr := d.Sync()
	cerr := d.Close()
	if serr != nil {
		return fmt.Errorf("mesh: syncing directory: %w", serr)
	}
	if cerr != nil {
		return fmt.Errorf("mesh: %w", cerr)
	}
	return nil
}
