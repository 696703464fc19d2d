package catalog

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strings"
	"testing"

	"github.com/scanfold/scanfold/mesh"
)

func TestExport(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	f := testFiling("bracket", 3)
	if _, err := s.File(ctx, testFiling("bracket", 2)); err != nil {
		t.Fatal(err)
	}
	if _, err := s.File(ctx, f); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "export", "bracket")
	m, err := s.Export("bracket", 0, out)
	if err != nil {
		t.Fatal(err)
	}

	// The files: every role under its export name, the mesh converted to
	// STL and OBJ, and the manifest; nothing else (no temp files).
	entries, _ := os.ReadDir(out)
	var names []string
	for _, e := range entries {
		names = append(names, e.Name())
	}
	want := []string{"cloud.ply", "legend.png", "manifest.json", "mesh.obj", "mesh.ply", "mesh.stl", "report.json", "tables.ppf"}
	if !reflect.DeepEqual(names, want) {
		t.Fatalf("exported files %v, want %v", names, want)
	}
	for role, src := range f.Blobs {
		got, _ := os.ReadFile(filepath.Join(out, ExportName(role, MediaTypeFor(role))))
		if !bytes.Equal(got, src.Data) {
			t.Errorf("role %q exported with different bytes", role)
		}
	}

	// The manifest as written on disk, read as plain JSON.
	raw, err := os.ReadFile(filepath.Join(out, "manifest.json"))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(raw, []byte(`"coverage 91 % < 95 %"`)) {
		t.Errorf("manifest escapes the reasons' text")
	}
	var doc map[string]any
	if err := json.Unmarshal(raw, &doc); err != nil {
		t.Fatalf("manifest is not JSON: %v", err)
	}
	for _, key := range []string{"format", "format_version", "part", "revision", "units", "frame", "files", "ppf",
		"acceptance", "diameter_m", "symmetry", "verdict", "reasons", "provenance", "safety"} {
		if _, ok := doc[key]; !ok {
			t.Errorf("manifest lacks %q", key)
		}
	}
	var back Manifest
	if err := json.Unmarshal(raw, &back); err != nil {
		t.Fatal(err)
	}
	if back.Part != "bracket" || back.Revision != 2 || back.Units != "metres" || back.Verdict != Review {
		t.Errorf("manifest part %q rev %d units %q verdict %q", back.Part, back.Revision, back.Units, back.Verdict)
	}
	if back.Frame.PartToSweep != [4][4]float64{
		{1, 0, 0, 0.1}, {0, 1, 0, -0.02}, {0, 0, 1, 0.5}, {0, 0, 0, 1}} || back.Frame.Description != f.Frame.Description || back.Frame.Convention == "" {
		t.Errorf("manifest frame %+v", back.Frame)
	}
	if !reflect.DeepEqual(back.PPF, f.PPF) || back.Acceptance != f.Acceptance || back.Diameter != f.Diameter ||
		!reflect.DeepEqual(back.Symmetry, f.Symmetry) || !reflect.DeepEqual(back.Reasons, f.Reasons) {
		t.Errorf("manifest metadata differs from the filing: %+v", back)
	}
	if back.Provenance.InputHash != f.Provenance.InputHash || back.Provenance.SettingsHash == "" {
		t.Errorf("manifest provenance %+v", back.Provenance)
	}
	for _, phrase := range []string{"supervised", "reduced speed", "risk assessment", "local"} {
		if !strings.Contains(back.Safety, phrase) {
			t.Errorf("safety note lacks %q: %s", phrase, back.Safety)
		}
	}
	var compact bytes.Buffer
	json.Compact(&compact, raw)
	var mj bytes.Buffer
	enc := json.NewEncoder(&mj)
	enc.SetEscapeHTML(false)
	enc.Encode(m)
	if !bytes.Equal(compact.Bytes(), bytes.TrimSpace(mj.Bytes())) {
		t.Errorf("Export's returned manifest differs from the file:\n%s\n%s", compact.Bytes(), mj.Bytes())
	}

	// Every listed file's SHA-256 and size, checked against crypto/sha256
	// of the Go standard library over the file on disk.
	var listed []string
	for _, e := range back.Files {
		data, err := os.ReadFile(filepath.Join(out, e.File))
		if err != nil {
			t.Fatalf("manifest lists %s: %v", e.File, err)
		}
		sum := sha256.Sum256(data)
		if e.SHA256 != hex.EncodeToString(sum[:]) || e.Size != int64(len(data)) {
			t.Errorf("%s: manifest says %s/%d, file is %x/%d", e.File, e.SHA256, e.Size, sum, len(data))
		}
		listed = append(listed, e.File)
		if (e.File == "mesh.stl" || e.File == "mesh.obj") != (e.DerivedFrom == "mesh.ply") {
			t.Errorf("%s derived_from %q", e.File, e.DerivedFrom)
		}
	}
	sort.Strings(listed)
	var wantListed []string // every exported file but the manifest itself
	for _, n := range want {
		if n != ManifestName {
			wantListed = append(wantListed, n)
		}
	}
	if !reflect.DeepEqual(listed, wantListed) {
		t.Errorf("manifest lists %v, want %v", listed, wantListed)
	}

	// The converted meshes carry the same triangles. PLY stores float32
	// coordinates and STL too; float32 → float64 → float32 is exact, and
	// OBJ writes the shortest text that reads back to the same float64,
	// so positions must match exactly (tolerance 0).
	src, err := mesh.LoadMesh(filepath.Join(out, "mesh.ply"))
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"mesh.stl", "mesh.obj"} {
		got, err := mesh.LoadMesh(filepath.Join(out, name))
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if len(got.Faces) != len(src.Faces) {
			t.Fatalf("%s: %d faces, want %d", name, len(got.Faces), len(src.Faces))
		}
		for i := range src.Faces {
			for k := 0; k < 3; k++ {
				if a, b := got.Vertices[got.Faces[i][k]], src.Vertices[src.Faces[i][k]]; a != b {
					t.Fatalf("%s face %d corner %d at %v, want %v", name, i, k, a, b)
				}
			}
		}
		if name == "mesh.obj" && !reflect.DeepEqual(got.Colors, src.Colors) {
			t.Errorf("mesh.obj lost the vertex colours")
		}
	}

	// A given revision; a non-empty folder is refused and left alone.
	if m1, err := s.Export("bracket", 1, filepath.Join(t.TempDir(), "r1")); err != nil || m1.Revision != 1 {
		t.Errorf("Export(bracket, 1) = %v, %v", m1, err)
	}
	if _, err := s.Export("bracket", 2, out); !errors.Is(err, ErrExists) {
		t.Errorf("Export into a non-empty folder: %v, want ErrExists", err)
	}
	if _, err := s.Export("bracket", 7, filepath.Join(t.TempDir(), "r7")); !errors.Is(err, ErrNotFound) {
		t.Errorf("Export(bracket, 7): %v, want ErrNotFound", err)
	}
}

// A mesh blob that is not a readable PLY cannot be converted: Export
// fails naming the role and file, and takes back what it wrote.
func TestExportBadMesh(t *testing.T) {
	s := openTest(t)
	f := testFiling("nut", 1)
	f.Blobs[RoleMesh] = BlobSource{Data: []byte("ply\nformat ascii 1.0\nelement vertex 99\n")}
	if _, err := s.File(context.Background(), f); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "out")
	_, err := s.Export("nut", 1, out)
	if err == nil || !strings.Contains(err.Error(), `role "mesh"`) || !strings.Contains(err.Error(), "mesh.ply") {
		t.Fatalf("Export with a broken mesh: %v", err)
	}
	if _, err := os.Stat(out); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("failed Export left %s behind", out)
	}
}
