package catalog

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"math/rand/v2"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	sqlite "modernc.org/sqlite"
	sqlite3 "modernc.org/sqlite/lib"
)

// Layout names inside a catalog folder.
const (
	formatFile  = "FORMAT"   // marker: what the folder is and its layout version
	indexFile   = "index.db" // the SQLite index (plus index.db-wal, index.db-shm)
	blobsDir    = "blobs"    // blobs/ab/cdef… content-addressed files
	tmpDir      = "tmp"      // temp files of filings in progress
	formatMagic = "scanfold catalog"
	// LayoutVersion is the version of the folder layout this build
	// writes and reads (the FORMAT file's second line).
	LayoutVersion = 1
)

// Store is an open catalog. Its methods are safe for concurrent use by
// several goroutines, and several processes may open the same folder at
// once.
type Store struct {
	dir  string
	db   *sql.DB
	opts Options
	host string
	pid  int
}

// Dir returns the catalog folder (absolute).
func (s *Store) Dir() string { return s.dir }

// Open opens the catalog in folder dir, creating it when it is missing
// (unless opts.NoCreate) or an empty folder. A file, or a non-empty
// folder without a catalog's FORMAT marker, is refused with
// ErrNotCatalog, so that a mistyped path never scatters files into
// someone else's folder. Open migrates an older index schema to the
// current one and refuses a newer one with ErrUnsupported.
func Open(dir string, opts Options) (*Store, error) {
	opts = opts.withDefaults()
	abs, err := filepath.Abs(dir)
	if err != nil {
		return nil, fmt.Errorf("catalog: folder %q: %w", dir, err)
	}
	if err := prepareFolder(abs, opts.NoCreate); err != nil {
		return nil, err
	}
	for _, sub := range []string{blobsDir, tmpDir} {
		p := filepath.Join(abs, sub)
		if err := os.Mkdir(p, 0o755); err == nil {
			if err := syncDir(abs); err != nil {
				return nil, fmt.Errorf("catalog: sync folder %s: %w", abs, err)
			}
		} else if !errors.Is(err, fs.ErrExist) {
			return nil, fmt.Errorf("catalog: create %s: %w", p, err)
		} else if st, err := os.Stat(p); err != nil || !st.IsDir() {
			return nil, fmt.Errorf("%w: %s is not a folder", ErrNotCatalog, p)
		}
	}
	host, _ := os.Hostname()
	s := &Store{dir: abs, opts: opts, host: host, pid: os.Getpid()}
	db, err := sql.Open("sqlite", s.dsn())
	if err != nil {
		return nil, fmt.Errorf("catalog: open index %s: %w", s.indexPath(), err)
	}
	s.db = db
	if err := s.migrate(context.Background()); err != nil {
		db.Close()
		return nil, err
	}
	return s, nil
}

// Close closes the index. Blob readers already opened stay valid.
func (s *Store) Close() error {
	if err := s.db.Close(); err != nil {
		return fmt.Errorf("catalog: close index %s: %w", s.indexPath(), err)
	}
	return nil
}

func (s *Store) indexPath() string { return filepath.Join(s.dir, indexFile) }

// dsn builds the modernc.org/sqlite data source name: a file: URI (so
// that any character in the path is escaped) with the pragmas every
// connection needs. busy_timeout is applied first by the driver, then
// WAL journaling (readers never block the writer), synchronous=FULL (a
// commit is on disk when Commit returns: durable, not only consistent),
// foreign keys, and BEGIN IMMEDIATE for write transactions so that the
// busy handler, not a failed lock upgrade, settles contention.
func (s *Store) dsn() string {
	p := filepath.ToSlash(s.indexPath())
	if !strings.HasPrefix(p, "/") {
		p = "/" + p // Windows drive paths: file:///C:/…
	}
	u := url.URL{Scheme: "file", Path: p}
	q := url.Values{}
	q.Add("_pragma", "busy_timeout("+strconv.FormatInt(s.opts.BusyTimeout.Milliseconds(), 10)+")")
	q.Add("_pragma", "journal_mode(WAL)")
	q.Add("_pragma", "synchronous(FULL)")
	q.Add("_pragma", "foreign_keys(1)")
	q.Set("_txlock", "immediate")
	return u.String() + "?" + q.Encode()
}

// prepareFolder makes sure dir is a catalog folder, creating the
// marker in a missing or empty folder.
func prepareFolder(dir string, noCreate bool) error {
	st, err := os.Stat(dir)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		if noCreate {
			return fmt.Errorf("%w: catalog folder %s does not exist", ErrNotFound, dir)
		}
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return fmt.Errorf("catalog: create folder %s: %w", dir, err)
		}
		if err := syncDir(filepath.Dir(dir)); err != nil {
			return fmt.Errorf("catalog: sync folder %s: %w", filepath.Dir(dir), err)
		}
	case err != nil:
		return fmt.Errorf("catalog: folder %s: %w", dir, err)
	case !st.IsDir():
		return fmt.Errorf("%w: %s is a file, not a folder", ErrNotCatalog, dir)
	}
	marker := filepath.Join(dir, formatFile)
	data, err := os.ReadFile(marker)
	if err == nil {
		return checkFormat(marker, data)
	}
	if !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("catalog: read %s: %w", marker, err)
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return fmt.Errorf("catalog: read folder %s: %w", dir, err)
	}
	for _, e := range entries {
		// Another process creating the same catalog at this moment
		// leaves only its marker temp file.
		if !(strings.HasPrefix(e.Name(), "."+formatFile+".") && strings.HasSuffix(e.Name(), ".tmp")) {
			return fmt.Errorf("%w: %s is not empty and has no %s marker (found %q); give an empty or new folder",
				ErrNotCatalog, dir, formatFile, e.Name())
		}
	}
	if noCreate {
		return fmt.Errorf("%w: %s is an empty folder, not a catalog", ErrNotFound, dir)
	}
	content := fmt.Sprintf("%s\nlayout %d\n", formatMagic, LayoutVersion)
	tmp := filepath.Join(dir, fmt.Sprintf(".%s.%d.%d.tmp", formatFile, os.Getpid(), rand.Uint64()))
	if err := writeFileSync(tmp, []byte(content)); err != nil {
		return fmt.Errorf("catalog: write %s: %w", tmp, err)
	}
	if err := os.Rename(tmp, marker); err != nil {
		os.Remove(tmp)
		return fmt.Errorf("catalog: create %s: %w", marker, err)
	}
	if err := syncDir(dir); err != nil {
		return fmt.Errorf("catalog: sync folder %s: %w", dir, err)
	}
	return nil
}

