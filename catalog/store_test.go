package catalog

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"io"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestFileShowRoundTrip(t *testing.T) {
	s := openTest(t)
	f := testFiling("bracket", 1)
	got, err := s.File(context.Background(), f)
	if err != nil {
		t.Fatalf("File: %v", err)
	}
	if got.Number != 1 {
		t.Fatalf("first revision number = %d, want 1", got.Number)
	}
	shown, err := s.Show("bracket", 0)
	if err != nil {
		t.Fatalf("Show: %v", err)
	}
	if shown.Number != 1 || shown.Part != "bracket" {
		t.Errorf("Show = %s@%d, want bracket@1", shown.Part, shown.Number)
	}
	if !reflect.DeepEqual(shown.Blobs, got.Blobs) {
		t.Errorf("Show blobs = %v, File returned %v", shown.Blobs, got.Blobs)
	}
	if !shown.Filed.Equal(got.Filed) {
		t.Errorf("Filed = %v, want %v", shown.Filed, got.Filed)
	}
	// Metadata survives the JSON round trip through the index.
	a, _ := json.Marshal(shown.Metadata)
	b, _ := json.Marshal(got.Metadata)
	if !bytes.Equal(a, b) {
		t.Errorf("metadata after Show:\n%s\nwant\n%s", a, b)
	}
	if shown.Verdict != Review || len(shown.Reasons) != 2 || shown.Symmetry.Order != 6 || shown.Diameter != 0.0425 {
		t.Errorf("metadata fields lost: %+v", shown.Metadata)
	}
	if shown.Provenance.Host != "bench-1" || len(shown.Provenance.Stages) != 2 {
		t.Errorf("provenance lost: %+v", shown.Provenance)
	}
	wantSettings, _ := SettingsHash(f.Provenance.Settings)
	if shown.Provenance.SettingsHash != wantSettings {
		t.Errorf("settings hash = %q, want %q", shown.Provenance.SettingsHash, wantSettings)
	}

	// Every blob: reference, file place and content, checked against
	// crypto/sha256 of the Go standard library.
	for role, src := range f.Blobs {
		ref := shown.Blobs[role]
		sum := sha256.Sum256(src.Data)
		if ref.SHA256 != hex.EncodeToString(sum[:]) || ref.Size != int64(len(src.Data)) {
			t.Errorf("role %q ref = %+v, want sha256 %x size %d", role, ref, sum, len(src.Data))
		}
		if ref.MediaType != MediaTypeFor(role) {
			t.Errorf("role %q media type = %q, want %q", role, ref.MediaType, MediaTypeFor(role))
		}
		want := filepath.Join(s.Dir(), "blobs", ref.SHA256[:2], ref.SHA256[2:])
		if s.BlobPath(ref.SHA256) != want {
			t.Errorf("BlobPath = %s, want %s", s.BlobPath(ref.SHA256), want)
		}
		onDisk, err := os.ReadFile(want)
		if err != nil || !bytes.Equal(onDisk, src.Data) {
			t.Errorf("role %q: file %s does not hold the content (err %v)", role, want, err)
		}
		rc, err := s.OpenBlob(ref)
		if err != nil {
			t.Fatalf("OpenBlob(%s): %v", role, err)
		}
		read, err := io.ReadAll(rc)
		rc.Close()
		if err != nil || !bytes.Equal(read, src.Data) {
			t.Errorf("OpenBlob(%s) read %d bytes, err %v", role, len(read), err)
		}
	}
}

