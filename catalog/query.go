package catalog

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"sort"
	"strings"
	"time"
)

// partRow finds a part by name (letter case ignored) and returns its
// id and its name as filed.
func partRow(ctx context.Context, tx *sql.Tx, name string) (int64, string, error) {
	var id int64
	var filed string
	err := tx.QueryRowContext(ctx, `SELECT id, name FROM parts WHERE name = ?`, name).Scan(&id, &filed)
	if errorsIsNoRows(err) {
		return 0, "", fmt.Errorf("%w: part %q", ErrNotFound, name)
	}
	return id, filed, err
}

// loadRevision reads one revision, by its row, with its blobs.
func loadRevision(ctx context.Context, tx *sql.Tx, partName string, revID int64, number int, filedNS int64, metaJSON string) (*Revision, error) {
	ref := FormatRef(partName, number)
	r := &Revision{Part: partName, Number: number, Filed: time.Unix(0, filedNS).UTC(), Blobs: map[string]BlobRef{}}
	if err := json.Unmarshal([]byte(metaJSON), &r.Metadata); err != nil {
		return nil, fmt.Errorf("%w: %s: metadata: %v", ErrCorrupt, ref, err)
	}
	if !r.Verdict.Valid() {
		return nil, fmt.Errorf("%w: %s: metadata verdict %q", ErrCorrupt, ref, r.Verdict)
	}
	rows, err := tx.QueryContext(ctx, `SELECT role, sha256, size, media_type FROM revision_blobs WHERE revision_id = ?`, revID)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	for rows.Next() {
		var role string
		var b BlobRef
		if err := rows.Scan(&role, &b.SHA256, &b.Size, &b.MediaType); err != nil {
			return nil, fmt.Errorf("%w: %s: blob row: %v", ErrCorrupt, ref, err)
		}
		if !validSHA(b.SHA256) || b.Size < 0 || ValidateRole(role) != nil {
			return nil, fmt.Errorf("%w: %s: blob row role %q sha256 %q size %d", ErrCorrupt, ref, role, b.SHA256, b.Size)
		}
		r.Blobs[role] = b
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	if len(r.Blobs) == 0 {
		return nil, fmt.Errorf("%w: %s has no blobs", ErrCorrupt, ref)
	}
	return r, nil
}

// Show returns revision rev of part name, or its latest revision when
// rev is 0. The name's letter case need not match; the returned
// Revision carries the name as filed.
func (s *Store) Show(name string, rev int) (*Revision, error) {
	return s.ShowContext(context.Background(), name, rev)
}

// ShowContext is Show with a context.
func (s *Store) ShowContext(ctx context.Context, name string, rev int) (*Revision, error) {
	if err := ValidateName(name); err != nil {
		return nil, err
	}
	if rev < 0 || rev > maxRevision {
		return nil, fmt.Errorf("%w: part %q: revision %d out of range", ErrBadName, name, rev)
	}
	var out *Revision
	err := s.read(ctx, fmt.Sprintf("show %s", FormatRef(name, rev)), func(tx *sql.Tx) error {
		partID, filed, err := partRow(ctx, tx, name)
		if err != nil {
			return err
		}
		q := `SELECT id, rev, filed_ns, meta FROM revisions WHERE part_id = ? AND rev = ?`
		args := []any{partID, rev}
		if rev == 0 {
			q = `SELECT id, rev, filed_ns, meta FROM revisions WHERE part_id = ? ORDER BY rev DESC LIMIT 1`
			args = args[:1]
		}
		var id, filedNS int64
		var number int
		var meta string
		err = tx.QueryRowContext(ctx, q, args...).Scan(&id, &number, &filedNS, &meta)
		if errorsIsNoRows(err) {
			if rev == 0 {
				return fmt.Errorf("%w: part %q has no revisions", ErrNotFound, filed)
			}
			return fmt.Errorf("%w: part %q has no revision %d", ErrNotFound, filed, rev)
		}
		if err != nil {
			return err
		}
		out, err = loadRevision(ctx, tx, filed, id, number, filedNS, meta)
		return err
	})
	return out, err
}

// FindByProvenance returns the latest revision of part name whose input
// sweep hash and settings hash (see SettingsHash) are the given ones,
// or an error wrapping ErrNotFound. Batch onboarding uses it to skip a
// part whose work is already filed. The look-up uses an index on
// (part, input hash, settings hash).
func (s *Store) FindByProvenance(name, inputHash, settingsHash string) (*Revision, error) {
	if err := ValidateName(name); err != nil {
		return nil, err
	}
	inputHash, settingsHash = strings.ToLower(inputHash), strings.ToLower(settingsHash)
	ctx := context.Background()
	var out *Revision
	err := s.read(ctx, fmt.Sprintf("find part %q by provenance", name), func(tx *sql.Tx) error {
		partID, filed, err := partRow(ctx, tx, name)
		if err != nil {
			return err
		}
		var id, filedNS int64
		var number int
		var meta string
		err = tx.QueryRowContext(ctx, `SELECT id, rev, filed_ns, meta FROM revisions
			WHERE part_id = ? AND input_hash = ? AND settings_hash = ? ORDER BY rev DESC LIMIT 1`,
			partID, inputHash, settingsHash).Scan(&id, &number, &filedNS, &meta)
		if errorsIsNoRows(err) {
			return fmt.Errorf("%w: part %q has no revision with input hash %s and settings hash %s",
				ErrNotFound, filed, inputHash, settingsHash)
		}
		if err != nil {
			return err
		}
		out, err = loadRevision(ctx, tx, filed, id, number, filedNS, meta)
		return err
	})
	return out, err
}

// List returns one summary per part that has at least one revision,
// sorted by name.
func (s *Store) List() ([]PartSummary, error) {
	ctx := context.Background()
	var out []PartSummary
	err := s.read(ctx, "list parts", func(tx *sql.Tx) error {
		rows, err := tx.QueryContext(ctx, `
			SELECT p.name, r.rev, r.verdict, c.n, r.filed_ns
			FROM parts p
			JOIN (SELECT part_id, MAX(rev) AS latest, COUNT(*) AS n FROM revisions GROUP BY part_id) c ON c.part_id = p.id
			JOIN revisions r ON r.part_id = p.id AND r.rev = c.latest
			ORDER BY p.name`)
		if err != nil {
			return err
		}
		defer rows.Close()
		for rows.Next() {
			var ps PartSummary
			var verdict string
			var filedNS int64
			if err := rows.Scan(&ps.Name, &ps.Latest, &verdict, &ps.Revisions, &filedNS); err != nil {
				return fmt.Errorf("%w: list parts: %v", ErrCorrupt, err)
			}
			ps.Verdict = Verdict(verdict)
			ps.Updated = time.Unix(0, filedNS).UTC()
			out = append(out, ps)
		}
		return rows.Err()
	})
	return out, err
}

// Revisions returns the revision numbers of part name, in increasing
// order (an error wrapping ErrNotFound when it has none).
func (s *Store) Revisions(name string) ([]int, error) {
	if err := ValidateName(name); err != nil {
		return nil, err
	}
	ctx := context.Background()
	var out []int
	err := s.read(ctx, fmt.Sprintf("list revisions of part %q", name), func(tx *sql.Tx) error {
		partID, filed, err := partRow(ctx, tx, name)
		if err != nil {
			return err
		}
		rows, err := tx.QueryContext(ctx, `SELECT rev FROM revisions WHERE part_id = ? ORDER BY rev`, partID)
		if err != nil {
			return err
		}
		defer rows.Close()
		for rows.Next() {
			var n int
			if err := rows.Scan(&n); err != nil {
				return err
			}
			out = append(out, n)
		}
		if err := rows.Err(); err != nil {
			return err
		}
		if len(out) == 0 {
			return fmt.Errorf("%w: part %q has no revisions", ErrNotFound, filed)
		}
		return nil
	})
	return out, err
}

// Remove removes revision rev of part name, or every revision of the
// part when rev is 0, in one transaction. Revision numbers are never
// reused: filing the part again continues after the highest number it
// ever had. After the commit, blob files that no revision references
// any more are deleted; if that step fails the removal stands and the
// leftovers are orphans that Verify(true) removes.
func (s *Store) Remove(name string, rev int) error {
	if err := ValidateName(name); err != nil {
		return err
	}
	if rev < 0 || rev > maxRevision {
		return fmt.Errorf("%w: part %q: revision %d out of range", ErrBadName, name, rev)
	}
	ctx := context.Background()
	var candidates []string
	ref := FormatRef(name, rev)
	err := s.write(ctx, "remove "+ref, func(tx *sql.Tx) error {
		candidates = candidates[:0]
		partID, filed, err := partRow(ctx, tx, name)
		if err != nil {
			return err
		}
		where, args := `part_id = ?`, []any{partID}
		if rev != 0 {
			where, args = `part_id = ? AND rev = ?`, []any{partID, rev}
		}
		rows, err := tx.QueryContext(ctx, `SELECT DISTINCT sha256 FROM revision_blobs
			WHERE revision_id IN (SELECT id FROM revisions WHERE `+where+`)`, args...)
		if err != nil {
			return err
		}
		for rows.Next() {
			var sha string
			if err := rows.Scan(&sha); err != nil {
				rows.Close()
				return err
			}
			candidates = append(candidates, sha)
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			return err
		}
		res, err := tx.ExecContext(ctx, `DELETE FROM revisions WHERE `+where, args...)
		if err != nil {
			return err
		}
		n, err := res.RowsAffected()
		if err != nil {
			return err
		}
		if n == 0 {
			if rev == 0 {
				return fmt.Errorf("%w: part %q has no revisions", ErrNotFound, filed)
			}
			return fmt.Errorf("%w: part %q has no revision %d", ErrNotFound, filed, rev)
		}
		return nil
	})
	if err != nil {
		return err
	}
	sort.Strings(candidates)
	err = s.write(ctx, "delete unreferenced blobs of "+ref, func(tx *sql.Tx) error {
		_, err := s.collect(ctx, tx, candidates)
		return err
	})
	if err != nil {
		return fmt.Errorf("catalog: %s removed, but deleting its unreferenced blobs failed (run verify with repair): %w", ref, err)
	}
	return nil
}
