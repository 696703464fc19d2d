package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/urfave/cli/v2"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
)

// cubeSide is the edge of the test cube, metres.
const cubeSide = 0.02

// cubeMesh is a closed cube of side a with outward-wound faces and a
// colour per corner.
func cubeMesh(a float64) *mesh.Mesh {
	m := &mesh.Mesh{}
	for i := 0; i < 8; i++ {
		x, y, z := float64(i&1), float64(i>>1&1), float64(i>>2&1)
		m.Vertices = append(m.Vertices, r3.Vec{X: a * x, Y: a * y, Z: a * z})
		m.Colors = append(m.Colors, mesh.RGB{R: uint8(255 * x), G: uint8(255 * y), B: uint8(255 * z)})
	}
	// Two triangles per face, counter-clockwise seen from outside.
	for _, q := range [][4]uint32{
		{0, 2, 3, 1}, // z = 0
		{4, 5, 7, 6}, // z = a
		{0, 1, 5, 4}, // y = 0
		{2, 6, 7, 3}, // y = a
		{0, 4, 6, 2}, // x = 0
		{1, 3, 7, 5}, // x = a
	} {
		m.Faces = append(m.Faces, mesh.Face{q[0], q[1], q[2]}, mesh.Face{q[0], q[2], q[3]})
	}
	return m
}

// testCatalog is a catalog filled through catalog.File, and what was
// filed.
type testCatalog struct {
	dir      string
	nutRev1  catalog.Revision // ready: mesh, cloud, tables, report
	nutRev2  catalog.Revision // review: the same blobs, other metadata
	cubeRev1 catalog.Revision // rescan: a mesh only
}

