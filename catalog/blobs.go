package catalog

import (
	"bytes"
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
)

// copyChunk is the unit in which blobs are copied; cancellation is
// checked between chunks.
const copyChunk = 1 << 20

// chunkPool recycles copy buffers: filing and verifying copy many files.
var chunkPool = sync.Pool{New: func() any { b := make([]byte, copyChunk); return &b }}

// validSHA reports whether s is 64 lowercase hex digits.
func validSHA(s string) bool {
	if len(s) != sha256.Size*2 {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'f') {
			return false
		}
	}
	return true
}

// BlobPath returns the file that holds the blob with the given SHA-256
// (lowercase hex): DIR/blobs/ab/cdef… with the first two hex digits as
// the sub-folder and the other 62 as the file name. It returns "" for a
// malformed hash.
func (s *Store) BlobPath(sha string) string {
	if !validSHA(sha) {
		return ""
	}
	return filepath.Join(s.dir, blobsDir, sha[:2], sha[2:])
}

// syncDir fsyncs a folder so that a rename or create inside it is on
// disk (POSIX leaves directory entries to the directory's own fsync).
// Windows cannot open folders for syncing, and commits renames itself.
func syncDir(dir string) error {
	if runtime.GOOS == "windows" {
		return nil
	}
	f, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = f.Sync()
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return err
}

// staged is a blob written to a temp file, hashed and fsynced, not yet
// in its place.
type staged struct {
	role string
	ref  BlobRef
	tmp  string // "" once installed or discarded
}

// copyHashed copies r to w in chunks, hashing on the way and honouring
// ctx between chunks.
func copyHashed(ctx context.Context, w io.Writer, r io.Reader, h hash.Hash) (int64, error) {
	bp := chunkPool.Get().(*[]byte)
	defer chunkPool.Put(bp)
	buf := *bp
	var n int64
	for {
		if err := ctx.Err(); err != nil {
			return n, err
		}
		k, err := io.ReadFull(r, buf)
		if k > 0 {
			h.Write(buf[:k])
			if _, werr := w.Write(buf[:k]); werr != nil {
				return n, werr
			}
			n += int64(k)
		}
		if err == io.EOF || err == io.ErrUnexpectedEOF {
			return n, nil
		}
		if err != nil {
			return n, err
		}
	}
}

// stage writes one blob source into a temp file under tmp/, named after
// this process (so Verify can tell a live filing's file from a dead
// one's), hashing it on the way, and fsyncs it.
func (s *Store) stage(ctx context.Context, role string, src BlobSource) (st staged, err error) {
	var r io.Reader
	if src.Data != nil {
		r = bytes.NewReader(src.Data)
	} else {
		f, err := os.Open(src.Path)
		if err != nil {
			return st, fmt.Errorf("%w: role %q: open %s: %v", ErrBadFiling, role, src.Path, err)
		}
		defer f.Close()
		if fi, err := f.Stat(); err != nil || !fi.Mode().IsRegular() {
			return st, fmt.Errorf("%w: role %q: %s is not a regular file", ErrBadFiling, role, src.Path)
		}
		r = f
	}
	tmp, err := os.CreateTemp(filepath.Join(s.dir, tmpDir), fmt.Sprintf("%d.*.tmp", s.pid))
	if err != nil {
		return st, fmt.Errorf("catalog: role %q: create temp file in %s: %w", role, filepath.Join(s.dir, tmpDir), err)
	}
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
		}
	}()
	h := sha256.New()
	n, err := copyHashed(ctx, tmp, r, h)
	if err != nil {
		if ctx.Err() != nil {
			return st, fmt.Errorf("catalog: role %q: %w", role, err)
		}
		return st, fmt.Errorf("catalog: role %q: copy into %s: %w", role, tmp.Name(), err)
	}
	if err := tmp.Chmod(0o444); err != nil {
		return st, fmt.Errorf("catalog: role %q: %s: %w", role, tmp.Name(), err)
	}
	if err := tmp.Sync(); err != nil {
		return st, fmt.Errorf("catalog: role %q: fsync %s: %w", role, tmp.Name(), err)
	}
	if err := tmp.Close(); err != nil {
		return st, fmt.Errorf("catalog: role %q: close %s: %w", role, tmp.Name(), err)
	}
	return staged{
		role: role,
		ref:  BlobRef{SHA256: hex.EncodeToString(h.Sum(nil)), Size: n, MediaType: src.MediaType},
		tmp:  tmp.Name(),
	}, nil
}