func TestRevisionsListRemove(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	for i, part := range []string{"nut", "bracket", "nut", "nut", "valve"} {
		f := testFiling(part, uint64(i))
		if part == "nut" && i == 3 {
			f.Verdict = Ready
		}
		if _, err := s.File(ctx, f); err != nil {
			t.Fatalf("File %s: %v", part, err)
		}
	}
	list, err := s.List()
	if err != nil {
		t.Fatal(err)
	}
	type row struct {
		name    string
		latest  int
		verdict Verdict
		count   int
	}
	var got []row
	for _, p := range list {
		got = append(got, row{p.Name, p.Latest, p.Verdict, p.Revisions})
		if p.Updated.IsZero() {
			t.Errorf("%s: zero updated time", p.Name)
		}
	}
	want := []row{{"bracket", 1, Review, 1}, {"nut", 3, Ready, 3}, {"valve", 1, Review, 1}}
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("List = %v, want %v", got, want)
	}

	// Show a given revision; look-ups ignore letter case.
	r2, err := s.Show("NUT", 2)
	if err != nil || r2.Number != 2 || r2.Part != "nut" {
		t.Fatalf("Show(NUT, 2) = %+v, %v", r2, err)
	}
	if _, err := s.Show("nut", 9); !errors.Is(err, ErrNotFound) {
		t.Errorf("Show(nut, 9) error = %v, want ErrNotFound", err)
	}
	if _, err := s.Show("gear", 0); !errors.Is(err, ErrNotFound) || !strings.Contains(err.Error(), `"gear"`) {
		t.Errorf("Show(gear) error = %v, want ErrNotFound naming the part", err)
	}
	// A name differing only in case is refused, not filed as a new part.
	if _, err := s.File(ctx, testFiling("Nut", 7)); !errors.Is(err, ErrBadName) {
		t.Errorf("File(Nut) error = %v, want ErrBadName", err)
	}

	// Remove the latest revision: the next filing does not reuse its number.
	if err := s.Remove("nut", 3); err != nil {
		t.Fatal(err)
	}
	if revs, _ := s.Revisions("nut"); !reflect.DeepEqual(revs, []int{1, 2}) {
		t.Errorf("revisions after removing nut@3 = %v, want [1 2]", revs)
	}
	r, err := s.File(ctx, testFiling("nut", 20))
	if err != nil || r.Number != 4 {
		t.Fatalf("re-filing after removal gave %d, %v; want 4", r.Number, err)
	}
	if err := s.Remove("nut", 3); !errors.Is(err, ErrNotFound) {
		t.Errorf("removing nut@3 twice: %v, want ErrNotFound", err)
	}

	// Remove a whole part: it leaves List, its blobs go, shared blobs stay.
	bracket, _ := s.Show("bracket", 0)
	if err := s.Remove("bracket", 0); err != nil {
		t.Fatal(err)
	}
	list, _ = s.List()
	for _, p := range list {
		if p.Name == "bracket" {
			t.Errorf("bracket still listed after removal")
		}
	}
	for role, ref := range bracket.Blobs {
		_, err := os.Stat(s.BlobPath(ref.SHA256))
		if role == "legend.png" { // shared with the other parts
			if err != nil {
				t.Errorf("shared blob deleted with bracket: %v", err)
			}
		} else if !errors.Is(err, os.ErrNotExist) {
			t.Errorf("role %q blob still on disk after removal (err %v)", role, err)
		}
	}
	if _, err := s.Show("bracket", 0); !errors.Is(err, ErrNotFound) {
		t.Errorf("Show removed part: %v, want ErrNotFound", err)
	}
	r, err = s.File(ctx, testFiling("bracket", 30))
	if err != nil || r.Number != 2 {
		t.Errorf("re-filing a removed part gave %d, %v; want 2 (numbers never reused)", r.Number, err)
	}
	rep, err := s.Verify(false)
	if err != nil || !rep.Clean() {
		t.Errorf("Verify after removals: %+v, %v", rep, err)
	}
}

