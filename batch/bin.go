package batch

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/internal/units"
	"github.com/scanfold/scanfold/onboard"
)

// BinFile is the name of the optional list of parts in a bin folder.
const BinFile = "bin.json"

// Bounds on a bin: the bin.json file's size and the number of parts it
// (or the folder) may list. Several hundred parts fit a night; 10,000
// is far beyond any bin and keeps a hostile file from asking for
// unbounded work.
const (
	MaxBinBytes = 4 << 20
	MaxParts    = 10000
)

// Part is one part of a bin: its catalog name, its sweep folder and an
// optional drawing model to compare the scan with.
type Part struct {
	// Name is the part's name in the catalog.
	Name string
	// Sweep is the sweep folder (absolute, or relative to the working
	// directory).
	Sweep string
	// Reference is a drawing model (PLY, STL or OBJ), "" for none;
	// ReferenceUnit the length of one of its units in metres (1 when
	// not given).
	Reference     string
	ReferenceUnit float64
	// Rests is how the cell presents the part ("any" or "as-scanned",
	// see onboard.RestsAny); "" takes the run's setting
	// (Options.Onboard.Check.RestsAsScanned).
	Rests string
}

// binWire is bin.json as written.
type binWire struct {
	Format  *string    `json:"format"`
	Version *int       `json:"version"`
	Parts   []partWire `json:"parts"`
}

type partWire struct {
	Name          string `json:"name"`
	Sweep         string `json:"sweep"`
	Reference     string `json:"reference"`
	ReferenceUnit string `json:"reference_unit"`
	Rests         string `json:"rests"`
}

// BinFormat is the value of bin.json's optional "format" field, and
// BinVersion the only version this package reads.
const (
	BinFormat  = "scanfold.bin"
	BinVersion = 1
)

// BinError is a problem with a bin folder or its bin.json: the file,
// the part (its position in the list, from 0, or -1), the field and
// what is wrong.
type BinError struct {
	File  string
	Line  int
	Part  int
	Field string
	Msg   string
}

func (e *BinError) Error() string {
	var b strings.Builder
	b.WriteString("batch: ")
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	if e.Part >= 0 {
		fmt.Fprintf(&b, ": parts[%d]", e.Part)
		if e.Field != "" {
			b.WriteString("." + e.Field)
		}
	} else if e.Field != "" {
		b.WriteString(": " + e.Field)
	}
	b.WriteString(": " + e.Msg)
	return b.String()
}

// ReadBin lists the parts of the bin folder dir, in order: the parts
// bin.json lists when dir holds one (ParseBin; relative paths in it are
// relative to dir), else one part per sub-folder, named like the
// folder, in byte order of the names. Sub-folders whose name starts with
// '.' are left out (the run folder, .scanfold-batch, is one), and so
// are the folders named in skip (absolute or relative to the working
// directory: a catalog or run folder kept inside the bin). A sub-folder
// whose name is not a valid part name is still listed: onboarding it
// fails with the reason, without stopping the others.
func ReadBin(dir string, skip ...string) ([]Part, error) {
	st, err := os.Stat(dir)
	if err != nil {
		return nil, fmt.Errorf("batch: bin folder: %w", err)
	}
	if !st.IsDir() {
		return nil, fmt.Errorf("batch: bin %s is not a folder", dir)
	}
	f, err := os.Open(filepath.Join(dir, BinFile))
	switch {
	case err == nil:
		defer f.Close()
		data, err := io.ReadAll(io.LimitReader(f, MaxBinBytes+1))
		if err != nil {
			return nil, fmt.Errorf("batch: reading %s: %w", filepath.Join(dir, BinFile), err)
		}
		if len(data) > MaxBinBytes {
			return nil, &BinError{File: filepath.Join(dir, BinFile), Part: -1, Msg: fmt.Sprintf("larger than %d bytes", MaxBinBytes)}
		}
		parts, err := ParseBin(data)
		if err != nil {
			var be *BinError
			if errors.As(err, &be) {
				be.File = filepath.Join(dir, BinFile)
			}
			return nil, err
		}
		for i := range parts {
			parts[i].Sweep = inBin(dir, parts[i].Sweep)
			if parts[i].Reference != "" {
				parts[i].Reference = inBin(dir, parts[i].Reference)
			}
		}
		return parts, nil
	case !errors.Is(err, os.ErrNotExist):
		return nil, fmt.Errorf("batch: %w", err)
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("batch: bin folder: %w", err)
	}
	skipAbs := map[string]bool{}
	for _, s := range skip {
		if a, err := filepath.Abs(s); err == nil {
			skipAbs[a] = true
		}
	}
	var parts []Part
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			continue
		}
		p := filepath.Join(dir, e.Name())
		if !e.IsDir() {
			// A symbolic link to a folder counts as a folder.
			if st, err := os.Stat(p); err != nil || !st.IsDir() {
				continue
			}
		}
		if a, err := filepath.Abs(p); err == nil && skipAbs[a] {
			continue
		}
		if len(parts) == MaxParts {
			return nil, &BinError{File: dir, Part: -1, Msg: fmt.Sprintf("more than %d sub-folders", MaxParts)}
		}
		parts = append(parts, Part{Name: e.Name(), Sweep: p, ReferenceUnit: 1})
	}
	sort.Slice(parts, func(i, j int) bool { return parts[i].Name < parts[j].Name })
	if len(parts) == 0 {
		return nil, &BinError{File: dir, Part: -1, Msg: "no sub-folders and no " + BinFile + ": nothing to onboard"}
	}
	return parts, nil
}

