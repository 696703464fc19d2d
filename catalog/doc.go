// Package catalog is scanfold's local store of part models: the folder
// a robot cell reads. A catalog holds parts; each part has revisions
// numbered 1, 2, 3…; each revision keeps named blobs (the mesh, the
// cloud, the PPF tables, the report and its pictures) and metadata (the
// verdict and its reasons, symmetry, acceptance threshold, diameter,
// the canonical part frame, PPF parameters and provenance). The package
// computes no geometry; it imports package mesh only to convert an
// exported mesh to STL and OBJ.
//
// # Use
//
//	s, err := catalog.Open("scanfold-catalog", catalog.Options{})
//	rev, err := s.File(ctx, catalog.Filing{Part: "bracket", Blobs: …, Metadata: …})
//	r, err := s.Show("bracket", 0)          // 0: the latest revision
//	m, err := s.Export("bracket", rev.Number, "out/bracket")
//	rep, err := s.Verify(false)
//
// # Folder layout
//
//	DIR/FORMAT              "scanfold catalog\nlayout 1\n": marks the folder as ours
//	DIR/index.db            SQLite index (with index.db-wal and index.db-shm beside it)
//	DIR/blobs/ab/cdef…      one file per distinct content, named by its SHA-256:
//	                        the first two hex digits name the sub-folder, the other 62 the file
//	DIR/tmp/PID.RANDOM.tmp  blobs being written by the filing process PID
//	DIR/.FORMAT.PID.RANDOM.tmp  only while process PID creates the catalog
//
// Blob files are written once and never modified; they are created
// read-only (mode 0444). Identical content filed twice, by any part, is
// stored once. Open refuses a file, or a non-empty folder without
// FORMAT, so a mistyped path never scatters files into someone else's
// folder; it creates a missing or empty folder (unless
// Options.NoCreate). A FORMAT with a newer layout number, or an index
// with a newer schema version, is refused with ErrUnsupported.
//
// The index is SQLite through the pure-Go driver modernc.org/sqlite,
// with these pragmas on every connection: busy_timeout
// (Options.BusyTimeout, 10 s), journal_mode=WAL (readers never block
// the writer), synchronous=FULL (a commit is on disk when it returns),
// foreign_keys=ON; write transactions begin IMMEDIATE. The catalog is
// for one machine: SQLite's WAL mode needs shared memory, so the folder
// must be on a local file system, not a network share.
//
// # Schema (version 1)
//
//	schema_version (id = 1, version, updated_ns)
//	parts          (id, name UNIQUE COLLATE NOCASE, last_rev, created_ns)
//	revisions      (id, part_id → parts, rev, filed_ns, verdict, input_hash,
//	                settings_hash, tool_version, host, created_ns, diameter_m,
//	                acceptance_threshold, meta JSON; UNIQUE (part_id, rev))
//	               index revisions_provenance (part_id, input_hash, settings_hash)
//	revision_blobs (revision_id → revisions ON DELETE CASCADE, role, sha256,
//	                size, media_type; PRIMARY KEY (revision_id, role))
//	               index revision_blobs_sha256 (sha256)
//	pending_blobs  (filing, sha256, pid, host, started_ns; PRIMARY KEY (filing, sha256))
//	               index pending_blobs_sha256 (sha256)
//
// All tables are STRICT. The meta column holds the revision's Metadata
// as JSON and is the record of truth; the other revision columns copy
// the fields that are queried. parts.last_rev is the highest number
// ever given, so numbers are never reused, even after Remove. Part
// names are unique regardless of letter case (files exported on a
// case-folding file system must not collide); filing "Nut" when "nut"
// exists is refused with ErrBadName. Migrations are a list of SQL
// scripts, script i taking version i to i+1, each applied in the same
// transaction as the version bump; Open applies the missing ones.
//
// # Filing and the crash-safety argument
//
// File takes four steps:
//
//  1. Stage: each blob is copied into tmp/PID.RANDOM.tmp while its
//     SHA-256 is computed, then the temp file is fsynced.
//  2. Announce: one transaction inserts every hash into pending_blobs
//     (with this process's id and the time).
//  3. Install: each temp file is renamed to blobs/ab/cdef… (unless an
//     intact copy is already there; a damaged copy is replaced) and the
//     sub-folder is fsynced (and blobs/ when the sub-folder is new).
//  4. Commit: one transaction increments parts.last_rev, inserts the
//     revision and its blob rows, and deletes the announcement.
//
// The revision becomes visible only at step 4's commit, which SQLite
// makes atomic and durable (WAL with synchronous=FULL). Before that
// commit every blob it references is complete on disk: written, fsynced
// and renamed, with the rename fsynced. So a crash (or SIGKILL, or
// power loss) at any moment leaves one of two states: the commit
// happened, and the revision and all its blobs are there; or it did
// not, and the index is as it was, with at worst temp files, installed
// but unreferenced blob files and a stale announcement, which Verify
// reports and repair removes. No step modifies an existing blob or
// revision. A cancelled context stops the filing at the next
// checkpoint (between copy chunks, files and statements) and the filing
// undoes what it can of steps 1 to 3.
//
// Revision numbers are allocated inside step 4's transaction, under
// SQLite's write lock, so concurrent filings, in one process or many,
// get distinct consecutive numbers. A filer that finds the lock taken
// waits (busy timeout) and, should SQLITE_BUSY still come back, retries
// the whole transaction with a randomised back-off (Options.Retries).
//
// Deleting blob files is the only dangerous operation, because a filer
// may be about to reference a file that looks unused. Blob files are
// therefore deleted only inside a write transaction that first checks,
// under the lock, that neither a revision nor an announcement refers to
// the hash. A filer announces (step 2, its own committed transaction)
// before it looks for or installs a file (step 3); so either the
// deleter's check sees the announcement and keeps the file, or the
// deletion finished before the announcement and the filer installs its
// own copy. Announcements of dead filings are stale: their process is
// gone (checked with signal 0 on Unix, on the same host) or they are
// older than Options.StaleAfter (24 h); repair clears them.
//
// # Removal
//
// Remove deletes one revision, or all of a part's, in one transaction;
// then a second transaction deletes the blob files that no revision or
// announcement uses any more. A crash between the two leaves orphans
// for Verify.
//
// # Verify
//
// Verify runs SQLite's quick_check, reads every revision's metadata,
// re-hashes every blob file, and reports missing, damaged (size or
// SHA-256 mismatch) and orphan blobs, stale temp files and
// announcements, stray files under blobs/, and the revisions that are
// not intact (BadRevisions). With repair it removes orphans, stale
// temp files and stale announcements. It never deletes a revision or a
// damaged blob: those need a person's decision (remove the revision, or
// file the same content again, which replaces the damaged file).
// VerifyProgress reports progress through the blob files, for a
// progress bar. OpenBlob re-hashes as it reads and ends with ErrDamaged
// instead of io.EOF when the content does not match.
//
// # Export and the manifest
//
// Export writes a revision into an empty or new folder: every blob
// under its ExportName ("mesh" → mesh.ply, "cloud" → cloud.ply,
// "tables" → tables.ppf, "report.json", "report.html", "*.png" as
// named), each hash-checked and written through temp file, fsync and
// rename; for a PLY mesh also mesh.stl (binary STL) and mesh.obj,
// converted by package mesh; and last manifest.json, so that a folder
// with a manifest holds a complete export. The manifest (Manifest) is
// JSON with these fields:
//
//	format, format_version  "scanfold-part-model", 1
//	part, revision          the part name and revision number
//	filed, exported         RFC 3339 times (UTC)
//	units                   "metres": every length in the files and the manifest
//	frame                   description of the canonical part frame that every
//	                        model file is in; part_to_sweep, the row-major 4x4
//	                        rigid transform from part frame to the sweep's world
//	                        frame; convention, the same in words
//	files[]                 file, role, media_type, sha256, size, and
//	                        derived_from for converted files
//	ppf                     sampling_step_m, distance_step_m, angle_bins,
//	                        ref_point_every (Drost et al. 2010), extra
//	acceptance              scorer and threshold for accepting a pose hypothesis
//	diameter_m              the part's diameter
//	symmetry                kind, order, axis (part frame), description
//	verdict, reasons        ready | review | rescan, and why
//	provenance              input_hash, settings, settings_hash, tool_version,
//	                        stages (seconds each), created, host
//	safety                  SafetyNote: a ready model still needs a supervised,
//	                        reduced-speed trial in the cell under its risk
//	                        assessment and local safety rules
//
// # Names and degenerate input
//
// Part names and roles: 1–64 ASCII letters, digits, '-', '_', '.'; not
// starting with '.' or '-', not ending with '.', not a Windows device
// name (con, nul, com1, …, with or without extension). References are
// NAME or NAME@REV (ParseRef). Decided once, here: a filing needs at
// least one blob and at most MaxRoles; a blob may be empty (zero
// bytes); an all-zero Frame.PartToSweep means identity; an empty input
// hash is allowed (no sweep) and empty settings hash as JSON null; a
// zero Provenance.Created becomes the filing time and an empty Host
// this machine's name; NaN or infinite numbers, negative diameters,
// steps and timings, invalid UTF-8 text and invalid JSON documents are
// refused with ErrBadFiling. A part whose revisions were all removed
// is not listed and Show reports ErrNotFound, but its number sequence
// continues if it is filed again.
package catalog
