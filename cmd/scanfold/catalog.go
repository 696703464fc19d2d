package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/internal/units"
)

// Where the catalog is, when no flag says: the environment variable,
// then a folder in the working directory.
const (
	catalogEnv        = "SCANFOLD_CATALOG"
	catalogDefaultDir = "scanfold-catalog"
)

// catalogFlag is the --catalog flag. The catalog command and each of its
// subcommands carry it, and so may any command that files parts
// (onboard, batch); catalogDir resolves it.
func catalogFlag() cli.Flag {
	return &cli.StringFlag{
		Name:      "catalog",
		Usage:     "catalog folder (default: $" + catalogEnv + ", else ./" + catalogDefaultDir + ")",
		TakesFile: true,
	}
}

// catalogDir returns the catalog folder for c: the --catalog flag given
// on c or on any command above it (the nearest wins), else the
// environment variable SCANFOLD_CATALOG, else ./scanfold-catalog.
func catalogDir(c *cli.Context) string {
	for _, cc := range c.Lineage() {
		if cc.IsSet("catalog") {
			if d := cc.String("catalog"); d != "" {
				return d
			}
		}
	}
	if d := os.Getenv(catalogEnv); d != "" {
		return d
	}
	return catalogDefaultDir
}

// openCatalog opens the catalog catalogDir names. With create false a
// missing catalog is an error that says how to point at the right one,
// so that a mistyped path never creates an empty catalog.
func openCatalog(c *cli.Context, create bool) (*catalog.Store, error) {
	dir := catalogDir(c)
	opt := catalog.DefaultOptions()
	opt.NoCreate = !create
	s, err := catalog.Open(dir, opt)
	if errors.Is(err, catalog.ErrNotFound) {
		return nil, fmt.Errorf("%w; give the catalog folder with --catalog DIR or $%s", err, catalogEnv)
	}
	return s, err
}

func catalogCommand() *cli.Command {
	jsonFlag := func(what string) cli.Flag {
		return &cli.BoolFlag{Name: "json", Usage: "print " + what + " as JSON, for programs"}
	}
	return &cli.Command{
		Name:            "catalog",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "list, show, export, remove and verify the parts in the local catalog",
		UsageText:       "scanfold catalog [--catalog DIR] list|show|export|remove|verify [arguments]",
		Description: "The catalog is the folder a robot cell reads its part models from: parts, each with " +
			"revisions 1, 2, 3…, each revision with its blobs (mesh, cloud, PPF tables, report) and metadata " +
			"(verdict, symmetry, acceptance threshold, provenance). A revision is named NAME@REV; NAME alone " +
			"means the latest revision. The folder is --catalog, else $" + catalogEnv + ", else ./" +
			catalogDefaultDir + ".",
		Flags: []cli.Flag{catalogFlag()},
		Subcommands: []*cli.Command{
			{
				Name:         "list",
				OnUsageError: usageError,
				Usage:        "list the parts: latest revision, its verdict, how many revisions, when updated",
				UsageText:    "scanfold catalog list [--json]",
				Flags:        []cli.Flag{catalogFlag(), jsonFlag("the parts")},
				Action:       catalogList,
			},
			{
				Name:         "show",
				OnUsageError: usageError,
				Usage:        "show a revision's verdict, parameters, provenance and blobs",
				UsageText:    "scanfold catalog show NAME[@REV] [--json]",
				Flags:        []cli.Flag{catalogFlag(), jsonFlag("the revision")},
				Action:       catalogShow,
			},
			{
				Name:         "export",
				OnUsageError: usageError,
				Usage:        "write a revision's model files and manifest.json into a new folder for the cell",
				UsageText:    "scanfold catalog export NAME[@REV] --to DIR",
				Description: "Writes the revision's blobs (cloud and mesh PLY, PPF tables, report), the mesh " +
					"converted to STL and OBJ, and last manifest.json, which lists every file with its SHA-256 " +
					"and gives the part frame, PPF parameters, acceptance threshold, symmetry, verdict and " +
					"provenance. DIR must be new or empty; an interrupted export leaves nothing behind.",
				Flags: []cli.Flag{
					catalogFlag(),
					&cli.StringFlag{Name: "to", Usage: "folder to write (must not exist, or be empty)", Required: true, TakesFile: true},
				},
				Action: catalogExport,
			},
			{
				Name:         "remove",
				OnUsageError: usageError,
				Usage:        "remove one revision (NAME@REV), or a whole part (NAME, with --yes)",
				UsageText:    "scanfold catalog remove NAME@REV | NAME --yes",
				Description: "Removes the revision, or every revision of the part, in one transaction, then " +
					"deletes the blob files nothing uses any more. Revision numbers are never reused. Removing " +
					"a whole part needs --yes; there is no prompt, so that scripts never hang.",
				Flags: []cli.Flag{
					catalogFlag(),
					&cli.BoolFlag{Name: "yes", Usage: "confirm removing every revision of a part named without @REV"},
				},
				Action: catalogRemove,
			},
			{
				Name:         "verify",
				OnUsageError: usageError,
				Usage:        "re-hash every blob and check the index; exit 1 when a revision is not intact",
				UsageText:    "scanfold catalog verify [--repair]",
				Description: "Runs SQLite's quick check on the index and re-hashes every blob file with SHA-256; " +
					"reports damaged and missing blobs and the revisions they affect, orphan blobs, stale temp " +
					"files and stale filing records. --repair deletes orphans, stale temp files and stale " +
					"records; it never deletes a revision or a damaged blob (remove the revision, or file the " +
					"same content again).",
				Flags: []cli.Flag{
					catalogFlag(),
					&cli.BoolFlag{Name: "repair", Usage: "delete orphan blobs, stale temp files and stale filing records"},
				},
				Action: catalogVerify,
			},
		},
	}
}

