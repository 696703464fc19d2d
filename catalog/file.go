package catalog

import (
	"bytes"
	"context"
	"crypto/rand"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"sort"
	"strings"
	"time"
	"unicode/utf8"
)

// Bounds on what one filing may carry. They keep the index small and a
// damaged or hostile caller from filling it.
const (
	// MaxRoles is the most blobs one revision may hold.
	MaxRoles = 1024
	// maxText bounds each free-text field (reason, description, …).
	maxText = 16 << 10
	// maxDoc bounds each JSON document (settings, extra, PPF extra).
	maxDoc = 4 << 20
	// maxReasons bounds the reasons of a verdict.
	maxReasons = 1024
	// maxStages bounds the stage timings.
	maxStages = 1024
)

// ManifestName is the name of the manifest Export writes; no role may
// export under this name.
const ManifestName = "manifest.json"

// SettingsHash returns the hash under which a run's settings are filed
// and looked up: the lowercase hex SHA-256 (FIPS 180-4) of the settings
// re-encoded canonically by encoding/json (object keys sorted, no
// insignificant white space, numbers kept as written, so 1 and 1.0
// differ). Empty settings hash as JSON null. Batch onboarding computes
// it before running to ask FindByProvenance whether the work is done.
func SettingsHash(settings json.RawMessage) (string, error) {
	canon, err := canonicalJSON(settings)
	if err != nil {
		return "", fmt.Errorf("%w: settings: %v", ErrBadFiling, err)
	}
	sum := sha256.Sum256(canon)
	return hex.EncodeToString(sum[:]), nil
}

// canonicalJSON re-encodes a JSON document with sorted keys and no
// white space; empty input is JSON null.
func canonicalJSON(doc json.RawMessage) ([]byte, error) {
	if len(bytes.TrimSpace(doc)) == 0 {
		return []byte("null"), nil
	}
	if len(doc) > maxDoc {
		return nil, fmt.Errorf("%d bytes, at most %d allowed", len(doc), maxDoc)
	}
	dec := json.NewDecoder(bytes.NewReader(doc))
	dec.UseNumber()
	var v any
	if err := dec.Decode(&v); err != nil {
		return nil, fmt.Errorf("not valid JSON: %v", err)
	}
	if dec.More() {
		return nil, fmt.Errorf("not valid JSON: data after the first value")
	}
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(v); err != nil {
		return nil, err
	}
	return bytes.TrimSuffix(buf.Bytes(), []byte("\n")), nil
}

// checkDoc validates an optional JSON document and returns it compacted
// (nil stays nil).
func checkDoc(field string, doc json.RawMessage) (json.RawMessage, error) {
	if len(bytes.TrimSpace(doc)) == 0 {
		return nil, nil
	}
	if len(doc) > maxDoc {
		return nil, fmt.Errorf("%w: %s: %d bytes, at most %d allowed", ErrBadFiling, field, len(doc), maxDoc)
	}
	if !json.Valid(doc) {
		return nil, fmt.Errorf("%w: %s: not valid JSON", ErrBadFiling, field)
	}
	var buf bytes.Buffer
	if err := json.Compact(&buf, doc); err != nil {
		return nil, fmt.Errorf("%w: %s: %v", ErrBadFiling, field, err)
	}
	return buf.Bytes(), nil
}

func checkText(field, s string) error {
	if len(s) > maxText {
		return fmt.Errorf("%w: %s: %d bytes, at most %d allowed", ErrBadFiling, field, len(s), maxText)
	}
	if !utf8.ValidString(s) {
		return fmt.Errorf("%w: %s: not valid UTF-8", ErrBadFiling, field)
	}
	return nil
}

func checkFinite(field string, v float64, nonNegative bool) error {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return fmt.Errorf("%w: %s is %v", ErrBadFiling, field, v)
	}
	if nonNegative && v < 0 {
		return fmt.Errorf("%w: %s is %v, must not be negative", ErrBadFiling, field, v)
	}
	return nil
}

func checkMediaType(role, mt string) error {
	if mt == "" || len(mt) > 255 || !strings.Contains(mt, "/") {
		return fmt.Errorf("%w: role %q: media type %q is not of the form type/subtype (at most 255 bytes)", ErrBadFiling, role, mt)
	}
	for i := 0; i < len(mt); i++ {
		if c := mt[i]; c <= ' ' && c != ' ' || c >= 0x7f {
			return fmt.Errorf("%w: role %q: media type %q has a control or non-ASCII byte at %d", ErrBadFiling, role, mt, i)
		}
	}
	return nil
}

var identity4 = [16]float64{1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1}