// inBin resolves a path from bin.json against the bin folder.
func inBin(dir, p string) string {
	p = filepath.FromSlash(p)
	if filepath.IsAbs(p) {
		return p
	}
	return filepath.Join(dir, p)
}

// ParseBin parses the bytes of a bin.json:
//
//	{
//	  "format": "scanfold.bin", "version": 1,       (both optional)
//	  "parts": [
//	    {"name": "bracket", "sweep": "sweeps/bracket"},
//	    {"name": "valve", "sweep": "/data/valve", "reference": "cad/valve.stl", "reference_unit": "1mm"},
//	    {"name": "nut", "sweep": "sweeps/nut", "rests": "any"}
//	  ]
//	}
//
// name (a valid catalog part name, unique regardless of letter case)
// and sweep (a folder, relative to the bin folder or absolute) are
// required; reference is a drawing model and reference_unit the length
// of one of its units ("1mm", "0.001", "1m"; default 1 m); rests is
// how the cell presents the part, "any" (any stable pose, as in a bin)
// or "as-scanned" (as it stood in its sweep: a tray, a fixture), and
// overrides the run's --rests for that part. Unknown
// fields, trailing data, an empty list and more than MaxParts parts are
// refused. Errors are *BinError naming the line or the part and field.
func ParseBin(data []byte) ([]Part, error) {
	bad := func(part int, field, msg string) error {
		return &BinError{File: BinFile, Part: part, Field: field, Msg: msg}
	}
	var w binWire
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&w); err != nil {
		return nil, jsonProblem(BinFile, data, err)
	}
	if off := dec.InputOffset(); len(bytes.TrimSpace(data[off:])) != 0 {
		rest := data[off:]
		off += int64(len(rest) - len(bytes.TrimLeft(rest, " \t\r\n")))
		return nil, &BinError{File: BinFile, Line: lineOf(data, off), Part: -1, Msg: "unexpected data after the JSON value"}
	}
	if w.Format != nil && *w.Format != BinFormat {
		return nil, bad(-1, "format", fmt.Sprintf("%q, want %q", clip(*w.Format), BinFormat))
	}
	if w.Version != nil && *w.Version != BinVersion {
		return nil, bad(-1, "version", fmt.Sprintf("%d is not supported; this build reads version %d", *w.Version, BinVersion))
	}
	if len(w.Parts) == 0 {
		return nil, bad(-1, "parts", "missing or empty: list at least one part")
	}
	if len(w.Parts) > MaxParts {
		return nil, bad(-1, "parts", fmt.Sprintf("%d parts, at most %d", len(w.Parts), MaxParts))
	}
	seen := map[string]int{}
	parts := make([]Part, len(w.Parts))
	for i, pw := range w.Parts {
		if err := catalog.ValidateName(pw.Name); err != nil {
			return nil, bad(i, "name", strings.TrimPrefix(err.Error(), "catalog: "))
		}
		key := strings.ToLower(pw.Name)
		if j, dup := seen[key]; dup {
			return nil, bad(i, "name", fmt.Sprintf("%q is parts[%d]'s name too (names ignore letter case)", pw.Name, j))
		}
		seen[key] = i
		if strings.TrimSpace(pw.Sweep) == "" {
			return nil, bad(i, "sweep", "missing: give the part's sweep folder")
		}
		if strings.ContainsRune(pw.Sweep, 0) || strings.ContainsRune(pw.Reference, 0) {
			return nil, bad(i, "", "a path holds a NUL byte")
		}
		unit := 1.0
		if pw.ReferenceUnit != "" {
			u, err := units.ParseLength(pw.ReferenceUnit)
			if err != nil || !(u > 0) {
				return nil, bad(i, "reference_unit", fmt.Sprintf("%q: want a positive length such as 1mm or 0.001", clip(pw.ReferenceUnit)))
			}
			if pw.Reference == "" {
				return nil, bad(i, "reference_unit", "given without a reference")
			}
			unit = u
		}
		if pw.Rests != "" && pw.Rests != onboard.RestsAny && pw.Rests != onboard.RestsAsScanned {
			return nil, bad(i, "rests", fmt.Sprintf("%q: want %q or %q", clip(pw.Rests), onboard.RestsAny, onboard.RestsAsScanned))
		}
		parts[i] = Part{Name: pw.Name, Sweep: pw.Sweep, Reference: pw.Reference, ReferenceUnit: unit, Rests: pw.Rests}
	}
	return parts, nil
}

// jsonProblem turns an encoding/json error into a *BinError with the
// line where the decoder stopped, when it says.
func jsonProblem(file string, data []byte, err error) error {
	e := &BinError{File: file, Part: -1}
	var syn *json.SyntaxError
	var typ *json.UnmarshalTypeError
	switch {
	case errors.As(err, &syn):
		e.Line, e.Msg = lineOf(data, syn.Offset), "JSON syntax error: "+strings.TrimPrefix(syn.Error(), "json: ")
	case errors.As(err, &typ):
		e.Line, e.Field, e.Msg = lineOf(data, typ.Offset), typ.Field, fmt.Sprintf("%s where a %s was expected", typ.Value, typ.Type)
	case errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF):
		e.Msg = "empty or truncated JSON"
	default:
		e.Msg = strings.TrimPrefix(err.Error(), "json: ")
	}
	return e
}

// lineOf returns the 1-based line of byte offset off in data.
func lineOf(data []byte, off int64) int {
	off = max(0, min(off, int64(len(data))))
	return bytes.Count(data[:off], []byte("\n")) + 1
}

// clip shortens text quoted back in an error.
func clip(s string) string {
	if len(s) <= 64 {
		return s
	}
	return s[:64] + "…"
}