// oneRef returns the single NAME[@REV] argument of c, parsed.
func oneRef(c *cli.Context, verb string) (string, int, error) {
	if c.Args().Len() != 1 {
		return "", 0, fmt.Errorf("catalog %s takes one argument, NAME or NAME@REV; got %d", verb, c.Args().Len())
	}
	return catalog.ParseRef(c.Args().First())
}

// noArgs refuses positional arguments.
func noArgs(c *cli.Context, verb string) error {
	if c.Args().Len() > 0 {
		return fmt.Errorf("catalog %s takes no arguments, got %q", verb, c.Args().First())
	}
	return nil
}

// localTime formats t for people, in the local time zone.
func localTime(t time.Time) string {
	if t.IsZero() {
		return "-"
	}
	return t.Local().Format("2006-01-02 15:04:05 MST")
}

// byteSize formats n bytes with SI prefixes (1 kB = 1000 B).
func byteSize(n int64) string {
	switch {
	case n < 1000:
		return strconv.FormatInt(n, 10) + " B"
	case n < 1000*1000:
		return fmt.Sprintf("%.1f kB", float64(n)/1e3)
	case n < 1000*1000*1000:
		return fmt.Sprintf("%.1f MB", float64(n)/1e6)
	}
	return fmt.Sprintf("%.2f GB", float64(n)/1e9)
}

// table is a text/tabwriter (two spaces between columns) whose Flush
// writes to w with the padding at the ends of lines trimmed.
type table struct {
	*tabwriter.Writer
	buf bytes.Buffer
	w   io.Writer
}

func newTable(w io.Writer) *table {
	t := &table{w: w}
	t.Writer = tabwriter.NewWriter(&t.buf, 0, 0, 2, ' ', 0)
	return t
}

// Flush aligns what was written and copies it to the destination.
func (t *table) Flush() error {
	if err := t.Writer.Flush(); err != nil {
		return err
	}
	var out bytes.Buffer
	for _, line := range strings.SplitAfter(t.buf.String(), "\n") {
		nl := strings.HasSuffix(line, "\n")
		out.WriteString(strings.TrimRight(line, " \n"))
		if nl {
			out.WriteByte('\n')
		}
	}
	t.buf.Reset()
	_, err := t.w.Write(out.Bytes())
	return err
}

