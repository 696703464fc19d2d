package catalog

import (
	"context"
	"errors"
	"fmt"
	"path/filepath"
	"sync"
	"testing"
)

// Filing, removing and repairing at once, through two Store values on
// one folder (two connection pools, as two processes would have), with
// identical content so that every filing reuses blob files that a
// removal or a repair is trying to delete. Afterwards every revision
// must be intact: the announcement protocol keeps collection from
// deleting a blob that a filing is about to reference.
func TestFileRemoveRepairRace(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "cat")
	s1, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s1.Close()
	s2, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	ctx := context.Background()
	rounds := 20
	if testing.Short() {
		rounds = 8
	}
	var filers, others sync.WaitGroup
	done := make(chan struct{})
	errs := make(chan error, 8)
	for _, s := range []*Store{s1, s2} {
		filers.Add(1)
		go func(s *Store) {
			defer filers.Done()
			for i := 0; i < rounds; i++ {
				if _, err := s.File(ctx, testFiling("a", 1)); err != nil {
					errs <- err
					return
				}
			}
		}(s)
	}
	removed, repairs := 0, 0
	others.Add(1)
	go func() { // remove the oldest revision, over and over, until the filers stop
		defer others.Done()
		for {
			select {
			case <-done:
				return
			default:
			}
			revs, err := s1.Revisions("a")
			if errors.Is(err, ErrNotFound) {
				continue
			}
			if err != nil {
				errs <- err
				return
			}
			if err := s1.Remove("a", revs[0]); err != nil {
				errs <- err
				return
			}
			removed++
		}
	}()
	others.Add(1)
	go func() { // repair at the same time
		defer others.Done()
		for {
			select {
			case <-done:
				return
			default:
			}
			rep, err := s2.Verify(true)
			if err != nil {
				errs <- err
				return
			}
			if !rep.Healthy() {
				errs <- fmt.Errorf("unhealthy during the race: %+v", rep)
				return
			}
			repairs++
		}
	}()
	filers.Wait()
	close(done)
	others.Wait()
	close(errs)
	for err := range errs {
		t.Fatal(err)
	}
	rep, err := s1.Verify(false)
	if err != nil || !rep.Clean() {
		t.Fatalf("after the race: %+v, %v", rep, err)
	}
	revs, _ := s1.Revisions("a")
	for _, n := range revs {
		r, err := s1.Show("a", n)
		if err != nil {
			t.Fatal(err)
		}
		for role, ref := range r.Blobs {
			if err := checkBlobFile(s1.BlobPath(ref.SHA256), ref); err != nil {
				t.Errorf("a@%d role %s: %v", n, role, err)
			}
		}
	}
	if len(revs)+removed != 2*rounds {
		t.Errorf("%d revisions left + %d removed != %d filed", len(revs), removed, 2*rounds)
	}
	t.Logf("%d filed, %d removed, %d repairs ran meanwhile", 2*rounds, removed, repairs)
}
