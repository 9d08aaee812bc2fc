package main

import (
	"context"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"runtime"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/cohort"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/pipeline"
)

func init() {
	register("batch", "score every study under a folder tree, resumably, into results.csv/.jsonl", runBatch)
}

func runBatch(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("batch", "ROOT", "Finds every study under ROOT (folders and zip archives, any layout) by reading DICOM\n"+
		"headers only, scores each with the model and writes OUT/results.csv and OUT/results.jsonl,\n"+
		"one row per study sorted by Study Instance UID. Finished studies are kept in OUT/batch.db:\n"+
		"a rerun scores only what is missing (or all with --rescore). In batch, --threads 0 means\n"+
		"one ONNX Runtime thread per study, with up to --workers studies in the model at once.", stderr)
	var pf pipelineFlags
	pf.register(fs, "also make an occlusion map of each study scored in this run: OUT/maps/STUDY_UID/ holds result.json, heatmap.png and heatmap.dcm")
	out := fs.String("out", "", "output `folder` (results, header index and progress; required)")
	workers := fs.Int("workers", runtime.NumCPU(), "studies scored at once; memory grows with it")
	shardFlag := fs.String("shard", "", "score only shard `I/N` of the cohort: FNV-1a 64 of the Study Instance UID mod N equals I")
	labels := fs.String("labels", "", "CSV `file` with study_instance_uid and label columns, joined as the label column")
	rescore := fs.Bool("rescore", false, "score again studies already recorded with this model")
	every := fs.Duration("progress-every", 30*time.Second, "`interval` of progress log lines when stderr is not a terminal")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 || *out == "" {
		fs.Usage()
		return usagef("batch needs --out and one ROOT folder")
	}
	if *workers < 1 {
		return usagef("--workers must be at least 1")
	}
	if *every <= 0 {
		return usagef("--progress-every must be positive")
	}
	cfg, err := pf.config(batchSession(pf.threads, *workers))
	if err != nil {
		return err
	}
	var shard cohort.Shard
	if *shardFlag != "" {
		s, err := cohort.ParseShard(*shardFlag)
		if err != nil {
			return usagef("--shard: %v", err)
		}
		shard = s
	}
	root := fs.Arg(0)
	if st, err := os.Stat(root); err != nil || !st.IsDir() {
		return reportRejection(midsag.Rejectf(midsag.ReasonNoInput, "%s is not a folder", root), false, stderr)
	}
	var labelMap map[string]string
	if *labels != "" {
		m, err := cohort.ReadLabels(*labels)
		if err != nil {
			return reportRejection(err, false, stderr)
		}
		labelMap = m
	}
	pipe, model, err := pipeline.New(cfg)
	if err != nil {
		return err
	}
	defer model.Close()
	ledger, err := cohort.Open(*out)
	if err != nil {
		return err
	}
	defer ledger.Close()

	var onScored func(context.Context, *midsag.Result) error
	if pipe.Explainer != nil {
		onScored = func(_ context.Context, res *midsag.Result) error {
			return writeStudyMaps(filepath.Join(*out, "maps"), res)
		}
	}
	prog := newProgress(stderr, *every)
	sum, err := ledger.Run(ctx, cohort.Options{
		OnScored: onScored,
		Root:     root,
		Pipeline: pipe,
		Workers:  *workers,
		Shard:    shard,
		Labels:   labelMap,
		Rescore:  *rescore,
		OnStart:  prog.start,
		OnRow:    func(cohort.Row) { prog.add() },
	})
	prog.finish()
	if sum != nil {
		printBatchSummary(stdout, sum, filepath.Join(*out, cohort.CSVName))
	}
	if err != nil {
		if errors.Is(err, context.Canceled) {
			return fmt.Errorf("batch interrupted; rows recorded so far are kept, rerun to resume: %w", err)
		}
		return fmt.Errorf("batch: %w", err)
	}
	if sum != nil && sum.Discovery != nil && sum.Discovery.Studies == 0 {
		return reportRejection(midsag.Rejectf(midsag.ReasonNoInput, "no DICOM study found under %s: %s",
			root, describeRefused(sum.Discovery)), false, stderr)
	}
	return nil
}

// describeRefused says what discovery saw when it found no study, so an
// empty or mistyped root is told apart from a folder of unusable files.
func describeRefused(d *cohort.Discovery) string {
	if d.Files == 0 {
		return "no files (hidden files and folders are skipped)"
	}
	reasons := make([]string, 0, len(d.Refused))
	for r, n := range d.Refused {
		reasons = append(reasons, fmt.Sprintf("%d %s", n, r))
	}
	sort.Strings(reasons)
	return fmt.Sprintf("%d file(s), none with a Study Instance UID (refused: %s)", d.Files, strings.Join(reasons, ", "))
}

// writeStudyMaps writes res's result.json, heatmap.png and heatmap.dcm
// into dir/NAME, NAME being the Study Instance UID when it is a valid UID
// (PS3.5 9.1: digits and dots, at most 64 characters) and its FNV-1a 64
// hash otherwise, so a header can never name a path outside dir.
func writeStudyMaps(dir string, res *midsag.Result) error {
	name := res.StudyInstanceUID
	if !validUID(name) {
		h := fnv.New64a()
		h.Write([]byte(name))
		name = fmt.Sprintf("uid-%016x", h.Sum64())
	}
	sub := filepath.Join(dir, name)
	if err := os.MkdirAll(sub, 0o755); err != nil {
		return err
	}
	if err := writeJSONFile(filepath.Join(sub, "result.json"), res); err != nil {
		return err
	}
	return writeHeatmaps(sub, res)
}

