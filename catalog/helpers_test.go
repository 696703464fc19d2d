package catalog

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"testing"
	"time"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// openTest opens a fresh catalog in a temp folder.
func openTest(t testing.TB) *Store {
	t.Helper()
	s, err := Open(filepath.Join(t.TempDir(), "cat"), Options{})
	if err != nil {
		t.Fatalf("Open: %v", err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// randBytes returns n bytes from a seeded generator (invented test
// content: the store treats blobs as opaque bytes).
func randBytes(seed uint64, n int) []byte {
	r := rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15))
	b := make([]byte, n)
	for i := 0; i+8 <= n; i += 8 {
		v := r.Uint64()
		for k := 0; k < 8; k++ {
			b[i+k] = byte(v >> (8 * k))
		}
	}
	for i := n &^ 7; i < n; i++ {
		b[i] = byte(r.Uint32())
	}
	return b
}

// testFiling builds a filing with a mesh, a cloud, tables and a report;
// content is determined by seed, and "shared" is the same in every
// filing (to exercise de-duplication).
func testFiling(part string, seed uint64) Filing {
	settings := json.RawMessage(fmt.Sprintf(`{"voxel_m": 0.002, "seed": %d, "frames": 36}`, seed))
	report, _ := json.Marshal(map[string]any{"seed": seed, "note": "test"})
	return Filing{
		Part: part,
		Blobs: map[string]BlobSource{
			RoleMesh:       {Data: testMeshPLY(seed)},
			RoleCloud:      {Data: randBytes(seed*4+2, 2000)},
			RoleTables:     {Data: randBytes(seed*4+3, 1000)},
			RoleReportJSON: {Data: report},
			"legend.png":   {Data: []byte("shared picture bytes")},
		},
		Metadata: Metadata{
			Verdict:    Review,
			Reasons:    []string{"coverage 91 % < 95 %", "hole near the flange"},
			Symmetry:   Symmetry{Kind: "discrete", Order: 6, Axis: [3]float64{0, 0, 1}, Description: "hex"},
			Acceptance: Acceptance{Scorer: "point-difference", Threshold: 0.62},
			Diameter:   0.0425,
			Frame: Frame{
				Description: "origin at the centroid; axes along the principal axes",
				PartToSweep: [16]float64{1, 0, 0, 0.1, 0, 1, 0, -0.02, 0, 0, 1, 0.5, 0, 0, 0, 1},
			},
			PPF: PPFParams{SamplingStep: 0.05 * 0.0425, DistanceStep: 0.05 * 0.0425, AngleBins: 30, RefPointEvery: 5},
			Provenance: Provenance{
				InputHash:   fmt.Sprintf("%064x", seed+1),
				Settings:    settings,
				ToolVersion: "test",
				Stages:      []StageTiming{{"fuse", 1.5}, {"tables", 0.25}},
				Created:     time.Date(2025, 3, 1, 12, 0, 0, 0, time.UTC),
				Host:        "bench-1",
			},
			Extra: json.RawMessage(`{"operator":"test"}`),
		},
	}
}

func nan() float64 { var z float64; return z / z }

// testMesh is a seeded triangle soup with colours (invented data: the
// store only copies and converts it).
func testMesh(seed uint64) *mesh.Mesh {
	r := rand.New(rand.NewPCG(seed, 99))
	m := &mesh.Mesh{}
	for i := 0; i < 60; i++ {
		m.Vertices = append(m.Vertices, r3.Vec{X: r.Float64() * 0.05, Y: r.Float64() * 0.05, Z: r.Float64() * 0.02})
		m.Colors = append(m.Colors, mesh.RGB{R: uint8(r.IntN(256)), G: uint8(r.IntN(256)), B: uint8(r.IntN(256))})
	}
	for i := 0; i+2 < 60; i += 3 {
		m.Faces = append(m.Faces, mesh.Face{uint32(i), uint32(i + 1), uint32(i + 2)})
	}
	return m
}

// testMeshPLY is testMesh as binary PLY.
func testMeshPLY(seed uint64) []byte {
	var b bytes.Buffer
	if err := mesh.WritePLY(&b, testMesh(seed), mesh.DefaultPLYOptions()); err != nil {
		panic(err)
	}
	return b.Bytes()
}