// normalize validates a filing's metadata and returns it completed with
// its defaults: an identity frame for an all-zero one, the settings
// hash, the created time and the host.
func (s *Store) normalize(f *Filing, now time.Time) (Metadata, error) {
	m := f.Metadata
	ref := FormatRef(f.Part, 0)
	wrap := func(err error) error { return fmt.Errorf("%w (filing part %q)", err, ref) }
	if !m.Verdict.Valid() {
		return m, wrap(fmt.Errorf("%w: verdict %q; want ready, review or rescan", ErrBadFiling, m.Verdict))
	}
	if len(m.Reasons) > maxReasons {
		return m, wrap(fmt.Errorf("%w: %d reasons, at most %d allowed", ErrBadFiling, len(m.Reasons), maxReasons))
	}
	m.Reasons = append([]string{}, m.Reasons...)
	for i, r := range m.Reasons {
		if err := checkText(fmt.Sprintf("reason %d", i), r); err != nil {
			return m, wrap(err)
		}
	}
	if err := checkText("symmetry kind", m.Symmetry.Kind); err != nil {
		return m, wrap(err)
	}
	if err := checkText("symmetry description", m.Symmetry.Description); err != nil {
		return m, wrap(err)
	}
	if m.Symmetry.Order < 0 {
		return m, wrap(fmt.Errorf("%w: symmetry order %d is negative", ErrBadFiling, m.Symmetry.Order))
	}
	for i, a := range m.Symmetry.Axis {
		if err := checkFinite(fmt.Sprintf("symmetry axis[%d]", i), a, false); err != nil {
			return m, wrap(err)
		}
	}
	if err := checkText("acceptance scorer", m.Acceptance.Scorer); err != nil {
		return m, wrap(err)
	}
	if err := checkFinite("acceptance threshold", m.Acceptance.Threshold, false); err != nil {
		return m, wrap(err)
	}
	if err := checkFinite("diameter", m.Diameter, true); err != nil {
		return m, wrap(err)
	}
	if err := checkText("frame description", m.Frame.Description); err != nil {
		return m, wrap(err)
	}
	if m.Frame.PartToSweep == ([16]float64{}) {
		m.Frame.PartToSweep = identity4
	}
	for i, v := range m.Frame.PartToSweep {
		if err := checkFinite(fmt.Sprintf("frame part_to_sweep[%d]", i), v, false); err != nil {
			return m, wrap(err)
		}
	}
	if b := m.Frame.PartToSweep[12:]; b[0] != 0 || b[1] != 0 || b[2] != 0 || b[3] != 1 {
		return m, wrap(fmt.Errorf("%w: frame part_to_sweep bottom row is %v, want [0 0 0 1]", ErrBadFiling, b))
	}
	for _, p := range []struct {
		name string
		v    float64
	}{{"ppf sampling step", m.PPF.SamplingStep}, {"ppf distance step", m.PPF.DistanceStep}} {
		if err := checkFinite(p.name, p.v, true); err != nil {
			return m, wrap(err)
		}
	}
	if m.PPF.AngleBins < 0 || m.PPF.RefPointEvery < 0 {
		return m, wrap(fmt.Errorf("%w: ppf angle bins %d and reference-point stride %d must not be negative",
			ErrBadFiling, m.PPF.AngleBins, m.PPF.RefPointEvery))
	}
	var err error
	if m.PPF.Extra, err = checkDoc("ppf extra", m.PPF.Extra); err != nil {
		return m, wrap(err)
	}
	if m.Extra, err = checkDoc("extra", m.Extra); err != nil {
		return m, wrap(err)
	}

	p := &m.Provenance
	p.InputHash = strings.ToLower(p.InputHash)
	if p.InputHash != "" && !validSHA(p.InputHash) {
		return m, wrap(fmt.Errorf("%w: provenance input hash %q is not a hex SHA-256 (64 digits)", ErrBadFiling, p.InputHash))
	}
	sh, err := SettingsHash(p.Settings)
	if err != nil {
		return m, wrap(err)
	}
	if p.SettingsHash != "" && strings.ToLower(p.SettingsHash) != sh {
		return m, wrap(fmt.Errorf("%w: provenance settings hash %q does not match the settings (%s); leave it empty",
			ErrBadFiling, p.SettingsHash, sh))
	}
	p.SettingsHash = sh
	if p.Settings, err = checkDoc("settings", p.Settings); err != nil {
		return m, wrap(err)
	}
	if err := checkText("tool version", p.ToolVersion); err != nil {
		return m, wrap(err)
	}
	if len(p.Stages) > maxStages {
		return m, wrap(fmt.Errorf("%w: %d stage timings, at most %d allowed", ErrBadFiling, len(p.Stages), maxStages))
	}
	p.Stages = append([]StageTiming(nil), p.Stages...)
	for i, st := range p.Stages {
		if err := checkText(fmt.Sprintf("stage %d name", i), st.Stage); err != nil {
			return m, wrap(err)
		}
		if err := checkFinite(fmt.Sprintf("stage %d (%s) seconds", i, st.Stage), st.Seconds, true); err != nil {
			return m, wrap(err)
		}
	}
	if p.Created.IsZero() {
		p.Created = now
	}
	p.Created = p.Created.UTC()
	if p.Host == "" {
		p.Host = s.host
	}
	if err := checkText("host", p.Host); err != nil {
		return m, wrap(err)
	}
	return m, nil
}