// validUID reports whether s is a DICOM UID: 1 to 64 characters, digits
// and dots, neither first nor last a dot (PS3.5 9.1).
func validUID(s string) bool {
	if len(s) == 0 || len(s) > 64 || s[0] == '.' || s[len(s)-1] == '.' {
		return false
	}
	for _, c := range []byte(s) {
		if (c < '0' || c > '9') && c != '.' {
			return false
		}
	}
	return true
}

// batchSession returns the model's session options for many studies at
// once. By default each Predict uses one intra-op thread and up to workers
// run at once: on 2 cores, 2 workers then keep both cores busy, one
// study's decode and stack overlap another's model run, and ONNX Runtime
// never has more threads than cores. With --threads T, runs are bounded
// to cores/T so T x runs stays within the cores.
func batchSession(threads, workers int) models.Options {
	if threads > 0 {
		return models.Options{IntraOpThreads: threads, MaxConcurrent: max(1, runtime.NumCPU()/threads)}
	}
	return models.Options{IntraOpThreads: 1, MaxConcurrent: min(workers, runtime.NumCPU())}
}

// progress shows a bar with count, rate and ETA on a terminal, and
// otherwise logs a JSON line every interval. It never names a study.
type progress struct {
	w     io.Writer
	every time.Duration

	mu          sync.Mutex
	bar         *progressbar.ProgressBar
	total, done int
	start0      time.Time
	stop        chan struct{}
	wg          sync.WaitGroup
}

func newProgress(w io.Writer, every time.Duration) *progress {
	return &progress{w: w, every: every, stop: make(chan struct{})}
}

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}

func (p *progress) start(d *cohort.Discovery, todo, done int) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.total, p.start0 = todo, time.Now()
	fmt.Fprintf(p.w, "midsag batch: %d files (%d headers read, %d from the index), %d studies; %d to score, %d already done\n",
		d.Files, d.Read, d.Cached, d.Studies, todo, done)
	if isTerminal(p.w) {
		p.bar = progressbar.NewOptions(todo,
			progressbar.OptionSetWriter(p.w),
			progressbar.OptionSetDescription("scoring"),
			progressbar.OptionShowCount(),
			progressbar.OptionShowIts(),
			progressbar.OptionSetItsString("studies"),
			progressbar.OptionSetPredictTime(true),
			progressbar.OptionThrottle(200*time.Millisecond),
			progressbar.OptionOnCompletion(func() { fmt.Fprintln(p.w) }),
		)
		return
	}
	log := slog.New(slog.NewJSONHandler(p.w, nil))
	p.wg.Add(1)
	go func() {
		defer p.wg.Done()
		t := time.NewTicker(p.every)
		defer t.Stop()
		for {
			select {
			case <-p.stop:
				return
			case <-t.C:
				p.mu.Lock()
				done, total, el := p.done, p.total, time.Since(p.start0)
				p.mu.Unlock()
				rate := float64(done) / el.Hours()
				eta := "unknown"
				if done > 0 {
					eta = (time.Duration(float64(el) / float64(done) * float64(total-done))).Round(time.Second).String()
				}
				log.Info("batch progress", "done", done, "total", total, "studies_per_hour", int(rate), "eta", eta)
			}
		}
	}()
}

func (p *progress) add() {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.done++
	if p.bar != nil {
		_ = p.bar.Add(1) // a failed terminal write is not the batch's failure
	}
}

func (p *progress) finish() {
	close(p.stop)
	p.wg.Wait()
	if p.bar != nil {
		_ = p.bar.Exit()
	}
}

// printBatchSummary prints counts by status and reason, time and rate.
func printBatchSummary(w io.Writer, s *cohort.Summary, table string) {
	fmt.Fprintf(w, "%s\n\n", midsag.Notice)
	if d := s.Discovery; d != nil {
		fmt.Fprintf(w, "discovery    %d files, %d headers read, %d from the index, %d removed, %d studies\n",
			d.Files, d.Read, d.Cached, d.Removed, d.Studies)
		for _, r := range refusedReasons(d.Refused) {
			fmt.Fprintf(w, "  file %-30s %d\n", r, d.Refused[midsag.Reason(r)])
		}
	}
	fmt.Fprintf(w, "studies      %d in this shard, %d done before, %d done now\n", s.InShard, s.Done, s.Scored)
	for _, st := range []cohort.Status{cohort.StatusScored, cohort.StatusRejected, cohort.StatusFailed} {
		fmt.Fprintf(w, "  %-10s %d\n", st, s.ByStatus[st])
	}
	reasons := make([]string, 0, len(s.ByReason))
	for k := range s.ByReason {
		reasons = append(reasons, k)
	}
	sort.Strings(reasons)
	for _, k := range reasons {
		if k != string(cohort.StatusScored) {
			fmt.Fprintf(w, "  %-40s %d\n", k, s.ByReason[k])
		}
	}
	fmt.Fprintf(w, "elapsed      %s, %.0f studies per hour\n", s.Elapsed.Round(time.Millisecond), s.StudiesPerHour)
	fmt.Fprintf(w, "table        %s\n", table)
}

func refusedReasons(m map[midsag.Reason]int) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, string(k))
	}
	sort.Strings(out)
	return out
}