// fillCatalog files two revisions of the demo nut (meshed at 2 mm, its
// cloud sampled at the default 5 % of the diameter, and its PPF tables
// built from the cloud as read back from PLY, so that the exported
// cloud.ply and tables.ppf load together) and one revision of a cube.
func fillCatalog(t *testing.T) *testCatalog {
	t.Helper()
	ctx := context.Background()
	dir := filepath.Join(t.TempDir(), "cat")
	s, err := catalog.Open(dir, catalog.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()

	nut, err := reconstruct.SynthPartMesh("nut", 0.002)
	if err != nil {
		t.Fatal(err)
	}
	var meshPLY bytes.Buffer
	if err := mesh.WritePLY(&meshPLY, nut, mesh.DefaultPLYOptions()); err != nil {
		t.Fatal(err)
	}
	cloud, spacing, err := mesh.Sample(nut, mesh.DefaultSampleOptions())
	if err != nil {
		t.Fatal(err)
	}
	var cloudPLY bytes.Buffer
	if err := mesh.WritePLYCloud(&cloudPLY, cloud, mesh.DefaultPLYOptions()); err != nil {
		t.Fatal(err)
	}
	cloud, err = mesh.ReadPLYCloud(bytes.NewReader(cloudPLY.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	topt := features.DefaultTableOptions()
	model, err := features.BuildTables(ctx, cloud, topt)
	if err != nil {
		t.Fatal(err)
	}
	tables := features.MarshalTables(model)

	meta := catalog.Metadata{
		Verdict:    catalog.Ready,
		Reasons:    []string{"all synthetic scenes found within 2 mm"},
		Symmetry:   catalog.Symmetry{Kind: "discrete", Order: 6, Axis: [3]float64{0, 0, 1}, Description: "hex nut"},
		Acceptance: catalog.Acceptance{Scorer: "point-difference", Threshold: 0.55},
		Diameter:   nut.Diameter(),
		Frame:      catalog.Frame{Description: "demo part frame: origin at the centre of the footprint, +z up"},
		PPF: catalog.PPFParams{SamplingStep: spacing, DistanceStep: model.DistanceStep(),
			AngleBins: topt.AngleBins, RefPointEvery: 5},
		Provenance: catalog.Provenance{
			InputHash:   strings.Repeat("ab", 32),
			Settings:    json.RawMessage(`{"voxel": "1mm", "frames": 36, "note": "<test & check>"}`),
			ToolVersion: Version,
			Stages:      []catalog.StageTiming{{Stage: "fuse", Seconds: 12.5}, {Stage: "tables", Seconds: 0.75}},
			Created:     time.Date(2025, 3, 1, 12, 0, 0, 0, time.UTC),
			Host:        "cell-pc",
		},
	}
	report := []byte(`{"verdict": "ready"}`)
	tc := &testCatalog{dir: dir}
	tc.nutRev1, err = s.File(ctx, catalog.Filing{Part: "nut", Metadata: meta, Blobs: map[string]catalog.BlobSource{
		catalog.RoleMesh:       {Data: meshPLY.Bytes()},
		catalog.RoleCloud:      {Data: cloudPLY.Bytes()},
		catalog.RoleTables:     {Data: tables},
		catalog.RoleReportJSON: {Data: report},
	}})
	if err != nil {
		t.Fatal(err)
	}
	meta.Verdict, meta.Reasons = catalog.Review, []string{"coverage 91 % < 95 %"}
	tc.nutRev2, err = s.File(ctx, catalog.Filing{Part: "nut", Metadata: meta, Blobs: map[string]catalog.BlobSource{
		catalog.RoleMesh:   {Data: meshPLY.Bytes()},
		catalog.RoleCloud:  {Data: cloudPLY.Bytes()},
		catalog.RoleTables: {Data: tables},
	}})
	if err != nil {
		t.Fatal(err)
	}
	var cubePLY bytes.Buffer
	if err := mesh.WritePLY(&cubePLY, cubeMesh(cubeSide), mesh.DefaultPLYOptions()); err != nil {
		t.Fatal(err)
	}
	tc.cubeRev1, err = s.File(ctx, catalog.Filing{Part: "cube", Blobs: map[string]catalog.BlobSource{catalog.RoleMesh: {Data: cubePLY.Bytes()}},
		Metadata: catalog.Metadata{Verdict: catalog.Rescan, Reasons: []string{"too few frames saw the top"}, Diameter: math.Sqrt(3) * cubeSide}})
	if err != nil {
		t.Fatal(err)
	}
	return tc
}

// cat runs "scanfold catalog --catalog DIR args...".
func (tc *testCatalog) cat(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	return runArgs(t, context.Background(), append([]string{"catalog", "--catalog", tc.dir}, args...)...)
}

func TestCatalogList(t *testing.T) {
	tc := fillCatalog(t)
	code, out, errOut := tc.cat(t, "list")
	if code != 0 {
		t.Fatalf("list: exit %d: %s", code, errOut)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if len(lines) != 3 {
		t.Fatalf("list printed %d lines, want a header and 2 parts:\n%s", len(lines), out)
	}
	// Sorted by name; columns aligned by text/tabwriter: every row's
	// verdict starts where the header's VERDICT does.
	col := strings.Index(lines[0], "VERDICT")
	for i, want := range []string{`^cube\s+@1\s+rescan\s+1\s+\d{4}-\d\d-\d\d `, `^nut\s+@2\s+review\s+2\s+\d{4}-\d\d-\d\d `} {
		if !regexp.MustCompile(want).MatchString(lines[i+1]) {
			t.Errorf("row %d %q does not match %q", i+1, lines[i+1], want)
		}
		if col < 0 || len(lines[i+1]) <= col || lines[i+1][col-1] != ' ' || lines[i+1][col] == ' ' {
			t.Errorf("row %q not aligned with the header %q", lines[i+1], lines[0])
		}
	}

	code, out, errOut = tc.cat(t, "list", "--json")
	if code != 0 {
		t.Fatalf("list --json: exit %d: %s", code, errOut)
	}
	var got []struct {
		Name      string    `json:"name"`
		Latest    int       `json:"latest"`
		Verdict   string    `json:"verdict"`
		Revisions int       `json:"revisions"`
		Updated   time.Time `json:"updated"`
	}
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("list --json does not parse: %v\n%s", err, out)
	}
	if len(got) != 2 || got[1].Name != "nut" || got[1].Latest != 2 || got[1].Verdict != "review" || got[1].Revisions != 2 ||
		!got[1].Updated.Equal(tc.nutRev2.Filed) {
		t.Errorf("list --json: %+v", got)
	}

	// An empty catalog says so; as JSON it is an empty array.
	empty := filepath.Join(t.TempDir(), "empty")
	if s, err := catalog.Open(empty, catalog.Options{}); err != nil {
		t.Fatal(err)
	} else {
		s.Close()
	}
	code, out, _ = runArgs(t, context.Background(), "catalog", "list", "--catalog", empty)
	if code != 0 || !strings.Contains(out, "holds no parts") {
		t.Errorf("empty list: exit %d, %q", code, out)
	}
	code, out, _ = runArgs(t, context.Background(), "catalog", "list", "--json", "--catalog", empty)
	if code != 0 || strings.TrimSpace(out) != "[]" {
		t.Errorf("empty list --json: exit %d, %q", code, out)
	}
}

func TestCatalogShow(t *testing.T) {
	tc := fillCatalog(t)
	code, out, errOut := tc.cat(t, "show", "nut@1")
	if code != 0 {
		t.Fatalf("show nut@1: exit %d: %s", code, errOut)
	}
	r := tc.nutRev1
	for _, want := range []string{
		"nut@1 (revision 1; revisions 1, 2)",
		"verdict", "ready", "all synthetic scenes found within 2 mm",
		"threshold 0.55 on the point-difference score",
		"discrete, order 6 about axis (0, 0, 1): hex nut",
		"input hash", strings.Repeat("ab", 32),
		`{"voxel":"1mm","frames":36,"note":"<test & check>"}`, r.Provenance.SettingsHash,
		"fuse", "12.50 s", "13.25 s", "cell-pc", Version,
		r.Blobs[catalog.RoleTables].SHA256, r.Blobs[catalog.RoleMesh].SHA256,
		"application/vnd.scanfold.ppf-tables",
		"risk assessment",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("show nut@1 lacks %q:\n%s", want, out)
		}
	}
	// NAME alone is the latest revision, in any letter case.
	code, out, _ = tc.cat(t, "show", "NUT")
	if code != 0 || !strings.Contains(out, "nut@2 (revision 2, the latest") || !strings.Contains(out, "coverage 91 % < 95 %") {
		t.Errorf("show NUT: exit %d:\n%s", code, out)
	}
	if strings.Contains(out, "risk assessment") {
		t.Errorf("show of a review revision prints the ready caution:\n%s", out)
	}

	code, out, errOut = tc.cat(t, "show", "nut@1", "--json")
	if code != 0 {
		t.Fatalf("show --json: exit %d: %s", code, errOut)
	}
	var got struct {
		Part      string                     `json:"part"`
		Revision  int                        `json:"revision"`
		Revisions []int                      `json:"revisions"`
		Blobs     map[string]catalog.BlobRef `json:"blobs"`
		catalog.Metadata
	}
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("show --json does not parse: %v\n%s", err, out)
	}
	if got.Part != "nut" || got.Revision != 1 || len(got.Revisions) != 2 || got.Verdict != catalog.Ready ||
		got.Acceptance != r.Acceptance || got.Diameter != r.Diameter || got.Provenance.SettingsHash != r.Provenance.SettingsHash ||
		len(got.Blobs) != 4 || got.Blobs[catalog.RoleCloud] != r.Blobs[catalog.RoleCloud] {
		t.Errorf("show --json: %+v", got)
	}
}

func TestCatalogExport(t *testing.T) {
	tc := fillCatalog(t)
	to := filepath.Join(t.TempDir(), "out", "nut")
	code, out, errOut := tc.cat(t, "export", "nut@1", "--to", to)
	if code != 0 {
		t.Fatalf("export: exit %d: %s", code, errOut)
	}
	manifestPath := filepath.Join(to, catalog.ManifestName)
	for _, want := range []string{"exported nut@1 (verdict ready) to " + to, "mesh.ply", "mesh.stl", "mesh.obj",
		"cloud.ply", "tables.ppf", "report.json", "converted from mesh.ply", "manifest " + manifestPath, "risk assessment"} {
		if !strings.Contains(out, want) {
			t.Errorf("export output lacks %q:\n%s", want, out)
		}
	}
	data, err := os.ReadFile(manifestPath)
	if err != nil {
		t.Fatal(err)
	}
	var m catalog.Manifest
	if err := json.Unmarshal(data, &m); err != nil {
		t.Fatalf("manifest does not parse: %v", err)
	}
	if m.Part != "nut" || m.Revision != 1 || m.Verdict != catalog.Ready || m.Units != "metres" || len(m.Files) != 6 {
		t.Errorf("manifest: %+v", m)
	}
	// Every file the manifest lists is on disk with the SHA-256 it gives
	// (computed again with the Go standard library's crypto/sha256).
	for _, f := range m.Files {
		b, err := os.ReadFile(filepath.Join(to, f.File))
		if err != nil {
			t.Fatal(err)
		}
		sum := sha256.Sum256(b)
		if hex.EncodeToString(sum[:]) != f.SHA256 || int64(len(b)) != f.Size {
			t.Errorf("%s: %d bytes, sha256 %x; manifest says %d, %s", f.File, len(b), sum, f.Size, f.SHA256)
		}
	}
	// The exported cloud and tables belong together: LoadTables checks
	// the cloud's hash recorded in the tables.
	cloud, err := mesh.LoadCloud(filepath.Join(to, "cloud.ply"))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := features.LoadTables(filepath.Join(to, "tables.ppf"), cloud); err != nil {
		t.Errorf("exported tables do not load against the exported cloud: %v", err)
	}

	// The cube's STL: binary STL is an 80-byte header, a uint32 count and
	// 50 bytes per triangle (the STL format's definition, 3D Systems
	// 1989), so 12 triangles take 84 + 600 bytes; read back, the cube's
	// area is 6a² and its volume a³ (handbook formulas). STL stores
	// float32 vertices: each coordinate is rounded with relative error at
	// most 2⁻²⁴ ≈ 6e-8, so the area (degree 2) is off by at most ~1.2e-7
	// and the volume (degree 3) by ~1.8e-7 relative; 1e-6 allows that.
	cubeDir := filepath.Join(t.TempDir(), "cube")
	code, out, errOut = tc.cat(t, "export", "cube", "--to", cubeDir)
	if code != 0 {
		t.Fatalf("export cube: exit %d: %s", code, errOut)
	}
	if !strings.Contains(out, "warning: the verdict is rescan") {
		t.Errorf("export of a rescan model does not warn:\n%s", out)
	}
	if st, err := os.Stat(filepath.Join(cubeDir, "mesh.stl")); err != nil || st.Size() != 84+50*12 {
		t.Errorf("mesh.stl: %v, %v; want %d bytes", st, err, 84+50*12)
	}
	cube, err := mesh.LoadMesh(filepath.Join(cubeDir, "mesh.stl"))
	if err != nil {
		t.Fatal(err)
	}
	a := cubeSide
	if got := cube.Area(); math.Abs(got-6*a*a) > 1e-6*6*a*a {
		t.Errorf("exported cube area %g, want 6a² = %g", got, 6*a*a)
	}
	if got := cube.SignedVolume(); math.Abs(got-a*a*a) > 1e-6*a*a*a {
		t.Errorf("exported cube volume %g, want a³ = %g", got, a*a*a)
	}

	// A non-empty target is refused and left as it was.
	code, _, errOut = tc.cat(t, "export", "nut", "--to", to)
	if code != 1 || !strings.Contains(errOut, "not empty") || !strings.Contains(errOut, "nut@2") {
		t.Errorf("export into a full folder: exit %d, %q", code, errOut)
	}
	// --to is required.
	code, _, errOut = tc.cat(t, "export", "nut")
	if code != 1 || !strings.Contains(errOut, `"to"`) {
		t.Errorf("export without --to: exit %d, %q", code, errOut)
	}
}

func TestCatalogRemove(t *testing.T) {
	tc := fillCatalog(t)
	// A whole part without --yes is refused, with the way to confirm.
	code, _, errOut := tc.cat(t, "remove", "nut")
	if code != 1 || !strings.Contains(errOut, "--yes") || !strings.Contains(errOut, "nut@REV") || !strings.Contains(errOut, "2 revision(s) (1, 2)") {
		t.Errorf("remove nut without --yes: exit %d, %q", code, errOut)
	}
	if _, out, _ := tc.cat(t, "show", "nut@1"); !strings.Contains(out, "nut@1") {
		t.Errorf("refused removal removed something:\n%s", out)
	}
	// One revision needs no confirmation.
	code, out, errOut := tc.cat(t, "remove", "nut@1")
	if code != 0 || !strings.Contains(out, "removed nut@1; revisions left: 2") {
		t.Errorf("remove nut@1: exit %d, %q, %q", code, out, errOut)
	}
	code, _, errOut = tc.cat(t, "show", "nut@1")
	if code != 1 || !strings.Contains(errOut, "has no revision 1") {
		t.Errorf("show of a removed revision: exit %d, %q", code, errOut)
	}
	code, _, errOut = tc.cat(t, "remove", "nut@7")
	if code != 1 || !strings.Contains(errOut, `part "nut" has no revision 7`) {
		t.Errorf("remove nut@7: exit %d, %q", code, errOut)
	}
	// The whole part with --yes, flag before or after the name.
	code, out, errOut = tc.cat(t, "remove", "--yes", "nut")
	if code != 0 || !strings.Contains(out, "removed part nut: revision(s) 2") {
		t.Errorf("remove --yes nut: exit %d, %q, %q", code, out, errOut)
	}
	code, out, _ = tc.cat(t, "list")
	if code != 0 || strings.Contains(out, "nut") || !strings.Contains(out, "cube") {
		t.Errorf("list after removal:\n%s", out)
	}
	// The removed blobs' files are gone: the store verifies clean.
	code, out, errOut = tc.cat(t, "verify")
	if code != 0 || !regexp.MustCompile(`blobs checked\s+1\b`).MatchString(out) || !strings.HasSuffix(out, "healthy\n") {
		t.Errorf("verify after removal: exit %d, %q\n%s", code, errOut, out)
	}
}

func TestCatalogVerify(t *testing.T) {
	tc := fillCatalog(t)
	code, out, errOut := tc.cat(t, "verify")
	// nut@1 and nut@2 share mesh, cloud and tables; with nut@1's report
	// and the cube's mesh, 5 distinct files.
	if code != 0 || !regexp.MustCompile(`blobs checked\s+5\b`).MatchString(out) || !regexp.MustCompile(`revisions\s+3\b`).MatchString(out) {
		t.Fatalf("verify: exit %d, %q\n%s", code, errOut, out)
	}

	// A leftover temp file of a dead process: healthy (exit 0), and
	// --repair removes it. PID 2^22+1 is above Linux's pid_max limit
	// (from memory), so no live process has it.
	stale := filepath.Join(tc.dir, "tmp", "4194305.1.tmp")
	if err := os.WriteFile(stale, []byte("partial"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, _ = tc.cat(t, "verify")
	if code != 0 || !regexp.MustCompile(`stale temp files\s+1\b`).MatchString(out) || !strings.Contains(out, "--repair") {
		t.Errorf("verify with a stale temp file: exit %d\n%s", code, out)
	}
	code, out, _ = tc.cat(t, "verify", "--repair")
	if _, err := os.Stat(stale); code != 0 || err == nil || !strings.Contains(out, "removed "+stale) {
		t.Errorf("verify --repair: exit %d, temp file still there: %v\n%s", code, err == nil, out)
	}

	// Damage the cube's mesh: verify exits 1 naming the revision, and
	// --repair does not hide it.
	path := filepath.Join(tc.dir, "blobs", tc.cubeRev1.Blobs[catalog.RoleMesh].SHA256[:2], tc.cubeRev1.Blobs[catalog.RoleMesh].SHA256[2:])
	if err := os.Chmod(path, 0o644); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	b[len(b)-1] ^= 0xff
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, args := range [][]string{{"verify"}, {"verify", "--repair"}} {
		code, out, errOut = tc.cat(t, args...)
		if code != 1 || !strings.Contains(errOut, "not healthy") || !strings.Contains(errOut, "cube@1") ||
			!regexp.MustCompile(`damaged\s+1\b`).MatchString(out) || !strings.Contains(out, "cube@1:mesh") {
			t.Errorf("%v on a damaged blob: exit %d, %q\n%s", args, code, errOut, out)
		}
	}
	// The healthy revisions still export; the damaged one does not, and
	// leaves nothing.
	to := filepath.Join(t.TempDir(), "cube")
	code, _, errOut = tc.cat(t, "export", "cube", "--to", to)
	if code != 1 || !strings.Contains(errOut, "cube@1") {
		t.Errorf("export of a damaged revision: exit %d, %q", code, errOut)
	}
	if _, err := os.Stat(to); err == nil {
		t.Errorf("failed export left %s", to)
	}
}

func TestCatalogBadInput(t *testing.T) {
	tc := fillCatalog(t)
	to := filepath.Join(t.TempDir(), "x")
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"show", "../x"}, `part name "../x"`},
		{[]string{"export", "../x", "--to", to}, `part name "../x"`},
		{[]string{"remove", "../x", "--yes"}, `part name "../x"`},
		{[]string{"show", "nut@0"}, `revision "0"`},
		{[]string{"show", "nut@two"}, `revision "two"`},
		{[]string{"show", "gear"}, `part "gear"`},
		{[]string{"show", "gear@3"}, `part "gear"`},
		{[]string{"show"}, "one argument"},
		{[]string{"show", "nut", "cube"}, "one argument"},
		{[]string{"list", "nut"}, `no arguments, got "nut"`},
		{[]string{"verify", "nut"}, `no arguments, got "nut"`},
		{[]string{"list", "--frobnicate"}, "frobnicate"},
		{[]string{"frobnicate"}, "frobnicate"},
	} {
		code, out, errOut := tc.cat(t, c.args...)
		if code != 1 || !strings.Contains(errOut, c.want) || strings.Count(errOut, "\n") != 1 {
			t.Errorf("%v: exit %d, stderr %q, want 1 and one line with %q", c.args, code, errOut, c.want)
		}
		if out != "" {
			t.Errorf("%v printed %q on stdout", c.args, out)
		}
	}
	if _, err := os.Stat(to); err == nil {
		t.Errorf("a refused export wrote %s", to)
	}
	// A missing catalog is not created by a read; the error says how to
	// give the folder.
	missing := filepath.Join(t.TempDir(), "nope")
	code, _, errOut := runArgs(t, context.Background(), "catalog", "list", "--catalog", missing)
	if code != 1 || !strings.Contains(errOut, "--catalog") || !strings.Contains(errOut, missing) {
		t.Errorf("list of a missing catalog: exit %d, %q", code, errOut)
	}
	if _, err := os.Stat(missing); err == nil {
		t.Errorf("list created %s", missing)
	}
	// A folder that is not a catalog is refused.
	code, _, errOut = runArgs(t, context.Background(), "catalog", "list", "--catalog", t.TempDir()+"/..")
	if code != 1 || !strings.Contains(errOut, "not a catalog") {
		t.Errorf("list of a non-catalog folder: exit %d, %q", code, errOut)
	}
}

