package catalog

import (
	"context"
	"fmt"
	"testing"
)

// BenchmarkFile5MB files one revision with about 5 MB of new blobs (a
// 3 MB mesh, a 1.5 MB cloud, 0.5 MB of tables, a small report): the
// cost of staging, hashing, fsyncing, installing and committing.
func BenchmarkFile5MB(b *testing.B) {
	s := openTest(b)
	ctx := context.Background()
	const total = 3<<20 + 3<<19 + 1<<19
	b.SetBytes(total)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		b.StopTimer()
		f := testFiling("bench", uint64(i))
		seed := uint64(i) * 16
		f.Blobs[RoleMesh] = BlobSource{Data: randBytes(seed+1, 3<<20)}
		f.Blobs[RoleCloud] = BlobSource{Data: randBytes(seed+2, 3<<19)}
		f.Blobs[RoleTables] = BlobSource{Data: randBytes(seed+3, 1<<19)}
		b.StartTimer()
		if _, err := s.File(ctx, f); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkList1000 lists a catalog of 1,000 parts with two revisions
// each.
func BenchmarkList1000(b *testing.B) {
	s := openTest(b)
	ctx := context.Background()
	// Filling through File would take minutes of fsyncs; the rows are
	// the same as File writes, inserted in one transaction.
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		b.Fatal(err)
	}
	for p := 0; p < 1000; p++ {
		res, err := tx.Exec(`INSERT INTO parts (name, last_rev, created_ns) VALUES (?, 2, 0)`, fmt.Sprintf("part-%04d", p))
		if err != nil {
			b.Fatal(err)
		}
		id, _ := res.LastInsertId()
		for r := 1; r <= 2; r++ {
			if _, err := tx.Exec(`INSERT INTO revisions (part_id, rev, filed_ns, verdict, input_hash, settings_hash,
				tool_version, host, created_ns, diameter_m, acceptance_threshold, meta)
				VALUES (?, ?, ?, 'ready', '', '', 'bench', 'h', 0, 0.05, 0.5, '{"verdict":"ready"}')`, id, r, int64(p*10+r)); err != nil {
				b.Fatal(err)
			}
		}
	}
	if err := tx.Commit(); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		list, err := s.List()
		if err != nil || len(list) != 1000 || list[999].Latest != 2 || list[999].Revisions != 2 {
			b.Fatalf("List: %d parts, %v", len(list), err)
		}
	}
}
