package reconstruct

import (
	"errors"
	"fmt"
	"strings"
)

// Sentinel errors. Every error that the sweep loader returns for bad
// data wraps exactly one of them, so callers can tell a broken sweep
// (ErrInvalid) from a well-formed sweep that this version cannot read
// (ErrUnsupported), e.g. a newer format version.
var (
	ErrInvalid     = errors.New("reconstruct: invalid sweep")
	ErrUnsupported = errors.New("reconstruct: unsupported sweep")
	// ErrNoFrames is wrapped when a sweep has no usable frame left after
	// the per-frame problems were set aside.
	ErrNoFrames = errors.New("reconstruct: no usable frames")
)

// SweepError is a sweep-level problem: the sweep cannot be used at all.
// File is the file inside the sweep folder (usually ManifestName), Field
// the JSON path of the offending value ("intrinsics.fx",
// "frames[3].depth"), Line the 1-based line in File when known (0
// otherwise).
type SweepError struct {
	File  string
	Field string
	Line  int
	Msg   string
	Kind  error // ErrInvalid or ErrUnsupported
}

func (e *SweepError) Error() string {
	var b strings.Builder
	b.WriteString("reconstruct: ")
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	if e.Field != "" {
		b.WriteString(": ")
		b.WriteString(e.Field)
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	return b.String()
}

// Unwrap returns the error kind (ErrInvalid or ErrUnsupported).
func (e *SweepError) Unwrap() error { return e.Kind }

// FrameError is a per-frame problem: frame Frame cannot be used, but
// the rest of the sweep can. File is the image or manifest concerned,
// Field the manifest field ("depth", "cam_to_world"), Msg what is wrong
// and what to do. Unless loading is strict, such frames are skipped
// and recorded in Sweep.Skipped.
type FrameError struct {
	Frame int
	File  string
	Field string
	Msg   string
	Err   error // underlying cause, if any (e.g. from image/png)
}

func (e *FrameError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "reconstruct: frame %d", e.Frame)
	if e.Field != "" {
		fmt.Fprintf(&b, " (%s)", e.Field)
	}
	if e.File != "" {
		b.WriteString(": ")
		b.WriteString(e.File)
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	if e.Err != nil {
		b.WriteString(": ")
		b.WriteString(e.Err.Error())
	}
	return b.String()
}

// Unwrap returns ErrInvalid and the underlying cause, if any.
func (e *FrameError) Unwrap() []error {
	if e.Err != nil {
		return []error{ErrInvalid, e.Err}
	}
	return []error{ErrInvalid}
}

// maxReported bounds how many sweep-level problems one error lists, so
// a manifest with a million broken entries does not give a million-line
// error.
const maxReported = 20

// problems collects sweep-level problems while a manifest is checked.
type problems struct {
	file string
	list []error
	more int
}

func (p *problems) add(field string, kind error, format string, args ...any) {
	if len(p.list) >= maxReported {
		p.more++
		return
	}
	p.list = append(p.list, &SweepError{File: p.file, Field: field, Msg: fmt.Sprintf(format, args...), Kind: kind})
}

// addErr records an already formed error.
func (p *problems) addErr(err error) {
	if len(p.list) >= maxReported {
		p.more++
		return
	}
	p.list = append(p.list, err)
}

func (p *problems) err() error {
	if len(p.list) == 0 {
		return nil
	}
	if p.more > 0 {
		p.list = append(p.list, &SweepError{File: p.file, Msg: fmt.Sprintf("%d more problems not listed", p.more), Kind: ErrInvalid})
	}
	if len(p.list) == 1 {
		return p.list[0]
	}
	return errors.Join(p.list...)
}
