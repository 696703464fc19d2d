package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"time"

	"github.com/scanfold/scanfold/mesh"
)

// ManifestFormat and ManifestVersion identify the manifest's layout
// (its "format" and "format_version" fields).
const (
	ManifestFormat  = "scanfold-part-model"
	ManifestVersion = 1
)

// SafetyNote is the manifest's safety field, written for the cell's
// integrator.
const SafetyNote = "A model whose verdict is ready is not by itself safe to run: before production use, " +
	"run a supervised trial in the cell at reduced speed, under the cell's risk assessment and local " +
	"safety rules (ISO 10218-1 and -2 for industrial robots; ISO/TS 15066 where people share the space). " +
	"A wrong pose can send the robot where it should not go."

// ManifestEntry describes one exported file.
type ManifestEntry struct {
	// File is the file name inside the export folder.
	File string `json:"file"`
	// Role is the revision's role the file comes from.
	Role string `json:"role"`
	// MediaType of the file.
	MediaType string `json:"media_type"`
	// SHA256 (lowercase hex) and Size (bytes) of the file as written.
	SHA256 string `json:"sha256"`
	Size   int64  `json:"size"`
	// DerivedFrom names the file this one was converted from ("" for a
	// stored blob, copied byte for byte).
	DerivedFrom string `json:"derived_from,omitempty"`
}

// ManifestFrame is the manifest's frame section.
type ManifestFrame struct {
	Description string `json:"description"`
	// PartToSweep: homogeneous 4×4 as four rows,
	// x_sweep = M·[x_part 1]ᵀ, metres.
	PartToSweep [4][4]float64 `json:"part_to_sweep"`
	Convention  string        `json:"convention"`
}

// Manifest is the JSON document Export writes as manifest.json for the
// cell's integrator. doc.go describes each field.
type Manifest struct {
	Format        string          `json:"format"`
	FormatVersion int             `json:"format_version"`
	Part          string          `json:"part"`
	Revision      int             `json:"revision"`
	Filed         time.Time       `json:"filed"`
	Exported      time.Time       `json:"exported"`
	Units         string          `json:"units"`
	Frame         ManifestFrame   `json:"frame"`
	Files         []ManifestEntry `json:"files"`
	PPF           PPFParams       `json:"ppf"`
	Acceptance    Acceptance      `json:"acceptance"`
	Diameter      float64         `json:"diameter_m"`
	Symmetry      Symmetry        `json:"symmetry"`
	Verdict       Verdict         `json:"verdict"`
	Reasons       []string        `json:"reasons"`
	Provenance    Provenance      `json:"provenance"`
	Safety        string          `json:"safety"`
}

// frameConvention is the manifest's words on the transform.
const frameConvention = "part_to_sweep is a homogeneous 4x4 rigid transform in metres, given as four rows: " +
	"a point p given in the part frame (the frame of every exported model file) is at " +
	"part_to_sweep * [p 1]^T in the sweep's world frame (the first frame's camera frame: " +
	"x right, y down, z forward)."

// Export writes revision rev of part name (0: the latest) into folder
// toDir, which must be missing or empty (else ErrExists): every blob
// under its ExportName, byte for byte and hash-checked; for a PLY mesh
// also STL (binary) and OBJ copies converted through package mesh; and
// last manifest.json, so that a folder with a manifest is a complete
// export. Each file is written to a temp file, fsynced and renamed.
func (s *Store) Export(name string, rev int, toDir string) (*Manifest, error) {
	return s.ExportContext(context.Background(), name, rev, toDir)
}

// ExportContext is Export with a context, checked between files.
func (s *Store) ExportContext(ctx context.Context, name string, rev int, toDir string) (*Manifest, error) {
	r, err := s.ShowContext(ctx, name, rev)
	if err != nil {
		return nil, err
	}
	ref := FormatRef(r.Part, r.Number)
	created, err := prepareExportDir(toDir)
	if err != nil {
		return nil, fmt.Errorf("%w (exporting %s)", err, ref)
	}
	// On failure, take back what this export wrote: the folder was new
	// or empty.
	var written []string
	ok := false
	defer func() {
		if ok {
			return
		}
		for _, f := range written {
			os.Remove(filepath.Join(toDir, f))
		}
		if created {
			os.Remove(toDir)
		}
	}()
	m := &Manifest{
		Format:        ManifestFormat,
		FormatVersion: ManifestVersion,
		Part:          r.Part,
		Revision:      r.Number,
		Filed:         r.Filed,
		Exported:      time.Now().UTC(),
		Units:         "metres",
		Frame:         ManifestFrame{Description: r.Frame.Description, PartToSweep: rows4(r.Frame.PartToSweep), Convention: frameConvention},
		PPF:           r.PPF,
		Acceptance:    r.Acceptance,
		Diameter:      r.Diameter,
		Symmetry:      r.Symmetry,
		Verdict:       r.Verdict,
		Reasons:       r.Reasons,
		Provenance:    r.Provenance,
		Safety:        SafetyNote,
	}
	if m.Reasons == nil {
		m.Reasons = []string{}
	}
	roles := make([]string, 0, len(r.Blobs))
	for role := range r.Blobs {
		roles = append(roles, role)
	}
	sort.Strings(roles)
	for _, role := range roles {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("catalog: exporting %s: %w", ref, err)
		}
		b := r.Blobs[role]
		file := ExportName(role, b.MediaType)
		written = append(written, file)
		if err := s.exportBlob(b, filepath.Join(toDir, file)); err != nil {
			return nil, fmt.Errorf("%w (exporting %s role %q)", err, ref, role)
		}
		m.Files = append(m.Files, ManifestEntry{File: file, Role: role, MediaType: b.MediaType, SHA256: b.SHA256, Size: b.Size})
	}
	if b, ok := r.Blobs[RoleMesh]; ok && b.MediaType == MediaPLY {
		written = append(written, RoleMesh+".stl", RoleMesh+".obj")
		derived, err := convertMesh(toDir, ExportName(RoleMesh, MediaPLY), RoleMesh)
		if err != nil {
			return nil, fmt.Errorf("%w (exporting %s)", err, ref)
		}
		m.Files = append(m.Files, derived...)
	}
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(false) // reasons such as "coverage < 95 %" stay readable
	enc.SetIndent("", "  ")
	if err := enc.Encode(m); err != nil {
		return nil, fmt.Errorf("catalog: exporting %s: encode manifest: %w", ref, err)
	}
	data := buf.Bytes()
	written = append(written, ManifestName)
	if err := writeAtomic(filepath.Join(toDir, ManifestName), func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	}); err != nil {
		return nil, fmt.Errorf("%w (exporting %s)", err, ref)
	}
	if err := syncDir(toDir); err != nil {
		return nil, fmt.Errorf("catalog: exporting %s: sync %s: %w", ref, toDir, err)
	}
	ok = true
	return m, nil
}

