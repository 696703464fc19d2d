package catalog

import (
	"encoding/json"
	"errors"
	"time"
)

// Sentinel errors. Every error the package returns is prefixed with
// "catalog:", names the part, revision, blob or file it is about, and
// wraps one of these where a caller may want to branch on it.
var (
	// ErrNotFound: no such part, revision or blob reference.
	ErrNotFound = errors.New("catalog: not found")
	// ErrBadName: a part name, role or reference that is not allowed.
	ErrBadName = errors.New("catalog: bad name")
	// ErrBadFiling: a Filing whose metadata or blobs are invalid.
	ErrBadFiling = errors.New("catalog: bad filing")
	// ErrDamaged: a blob file whose size or SHA-256 does not match its
	// reference.
	ErrDamaged = errors.New("catalog: damaged blob")
	// ErrMissing: a blob file that a revision references is absent.
	ErrMissing = errors.New("catalog: missing blob")
	// ErrCorrupt: the index holds something the package cannot read
	// (bad JSON, a bad hash, a value out of range, a failed integrity
	// check).
	ErrCorrupt = errors.New("catalog: corrupt index")
	// ErrNotCatalog: Open was pointed at a file, or at a non-empty folder
	// that is not a catalog.
	ErrNotCatalog = errors.New("catalog: not a catalog folder")
	// ErrUnsupported: the catalog was written by a newer layout or schema
	// version than this build understands.
	ErrUnsupported = errors.New("catalog: unsupported catalog version")
	// ErrExists: Export was asked to write into a folder that already
	// holds files.
	ErrExists = errors.New("catalog: already exists")
)

// Verdict is the outcome of a model check.
type Verdict string

// The three verdicts a check ends in.
const (
	// Ready: the model passed the self-check.
	Ready Verdict = "ready"
	// Review: usable with care; an engineer should read the reasons.
	Review Verdict = "review"
	// Rescan: the model failed; scan the part again.
	Rescan Verdict = "rescan"
)

// Valid reports whether v is one of Ready, Review, Rescan.
func (v Verdict) Valid() bool { return v == Ready || v == Review || v == Rescan }

// Media types the package assigns when a BlobSource leaves MediaType
// empty (see MediaTypeFor). PLY, and our table format, have no
// registered type, so they get an x- / vnd. name of our own; STL and OBJ
// have registered model/ types (IANA media type registry, from memory).
const (
	MediaPLY       = "model/x-ply"
	MediaSTL       = "model/stl"
	MediaOBJ       = "model/obj"
	MediaPPFTables = "application/vnd.scanfold.ppf-tables"
	MediaJSON      = "application/json"
	MediaHTML      = "text/html"
	MediaPNG       = "image/png"
	MediaBinary    = "application/octet-stream"
)

// Well-known roles. Any other valid name may be used as a role too.
const (
	RoleMesh       = "mesh"        // coloured triangle mesh, PLY, canonical part frame
	RoleCloud      = "cloud"       // oriented coloured point cloud, PLY, canonical part frame
	RoleTables     = "tables"      // PPF model tables, our binary format
	RoleReportJSON = "report.json" // the check's report
	RoleReportHTML = "report.html" // the same for people; pictures are roles named *.png
)

// BlobRef points at one blob file of the store.
type BlobRef struct {
	SHA256    string `json:"sha256"` // lowercase hex SHA-256 of the content (FIPS 180-4)
	Size      int64  `json:"size"`   // bytes
	MediaType string `json:"media_type"`
}

// BlobSource is the content of one role in a Filing: either Data, or the
// file at Path (streamed; used when Data is nil).
type BlobSource struct {
	// MediaType of the content. DEFAULT: MediaTypeFor(role).
	MediaType string
	// Data is the content, when it is in memory.
	Data []byte
	// Path is a file to copy in, when Data is nil.
	Path string
}

// Symmetry describes the part's symmetry as the check found it, in the
// canonical part frame.
type Symmetry struct {
	// Kind is "none", "discrete" (Order rotations about Axis),
	// "continuous" (any rotation about Axis) or a free word for anything
	// else that Description explains. DEFAULT: "" (not assessed).
	Kind string `json:"kind"`
	// Order of a discrete symmetry (6 for a hex nut), else 0.
	Order int `json:"order,omitempty"`
	// Axis is a unit vector in the canonical part frame; zero when Kind
	// has no axis.
	Axis [3]float64 `json:"axis,omitempty"`
	// Description in words, for people.
	Description string `json:"description,omitempty"`
}

// Frame describes the canonical part frame that the mesh, cloud and
// tables are expressed in, and how to get back to the sweep's frame.
type Frame struct {
	// Description says where the origin is and how the axes are chosen.
	Description string `json:"description"`
	// PartToSweep is a row-major homogeneous 4×4 rigid transform taking
	// a point in the part frame to the sweep's world frame:
	// x_sweep = PartToSweep · [x_part 1]ᵀ. An all-zero matrix is stored
	// as the identity (the part frame is the sweep frame).
	PartToSweep [16]float64 `json:"part_to_sweep"`
}