// checkBlobs validates the roles of a filing and fills in media types.
// It returns the roles in sorted order.
func checkBlobs(f *Filing) ([]string, map[string]BlobSource, error) {
	if len(f.Blobs) == 0 {
		return nil, nil, fmt.Errorf("%w: part %q: no blobs; a revision holds at least one", ErrBadFiling, f.Part)
	}
	if len(f.Blobs) > MaxRoles {
		return nil, nil, fmt.Errorf("%w: part %q: %d blobs, at most %d allowed", ErrBadFiling, f.Part, len(f.Blobs), MaxRoles)
	}
	roles := make([]string, 0, len(f.Blobs))
	srcs := make(map[string]BlobSource, len(f.Blobs))
	names := map[string]string{ManifestName: "the manifest"}
	for role, src := range f.Blobs {
		if err := ValidateRole(role); err != nil {
			return nil, nil, fmt.Errorf("%w (filing part %q)", err, f.Part)
		}
		if src.Data == nil && src.Path == "" {
			return nil, nil, fmt.Errorf("%w: part %q: role %q has neither Data nor Path", ErrBadFiling, f.Part, role)
		}
		if src.Data != nil && src.Path != "" {
			return nil, nil, fmt.Errorf("%w: part %q: role %q has both Data and Path", ErrBadFiling, f.Part, role)
		}
		if src.MediaType == "" {
			src.MediaType = MediaTypeFor(role)
		}
		if err := checkMediaType(role, src.MediaType); err != nil {
			return nil, nil, fmt.Errorf("%w (filing part %q)", err, f.Part)
		}
		roles = append(roles, role)
		srcs[role] = src
	}
	sort.Strings(roles)
	// Export writes each role under ExportName, plus STL and OBJ copies
	// of a PLY mesh; no two may collide (case-insensitively, for the
	// file systems that fold case).
	for _, role := range roles {
		ns := []string{ExportName(role, srcs[role].MediaType)}
		if role == RoleMesh && srcs[role].MediaType == MediaPLY {
			ns = append(ns, role+".stl", role+".obj")
		}
		for _, n := range ns {
			k := strings.ToLower(n)
			if other, ok := names[k]; ok {
				return nil, nil, fmt.Errorf("%w: part %q: role %q would export as %q, which %s also uses",
					ErrBadFiling, f.Part, role, n, other)
			}
			names[k] = fmt.Sprintf("role %q", role)
		}
	}
	return roles, srcs, nil
}