// install moves a staged blob into its content-addressed place, unless
// an intact copy is there already. A damaged copy is replaced (the new
// content is, by its hash, what the name promises). The caller must
// have registered the hash in pending_blobs first, so that no
// collection deletes the file between install and commit.
func (s *Store) install(st *staged) error {
	final := s.BlobPath(st.ref.SHA256)
	if err := checkBlobFile(final, st.ref); err == nil {
		os.Remove(st.tmp)
		st.tmp = ""
		return nil
	}
	sub := filepath.Dir(final)
	if err := os.Mkdir(sub, 0o755); err == nil {
		if err := syncDir(filepath.Dir(sub)); err != nil {
			return fmt.Errorf("catalog: blob %s: sync %s: %w", st.ref.SHA256, filepath.Dir(sub), err)
		}
	} else if !errors.Is(err, fs.ErrExist) {
		return fmt.Errorf("catalog: blob %s: create %s: %w", st.ref.SHA256, sub, err)
	}
	if err := os.Rename(st.tmp, final); err != nil {
		return fmt.Errorf("catalog: blob %s: move %s to %s: %w", st.ref.SHA256, st.tmp, final, err)
	}
	st.tmp = ""
	if err := syncDir(sub); err != nil {
		return fmt.Errorf("catalog: blob %s: sync %s: %w", st.ref.SHA256, sub, err)
	}
	return nil
}

// checkBlobFile re-hashes the file at path against ref: nil when it is
// intact, an error wrapping ErrMissing or ErrDamaged otherwise.
func checkBlobFile(path string, ref BlobRef) error {
	if fi, err := os.Stat(path); err == nil && fi.Size() != ref.Size {
		return fmt.Errorf("%w: blob %s: file %s has %d bytes, want %d", ErrDamaged, ref.SHA256, path, fi.Size(), ref.Size)
	}
	sum, size, err := hashFile(context.Background(), path)
	if errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("%w: blob %s: file %s is absent", ErrMissing, ref.SHA256, path)
	}
	if err != nil {
		return fmt.Errorf("catalog: blob %s: read %s: %w", ref.SHA256, path, err)
	}
	if size != ref.Size {
		return fmt.Errorf("%w: blob %s: file %s has %d bytes, want %d", ErrDamaged, ref.SHA256, path, size, ref.Size)
	}
	if sum != ref.SHA256 {
		return fmt.Errorf("%w: blob %s: file %s hashes to %s", ErrDamaged, ref.SHA256, path, sum)
	}
	return nil
}

// hashFile returns the lowercase hex SHA-256 and the size of a file.
func hashFile(ctx context.Context, path string) (string, int64, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", 0, err
	}
	defer f.Close()
	h := sha256.New()
	n, err := copyHashed(ctx, io.Discard, f, h)
	if err != nil {
		return "", n, err
	}
	return hex.EncodeToString(h.Sum(nil)), n, nil
}

// OpenBlob opens the blob that ref points at. The reader re-hashes what
// it returns: a size mismatch is reported at once, a content mismatch
// when the reader reaches the end, as an error wrapping ErrDamaged in
// place of io.EOF. A caller that must not act on unverified bytes reads
// to the end before using them (Export does). A missing file gives an
// error wrapping ErrMissing.
func (s *Store) OpenBlob(ref BlobRef) (io.ReadCloser, error) {
	path := s.BlobPath(ref.SHA256)
	if path == "" {
		return nil, fmt.Errorf("%w: blob reference %q is not a lowercase hex SHA-256", ErrBadName, ref.SHA256)
	}
	f, err := os.Open(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("%w: blob %s: file %s is absent", ErrMissing, ref.SHA256, path)
	}
	if err != nil {
		return nil, fmt.Errorf("catalog: blob %s: open %s: %w", ref.SHA256, path, err)
	}
	fi, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("catalog: blob %s: stat %s: %w", ref.SHA256, path, err)
	}
	if fi.Size() != ref.Size {
		f.Close()
		return nil, fmt.Errorf("%w: blob %s: file %s has %d bytes, want %d", ErrDamaged, ref.SHA256, path, fi.Size(), ref.Size)
	}
	return &verifyingReader{f: f, h: sha256.New(), ref: ref, path: path}, nil
}

// verifyingReader hashes what it reads and checks the sum at the end.
type verifyingReader struct {
	f    *os.File
	h    hash.Hash
	ref  BlobRef
	path string
	n    int64
	err  error // sticky final result
}

