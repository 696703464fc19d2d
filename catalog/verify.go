package catalog

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"
)

// BlobIssue is one blob file that Verify found wrong.
type BlobIssue struct {
	SHA256 string
	Path   string
	// Size on disk; -1 when the file is absent.
	Size int64
	// Detail says what is wrong, in words.
	Detail string
	// Users are the references "part@rev:role" that point at the blob.
	Users []string
}

// VerifyReport is what Verify found (and, with repair, removed).
type VerifyReport struct {
	Revisions int   // revisions in the index
	Blobs     int   // blob files hashed
	Bytes     int64 // bytes hashed

	// Index problems reported by SQLite's PRAGMA quick_check, or rows
	// the package cannot read.
	IndexProblems []string
	// Missing: blobs a revision references whose file is absent.
	Missing []BlobIssue
	// Damaged: blob files whose size or SHA-256 differs from their
	// reference (or, for unreferenced files, from their name).
	Damaged []BlobIssue
	// BadRevisions lists "part@rev" of every revision that cannot be
	// exported intact: a missing or damaged blob, or unreadable
	// metadata. Verify never deletes them, with or without repair;
	// remove or re-file them deliberately.
	BadRevisions []string
	// Orphans: blob files that no revision references and no filing in
	// progress announced: left by a crash or an interrupted removal.
	Orphans []BlobIssue
	// StaleTemp: temp files of filings whose process is gone, or older
	// than Options.StaleAfter.
	StaleTemp []string
	// StalePending counts announcements of filings whose process is
	// gone, or older than Options.StaleAfter.
	StalePending int
	// Strays: files under blobs/ whose names are not blob names.
	// Verify reports them and never deletes them.
	Strays []string
	// InFlight counts blob and temp files that a live filing protects.
	InFlight int
	// Removed lists the files that repair deleted.
	Removed []string
}

// Healthy reports whether every revision can be read and exported
// intact: no index problem, no missing or damaged blob, no bad
// revision.
func (r *VerifyReport) Healthy() bool {
	return len(r.IndexProblems) == 0 && len(r.Missing) == 0 && len(r.Damaged) == 0 && len(r.BadRevisions) == 0
}

// Clean reports whether the report is Healthy and has nothing left for
// a repair to tidy (no orphans, stale temp files or records, strays).
func (r *VerifyReport) Clean() bool {
	return r.Healthy() && len(r.Orphans) == 0 && len(r.StaleTemp) == 0 && r.StalePending == 0 && len(r.Strays) == 0
}

// Verify checks the whole catalog: SQLite's quick_check of the index,
// every revision's metadata, and every blob file re-hashed with
// SHA-256. It reports missing, damaged and orphan blobs, stale temp
// files and stray files. With repair it deletes orphan blobs, stale
// temp files and stale announcements; it never deletes a revision or a
// damaged blob, and reports the revisions that damage affects.
func (s *Store) Verify(repair bool) (VerifyReport, error) {
	return s.VerifyContext(context.Background(), repair)
}

type blobUse struct {
	size  int64
	users []string
}

// VerifyContext is Verify with a context, checked between files.
func (s *Store) VerifyContext(ctx context.Context, repair bool) (VerifyReport, error) {
	return s.VerifyProgress(ctx, repair, nil)
}