// convertMesh reads the exported PLY mesh in dir and writes it again as
// binary STL and as OBJ beside it, through package mesh (which writes
// each file atomically). STL keeps only the triangles (no colours); OBJ
// keeps vertex colours as "v x y z r g b". Both stay in metres and in
// the part frame.
func convertMesh(dir, plyName, role string) ([]ManifestEntry, error) {
	src := filepath.Join(dir, plyName)
	m, err := mesh.LoadMesh(src)
	if err != nil {
		return nil, fmt.Errorf("catalog: role %q: read %s for conversion: %w", role, src, err)
	}
	var out []ManifestEntry
	for _, c := range []struct{ ext, media string }{{".stl", MediaSTL}, {".obj", MediaOBJ}} {
		name := role + c.ext
		path := filepath.Join(dir, name)
		if err := mesh.SaveMesh(path, m); err != nil {
			return nil, fmt.Errorf("catalog: role %q: write %s: %w", role, path, err)
		}
		sum, size, err := hashFile(context.Background(), path)
		if err != nil {
			return nil, fmt.Errorf("catalog: role %q: hash %s: %w", role, path, err)
		}
		out = append(out, ManifestEntry{File: name, Role: role, MediaType: c.media, SHA256: sum, Size: size, DerivedFrom: plyName})
	}
	return out, nil
}

// rows4 turns a row-major 4×4 into its four rows.
func rows4(m [16]float64) [4][4]float64 {
	var r [4][4]float64
	for i := range 4 {
		copy(r[i][:], m[4*i:4*i+4])
	}
	return r
}

// prepareExportDir creates dir, or checks that it is an empty folder;
// it reports whether it created it.
func prepareExportDir(dir string) (bool, error) {
	st, err := os.Stat(dir)
	if errors.Is(err, fs.ErrNotExist) {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return false, fmt.Errorf("catalog: create export folder %s: %w", dir, err)
		}
		return true, nil
	}
	if err != nil {
		return false, fmt.Errorf("catalog: export folder %s: %w", dir, err)
	}
	if !st.IsDir() {
		return false, fmt.Errorf("%w: export target %s is a file", ErrExists, dir)
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return false, fmt.Errorf("catalog: read export folder %s: %w", dir, err)
	}
	if len(entries) > 0 {
		return false, fmt.Errorf("%w: export folder %s is not empty (holds %q); give a new or empty folder", ErrExists, dir, entries[0].Name())
	}
	return false, nil
}

// exportBlob copies a blob to path through a hash-checking reader; the
// file appears under its name only when the whole content verified.
func (s *Store) exportBlob(b BlobRef, path string) error {
	rc, err := s.OpenBlob(b)
	if err != nil {
		return err
	}
	defer rc.Close()
	return writeAtomic(path, func(w io.Writer) error {
		_, err := io.Copy(w, rc)
		return err
	})
}

// writeAtomic writes a file through fill into a temp file beside path,
// fsyncs it and renames it to path. On any error nothing is left.
func writeAtomic(path string, fill func(io.Writer) error) error {
	tmp := fmt.Sprintf("%s.%d.%d.tmp", path, os.Getpid(), rand.Uint64())
	f, err := os.OpenFile(tmp, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		return fmt.Errorf("catalog: create %s: %w", tmp, err)
	}
	ok := false
	defer func() {
		if !ok {
			f.Close()
			os.Remove(tmp)
		}
	}()
	if err := fill(f); err != nil {
		return fmt.Errorf("catalog: write %s: %w", path, err)
	}
	if err := f.Sync(); err != nil {
		return fmt.Errorf("catalog: fsync %s: %w", tmp, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("catalog: close %s: %w", tmp, err)
	}
	if err := os.Rename(tmp, path); err != nil {
		return fmt.Errorf("catalog: rename %s to %s: %w", tmp, path, err)
	}
	ok = true
	return nil
}
