package batch

import (
	"bytes"
	"encoding/json"
	"fmt"
	"html/template"
	"os"
	"path/filepath"
	"strings"

	"github.com/scanfold/scanfold/catalog"
)

// Status is where a part of the bin stands.
type Status string

// The statuses of a part.
const (
	// StatusPending: not started (yet, or at all when the run was
	// stopped).
	StatusPending Status = "pending"
	// StatusRunning: being onboarded. In a summary read back, a part
	// still running means the run ended without finishing it (killed or
	// crashed).
	StatusRunning Status = "running"
	// StatusFiled: onboarded in this run and filed as a new revision.
	StatusFiled Status = "filed"
	// StatusSkipped: already filed from the same sweep with the same
	// settings; nothing was done.
	StatusSkipped Status = "skipped"
	// StatusFailed: onboarding failed (a corrupt sweep, no part found, a
	// crash in a stage); Error says why. Nothing was filed.
	StatusFailed Status = "failed"
	// StatusAbandoned: interrupted; nothing was filed, and the next run
	// onboards it.
	StatusAbandoned Status = "abandoned"
)

// RunState is where the whole run stands.
type RunState string

// The states of a run.
const (
	// StateRunning: parts are being onboarded; a summary read back in
	// this state belongs to a run that was killed or crashed.
	StateRunning RunState = "running"
	// StateFinished: every part has a result.
	StateFinished RunState = "finished"
	// StateInterrupted: the run was stopped before every part had a
	// result; the next run carries on.
	StateInterrupted RunState = "interrupted"
)

// SummaryFormat is the "format" field of summary.json and
// SummaryVersion the only version this package writes and reads.
const (
	SummaryFormat  = "scanfold.batch-summary"
	SummaryVersion = 1
	// maxSummaryBytes bounds the summary file read back: ten thousand
	// parts with their reasons fit in a few MiB.
	maxSummaryBytes = 64 << 20
)

// PartResult is one part's line of the summary.
type PartResult struct {
	// Name is the part's name; Sweep its sweep folder.
	Name  string `json:"name"`
	Sweep string `json:"sweep"`
	// Status is where the part stands.
	Status Status `json:"status"`
	// Verdict and Reasons are the check's outcome ("verdict: message"
	// each), for a filed or skipped part.
	Verdict catalog.Verdict `json:"verdict,omitempty"`
	Reasons []string        `json:"reasons,omitempty"`
	// Error says why the part failed, or what went wrong after it was
	// filed.
	Error string `json:"error,omitempty"`
	// Revision is the catalog revision filed (or found, when skipped).
	Revision int `json:"revision,omitempty"`
	// Report is the part's report folder and Log its log file, both
	// relative to the run folder, slash-separated.
	Report string `json:"report,omitempty"`
	Log    string `json:"log,omitempty"`
	// Seconds is the wall time of the part's last attempt; Stages the
	// time of each stage when it was onboarded.
	Seconds float64               `json:"seconds"`
	Stages  []catalog.StageTiming `json:"stages,omitempty"`
	// InputHash is the sweep's SHA-256 (onboard.SweepHash), when it
	// could be read; Fingerprint a cheap hash of its files' names,
	// sizes and modification times, which tells whether a failed sweep
	// was changed since.
	InputHash   string `json:"input_hash,omitempty"`
	Fingerprint string `json:"fingerprint,omitempty"`
	// Attempts counts the runs that started the part without giving it
	// a result (killed or crashed) plus the one that did.
	Attempts int `json:"attempts"`
	// MemoryEstimate is the part's estimated peak memory in bytes
	// (EstimateMemory).
	MemoryEstimate int64 `json:"memory_estimate_bytes"`
	// Started and Finished are RFC 3339 times of the last attempt.
	Started  string `json:"started,omitempty"`
	Finished string `json:"finished,omitempty"`
	// Carried is set when the result was carried over from an earlier
	// run rather than obtained in this one (a failure not retried).
	Carried bool `json:"carried,omitempty"`
}

// Counts tallies a summary's parts.
type Counts struct {
	Parts   int `json:"parts"`
	Ready   int `json:"ready"`
	Review  int `json:"review"`
	Rescan  int `json:"rescan"`
	Failed  int `json:"failed"`
	Filed   int `json:"filed"`
	Skipped int `json:"skipped"`
	// Pending counts the parts without a result: pending, running or
	// abandoned.
	Pending int `json:"pending"`
}

