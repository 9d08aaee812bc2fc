package cohort

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"strings"
	"sync"
	"time"

	"golang.org/x/sync/errgroup"

	"github.com/midsag/midsag"
)

// Options configure a batch Run.
type Options struct {
	// Root is the folder to discover studies in.
	Root string
	// Headers reads file headers for discovery; nil uses the Pipeline's
	// preprocessor when it is a HeaderReader.
	Headers HeaderReader
	// Pipeline scores one study; its Model's sha256 keys finished rows.
	Pipeline *midsag.Pipeline
	// Workers is how many studies are scored at once (at least 1). Memory
	// grows with it: each worker holds one study's picked series.
	Workers int
	// Shard selects the part of the cohort this run scores.
	Shard Shard
	// Labels, when not nil, is joined into the label column.
	Labels map[string]string
	// Rescore redoes studies already recorded with the same model.
	Rescore bool
	// FlushEvery is how often the tables are rewritten while running;
	// zero means one minute.
	FlushEvery time.Duration
	// OnStart is called once after discovery with the number of studies
	// to score and of those already done.
	OnStart func(d *Discovery, todo, done int)
	// OnRow is called after each study's row is recorded, from the
	// worker's goroutine.
	OnRow func(Row)
	// OnScored, when not nil, is called with each study's result after it
	// scores and before its row is recorded, from the worker's goroutine,
	// to write per-study outputs (such as occlusion maps). An error makes
	// the row failed; a run killed in between scores the study again on
	// resume, so the outputs must be written atomically.
	OnScored func(ctx context.Context, res *midsag.Result) error
}

// Summary is a batch's outcome.
type Summary struct {
	Discovery *Discovery `json:"discovery"`
	// InShard is the number of studies in this shard; Done of them were
	// recorded before this run and skipped.
	InShard int `json:"in_shard"`
	Done    int `json:"done_before"`
	// Scored counts this run's rows; ByStatus and ByReason break them
	// down ("scored", "rejected:not_dicom", ...).
	Scored   int            `json:"scored_now"`
	ByStatus map[Status]int `json:"by_status"`
	ByReason map[string]int `json:"by_reason"`
	Elapsed  time.Duration  `json:"elapsed"`
	// StudiesPerHour is this run's scoring rate, discovery included.
	StudiesPerHour float64 `json:"studies_per_hour"`
}

// Run discovers the studies under opts.Root, scores those of the shard
// not yet recorded with the model, records each row durably as it
// finishes, and writes results.csv and results.jsonl (all of the shard's
// recorded rows, sorted by Study Instance UID) every FlushEvery and at
// the end. If ctx is cancelled the studies in flight are dropped, the
// tables are written and ctx's error is returned. Without opts.Headers
// the Pipeline's preprocessor reads the headers, if it can.
func (s *Ledger) Run(ctx context.Context, opts Options) (*Summary, error) {
	start := time.Now()
	if opts.Headers == nil && opts.Pipeline != nil {
		opts.Headers, _ = opts.Pipeline.Pre.(HeaderReader)
	}
	if opts.Pipeline == nil || opts.Pipeline.Model == nil || opts.Headers == nil {
		return nil, errors.New("cohort: run needs a pipeline with a model and a header reader")
	}
	opts.Workers = max(opts.Workers, 1)
	pl, err := s.plan(ctx, opts)
	if err != nil {
		return nil, err
	}
	sum := &Summary{Discovery: pl.disc, InShard: len(pl.inShard), Done: pl.done, ByStatus: map[Status]int{}, ByReason: map[string]int{}}
	if opts.OnStart != nil {
		opts.OnStart(pl.disc, len(pl.todo), pl.done)
	}
	runErr := s.scoreAll(ctx, opts, pl, sum)
	if err := s.writeTables(ctx, opts, pl); err != nil {
		runErr = cmpErr(runErr, err)
	}
	sum.Elapsed = time.Since(start)
	if h := sum.Elapsed.Hours(); h > 0 {
		sum.StudiesPerHour = float64(sum.Scored) / h
	}
	if runErr != nil {
		return sum, runErr
	}
	return sum, ctx.Err()
}

// runPlan is what a Run found to do.
type runPlan struct {
	disc     *Discovery
	modelSHA string
	// inShard holds the shard's studies, todo those to score now; done
	// counts those recorded before.
	inShard map[string]bool
	todo    []string
	done    int
}

// plan discovers the studies and picks the shard's studies still to do.
func (s *Ledger) plan(ctx context.Context, opts Options) (*runPlan, error) {
	pl := &runPlan{modelSHA: opts.Pipeline.Model.Info().SHA256, inShard: map[string]bool{}}
	var err error
	if pl.disc, err = s.Discover(ctx, opts.Root, opts.Headers, opts.Workers); err != nil {
		return nil, err
	}
	all, err := s.Studies(ctx)
	if err != nil {
		return nil, err
	}
	done := map[string]bool{}
	if !opts.Rescore {
		if done, err = s.done(ctx, pl.modelSHA); err != nil {
			return nil, err
		}
	}
	for _, uid := range all {
		switch {
		case !opts.Shard.Has(uid):
		case done[uid]:
			pl.inShard[uid] = true
			pl.done++
		default:
			pl.inShard[uid] = true
			pl.todo = append(pl.todo, uid)
		}
	}
	return pl, nil
}