func TestFindByProvenance(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	f := testFiling("bushing", 5)
	first, err := s.File(ctx, f)
	if err != nil {
		t.Fatal(err)
	}
	// The same settings written with other spacing and key order hash
	// the same; a changed value does not.
	same, _ := SettingsHash(json.RawMessage(`{ "frames":36, "seed":5,"voxel_m":0.002 }`))
	other, _ := SettingsHash(json.RawMessage(`{"voxel_m": 0.003, "seed": 5, "frames": 36}`))
	got, err := s.FindByProvenance("bushing", f.Provenance.InputHash, same)
	if err != nil || got.Number != first.Number {
		t.Fatalf("FindByProvenance = %v, %v; want revision %d", got, err, first.Number)
	}
	if _, err := s.FindByProvenance("bushing", f.Provenance.InputHash, other); !errors.Is(err, ErrNotFound) {
		t.Errorf("other settings: %v, want ErrNotFound", err)
	}
	if _, err := s.FindByProvenance("bushing", strings.Repeat("0", 64), same); !errors.Is(err, ErrNotFound) {
		t.Errorf("other input: %v, want ErrNotFound", err)
	}
	second, _ := s.File(ctx, f)
	if got, _ := s.FindByProvenance("bushing", strings.ToUpper(f.Provenance.InputHash), same); got == nil || got.Number != second.Number {
		t.Errorf("FindByProvenance should return the latest match, %d", second.Number)
	}
	// The index that serves the look-up exists (SQLite's query plan).
	var detail string
	rows, err := s.db.Query(`EXPLAIN QUERY PLAN SELECT id FROM revisions WHERE part_id = 1 AND input_hash = 'a' AND settings_hash = 'b'`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var id, parent, notused int
		var d string
		rows.Scan(&id, &parent, &notused, &d)
		detail += d
	}
	rows.Close()
	if !strings.Contains(detail, "revisions_provenance") {
		t.Errorf("query plan %q does not use the provenance index", detail)
	}
}

func TestFilingValidation(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	cases := []struct {
		name   string
		modify func(*Filing)
		want   error
	}{
		{"bad part name", func(f *Filing) { f.Part = "../x" }, ErrBadName},
		{"bad role", func(f *Filing) { f.Blobs["a/b"] = BlobSource{Data: []byte("x")} }, ErrBadName},
		{"no blobs", func(f *Filing) { f.Blobs = nil }, ErrBadFiling},
		{"empty source", func(f *Filing) { f.Blobs["x.bin"] = BlobSource{} }, ErrBadFiling},
		{"both sources", func(f *Filing) { f.Blobs["x.bin"] = BlobSource{Data: []byte{1}, Path: "/etc/hosts"} }, ErrBadFiling},
		{"missing file", func(f *Filing) { f.Blobs["x.bin"] = BlobSource{Path: "/nonexistent/file"} }, ErrBadFiling},
		{"export name clash", func(f *Filing) { f.Blobs["mesh.ply"] = BlobSource{Data: []byte("x")} }, ErrBadFiling},
		{"manifest clash", func(f *Filing) { f.Blobs["manifest.json"] = BlobSource{Data: []byte("{}")} }, ErrBadFiling},
		{"bad media type", func(f *Filing) { f.Blobs["x.bin"] = BlobSource{Data: []byte{1}, MediaType: "bin\n"} }, ErrBadFiling},
		{"verdict", func(f *Filing) { f.Verdict = "ok" }, ErrBadFiling},
		{"NaN diameter", func(f *Filing) { f.Diameter = nan() }, ErrBadFiling},
		{"negative diameter", func(f *Filing) { f.Diameter = -1 }, ErrBadFiling},
		{"frame bottom row", func(f *Filing) { f.Frame.PartToSweep[15] = 2 }, ErrBadFiling},
		{"input hash", func(f *Filing) { f.Provenance.InputHash = "abc" }, ErrBadFiling},
		{"settings JSON", func(f *Filing) { f.Provenance.Settings = json.RawMessage(`{"a":`) }, ErrBadFiling},
		{"settings hash mismatch", func(f *Filing) { f.Provenance.SettingsHash = strings.Repeat("a", 64) }, ErrBadFiling},
		{"extra JSON", func(f *Filing) { f.Extra = json.RawMessage(`nope`) }, ErrBadFiling},
		{"reason UTF-8", func(f *Filing) { f.Reasons = []string{"\xff"} }, ErrBadFiling},
		{"stage seconds", func(f *Filing) { f.Provenance.Stages[0].Seconds = -1 }, ErrBadFiling},
	}
	for _, c := range cases {
		f := testFiling("part", 1)
		c.modify(&f)
		_, err := s.File(ctx, f)
		if !errors.Is(err, c.want) {
			t.Errorf("%s: error %v, want %v", c.name, err, c.want)
		}
	}
	// Nothing was filed and nothing is left behind.
	if list, _ := s.List(); len(list) != 0 {
		t.Errorf("List after refused filings = %v", list)
	}
	rep, err := s.Verify(false)
	if err != nil || !rep.Clean() || rep.Blobs != 0 {
		t.Errorf("Verify after refused filings: %+v, %v", rep, err)
	}
}