// Summary is the record of a batch run, written to summary.json (and
// as index.html) in the run folder as parts finish.
type Summary struct {
	Format  string `json:"format"`
	Version int    `json:"version"`
	// Bin, Catalog and RunDir are the folders (absolute).
	Bin     string `json:"bin"`
	Catalog string `json:"catalog"`
	RunDir  string `json:"run_dir"`
	// ToolVersion is onboard.Options.ToolVersion.
	ToolVersion string `json:"tool_version"`
	// Started, Updated and Finished are RFC 3339 times (Finished empty
	// until the run ends).
	Started  string   `json:"started"`
	Updated  string   `json:"updated"`
	Finished string   `json:"finished,omitempty"`
	State    RunState `json:"state"`
	// Workers is the number of parts onboarded at once at most,
	// MaxMemory the memory budget in bytes (0: none).
	Workers   int   `json:"workers"`
	MaxMemory int64 `json:"max_memory_bytes"`
	// PeakHeap is the highest heap in use sampled during the run (Go
	// runtime.MemStats.HeapInuse, every 250 ms) and PeakRSS the
	// process's peak resident set (getrusage; 0 where unknown), bytes.
	PeakHeap int64 `json:"peak_heap_bytes"`
	PeakRSS  int64 `json:"peak_rss_bytes"`
	// Confusers names the parts every check compared its part with.
	Confusers []string `json:"confusers"`
	// Notes are remarks about the run as a whole.
	Notes  []string     `json:"notes,omitempty"`
	Counts Counts       `json:"counts"`
	Parts  []PartResult `json:"parts"`
}

// Count recomputes s.Counts from s.Parts.
func (s *Summary) Count() {
	c := Counts{Parts: len(s.Parts)}
	for _, p := range s.Parts {
		switch p.Status {
		case StatusFiled, StatusSkipped:
			if p.Status == StatusFiled {
				c.Filed++
			} else {
				c.Skipped++
			}
			switch p.Verdict {
			case catalog.Ready:
				c.Ready++
			case catalog.Review:
				c.Review++
			case catalog.Rescan:
				c.Rescan++
			}
		case StatusFailed:
			c.Failed++
		default:
			c.Pending++
		}
	}
	s.Counts = c
}

// ParseSummary parses a summary.json written by Run. It refuses another
// format or a newer version, and a part list longer than MaxParts or
// with a nameless part; unknown fields are allowed (a later version may
// add some).
func ParseSummary(data []byte) (*Summary, error) {
	if len(data) > maxSummaryBytes {
		return nil, fmt.Errorf("batch: summary: %d bytes, at most %d", len(data), maxSummaryBytes)
	}
	var s Summary
	dec := json.NewDecoder(bytes.NewReader(data))
	if err := dec.Decode(&s); err != nil {
		be := jsonProblem("summary.json", data, err).(*BinError)
		be.File = "summary.json"
		return nil, be
	}
	bad := func(format string, a ...any) error {
		return fmt.Errorf("batch: summary.json: "+format, a...)
	}
	switch {
	case s.Format != SummaryFormat:
		return nil, bad("format %q, want %q", clip(s.Format), SummaryFormat)
	case s.Version != SummaryVersion:
		return nil, bad("version %d is not supported; this build reads version %d", s.Version, SummaryVersion)
	case len(s.Parts) > MaxParts:
		return nil, bad("%d parts, at most %d", len(s.Parts), MaxParts)
	}
	for i, p := range s.Parts {
		if p.Name == "" {
			return nil, bad("parts[%d]: no name", i)
		}
	}
	return &s, nil
}

// writeSummary writes summary.json and index.html into the run folder,
// each atomically (a reader sees the old file or the new one).
func writeSummary(dir string, s *Summary) error {
	data, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		return fmt.Errorf("batch: summary: %w", err)
	}
	if err := writeFileAtomic(filepath.Join(dir, SummaryFile), append(data, '\n')); err != nil {
		return err
	}
	var b bytes.Buffer
	if err := indexTemplate.Execute(&b, s); err != nil {
		return fmt.Errorf("batch: index.html: %w", err)
	}
	return writeFileAtomic(filepath.Join(dir, IndexFile), b.Bytes())
}