// writeTables writes results.csv and results.jsonl from the database.
// The rows are streamed in study order, so writing them needs memory for
// one row whatever the cohort's size.
func (s *Ledger) writeTables(ctx context.Context, opts Options, pl *runPlan) error {
	tw, err := newTableWriter(s.dir, opts.Labels != nil)
	if err != nil {
		return err
	}
	err = s.eachRow(context.WithoutCancel(ctx), pl.modelSHA, pl.inShard, func(r Row) error {
		if opts.Labels != nil {
			l := opts.Labels[r.StudyInstanceUID]
			r.Label = &l
		}
		return tw.write(r)
	})
	if err != nil {
		tw.abort()
		return err
	}
	return tw.commit()
}

// scoreAll scores the plan's studies with at most opts.Workers at once,
// recording each row as it finishes and rewriting the tables every
// FlushEvery. The first failure to record a row or write the tables
// stops the run and is returned.
func (s *Ledger) scoreAll(ctx context.Context, opts Options, pl *runPlan, sum *Summary) error {
	every := opts.FlushEvery
	if every <= 0 {
		every = time.Minute
	}
	tick := time.NewTicker(every)
	defer tick.Stop()
	runCtx, cancel := context.WithCancel(ctx)
	defer cancel()
	g, gctx := errgroup.WithContext(runCtx)
	g.SetLimit(opts.Workers)
	var mu sync.Mutex
	var flushErr error
	for _, uid := range pl.todo {
		if gctx.Err() != nil {
			break
		}
		select {
		case <-tick.C:
			if flushErr = s.writeTables(ctx, opts, pl); flushErr != nil {
				cancel()
			}
		default:
		}
		if flushErr != nil {
			break
		}
		g.Go(func() error {
			row, ok := s.scoreStudy(gctx, opts.Pipeline, opts.OnScored, uid, pl.modelSHA)
			if !ok {
				return nil
			}
			if err := s.put(context.WithoutCancel(gctx), row); err != nil {
				return err
			}
			mu.Lock()
			sum.count(row)
			mu.Unlock()
			if opts.OnRow != nil {
				opts.OnRow(row)
			}
			return nil
		})
	}
	return cmpErr(flushErr, g.Wait())
}

// count adds a recorded row to the summary's counts.
func (sum *Summary) count(row Row) {
	sum.Scored++
	sum.ByStatus[row.Status]++
	key := string(row.Status)
	if row.Reason != "" {
		key += ":" + row.Reason
	}
	sum.ByReason[key]++
}

func cmpErr(first, err error) error {
	if first != nil {
		return first
	}
	return err
}

// scoreStudy runs the Pipeline on one study's files. It returns false
// when the run was cancelled, so the study stays to do.
func (s *Ledger) scoreStudy(ctx context.Context, p *midsag.Pipeline, onScored func(context.Context, *midsag.Result) error,
	uid, modelSHA string) (Row, bool) {
	t0 := time.Now()
	row := Row{StudyInstanceUID: uid, ModelSHA256: modelSHA, Notice: midsag.Notice}
	files, err := s.studyFiles(ctx, uid)
	if err != nil {
		if ctx.Err() != nil {
			return row, false
		}
		return failed(row, err, t0), true
	}
	row.Files = len(files)
	srcs, closeSrcs := sources(files)
	res, err := p.Run(ctx, srcs)
	closeSrcs()
	if ctx.Err() != nil {
		return row, false
	}
	if err != nil {
		if e := midsag.RefusalOf(err); e != nil {
			row.Status = StatusRejected
			row.Reason = string(e.Reason)
			row.Message = oneLine(err.Error())
			row.ElapsedMS = msSince(t0)
			return row, true
		}
		return failed(row, err, t0), true
	}
	if res.StudyInstanceUID != uid {
		return failed(row, fmt.Errorf("pipeline scored study %s for %s", res.StudyInstanceUID, uid), t0), true
	}
	if onScored != nil {
		err := onScored(ctx, res)
		if ctx.Err() != nil {
			return row, false
		}
		if err != nil {
			return failed(row, fmt.Errorf("write the study's outputs: %w", err), t0), true
		}
	}
	row.Status = StatusScored
	row.SeriesInstanceUID = res.SeriesInstanceUID
	row.CenterSOPInstanceUID = res.CenterSOPInstanceUID
	row.CenterFrameNumber = res.CenterFrameNumber
	conf := res.MidlineConfidence
	row.MidlineConfidence = &conf
	row.RawOutput, row.Probability, row.CalibratedProbability = &res.RawOutput, &res.Probability, &res.CalibratedProb
	row.Threshold = &res.Threshold
	row.Decision = res.Decision
	row.QualityFlags = res.QualityFlags
	sort.Strings(row.QualityFlags)
	row.ElapsedMS = msSince(t0)
	return row, true
}

func failed(row Row, err error, t0 time.Time) Row {
	row.Status = StatusFailed
	row.Reason = string(midsag.ReasonError)
	row.Message = oneLine(err.Error())
	row.ElapsedMS = msSince(t0)
	return row
}

func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }

func msSince(t time.Time) float64 { return float64(time.Since(t).Microseconds()) / 1000 }
