package catalog

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"io"
	"os"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"sync/atomic"
	"testing"
	"time"
)

// flipByte flips one bit pattern of byte i of a file (the blob files are
// read-only; the test makes this one writable first).
func flipByte(t *testing.T, path string, i int64) {
	t.Helper()
	os.Chmod(path, 0o644)
	f, err := os.OpenFile(path, os.O_RDWR, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	b := make([]byte, 1)
	if _, err := f.ReadAt(b, i); err != nil {
		t.Fatal(err)
	}
	b[0] ^= 0x5a
	if _, err := f.WriteAt(b, i); err != nil {
		t.Fatal(err)
	}
}

func TestVerifyDamagedBlob(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	r1, err := s.File(ctx, testFiling("nut", 1))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.File(ctx, testFiling("valve", 2)); err != nil {
		t.Fatal(err)
	}
	rep, err := s.Verify(false)
	if err != nil || !rep.Clean() {
		t.Fatalf("Verify before damage: %+v, %v", rep, err)
	}
	if rep.Revisions != 2 || rep.Blobs != 9 { // 2 × 5 roles, the picture shared
		t.Errorf("Verify counted %d revisions, %d blobs; want 2, 9", rep.Revisions, rep.Blobs)
	}

	mesh := r1.Blobs[RoleMesh]
	path := s.BlobPath(mesh.SHA256)
	flipByte(t, path, 1234)

	// Verify finds it, names the blob and the revision using it.
	rep, err = s.Verify(true)
	if err != nil {
		t.Fatal(err)
	}
	if rep.Healthy() || len(rep.Damaged) != 1 || rep.Damaged[0].SHA256 != mesh.SHA256 {
		t.Fatalf("Verify after a flipped byte: %+v", rep)
	}
	if !reflect.DeepEqual(rep.Damaged[0].Users, []string{"nut@1:mesh"}) || !reflect.DeepEqual(rep.BadRevisions, []string{"nut@1"}) {
		t.Errorf("damaged users %v, bad revisions %v; want nut@1:mesh, nut@1", rep.Damaged[0].Users, rep.BadRevisions)
	}
	// The damaged content hashes to what crypto/sha256 says it does.
	data, _ := os.ReadFile(path)
	sum := sha256.Sum256(data)
	if !strings.Contains(rep.Damaged[0].Detail, hex.EncodeToString(sum[:])) {
		t.Errorf("detail %q does not give the actual hash %x", rep.Damaged[0].Detail, sum)
	}
	// Repair never deletes the damaged file or its revision.
	if _, err := os.Stat(path); err != nil {
		t.Errorf("repair deleted the damaged blob: %v", err)
	}
	if _, err := s.Show("nut", 1); err != nil {
		t.Errorf("repair removed the damaged revision: %v", err)
	}

	// Reading it through OpenBlob fails at the end with ErrDamaged.
	rc, err := s.OpenBlob(mesh)
	if err != nil {
		t.Fatal(err)
	}
	_, err = io.ReadAll(rc)
	rc.Close()
	if !errors.Is(err, ErrDamaged) || !strings.Contains(err.Error(), mesh.SHA256) {
		t.Errorf("reading a damaged blob: %v, want ErrDamaged naming the blob", err)
	}
	// Export refuses it and leaves no file under the blob's name.
	out := filepath.Join(t.TempDir(), "out")
	if _, err := s.Export("nut", 1, out); !errors.Is(err, ErrDamaged) {
		t.Errorf("Export of a damaged revision: %v, want ErrDamaged", err)
	}
	if _, err := os.Stat(filepath.Join(out, "mesh.ply")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("Export left mesh.ply from a damaged blob")
	}

	// Filing the same content again heals the blob file.
	if _, err := s.File(ctx, testFiling("nut", 1)); err != nil {
		t.Fatal(err)
	}
	rep, err = s.Verify(false)
	if err != nil || !rep.Clean() {
		t.Errorf("Verify after re-filing the same content: %+v, %v", rep, err)
	}

	// A truncated blob is damaged too; a deleted one is missing.
	os.Chmod(path, 0o644)
	os.Truncate(path, 10)
	cloud := r1.Blobs[RoleCloud]
	os.Remove(s.BlobPath(cloud.SHA256))
	rep, err = s.Verify(false)
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Damaged) != 1 || rep.Damaged[0].Size != 10 || len(rep.Missing) != 1 || rep.Missing[0].SHA256 != cloud.SHA256 {
		t.Errorf("truncated + deleted: damaged %+v, missing %+v", rep.Damaged, rep.Missing)
	}
	if _, err := s.OpenBlob(mesh); !errors.Is(err, ErrDamaged) {
		t.Errorf("OpenBlob(truncated) = %v, want ErrDamaged", err)
	}
	if _, err := s.OpenBlob(cloud); !errors.Is(err, ErrMissing) {
		t.Errorf("OpenBlob(deleted) = %v, want ErrMissing", err)
	}
	if _, err := s.OpenBlob(BlobRef{SHA256: "../../etc/passwd"}); !errors.Is(err, ErrBadName) {
		t.Errorf("OpenBlob(bad hash) = %v, want ErrBadName", err)
	}
}