// File files a new revision of f.Part and returns it, with its number.
//
// The blobs are written first, each to a temp file that is fsynced and
// then renamed into its content-addressed place (and the folder
// fsynced); only then does one transaction allocate the revision number
// and add the revision. A crash or a cancelled ctx at any moment leaves
// the catalog as it was before, at worst with orphan blob files that
// Verify reports and removes on repair. Two processes filing at once
// both succeed, with distinct numbers.
func (s *Store) File(ctx context.Context, f Filing) (Revision, error) {
	if err := ValidateName(f.Part); err != nil {
		return Revision{}, err
	}
	roles, srcs, err := checkBlobs(&f)
	if err != nil {
		return Revision{}, err
	}
	meta, err := s.normalize(&f, time.Now())
	if err != nil {
		return Revision{}, err
	}
	metaJSON, err := json.Marshal(meta)
	if err != nil {
		return Revision{}, fmt.Errorf("%w: part %q: encode metadata: %v", ErrBadFiling, f.Part, err)
	}
	if len(metaJSON) > 4*maxDoc {
		return Revision{}, fmt.Errorf("%w: part %q: metadata is %d bytes, at most %d allowed", ErrBadFiling, f.Part, len(metaJSON), 4*maxDoc)
	}

	// 1. Stage every blob: temp file, hash, fsync.
	blobs := make([]staged, 0, len(roles))
	defer func() {
		for _, b := range blobs {
			if b.tmp != "" {
				os.Remove(b.tmp)
			}
		}
	}()
	for _, role := range roles {
		st, err := s.stage(ctx, role, srcs[role])
		if err != nil {
			return Revision{}, fmt.Errorf("%w (filing part %q)", err, f.Part)
		}
		blobs = append(blobs, st)
	}
	shas := make([]string, 0, len(blobs))
	seen := map[string]bool{}
	for _, b := range blobs {
		if !seen[b.ref.SHA256] {
			seen[b.ref.SHA256] = true
			shas = append(shas, b.ref.SHA256)
		}
	}

	// 2. Announce the hashes, so no collection deletes them before the
	// revision that references them commits.
	var idb [16]byte
	rand.Read(idb[:])
	filing := hex.EncodeToString(idb[:])
	started := time.Now().UnixNano()
	err = s.write(ctx, fmt.Sprintf("announce blobs of part %q", f.Part), func(tx *sql.Tx) error {
		for _, sha := range shas {
			if _, err := tx.ExecContext(ctx, `INSERT OR IGNORE INTO pending_blobs (filing, sha256, pid, host, started_ns)
				VALUES (?, ?, ?, ?, ?)`, filing, sha, s.pid, s.host, started); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return Revision{}, err
	}
	committed := false
	defer func() {
		if !committed {
			s.abandon(filing, shas)
		}
	}()

	// 3. Move the blobs into place.
	for i := range blobs {
		if err := ctx.Err(); err != nil {
			return Revision{}, fmt.Errorf("catalog: filing part %q: %w", f.Part, err)
		}
		if err := s.install(&blobs[i]); err != nil {
			return Revision{}, fmt.Errorf("%w (filing part %q, role %q)", err, f.Part, blobs[i].role)
		}
	}

	// 4. One transaction: number and add the revision.
	rev := Revision{Part: f.Part, Blobs: make(map[string]BlobRef, len(blobs)), Metadata: meta}
	for _, b := range blobs {
		rev.Blobs[b.role] = b.ref
	}
	err = s.write(ctx, fmt.Sprintf("file part %q", f.Part), func(tx *sql.Tx) error {
		now := time.Now()
		if _, err := tx.ExecContext(ctx, `INSERT INTO parts (name, last_rev, created_ns) VALUES (?, 0, ?)
			ON CONFLICT (name) DO NOTHING`, f.Part, now.UnixNano()); err != nil {
			return err
		}
		var partID int64
		var name string
		var number int
		if err := tx.QueryRowContext(ctx, `UPDATE parts SET last_rev = last_rev + 1 WHERE name = ?
			RETURNING id, name, last_rev`, f.Part).Scan(&partID, &name, &number); err != nil {
			return err
		}
		if name != f.Part {
			return fmt.Errorf("%w: part name %q differs only in letter case from the filed part %q; use %q",
				ErrBadName, f.Part, name, name)
		}
		if number < 1 || number > maxRevision {
			return fmt.Errorf("%w: part %q: revision counter %d out of range", ErrCorrupt, name, number)
		}
		res, err := tx.ExecContext(ctx, `INSERT INTO revisions (part_id, rev, filed_ns, verdict, input_hash, settings_hash,
			tool_version, host, created_ns, diameter_m, acceptance_threshold, meta)
			VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
			partID, number, now.UnixNano(), string(meta.Verdict), meta.Provenance.InputHash, meta.Provenance.SettingsHash,
			meta.Provenance.ToolVersion, meta.Provenance.Host, meta.Provenance.Created.UnixNano(),
			meta.Diameter, meta.Acceptance.Threshold, string(metaJSON))
		if err != nil {
			return err
		}
		revID, err := res.LastInsertId()
		if err != nil {
			return err
		}
		for _, b := range blobs {
			if _, err := tx.ExecContext(ctx, `INSERT INTO revision_blobs (revision_id, role, sha256, size, media_type)
				VALUES (?, ?, ?, ?, ?)`, revID, b.role, b.ref.SHA256, b.ref.Size, b.ref.MediaType); err != nil {
				return err
			}
		}
		if _, err := tx.ExecContext(ctx, `DELETE FROM pending_blobs WHERE filing = ?`, filing); err != nil {
			return err
		}
		rev.Number = number
		rev.Filed = time.Unix(0, now.UnixNano()).UTC()
		return nil
	})
	if err != nil {
		return Revision{}, err
	}
	committed = true
	return rev, nil
}

// abandon undoes what a failed filing left: its announcements, and the
// blob files it installed that nothing else uses. It is best effort
// (the filing has already failed); whatever it cannot undo, Verify
// reports as orphans or stale records.
func (s *Store) abandon(filing string, shas []string) {
	ctx, cancel := context.WithTimeout(context.Background(), s.opts.BusyTimeout)
	defer cancel()
	s.write(ctx, "abandon filing", func(tx *sql.Tx) error {
		if _, err := tx.ExecContext(ctx, `DELETE FROM pending_blobs WHERE filing = ?`, filing); err != nil {
			return err
		}
		_, err := s.collect(ctx, tx, shas)
		return err
	})
}

// errorsIsNoRows reports sql.ErrNoRows.
func errorsIsNoRows(err error) bool { return errors.Is(err, sql.ErrNoRows) }