func TestCatalogLocation(t *testing.T) {
	tc := fillCatalog(t)
	// The environment variable, when no flag is given.
	t.Setenv(catalogEnv, tc.dir)
	code, out, errOut := runArgs(t, context.Background(), "catalog", "list")
	if code != 0 || !strings.Contains(out, "nut") {
		t.Errorf("list with $%s: exit %d, %q, %q", catalogEnv, code, out, errOut)
	}
	// The flag wins over the environment: an empty folder is not a
	// catalog, and a read does not make it one.
	empty := filepath.Join(t.TempDir(), "empty")
	if err := os.Mkdir(empty, 0o755); err != nil {
		t.Fatal(err)
	}
	code, _, errOut = runArgs(t, context.Background(), "catalog", "list", "--catalog", empty)
	if code != 1 || !strings.Contains(errOut, empty) {
		t.Errorf("list --catalog EMPTY with $%s set: exit %d, %q", catalogEnv, code, errOut)
	}
	if ents, _ := os.ReadDir(empty); len(ents) != 0 {
		t.Errorf("list wrote into %s: %v", empty, ents)
	}
	// The subcommand's flag wins over the parent's.
	code, out, _ = runArgs(t, context.Background(), "catalog", "--catalog", filepath.Join(t.TempDir(), "other"), "show", "nut", "--catalog", tc.dir)
	if code != 0 || !strings.Contains(out, "nut@2") {
		t.Errorf("subcommand --catalog does not win over the parent's: exit %d\n%s", code, out)
	}
	// The default is ./scanfold-catalog.
	t.Setenv(catalogEnv, "")
	app := newApp(&bytes.Buffer{}, &bytes.Buffer{})
	var got string
	app.Commands = append(app.Commands, &cli.Command{Name: "where", Flags: []cli.Flag{catalogFlag()},
		Action: func(c *cli.Context) error { got = catalogDir(c); return nil }})
	if err := app.Run([]string{"scanfold", "where"}); err != nil || got != catalogDefaultDir {
		t.Errorf("default catalog folder %q, %v; want %q", got, err, catalogDefaultDir)
	}
	if err := app.Run([]string{"scanfold", "where", "--catalog", "/srv/cat"}); err != nil || got != "/srv/cat" {
		t.Errorf("--catalog /srv/cat resolved to %q, %v", got, err)
	}
}