func TestFileFromPath(t *testing.T) {
	s := openTest(t)
	src := filepath.Join(t.TempDir(), "big.ply")
	data := randBytes(77, 3<<20+17) // more than one copy chunk
	if err := os.WriteFile(src, data, 0o644); err != nil {
		t.Fatal(err)
	}
	f := testFiling("valve", 2)
	f.Blobs[RoleMesh] = BlobSource{Path: src}
	r, err := s.File(context.Background(), f)
	if err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(data) // Go standard library
	if r.Blobs[RoleMesh].SHA256 != hex.EncodeToString(sum[:]) {
		t.Errorf("mesh sha256 = %s, want %x", r.Blobs[RoleMesh].SHA256, sum)
	}
}

func TestCancelledFilingLeavesPreviousState(t *testing.T) {
	s := openTest(t)
	if _, err := s.File(context.Background(), testFiling("nut", 1)); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := s.File(ctx, testFiling("nut", 2))
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("File with a cancelled context: %v, want context.Canceled", err)
	}
	revs, _ := s.Revisions("nut")
	if !reflect.DeepEqual(revs, []int{1}) {
		t.Errorf("revisions = %v, want [1]", revs)
	}
	rep, err := s.Verify(false)
	if err != nil || !rep.Clean() || rep.InFlight != 0 {
		t.Errorf("Verify after cancelled filing: %+v, %v", rep, err)
	}
}