func (v *verifyingReader) Read(p []byte) (int, error) {
	if v.err != nil {
		return 0, v.err
	}
	k, err := v.f.Read(p)
	v.h.Write(p[:k])
	v.n += int64(k)
	if v.n > v.ref.Size {
		v.err = fmt.Errorf("%w: blob %s: file %s grew past %d bytes", ErrDamaged, v.ref.SHA256, v.path, v.ref.Size)
		return k, v.err
	}
	if err == io.EOF {
		switch sum := hex.EncodeToString(v.h.Sum(nil)); {
		case v.n != v.ref.Size:
			v.err = fmt.Errorf("%w: blob %s: file %s ended after %d of %d bytes", ErrDamaged, v.ref.SHA256, v.path, v.n, v.ref.Size)
		case sum != v.ref.SHA256:
			v.err = fmt.Errorf("%w: blob %s: file %s hashes to %s", ErrDamaged, v.ref.SHA256, v.path, sum)
		default:
			v.err = io.EOF
		}
		return k, v.err
	}
	if err != nil {
		return k, fmt.Errorf("catalog: blob %s: read %s: %w", v.ref.SHA256, v.path, err)
	}
	return k, nil
}

func (v *verifyingReader) Close() error { return v.f.Close() }

// collect deletes the blob files among candidates that no revision
// references and no pending filing announces. It must run inside a
// write transaction: holding SQLite's write lock is what keeps a filer
// from announcing, installing and committing one of these blobs between
// the check and the delete (filers announce in a write transaction of
// their own, and install only after it commits). It returns the paths
// it deleted.
func (s *Store) collect(ctx context.Context, tx *sql.Tx, candidates []string) ([]string, error) {
	var removed []string
	dirs := map[string]bool{}
	for _, sha := range candidates {
		path := s.BlobPath(sha)
		if path == "" {
			continue
		}
		var used bool
		err := tx.QueryRowContext(ctx, `SELECT EXISTS (SELECT 1 FROM revision_blobs WHERE sha256 = ?)
			OR EXISTS (SELECT 1 FROM pending_blobs WHERE sha256 = ?)`, sha, sha).Scan(&used)
		if err != nil {
			return removed, err
		}
		if used {
			continue
		}
		if err := os.Remove(path); err != nil {
			if errors.Is(err, fs.ErrNotExist) {
				continue
			}
			return removed, fmt.Errorf("catalog: blob %s: delete %s: %w", sha, path, err)
		}
		removed = append(removed, path)
		dirs[filepath.Dir(path)] = true
	}
	for d := range dirs {
		if err := syncDir(d); err != nil {
			return removed, fmt.Errorf("catalog: sync %s: %w", d, err)
		}
	}
	return removed, nil
}

// MediaTypeFor returns the media type the store assigns to a role whose
// BlobSource leaves MediaType empty: PLY for "mesh" and "cloud", our
// table format for "tables", and by extension for names like
// "report.json", "report.html", "front.png", "part.stl", "part.obj",
// "x.ply"; application/octet-stream otherwise.
func MediaTypeFor(role string) string {
	switch role {
	case RoleMesh, RoleCloud:
		return MediaPLY
	case RoleTables:
		return MediaPPFTables
	}
	switch strings.ToLower(filepath.Ext(role)) {
	case ".ply":
		return MediaPLY
	case ".stl":
		return MediaSTL
	case ".obj":
		return MediaOBJ
	case ".json":
		return MediaJSON
	case ".html", ".htm":
		return MediaHTML
	case ".png":
		return MediaPNG
	}
	return MediaBinary
}

// extFor is the file extension Export gives a role without one.
func extFor(media string) string {
	switch media {
	case MediaPLY:
		return ".ply"
	case MediaSTL:
		return ".stl"
	case MediaOBJ:
		return ".obj"
	case MediaJSON:
		return ".json"
	case MediaHTML:
		return ".html"
	case MediaPNG:
		return ".png"
	case MediaPPFTables:
		return ".ppf"
	}
	return ".bin"
}

// ExportName is the file name Export gives a role: the role itself when
// it has an extension ("report.json"), else the role plus an extension
// for its media type ("mesh" → "mesh.ply", "tables" → "tables.ppf").
func ExportName(role, mediaType string) string {
	if filepath.Ext(role) != "" {
		return role
	}
	return role + extFor(mediaType)
}