// printJSON writes v as indented JSON, with <, > and & left readable.
func printJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetEscapeHTML(false)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// partJSON is one element of 'catalog list --json'.
type partJSON struct {
	Name      string          `json:"name"`
	Latest    int             `json:"latest"`
	Verdict   catalog.Verdict `json:"verdict"`
	Revisions int             `json:"revisions"`
	Updated   time.Time       `json:"updated"`
}

func catalogList(c *cli.Context) error {
	if err := noArgs(c, "list"); err != nil {
		return err
	}
	s, err := openCatalog(c, false)
	if err != nil {
		return err
	}
	defer s.Close()
	list, err := s.List()
	if err != nil {
		return err
	}
	w := c.App.Writer
	if c.Bool("json") {
		out := make([]partJSON, 0, len(list))
		for _, p := range list {
			out = append(out, partJSON{p.Name, p.Latest, p.Verdict, p.Revisions, p.Updated})
		}
		return printJSON(w, out)
	}
	if len(list) == 0 {
		_, err := fmt.Fprintf(w, "catalog %s holds no parts\n", s.Dir())
		return err
	}
	tw := newTable(w)
	fmt.Fprintln(tw, "PART\tLATEST\tVERDICT\tREVISIONS\tUPDATED")
	for _, p := range list {
		fmt.Fprintf(tw, "%s\t@%d\t%s\t%d\t%s\n", p.Name, p.Latest, p.Verdict, p.Revisions, localTime(p.Updated))
	}
	return tw.Flush()
}

// revisionJSON is the output of 'catalog show --json': the revision,
// the part's revision numbers, and the metadata's own fields.
type revisionJSON struct {
	Part      string                     `json:"part"`
	Revision  int                        `json:"revision"`
	Revisions []int                      `json:"revisions"`
	Filed     time.Time                  `json:"filed"`
	Blobs     map[string]catalog.BlobRef `json:"blobs"`
	catalog.Metadata
}

func catalogShow(c *cli.Context) error {
	name, rev, err := oneRef(c, "show")
	if err != nil {
		return err
	}
	s, err := openCatalog(c, false)
	if err != nil {
		return err
	}
	defer s.Close()
	r, err := s.ShowContext(c.Context, name, rev)
	if err != nil {
		return err
	}
	revs, err := s.Revisions(r.Part)
	if err != nil {
		return err
	}
	if c.Bool("json") {
		return printJSON(c.App.Writer, revisionJSON{r.Part, r.Number, revs, r.Filed, r.Blobs, r.Metadata})
	}
	return printRevision(c.App.Writer, r, revs)
}