func TestOpenRefusesOtherFolders(t *testing.T) {
	dir := t.TempDir()
	// A file.
	file := filepath.Join(dir, "file")
	os.WriteFile(file, []byte("x"), 0o644)
	if _, err := Open(file, Options{}); !errors.Is(err, ErrNotCatalog) {
		t.Errorf("Open(file) = %v, want ErrNotCatalog", err)
	}
	// A folder with someone's files.
	other := filepath.Join(dir, "home")
	os.MkdirAll(other, 0o755)
	os.WriteFile(filepath.Join(other, "notes.txt"), []byte("x"), 0o644)
	if _, err := Open(other, Options{}); !errors.Is(err, ErrNotCatalog) {
		t.Errorf("Open(non-empty folder) = %v, want ErrNotCatalog", err)
	}
	if entries, _ := os.ReadDir(other); len(entries) != 1 {
		t.Errorf("Open wrote into a foreign folder: %d entries", len(entries))
	}
	// A missing folder with NoCreate.
	if _, err := Open(filepath.Join(dir, "none"), Options{NoCreate: true}); !errors.Is(err, ErrNotFound) {
		t.Errorf("Open(missing, NoCreate) = %v, want ErrNotFound", err)
	}
	// A catalog from a newer layout.
	newer := filepath.Join(dir, "newer")
	os.MkdirAll(newer, 0o755)
	os.WriteFile(filepath.Join(newer, "FORMAT"), []byte("scanfold catalog\nlayout 99\n"), 0o644)
	if _, err := Open(newer, Options{}); !errors.Is(err, ErrUnsupported) {
		t.Errorf("Open(newer layout) = %v, want ErrUnsupported", err)
	}
	// An empty folder becomes a catalog; opening it again works.
	empty := filepath.Join(dir, "empty")
	os.MkdirAll(empty, 0o755)
	s, err := Open(empty, Options{})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	s, err = Open(empty, Options{NoCreate: true})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	// A folder name with characters that mean something in a URI: the
	// index must land inside it, under its real name.
	odd := filepath.Join(dir, "a b?c#d%41e&f=g")
	s, err = Open(odd, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.File(context.Background(), testFiling("nut", 1)); err != nil {
		t.Fatal(err)
	}
	s.Close()
	if _, err := os.Stat(filepath.Join(odd, "index.db")); err != nil {
		t.Errorf("index not inside %q: %v", odd, err)
	}
	if entries, _ := os.ReadDir(dir); len(entries) != 5 {
		t.Errorf("%d entries in %s, want 5: file, home, newer, empty and the odd one", len(entries), dir)
	}
}

func TestCorruptIndex(t *testing.T) {
	// A garbage index file: an error, no panic.
	dir := filepath.Join(t.TempDir(), "cat")
	s, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	for _, suffix := range []string{"", "-wal", "-shm"} {
		os.Remove(filepath.Join(dir, "index.db"+suffix))
	}
	if err := os.WriteFile(filepath.Join(dir, "index.db"), bytes.Repeat([]byte("not a database "), 500), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := Open(dir, Options{}); !errors.Is(err, ErrCorrupt) {
		t.Errorf("Open(garbage index) = %v, want ErrCorrupt", err)
	}

	// Damaged rows: Show and Verify report them, nothing panics.
	s = openTest(t)
	if _, err := s.File(context.Background(), testFiling("nut", 1)); err != nil {
		t.Fatal(err)
	}
	if _, err := s.db.Exec(`UPDATE revisions SET meta = '{"verdict": 12'`); err != nil {
		t.Fatal(err)
	}
	if _, err := s.Show("nut", 1); !errors.Is(err, ErrCorrupt) || !strings.Contains(err.Error(), "nut@1") {
		t.Errorf("Show(bad metadata) = %v, want ErrCorrupt naming nut@1", err)
	}
	rep, err := s.Verify(true)
	if err != nil {
		t.Fatal(err)
	}
	if rep.Healthy() || !reflect.DeepEqual(rep.BadRevisions, []string{"nut@1"}) {
		t.Errorf("Verify(bad metadata): %+v", rep)
	}
	if revs, _ := s.Revisions("nut"); len(revs) != 1 {
		t.Errorf("repair deleted a bad revision")
	}
	// A newer schema than this build knows.
	if _, err := s.db.Exec(`UPDATE schema_version SET version = 99`); err != nil {
		t.Fatal(err)
	}
	if _, err := Open(s.Dir(), Options{}); !errors.Is(err, ErrUnsupported) {
		t.Errorf("Open(newer schema) = %v, want ErrUnsupported", err)
	}
}

func TestSchemaVersionRecorded(t *testing.T) {
	s := openTest(t)
	var v int
	if err := s.db.QueryRow(`SELECT version FROM schema_version`).Scan(&v); err != nil || v != SchemaVersion {
		t.Errorf("schema version = %d, %v; want %d", v, err, SchemaVersion)
	}
	var mode string
	if err := s.db.QueryRow(`PRAGMA journal_mode`).Scan(&mode); err != nil || mode != "wal" {
		t.Errorf("journal mode = %q, %v; want wal", mode, err)
	}
	var busy int
	if err := s.db.QueryRow(`PRAGMA busy_timeout`).Scan(&busy); err != nil || busy != 10000 {
		t.Errorf("busy timeout = %d ms, %v; want 10000", busy, err)
	}
}