// VerifyProgress is VerifyContext that also reports its progress
// through the blob files: progress(done, total) is called before each
// file is hashed and once more when all are (done == total); total is
// the number of blob-named files under blobs/ when the check listed
// them. A nil progress reports nothing. progress runs on the caller's
// goroutine and must not call the Store.
func (s *Store) VerifyProgress(ctx context.Context, repair bool, progress func(done, total int)) (VerifyReport, error) {
	if progress == nil {
		progress = func(int, int) {}
	}
	var rep VerifyReport
	now := time.Now()

	// 1. The index itself.
	rows, err := s.db.QueryContext(ctx, `PRAGMA quick_check`)
	if err != nil {
		return rep, s.dbErr("quick_check", err)
	}
	for rows.Next() {
		var line string
		if err := rows.Scan(&line); err != nil {
			rows.Close()
			return rep, s.dbErr("quick_check", err)
		}
		if line != "ok" {
			rep.IndexProblems = append(rep.IndexProblems, line)
		}
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return rep, s.dbErr("quick_check", err)
	}

	// 2. One snapshot of revisions and their blob references.
	used := map[string]*blobUse{}
	bad := map[string]bool{}
	refOf := map[int64]string{}
	err = s.read(ctx, "verify: read revisions", func(tx *sql.Tx) error {
		rows, err := tx.QueryContext(ctx, `SELECT r.id, p.name, r.rev, r.meta FROM revisions r JOIN parts p ON p.id = r.part_id`)
		if err != nil {
			return err
		}
		defer rows.Close()
		for rows.Next() {
			var id int64
			var name, meta string
			var rev int
			if err := rows.Scan(&id, &name, &rev, &meta); err != nil {
				return err
			}
			rep.Revisions++
			ref := FormatRef(name, rev)
			refOf[id] = ref
			var m Metadata
			if err := json.Unmarshal([]byte(meta), &m); err != nil || !m.Verdict.Valid() {
				rep.IndexProblems = append(rep.IndexProblems, fmt.Sprintf("%s: unreadable metadata", ref))
				bad[ref] = true
			}
		}
		if err := rows.Err(); err != nil {
			return err
		}
		rows.Close()
		brows, err := tx.QueryContext(ctx, `SELECT revision_id, role, sha256, size FROM revision_blobs`)
		if err != nil {
			return err
		}
		defer brows.Close()
		withBlobs := map[int64]bool{}
		for brows.Next() {
			var id, size int64
			var role, sha string
			if err := brows.Scan(&id, &role, &sha, &size); err != nil {
				return err
			}
			withBlobs[id] = true
			ref, ok := refOf[id]
			if !ok {
				rep.IndexProblems = append(rep.IndexProblems, fmt.Sprintf("blob %q role %q belongs to no revision", sha, role))
				continue
			}
			if !validSHA(sha) {
				rep.IndexProblems = append(rep.IndexProblems, fmt.Sprintf("%s: role %q has a malformed sha256 %q", ref, role, sha))
				bad[ref] = true
				continue
			}
			u := used[sha]
			if u == nil {
				u = &blobUse{size: size}
				used[sha] = u
			} else if u.size != size {
				rep.IndexProblems = append(rep.IndexProblems, fmt.Sprintf("%s: role %q: blob %s recorded as %d bytes elsewhere as %d", ref, role, sha, size, u.size))
				bad[ref] = true
			}
			u.users = append(u.users, ref+":"+role)
		}
		if err := brows.Err(); err != nil {
			return err
		}
		for id, ref := range refOf {
			if !withBlobs[id] {
				rep.IndexProblems = append(rep.IndexProblems, fmt.Sprintf("%s has no blobs", ref))
				bad[ref] = true
			}
		}
		return nil
	})
	if err != nil {
		return rep, err
	}

	// 3. Every file under blobs/.
	onDisk := map[string]bool{}
	var orphanCandidates []BlobIssue
	root := filepath.Join(s.dir, blobsDir)
	subs, err := os.ReadDir(root)
	if err != nil {
		return rep, fmt.Errorf("catalog: verify: read %s: %w", root, err)
	}
	// List every blob file first, so that progress knows the total.
	type blobFile struct{ sha, path string }
	var blobFiles []blobFile
	for _, sub := range subs {
		subPath := filepath.Join(root, sub.Name())
		if !sub.IsDir() || len(sub.Name()) != 2 || !validSHA(sub.Name()+strings.Repeat("0", 62)) {
			rep.Strays = append(rep.Strays, subPath)
			continue
		}
		files, err := os.ReadDir(subPath)
		if err != nil {
			return rep, fmt.Errorf("catalog: verify: read %s: %w", subPath, err)
		}
		for _, f := range files {
			path := filepath.Join(subPath, f.Name())
			sha := sub.Name() + f.Name()
			if !f.Type().IsRegular() || !validSHA(sha) {
				rep.Strays = append(rep.Strays, path)
				continue
			}
			blobFiles = append(blobFiles, blobFile{sha, path})
		}
	}
	for i, bf := range blobFiles {
		progress(i, len(blobFiles))
		if err := ctx.Err(); err != nil {
			return rep, fmt.Errorf("catalog: verify: %w", err)
		}
		sha, path := bf.sha, bf.path
		onDisk[sha] = true
		sum, size, err := hashFile(ctx, path)
		if err != nil {
			if ctx.Err() != nil {
				return rep, fmt.Errorf("catalog: verify: %w", ctx.Err())
			}
			if errors.Is(err, fs.ErrNotExist) { // removed meanwhile
				delete(onDisk, sha)
				continue
			}
			return rep, fmt.Errorf("catalog: verify: blob %s: read %s: %w", sha, path, err)
		}
		rep.Blobs++
		rep.Bytes += size
		u := used[sha]
		if u == nil {
			issue := BlobIssue{SHA256: sha, Path: path, Size: size, Detail: "no revision references it"}
			if sum != sha {
				issue.Detail += fmt.Sprintf("; its content hashes to %s", sum)
			}
			orphanCandidates = append(orphanCandidates, issue)
			continue
		}
		var detail string
		switch {
		case size != u.size:
			detail = fmt.Sprintf("%d bytes, want %d", size, u.size)
		case sum != sha:
			detail = fmt.Sprintf("content hashes to %s", sum)
		}
		if detail != "" {
			rep.Damaged = append(rep.Damaged, BlobIssue{SHA256: sha, Path: path, Size: size, Detail: detail, Users: u.users})
			for _, user := range u.users {
				bad[user[:strings.LastIndexByte(user, ':')]] = true
			}
		}
	}
	progress(len(blobFiles), len(blobFiles))
	for sha, u := range used {
		if !onDisk[sha] {
			// A removal since the snapshot may have collected it.
			var referenced bool
			if err := s.db.QueryRowContext(ctx, `SELECT EXISTS (SELECT 1 FROM revision_blobs WHERE sha256 = ?)`, sha).Scan(&referenced); err != nil {
				return rep, s.dbErr("verify: re-check missing "+sha, err)
			}
			if !referenced {
				continue
			}
			rep.Missing = append(rep.Missing, BlobIssue{SHA256: sha, Path: s.BlobPath(sha), Size: -1, Detail: "file is absent", Users: u.users})
			for _, user := range u.users {
				bad[user[:strings.LastIndexByte(user, ':')]] = true
			}
		}
	}

	// 4. Announcements of filings in progress, and temp files.
	livePending := map[string]bool{}
	var stalePending []string // filing ids
	err = s.read(ctx, "verify: read pending blobs", func(tx *sql.Tx) error {
		rows, err := tx.QueryContext(ctx, `SELECT filing, sha256, pid, host, started_ns FROM pending_blobs`)
		if err != nil {
			return err
		}
		defer rows.Close()
		staleSeen := map[string]bool{}
		for rows.Next() {
			var filing, sha, host string
			var pid int
			var started int64
			if err := rows.Scan(&filing, &sha, &pid, &host, &started); err != nil {
				return err
			}
			if s.stale(pid, host, time.Unix(0, started), now) {
				if !staleSeen[filing] {
					staleSeen[filing] = true
					stalePending = append(stalePending, filing)
				}
				rep.StalePending++
			} else {
				livePending[sha] = true
			}
		}
		return rows.Err()
	})
	if err != nil {
		return rep, err
	}
	// Blob temp files are tmp/PID.RANDOM.tmp; a marker temp file left by
	// a crash while creating the catalog is .FORMAT.PID.RANDOM.tmp in the
	// folder itself.
	tmpRoot := filepath.Join(s.dir, tmpDir)
	tmps, err := os.ReadDir(tmpRoot)
	if err != nil {
		return rep, fmt.Errorf("catalog: verify: read %s: %w", tmpRoot, err)
	}
	roots, err := os.ReadDir(s.dir)
	if err != nil {
		return rep, fmt.Errorf("catalog: verify: read %s: %w", s.dir, err)
	}
	type tempFile struct {
		dir, name, pidText string
		e                  fs.DirEntry
	}
	var temps []tempFile
	for _, t := range tmps {
		p, _, _ := strings.Cut(t.Name(), ".")
		temps = append(temps, tempFile{tmpRoot, t.Name(), p, t})
	}
	for _, t := range roots {
		if rest, ok := strings.CutPrefix(t.Name(), "."+formatFile+"."); ok && strings.HasSuffix(rest, ".tmp") {
			p, _, _ := strings.Cut(rest, ".")
			temps = append(temps, tempFile{s.dir, t.Name(), p, t})
		}
	}
	for _, t := range temps {
		path := filepath.Join(t.dir, t.name)
		info, err := t.e.Info()
		if err != nil {
			continue // removed meanwhile
		}
		pid, err := strconv.Atoi(t.pidText)
		if err != nil || pid <= 0 || s.stale(pid, s.host, info.ModTime(), now) {
			rep.StaleTemp = append(rep.StaleTemp, path)
		} else {
			rep.InFlight++
		}
	}

	// 5. Orphans: unreferenced blobs that no live filing protects, checked
	// again against the index as it is now (a filing may have committed
	// since the snapshot).
	for _, o := range orphanCandidates {
		if livePending[o.SHA256] {
			rep.InFlight++
			continue
		}
		var referenced bool
		if err := s.db.QueryRowContext(ctx, `SELECT EXISTS (SELECT 1 FROM revision_blobs WHERE sha256 = ?)`, o.SHA256).Scan(&referenced); err != nil {
			return rep, s.dbErr("verify: re-check orphan "+o.SHA256, err)
		}
		if !referenced {
			rep.Orphans = append(rep.Orphans, o)
		}
	}

	for ref := range bad {
		rep.BadRevisions = append(rep.BadRevisions, ref)
	}
	sort.Strings(rep.BadRevisions)
	sort.Slice(rep.Missing, func(i, j int) bool { return rep.Missing[i].SHA256 < rep.Missing[j].SHA256 })
	sort.Slice(rep.Damaged, func(i, j int) bool { return rep.Damaged[i].SHA256 < rep.Damaged[j].SHA256 })
	sort.Slice(rep.Orphans, func(i, j int) bool { return rep.Orphans[i].SHA256 < rep.Orphans[j].SHA256 })
	sort.Strings(rep.StaleTemp)
	sort.Strings(rep.Strays)

	if !repair {
		return rep, nil
	}

	// 6. Repair: stale announcements and orphans inside one write
	// transaction (collect re-checks each orphan under the lock), then
	// stale temp files.
	orphans := make([]string, len(rep.Orphans))
	for i, o := range rep.Orphans {
		orphans[i] = o.SHA256
	}
	err = s.write(ctx, "verify: repair", func(tx *sql.Tx) error {
		for _, filing := range stalePending {
			if _, err := tx.ExecContext(ctx, `DELETE FROM pending_blobs WHERE filing = ?`, filing); err != nil {
				return err
			}
		}
		removed, err := s.collect(ctx, tx, orphans)
		rep.Removed = append(rep.Removed[:0], removed...)
		return err
	})
	if err != nil {
		return rep, err
	}
	for _, path := range rep.StaleTemp {
		if err := os.Remove(path); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return rep, fmt.Errorf("catalog: verify: delete temp file %s: %w", path, err)
		}
		rep.Removed = append(rep.Removed, path)
	}
	return rep, nil
}

// stale reports whether a temp file or announcement made by process pid
// on host at time t belongs to a filing that can no longer finish: the
// process is gone (checked only on this host), or it is older than
// Options.StaleAfter.
func (s *Store) stale(pid int, host string, t, now time.Time) bool {
	if now.Sub(t) > s.opts.StaleAfter {
		return true
	}
	if host == s.host && pid != s.pid && !processAlive(pid) {
		return true
	}
	return false
}
