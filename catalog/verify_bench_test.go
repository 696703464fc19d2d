package catalog

import (
	"context"
	"testing"
)

// BenchmarkVerify20MB verifies a catalog of 8 revisions holding about
// 20 MB of blob files (33 distinct files: 4 roles each and one shared
// picture): the cost of listing, re-hashing every file with SHA-256
// and checking it against the index, with a progress callback as the
// CLI passes one.
func BenchmarkVerify20MB(b *testing.B) {
	s := openTest(b)
	ctx := context.Background()
	var total int64
	for i := 0; i < 8; i++ {
		f := testFiling("bench", uint64(i))
		seed := uint64(i) * 16
		f.Blobs[RoleMesh] = BlobSource{Data: randBytes(seed+1, 3<<19)}
		f.Blobs[RoleCloud] = BlobSource{Data: randBytes(seed+2, 1<<19)}
		f.Blobs[RoleTables] = BlobSource{Data: randBytes(seed+3, 1<<19)}
		if _, err := s.File(ctx, f); err != nil {
			b.Fatal(err)
		}
	}
	rep, err := s.Verify(false)
	if err != nil || !rep.Clean() {
		b.Fatalf("Verify: %+v, %v", rep, err)
	}
	total = rep.Bytes
	b.SetBytes(total)
	b.ReportAllocs()
	calls := 0
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := s.VerifyProgress(ctx, false, func(int, int) { calls++ }); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	if calls != b.N*(rep.Blobs+1) {
		b.Fatalf("%d progress calls, want %d", calls, b.N*(rep.Blobs+1))
	}
}
