// Package batch onboards a whole bin of parts unattended, typically
// overnight: every part's sweep goes through onboard.Onboard on a pool
// of workers bounded by the cores and by a memory budget, each part
// with its own log, and the run leaves a summary (JSON and an HTML index
// linking every part's report) that is kept up to date as parts finish.
// The command line (scanfold batch) only renders what Run reports.
//
// # The bin
//
// A bin is a folder. Either it holds bin.json (ParseBin gives the
// format: each part's name, sweep folder and optional drawing model), or
// each of its sub-folders is one part's sweep, named like the folder
// (sorted by name; folders starting with '.' are left out). Paths in
// bin.json are relative to the bin folder.
//
// # The run folder
//
// Options.OutDir, by default BIN/.scanfold-batch, holds
//
//	summary.json            the Summary (format "scanfold.batch-summary", version 1)
//	index.html              the same for people: a table linking each report and log
//	logs/NAME.log           one log per part, appended to by every run: timestamped
//	                        start, stages with their times, the outcome or the error
//	                        (a crash's stack trace)
//	reports/NAME-rREV/      the report folder of each revision filed or found
//	lock                    held (flock) while a run works in the folder
//
// summary.json and index.html are replaced atomically (temporary file,
// fsync, rename) when a part starts and when it finishes, so a run that
// is killed leaves a usable summary of what it did; links in index.html
// are relative, so the run folder can be moved or copied whole.
//
// # Failure isolation
//
// A part that fails (a corrupt sweep, no part found, an error in any
// stage, a panic in the part's goroutine) gets status failed with the
// reason, and the others go on. Nothing of a failed part is filed
// (onboard files only at the end, and the catalog is crash-safe). A
// panic raised in a goroutine that a stage starts itself cannot be
// recovered by Go and ends the process; the next run then carries on
// (see below), and a part that keeps ending runs is marked failed after
// Options.MaxAttempts of them.
//
// # Resumption
//
// Every part is onboarded with onboard.Options.SkipFiled: a part filed
// before from the same sweep (its SHA-256) with the same settings is not
// onboarded again; its line says skipped, with the verdict and revision
// found, and its report folder is written from the catalog when the run
// folder lacks it. A part that failed in the previous run (as
// summary.json says) keeps its failure, unless Options.RetryFailed or
// its sweep folder changed since (a fingerprint of its files' names,
// sizes and modification times). A run killed with SIGKILL, or
// interrupted, therefore loses nothing and files nothing twice: what was
// committed to the catalog is found by SkipFiled, what was not is done
// again.
//
// # Interruption
//
// Closing Options.Stop stops the run from starting parts; the running
// ones finish. Cancelling Run's context abandons the running ones too:
// they stop at their next checkpoint and file nothing. Either way Run
// writes the summary (state interrupted) and returns ErrStopped, which
// wraps context.Canceled.
//
// # Determinism
//
// Each part's result depends only on its sweep and the settings, not on
// the number of workers nor on which other parts were filed first: the
// confusers (the parts each check compares its part with) are fixed once
// per run, as the catalog's other parts when the run starts, leaving out
// the bin's own parts (so that a resumed run uses the same set), or the
// demo parts bin when that leaves none and DemoConfusers is set. The
// bin's parts are therefore not checked against one another.
//
// # Memory
//
// EstimateMemory estimates a part's peak from its sweep's image size and
// the check's settings; the terms were measured (see memory.go). A part
// is started only while the estimates of the running parts and its own
// fit in Options.MaxMemory, except that one part always runs. The
// summary records the heap peak sampled during the run and the
// process's peak resident set.
//
// # Degenerate input
//
// A bin with no part is an error; so is an unreadable bin.json. A
// sub-folder that is not a sweep, or whose name is not a valid part name,
// is a part that fails with the reason. Two parts whose names differ
// only in letter case: the second fails (the catalog's names ignore
// case). An unreadable previous summary is noted and ignored.
package batch