func TestVerifyOrphansAndTempFiles(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	if _, err := s.File(ctx, testFiling("nut", 1)); err != nil {
		t.Fatal(err)
	}
	// An orphan: a correctly named blob file nothing references (as a
	// crash between blob writes and the commit leaves).
	content := []byte("orphan content")
	sum := sha256.Sum256(content)
	sha := hex.EncodeToString(sum[:])
	orphan := s.BlobPath(sha)
	os.MkdirAll(filepath.Dir(orphan), 0o755)
	os.WriteFile(orphan, content, 0o444)
	// A temp file of a dead process (pid 2³¹−2 does not exist here), and
	// one of this process (a filing in flight).
	deadTemp := filepath.Join(s.Dir(), "tmp", "2147483646.123.tmp")
	liveTemp := filepath.Join(s.Dir(), "tmp", strconv.Itoa(os.Getpid())+".456.tmp")
	os.WriteFile(deadTemp, []byte("x"), 0o600)
	deadMarker := filepath.Join(s.Dir(), ".FORMAT.2147483646.99.tmp")
	os.WriteFile(deadMarker, []byte("scanfold"), 0o600)
	os.WriteFile(liveTemp, []byte("y"), 0o600)
	// An announcement by a dead process.
	if _, err := s.db.Exec(`INSERT INTO pending_blobs VALUES ('f1', ?, 2147483646, ?, ?)`, sha, s.host, time.Now().UnixNano()); err != nil {
		t.Fatal(err)
	}
	// A stray file in the blob folder.
	stray := filepath.Join(s.Dir(), "blobs", "README")
	os.WriteFile(stray, []byte("hello"), 0o644)

	rep, err := s.Verify(false)
	if err != nil {
		t.Fatal(err)
	}
	if !rep.Healthy() || rep.Clean() {
		t.Errorf("Healthy %v Clean %v; want true, false", rep.Healthy(), rep.Clean())
	}
	if len(rep.Orphans) != 1 || rep.Orphans[0].SHA256 != sha {
		t.Errorf("orphans %+v, want %s", rep.Orphans, sha)
	}
	if !reflect.DeepEqual(rep.StaleTemp, []string{deadMarker, deadTemp}) || rep.InFlight != 1 || rep.StalePending != 1 {
		t.Errorf("stale temp %v, in flight %d, stale pending %d; want [%s %s], 1, 1", rep.StaleTemp, rep.InFlight, rep.StalePending, deadMarker, deadTemp)
	}
	if !reflect.DeepEqual(rep.Strays, []string{stray}) {
		t.Errorf("strays %v, want [%s]", rep.Strays, stray)
	}

	rep, err = s.Verify(true)
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Removed) != 3 {
		t.Errorf("repair removed %v, want the orphan and the two dead temp files", rep.Removed)
	}
	for _, p := range []string{orphan, deadTemp, deadMarker} {
		if _, err := os.Stat(p); !errors.Is(err, os.ErrNotExist) {
			t.Errorf("%s still present after repair", p)
		}
	}
	for _, p := range []string{liveTemp, stray} {
		if _, err := os.Stat(p); err != nil {
			t.Errorf("repair deleted %s: %v", p, err)
		}
	}
	os.Remove(liveTemp)
	os.Remove(stray)
	rep, err = s.Verify(false)
	if err != nil || !rep.Clean() {
		t.Errorf("after repair: %+v, %v", rep, err)
	}
	// Every revision still reads intact.
	r, err := s.Show("nut", 1)
	if err != nil {
		t.Fatal(err)
	}
	for role, ref := range r.Blobs {
		if err := checkBlobFile(s.BlobPath(ref.SHA256), ref); err != nil {
			t.Errorf("role %s: %v", role, err)
		}
	}
}