// writeFileAtomic replaces path with data: a temporary file in the same
// folder, synced, renamed over path, and the folder synced.
func writeFileAtomic(path string, data []byte) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*.tmp")
	if err != nil {
		return fmt.Errorf("batch: %w", err)
	}
	_, werr := tmp.Write(data)
	if werr == nil {
		werr = tmp.Sync()
	}
	if cerr := tmp.Close(); werr == nil {
		werr = cerr
	}
	if werr == nil {
		werr = os.Rename(tmp.Name(), path)
	}
	if werr != nil {
		os.Remove(tmp.Name())
		return fmt.Errorf("batch: writing %s: %w", path, werr)
	}
	if d, err := os.Open(filepath.Dir(path)); err == nil {
		d.Sync() // best effort: not every system syncs a folder
		d.Close()
	}
	return nil
}

// ShortReasons returns the reasons that are not "ready: …" remarks,
// the ones a person must read: those that gave the part its verdict
// first, then the others, each group in its order.
func (p PartResult) ShortReasons() []string {
	var first, rest []string
	for _, r := range p.Reasons {
		switch {
		case strings.HasPrefix(r, string(catalog.Ready)+":"):
		case p.Verdict != "" && strings.HasPrefix(r, string(p.Verdict)+":"):
			first = append(first, r)
		default:
			rest = append(rest, r)
		}
	}
	return append(first, rest...)
}

// Outcome is the word for the part in the summary table: its verdict,
// "error" when it failed, or its status when it has no result.
func (p PartResult) Outcome() string {
	switch {
	case p.Status == StatusFailed:
		return "error"
	case p.Verdict != "" && (p.Status == StatusFiled || p.Status == StatusSkipped):
		return string(p.Verdict)
	}
	return string(p.Status)
}

var indexTemplate = template.Must(template.New("index").Funcs(template.FuncMap{
	"secs": func(s float64) string { return fmt.Sprintf("%.1f s", s) },
	"mib":  func(b int64) string { return fmt.Sprintf("%.0f MiB", float64(b)/(1<<20)) },
}).Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>scanfold batch: {{.Bin}}</title>
<style>
body { font-family: sans-serif; margin: 2em; }
table { border-collapse: collapse; }
th, td { border: 1px solid #ccc; padding: 0.3em 0.6em; vertical-align: top; text-align: left; }
.ready { background: #d8f5d8; } .review { background: #fff3c4; } .rescan { background: #ffd9c4; }
.error { background: #f8c8c8; } .pending, .running, .abandoned { background: #eee; }
td ul { margin: 0; padding-left: 1.2em; }
</style>
</head>
<body>
<h1>scanfold batch</h1>
<p>Bin <code>{{.Bin}}</code>, catalog <code>{{.Catalog}}</code>.<br>
Started {{.Started}}; {{if .Finished}}ended {{.Finished}} ({{.State}}){{else}}updated {{.Updated}} (still running, or stopped without finishing){{end}}.<br>
{{.Counts.Parts}} parts: {{.Counts.Ready}} ready, {{.Counts.Review}} review, {{.Counts.Rescan}} rescan, {{.Counts.Failed}} failed, {{.Counts.Pending}} without a result
({{.Counts.Filed}} filed in this run, {{.Counts.Skipped}} already filed).
Workers {{.Workers}}{{if .MaxMemory}}, memory budget {{mib .MaxMemory}}{{end}}{{if .PeakHeap}}, peak heap {{mib .PeakHeap}}{{end}}.</p>
{{range .Notes}}<p>{{.}}</p>
{{end}}<table>
<tr><th>part</th><th>verdict</th><th>reasons</th><th>time</th><th>revision</th><th>log</th></tr>
{{range .Parts}}<tr class="{{.Outcome}}">
<td>{{if .Report}}<a href="{{.Report}}/index.html">{{.Name}}</a>{{else}}{{.Name}}{{end}}</td>
<td>{{.Outcome}}{{if eq .Status "skipped"}} (filed before){{end}}{{if .Carried}} (earlier run){{end}}</td>
<td>{{if .Error}}{{.Error}}{{end}}{{with .ShortReasons}}<ul>{{range .}}<li>{{.}}</li>{{end}}</ul>{{end}}</td>
<td>{{if .Finished}}{{secs .Seconds}}{{end}}</td>
<td>{{if .Revision}}{{.Revision}}{{end}}</td>
<td>{{if .Log}}<a href="{{.Log}}">log</a>{{end}}</td>
</tr>
{{end}}</table>
<p>A model marked ready passed scanfold's self-check on synthetic renders; it is not a safety assessment.
It still needs a supervised, reduced-speed trial in the cell, under the cell's risk assessment and local safety rules.</p>
</body>
</html>
`))