func TestCatalogInterrupted(t *testing.T) {
	tc := fillCatalog(t)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	to := filepath.Join(t.TempDir(), "nut")
	code, _, errOut := runArgs(t, ctx, "catalog", "--catalog", tc.dir, "export", "nut", "--to", to)
	if code != 130 || !strings.Contains(errOut, "interrupted") {
		t.Errorf("interrupted export: exit %d, %q", code, errOut)
	}
	if _, err := os.Stat(to); err == nil {
		t.Errorf("interrupted export left %s", to)
	}
	code, _, errOut = runArgs(t, ctx, "catalog", "--catalog", tc.dir, "remove", "nut@1")
	if code != 130 {
		t.Errorf("interrupted remove: exit %d, %q", code, errOut)
	}
	code, _, errOut = runArgs(t, ctx, "catalog", "--catalog", tc.dir, "verify")
	if code != 130 {
		t.Errorf("interrupted verify: exit %d, %q", code, errOut)
	}
	if code, out, _ := tc.cat(t, "list"); code != 0 || !strings.Contains(out, "nut   @2") {
		t.Errorf("after interruptions:\n%s", out)
	}
}

func TestCatalogHelp(t *testing.T) {
	code, out, _ := runArgs(t, context.Background(), "catalog", "--help")
	if code != 0 {
		t.Fatalf("catalog --help: exit %d", code)
	}
	for _, w := range []string{"list", "show", "export", "remove", "verify", "--catalog", catalogEnv} {
		if !strings.Contains(out, w) {
			t.Errorf("catalog --help lacks %q:\n%s", w, out)
		}
	}
	// Every subcommand and every flag has help text.
	for _, c := range catalogCommand().Subcommands {
		if c.Usage == "" || c.UsageText == "" {
			t.Errorf("catalog %s has no usage", c.Name)
		}
		for _, f := range c.Flags {
			if f.(cli.DocGenerationFlag).GetUsage() == "" {
				t.Errorf("catalog %s --%s has no help text", c.Name, f.Names()[0])
			}
		}
		code, out, _ := runArgs(t, context.Background(), "catalog", c.Name, "--help")
		if code != 0 || !strings.Contains(out, c.UsageText) {
			t.Errorf("catalog %s --help: exit %d\n%s", c.Name, code, out)
		}
	}
}