// A live announcement protects a blob from collection: the race that
// the pending table exists for.
func TestPendingProtectsBlob(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	f := testFiling("nut", 1)
	r, err := s.File(ctx, f)
	if err != nil {
		t.Fatal(err)
	}
	mesh := r.Blobs[RoleMesh].SHA256
	// Another filer (this process) announces the mesh blob…
	if _, err := s.db.Exec(`INSERT INTO pending_blobs VALUES ('f2', ?, ?, ?, ?)`, mesh, os.Getpid(), s.host, time.Now().UnixNano()); err != nil {
		t.Fatal(err)
	}
	// …so removing the only revision that references it keeps the file.
	if err := s.Remove("nut", 1); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(s.BlobPath(mesh)); err != nil {
		t.Fatalf("announced blob was collected: %v", err)
	}
	if _, err := os.Stat(s.BlobPath(r.Blobs[RoleCloud].SHA256)); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("unannounced blob survived removal")
	}
	rep, _ := s.Verify(true)
	if len(rep.Orphans) != 0 || rep.InFlight != 1 {
		t.Errorf("announced blob: orphans %v in flight %d; want none, 1", rep.Orphans, rep.InFlight)
	}
}

// cancelAfter is a context whose Err turns to Canceled after n calls:
// it cancels a filing deterministically at its n-th checkpoint.
type cancelAfter struct {
	context.Context
	n atomic.Int64
}

func (c *cancelAfter) Err() error {
	if c.n.Add(-1) < 0 {
		return context.Canceled
	}
	return nil
}

func (c *cancelAfter) Done() <-chan struct{} {
	if c.n.Load() < 0 {
		ch := make(chan struct{})
		close(ch)
		return ch
	}
	return nil
}

// Cancelling a filing at any of its checkpoints leaves the previous
// state: same revisions, no orphan, no temp file, no announcement.
func TestCancelAtEveryCheckpoint(t *testing.T) {
	s := openTest(t)
	if _, err := s.File(context.Background(), testFiling("nut", 1)); err != nil {
		t.Fatal(err)
	}
	want := []int{1}
	for n := int64(0); n < 200; n++ {
		ctx := &cancelAfter{Context: context.Background()}
		ctx.n.Store(n)
		r, err := s.File(ctx, testFiling("nut", uint64(100+n)))
		if err == nil {
			want = append(want, r.Number)
			if n < 10 {
				t.Fatalf("filing with cancellation after %d checks succeeded", n)
			}
			break // no checkpoint left to cancel at
		}
		if !errors.Is(err, context.Canceled) {
			t.Fatalf("cancel after %d checks: %v", n, err)
		}
		revs, _ := s.Revisions("nut")
		if !reflect.DeepEqual(revs, want) {
			t.Fatalf("cancel after %d checks: revisions %v, want %v", n, revs, want)
		}
		rep, err := s.Verify(false)
		if err != nil || !rep.Clean() || rep.InFlight != 0 {
			t.Fatalf("cancel after %d checks: %+v, %v", n, rep, err)
		}
	}
	if len(want) != 2 {
		t.Fatalf("no filing got through 200 checkpoints")
	}
}