// PPFParams are the point-pair-feature parameters the tables were built
// with (Drost, Ulrich, Navab & Ilic 2010, CVPR), so that the cell's
// estimator quantises scene features the same way.
type PPFParams struct {
	SamplingStep  float64         `json:"sampling_step_m"` // model sub-sampling distance, metres
	DistanceStep  float64         `json:"distance_step_m"` // quantisation of ‖d‖, metres
	AngleBins     int             `json:"angle_bins"`      // bins over [0, π] for the three angles and α
	RefPointEvery int             `json:"ref_point_every"` // scene reference-point stride suggested
	Extra         json.RawMessage `json:"extra,omitempty"` // anything else the tables' builder recorded
}

// Acceptance is the score threshold the check proposes for accepting a
// pose hypothesis of this part.
type Acceptance struct {
	// Scorer names the hypothesis score the threshold applies to.
	Scorer string `json:"scorer"`
	// Threshold on that score's scale.
	Threshold float64 `json:"threshold"`
}

// StageTiming is the wall time one pipeline stage took.
type StageTiming struct {
	Stage   string  `json:"stage"`
	Seconds float64 `json:"seconds"`
}

// Provenance says where a revision came from.
type Provenance struct {
	// InputHash is the lowercase hex SHA-256 of the input sweep, as the
	// caller computed it; "" when there is no sweep (a demo, an import).
	InputHash string `json:"input_hash"`
	// Settings is every setting of the run, as a JSON document.
	// DEFAULT: null.
	Settings json.RawMessage `json:"settings"`
	// SettingsHash is filled in by File: SettingsHash(Settings).
	SettingsHash string `json:"settings_hash"`
	// ToolVersion is the version of the program that made the model.
	ToolVersion string `json:"tool_version"`
	// Stages lists the time each stage took, in order.
	Stages []StageTiming `json:"stages,omitempty"`
	// Created is when the model was made. DEFAULT: the filing time.
	Created time.Time `json:"created"`
	// Host is the machine that made it. DEFAULT: os.Hostname().
	Host string `json:"host"`
}

// Metadata is everything a revision records besides its blobs.
type Metadata struct {
	Verdict    Verdict    `json:"verdict"`
	Reasons    []string   `json:"reasons"`
	Symmetry   Symmetry   `json:"symmetry"`
	Acceptance Acceptance `json:"acceptance"`
	// Diameter of the part in metres (largest distance between two
	// surface points).
	Diameter   float64    `json:"diameter_m"`
	Frame      Frame      `json:"frame"`
	PPF        PPFParams  `json:"ppf"`
	Provenance Provenance `json:"provenance"`
	// Extra is a free JSON document for anything else. DEFAULT: null.
	Extra json.RawMessage `json:"extra,omitempty"`
}

// Filing is what a caller hands to Store.File: the part name, the blobs
// by role, and the metadata.
type Filing struct {
	Part  string
	Blobs map[string]BlobSource
	Metadata
}

// Revision is one filed revision of a part.
type Revision struct {
	Part   string
	Number int       // 1, 2, 3… never reused, even after removal
	Filed  time.Time // when the store committed it
	Blobs  map[string]BlobRef
	Metadata
}

// PartSummary is one line of Store.List.
type PartSummary struct {
	Name      string
	Latest    int       // latest revision number
	Verdict   Verdict   // the latest revision's verdict
	Revisions int       // how many revisions the part has
	Updated   time.Time // filing time of the latest revision
}

// Options tune Open.
type Options struct {
	// BusyTimeout is how long one SQLite statement waits for another
	// process's lock before failing with SQLITE_BUSY. DEFAULT: 10 s.
	BusyTimeout time.Duration
	// Retries is how many times a whole write transaction is retried
	// after SQLITE_BUSY outlasts BusyTimeout. DEFAULT: 5.
	Retries int
	// StaleAfter is the age past which a temp file or a pending-blob
	// record is stale even if the process that made it still seems alive
	// (a process id can be reused). DEFAULT: 24 h.
	StaleAfter time.Duration
	// NoCreate makes Open fail with ErrNotFound instead of creating a
	// missing catalog. DEFAULT: false (create).
	NoCreate bool
}

// DefaultOptions returns the documented defaults.
func DefaultOptions() Options {
	return Options{BusyTimeout: 10 * time.Second, Retries: 5, StaleAfter: 24 * time.Hour}
}

func (o Options) withDefaults() Options {
	d := DefaultOptions()
	if o.BusyTimeout <= 0 {
		o.BusyTimeout = d.BusyTimeout
	}
	if o.Retries <= 0 {
		o.Retries = d.Retries
	}
	if o.StaleAfter <= 0 {
		o.StaleAfter = d.StaleAfter
	}
	return o
}