func TestInterspersedSubcommands(t *testing.T) {
	app := newApp(&strings.Builder{}, &strings.Builder{})
	for _, c := range []struct{ in, want string }{
		{"scanfold catalog show nut --json", "scanfold catalog show --json -- nut"},
		{"scanfold catalog --catalog d show nut@2 --json", "scanfold catalog --catalog d show --json -- nut@2"},
		{"scanfold catalog --catalog=d export nut --to o", "scanfold catalog --catalog=d export --to o -- nut"},
		{"scanfold catalog remove nut --yes --catalog d", "scanfold catalog remove --yes --catalog d -- nut"},
		{"scanfold catalog list", "scanfold catalog list"},
		{"scanfold catalog --help", "scanfold catalog --help"},
		{"scanfold catalog --catalog d", "scanfold catalog --catalog d"},
	} {
		got := strings.Join(interspersed(app, strings.Fields(c.in)), " ")
		if got != c.want {
			t.Errorf("%q → %q, want %q", c.in, got, c.want)
		}
	}
}

// TestUnescapeHTML checks unescapeHTML against encoding/json (the Go
// standard library) as the oracle: the document must decode to the same
// value before and after, and the HTML escapes must be gone.
func TestUnescapeHTML(t *testing.T) {
	for _, c := range []struct{ in, want string }{
		{`{"a":"\u003ctest \u0026 check\u003e"}`, `{"a":"<test & check>"}`},
		{`["\\u003c"]`, `["\\u003c"]`}, // an escaped backslash, then the letters u003c
		{`["\u00e9\n\"\u003C"]`, `["\u00e9\n\"<"]`},
		{`{"k\u0026":1}`, `{"k&":1}`},
		{`"\\"`, `"\\"`},
	} {
		got := string(unescapeHTML([]byte(c.in)))
		if got != c.want {
			t.Errorf("unescapeHTML(%s) = %s, want %s", c.in, got, c.want)
		}
		var a, b any
		if err := json.Unmarshal([]byte(c.in), &a); err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal([]byte(got), &b); err != nil {
			t.Errorf("unescapeHTML(%s) = %s is not JSON: %v", c.in, got, err)
		}
		if ja, jb := mustJSON(t, a), mustJSON(t, b); ja != jb {
			t.Errorf("unescapeHTML(%s) changed the value: %s vs %s", c.in, ja, jb)
		}
	}
}

func mustJSON(t *testing.T, v any) string {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}
