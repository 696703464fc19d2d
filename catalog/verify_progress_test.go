package catalog

import (
	"context"
	"errors"
	"testing"
)

// TestVerifyProgress checks that VerifyProgress reports every blob file
// once, in order, with a fixed total that matches the files it hashed,
// and that a cancellation from inside the callback stops the check
// before the next file.
func TestVerifyProgress(t *testing.T) {
	s := openTest(t)
	ctx := context.Background()
	for i, part := range []string{"nut", "valve"} {
		if _, err := s.File(ctx, testFiling(part, uint64(i+1))); err != nil {
			t.Fatal(err)
		}
	}
	var calls [][2]int
	rep, err := s.VerifyProgress(ctx, false, func(done, total int) { calls = append(calls, [2]int{done, total}) })
	if err != nil || !rep.Clean() {
		t.Fatalf("VerifyProgress: %+v, %v", rep, err)
	}
	// 2 filings × 5 roles, the picture shared: 9 files (as in
	// TestVerifyDamagedBlob), so 0..9 reported.
	if len(calls) != rep.Blobs+1 || rep.Blobs != 9 {
		t.Fatalf("%d progress calls for %d blobs: %v", len(calls), rep.Blobs, calls)
	}
	for i, c := range calls {
		if c != [2]int{i, rep.Blobs} {
			t.Errorf("call %d: progress(%d, %d), want (%d, %d)", i, c[0], c[1], i, rep.Blobs)
		}
	}

	cctx, cancel := context.WithCancel(ctx)
	defer cancel()
	rep, err = s.VerifyProgress(cctx, true, func(done, total int) {
		if done == 3 {
			cancel()
		}
	})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled VerifyProgress: %v", err)
	}
	if rep.Blobs != 3 {
		t.Errorf("cancelled after 3 files, hashed %d", rep.Blobs)
	}
	// Nil progress is allowed and is VerifyContext.
	if rep, err := s.VerifyProgress(ctx, false, nil); err != nil || rep.Blobs != 9 {
		t.Errorf("nil progress: %d blobs, %v", rep.Blobs, err)
	}
}