// printRevision writes a revision for people.
func printRevision(w io.Writer, r *catalog.Revision, revs []int) error {
	tw := newTable(w)
	line := func(key, format string, args ...any) {
		fmt.Fprintf(tw, "  %s\t"+format+"\n", append([]any{key}, args...)...)
	}

	nums := make([]string, len(revs))
	for i, n := range revs {
		nums[i] = strconv.Itoa(n)
	}
	latest := ""
	if len(revs) > 0 && revs[len(revs)-1] == r.Number {
		latest = ", the latest"
	}
	fmt.Fprintf(tw, "%s (revision %d%s; revisions %s)\n", catalog.FormatRef(r.Part, r.Number), r.Number, latest, strings.Join(nums, ", "))
	line("verdict", "%s", r.Verdict)
	for i, reason := range r.Reasons {
		key := ""
		if i == 0 {
			key = "reasons"
		}
		line(key, "- %s", reason)
	}
	line("filed", "%s", localTime(r.Filed))
	if r.Acceptance.Scorer != "" || r.Acceptance.Threshold != 0 {
		line("acceptance", "threshold %.4g on the %s score", r.Acceptance.Threshold, orDash(r.Acceptance.Scorer))
	} else {
		line("acceptance", "none recorded")
	}
	line("symmetry", "%s", symmetryText(r.Symmetry))
	line("diameter", "%s", units.FormatLength(r.Diameter))
	line("frame", "%s", orDash(r.Frame.Description))
	m := r.Frame.PartToSweep
	for i := 0; i < 4; i++ {
		key := ""
		if i == 0 {
			key = "part to sweep"
		}
		line(key, "[% .6g % .6g % .6g % .6g]", m[4*i], m[4*i+1], m[4*i+2], m[4*i+3])
	}
	p := r.PPF
	line("PPF", "sampling step %s, distance step %s, %d angle bins, reference-point stride %d",
		units.FormatLength(p.SamplingStep), units.FormatLength(p.DistanceStep), p.AngleBins, p.RefPointEvery)

	fmt.Fprintln(tw, "provenance")
	pv := r.Provenance
	line("input hash", "%s", orDash(pv.InputHash))
	line("settings", "%s", settingsText(pv.Settings))
	line("settings hash", "%s", orDash(pv.SettingsHash))
	line("tool version", "%s", orDash(pv.ToolVersion))
	if len(pv.Stages) > 0 {
		total := 0.0
		for _, st := range pv.Stages {
			total += st.Seconds
		}
		for i, st := range pv.Stages {
			key := ""
			if i == 0 {
				key = "stages"
			}
			line(key, "%-12s %8.2f s", st.Stage, st.Seconds)
		}
		line("", "%-12s %8.2f s", "total", total)
	}
	line("created", "%s", localTime(pv.Created))
	line("host", "%s", orDash(pv.Host))
	if err := tw.Flush(); err != nil {
		return err
	}

	fmt.Fprintln(w, "blobs")
	roles := make([]string, 0, len(r.Blobs))
	for role := range r.Blobs {
		roles = append(roles, role)
	}
	sort.Strings(roles)
	tw = newTable(w)
	fmt.Fprintln(tw, "  ROLE\tSIZE\tBYTES\tMEDIA TYPE\tSHA-256")
	for _, role := range roles {
		b := r.Blobs[role]
		fmt.Fprintf(tw, "  %s\t%s\t%d\t%s\t%s\n", role, byteSize(b.Size), b.Size, b.MediaType, b.SHA256)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if r.Verdict == catalog.Ready {
		_, err := fmt.Fprintln(w, "\n"+safetyCaution)
		return err
	}
	return nil
}

// safetyCaution is printed wherever a model is handed towards a cell.
const safetyCaution = "Caution: a ready model still needs a supervised, reduced-speed trial in the cell, " +
	"under the cell's risk assessment and local safety rules, before production use."

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// symmetryText describes a symmetry in one line.
func symmetryText(s catalog.Symmetry) string {
	var b strings.Builder
	switch s.Kind {
	case "":
		b.WriteString("not assessed")
	case "discrete":
		fmt.Fprintf(&b, "discrete, order %d", s.Order)
	default:
		b.WriteString(s.Kind)
	}
	if s.Axis != [3]float64{} {
		fmt.Fprintf(&b, " about axis (%.4g, %.4g, %.4g)", s.Axis[0], s.Axis[1], s.Axis[2])
	}
	if s.Description != "" {
		b.WriteString(": " + s.Description)
	}
	return b.String()
}

// maxSettingsText is how much of the settings document show prints;
// --json prints all of it.
const maxSettingsText = 240

// settingsText is the settings document compacted onto one line, cut
// at maxSettingsText bytes.
func settingsText(doc json.RawMessage) string {
	if len(bytes.TrimSpace(doc)) == 0 {
		return "-"
	}
	var compact bytes.Buffer
	if err := json.Compact(&compact, doc); err != nil {
		return string(doc)
	}
	buf := bytes.NewBuffer(unescapeHTML(compact.Bytes()))
	if buf.Len() > maxSettingsText {
		cut := maxSettingsText
		for cut > 0 && buf.Bytes()[cut]&0xc0 == 0x80 { // do not split a UTF-8 sequence
			cut--
		}
		return fmt.Sprintf("%s… (%d bytes; --json prints all)", buf.Bytes()[:cut], buf.Len())
	}
	return buf.String()
}

// unescapeHTML undoes encoding/json's HTML-safe escapes (\u003c,
// \u003e, \u0026) in a valid JSON document, so that "<" and "&" print as
// themselves; every other escape is kept as it is.
func unescapeHTML(doc []byte) []byte {
	out := make([]byte, 0, len(doc))
	for i := 0; i < len(doc); i++ {
		if doc[i] != '\\' || i+1 >= len(doc) {
			out = append(out, doc[i])
			continue
		}
		if doc[i+1] == 'u' && i+6 <= len(doc) {
			switch string(doc[i+2 : i+6]) {
			case "003c", "003C":
				out, i = append(out, '<'), i+5
				continue
			case "003e", "003E":
				out, i = append(out, '>'), i+5
				continue
			case "0026":
				out, i = append(out, '&'), i+5
				continue
			}
		}
		out = append(out, doc[i], doc[i+1]) // any other escape, kept
		i++
	}
	return out
}

func catalogExport(c *cli.Context) error {
	name, rev, err := oneRef(c, "export")
	if err != nil {
		return err
	}
	s, err := openCatalog(c, false)
	if err != nil {
		return err
	}
	defer s.Close()
	to := c.String("to")
	m, err := s.ExportContext(c.Context, name, rev, to)
	if err != nil {
		return err
	}
	w := c.App.Writer
	fmt.Fprintf(w, "exported %s (verdict %s) to %s\n", catalog.FormatRef(m.Part, m.Revision), m.Verdict, to)
	tw := newTable(w)
	var total int64
	for _, f := range m.Files {
		from := ""
		if f.DerivedFrom != "" {
			from = "converted from " + f.DerivedFrom
		}
		fmt.Fprintf(tw, "  %s\t%s\t%s\t%s\n", f.File, byteSize(f.Size), f.MediaType, from)
		total += f.Size
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "  %d files, %s\n", len(m.Files), byteSize(total))
	fmt.Fprintf(w, "manifest %s\n", filepath.Join(to, catalog.ManifestName))
	if m.Verdict != catalog.Ready {
		fmt.Fprintf(w, "warning: the verdict is %s, not ready: read the reasons (scanfold catalog show %s)\n",
			m.Verdict, catalog.FormatRef(m.Part, m.Revision))
	}
	_, err = fmt.Fprintln(w, safetyCaution)
	return err
}

func catalogRemove(c *cli.Context) error {
	name, rev, err := oneRef(c, "remove")
	if err != nil {
		return err
	}
	s, err := openCatalog(c, false)
	if err != nil {
		return err
	}
	defer s.Close()
	revs, err := s.Revisions(name)
	if err != nil {
		return err
	}
	nums := make([]string, len(revs))
	for i, n := range revs {
		nums[i] = strconv.Itoa(n)
	}
	if rev == 0 && !c.Bool("yes") {
		return fmt.Errorf("catalog remove: %q names the whole part, with %d revision(s) (%s); to remove them all, "+
			"run again with --yes; to remove one, name it as %s@REV", name, len(revs), strings.Join(nums, ", "), name)
	}
	// Remove is one transaction; do not start it once interrupted.
	if err := c.Context.Err(); err != nil {
		return err
	}
	if err := s.Remove(name, rev); err != nil {
		return err
	}
	w := c.App.Writer
	if rev == 0 {
		_, err = fmt.Fprintf(w, "removed part %s: revision(s) %s\n", name, strings.Join(nums, ", "))
		return err
	}
	left, err := s.Revisions(name)
	switch {
	case errors.Is(err, catalog.ErrNotFound):
		_, err = fmt.Fprintf(w, "removed %s; the part has no revisions left\n", catalog.FormatRef(name, rev))
	case err == nil:
		nums = nums[:0]
		for _, n := range left {
			nums = append(nums, strconv.Itoa(n))
		}
		_, err = fmt.Fprintf(w, "removed %s; revisions left: %s\n", catalog.FormatRef(name, rev), strings.Join(nums, ", "))
	}
	return err
}

func catalogVerify(c *cli.Context) error {
	if err := noArgs(c, "verify"); err != nil {
		return err
	}
	s, err := openCatalog(c, false)
	if err != nil {
		return err
	}
	defer s.Close()
	repair := c.Bool("repair")
	progress, finish := progressFunc(c.App.ErrWriter, "verify")
	rep, err := s.VerifyProgress(c.Context, repair, progress)
	finish()
	if err != nil {
		return err
	}
	printVerify(c.App.Writer, s.Dir(), &rep, repair)
	if !rep.Healthy() {
		return fmt.Errorf("catalog %s is not healthy: %s; affected revisions: %s (remove them with 'scanfold catalog remove NAME@REV', or file the same content again)",
			s.Dir(), verifyProblems(&rep), orDash(strings.Join(rep.BadRevisions, ", ")))
	}
	return nil
}

// verifyProblems sums up what makes a report unhealthy.
func verifyProblems(r *catalog.VerifyReport) string {
	var p []string
	if n := len(r.Damaged); n > 0 {
		p = append(p, fmt.Sprintf("%d damaged blob(s)", n))
	}
	if n := len(r.Missing); n > 0 {
		p = append(p, fmt.Sprintf("%d missing blob(s)", n))
	}
	if n := len(r.IndexProblems); n > 0 {
		p = append(p, fmt.Sprintf("%d index problem(s)", n))
	}
	if len(p) == 0 && len(r.BadRevisions) > 0 {
		p = append(p, fmt.Sprintf("%d revision(s) not intact", len(r.BadRevisions)))
	}
	return strings.Join(p, ", ")
}

// printVerify writes a verify report for people.
func printVerify(w io.Writer, dir string, r *catalog.VerifyReport, repair bool) {
	fmt.Fprintf(w, "verified catalog %s\n", dir)
	tw := newTable(w)
	line := func(key string, n int, detail string) {
		if detail != "" {
			detail = "  " + detail
		}
		fmt.Fprintf(tw, "  %s\t%d%s\n", key, n, detail)
	}
	line("revisions", r.Revisions, "")
	line("blobs checked", r.Blobs, fmt.Sprintf("(%s re-hashed with SHA-256)", byteSize(r.Bytes)))
	line("index problems", len(r.IndexProblems), "")
	line("damaged", len(r.Damaged), "")
	line("missing", len(r.Missing), "")
	line("orphans", len(r.Orphans), "")
	line("stale temp files", len(r.StaleTemp), "")
	line("stale records", r.StalePending, "")
	line("stray files", len(r.Strays), "(never deleted; look at them)")
	line("in flight", r.InFlight, "(files of filings in progress)")
	if repair {
		line("removed", len(r.Removed), "(by --repair)")
	}
	tw.Flush()
	for _, p := range r.IndexProblems {
		fmt.Fprintf(w, "index problem: %s\n", p)
	}
	issue := func(kind string, b catalog.BlobIssue) {
		fmt.Fprintf(w, "%s blob %s (%s): %s; used by %s\n", kind, b.SHA256, b.Path, b.Detail, strings.Join(b.Users, ", "))
	}
	for _, b := range r.Damaged {
		issue("damaged", b)
	}
	for _, b := range r.Missing {
		issue("missing", b)
	}
	for _, b := range r.Orphans {
		fmt.Fprintf(w, "orphan blob %s (%s): %s\n", b.SHA256, byteSize(b.Size), b.Detail)
	}
	for _, p := range r.StaleTemp {
		fmt.Fprintf(w, "stale temp file %s\n", p)
	}
	for _, p := range r.Strays {
		fmt.Fprintf(w, "stray file %s\n", p)
	}
	for _, p := range r.Removed {
		fmt.Fprintf(w, "removed %s\n", p)
	}
	leftovers := len(r.Orphans) > 0 || len(r.StaleTemp) > 0 || r.StalePending > 0
	switch {
	case !r.Healthy():
		fmt.Fprintf(w, "not healthy: revisions not intact: %s\n", orDash(strings.Join(r.BadRevisions, ", ")))
	case leftovers && !repair:
		fmt.Fprintln(w, "healthy; run 'scanfold catalog verify --repair' to remove the leftovers above")
	case len(r.Strays) > 0:
		fmt.Fprintln(w, "healthy; stray files left for a person to look at")
	default:
		fmt.Fprintln(w, "healthy")
	}
}