func checkFormat(marker string, data []byte) error {
	lines := strings.Split(string(data), "\n")
	if len(lines) < 2 || lines[0] != formatMagic || !strings.HasPrefix(lines[1], "layout ") {
		return fmt.Errorf("%w: %s does not start with %q and a layout line", ErrNotCatalog, marker, formatMagic)
	}
	v, err := strconv.Atoi(strings.TrimPrefix(lines[1], "layout "))
	if err != nil || v < 1 {
		return fmt.Errorf("%w: %s: bad layout line %q", ErrNotCatalog, marker, lines[1])
	}
	if v > LayoutVersion {
		return fmt.Errorf("%w: %s: layout %d, this build reads up to %d; use a newer scanfold",
			ErrUnsupported, marker, v, LayoutVersion)
	}
	return nil
}

func writeFileSync(path string, data []byte) error {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		return err
	}
	if _, err := f.Write(data); err != nil {
		f.Close()
		os.Remove(path)
		return err
	}
	if err := f.Sync(); err != nil {
		f.Close()
		os.Remove(path)
		return err
	}
	if err := f.Close(); err != nil {
		os.Remove(path)
		return err
	}
	return nil
}

// isBusy reports whether err is SQLite's SQLITE_BUSY or SQLITE_LOCKED
// (any extended code): another connection holds the lock.
func isBusy(err error) bool {
	var se *sqlite.Error
	if errors.As(err, &se) {
		c := se.Code() & 0xff
		return c == sqlite3.SQLITE_BUSY || c == sqlite3.SQLITE_LOCKED
	}
	return false
}

// isCorrupt reports whether err is SQLite's SQLITE_CORRUPT or
// SQLITE_NOTADB.
func isCorrupt(err error) bool {
	var se *sqlite.Error
	if errors.As(err, &se) {
		c := se.Code() & 0xff
		return c == sqlite3.SQLITE_CORRUPT || c == sqlite3.SQLITE_NOTADB
	}
	return false
}

// dbErr wraps an SQLite error with what was being done and, for a
// damaged index file, ErrCorrupt.
func (s *Store) dbErr(what string, err error) error {
	if err == nil {
		return nil
	}
	if isCorrupt(err) {
		return fmt.Errorf("%w: %s: index %s: %v", ErrCorrupt, what, s.indexPath(), err)
	}
	return fmt.Errorf("catalog: %s: index %s: %w", what, s.indexPath(), err)
}

// write runs fn inside one BEGIN IMMEDIATE transaction and commits it,
// retrying the whole transaction (up to opts.Retries times, with a
// randomised back-off) when SQLite reports the database busy after the
// busy timeout. fn must have no effects outside the transaction that a
// retry would repeat harmfully.
func (s *Store) write(ctx context.Context, what string, fn func(*sql.Tx) error) error {
	for attempt := 0; ; attempt++ {
		err := s.writeOnce(ctx, fn)
		if err == nil {
			return nil
		}
		if !isBusy(err) || attempt >= s.opts.Retries {
			return s.wrapTxErr(what, err)
		}
		backoff := time.Duration(10+rand.IntN(40<<attempt)) * time.Millisecond
		t := time.NewTimer(backoff)
		select {
		case <-ctx.Done():
			t.Stop()
			return fmt.Errorf("catalog: %s: %w", what, ctx.Err())
		case <-t.C:
		}
	}
}

func (s *Store) writeOnce(ctx context.Context, fn func(*sql.Tx) error) error {
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return err
	}
	if err := fn(tx); err != nil {
		tx.Rollback()
		return err
	}
	return tx.Commit()
}

// read runs fn inside one read-only (deferred) transaction, so that it
// sees one consistent snapshot of the index.
func (s *Store) read(ctx context.Context, what string, fn func(*sql.Tx) error) error {
	tx, err := s.db.BeginTx(ctx, &sql.TxOptions{ReadOnly: true})
	if err != nil {
		return s.wrapTxErr(what, err)
	}
	defer tx.Rollback()
	if err := fn(tx); err != nil {
		return s.wrapTxErr(what, err)
	}
	return nil
}

// wrapTxErr gives an error out of a transaction the package prefix and
// the action, unless the package already wrote it.
func (s *Store) wrapTxErr(what string, err error) error {
	var se *sqlite.Error
	switch {
	case errors.As(err, &se):
		return s.dbErr(what, err)
	case strings.HasPrefix(err.Error(), "catalog: "):
		return err
	}
	return fmt.Errorf("catalog: %s: %w", what, err)
}
