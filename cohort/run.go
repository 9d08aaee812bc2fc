package cohort

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/midsag/midsag"
)

// Options configure a batch Run.
type Options struct {
	// Root is the folder to discover studies in.
	Root string
	// Headers reads file headers for discovery.
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
// tables are written and ctx's error is returned.
func (s *Store) Run(ctx context.Context, opts Options) (*Summary, error) {
	start := time.Now()
	if opts.Pipeline == nil || opts.Pipeline.Model == nil || opts.Headers == nil {
		return nil, errors.New("cohort: run needs a pipeline with a model and a header reader")
	}
	workers := max(opts.Workers, 1)
	modelSHA := opts.Pipeline.Model.Info().SHA256
	disc, err := s.Discover(ctx, opts.Root, opts.Headers, workers)
	if err != nil {
		return nil, err
	}
	all, err := s.Studies(ctx)
	if err != nil {
		return nil, err
	}
	inShard := map[string]bool{}
	var mine []string
	for _, uid := range all {
		if opts.Shard.Has(uid) {
			inShard[uid] = true
			mine = append(mine, uid)
		}
	}
	done := map[string]bool{}
	if !opts.Rescore {
		if done, err = s.done(ctx, modelSHA); err != nil {
			return nil, err
		}
	}
	var todo []string
	nDone := 0
	for _, uid := range mine {
		if done[uid] {
			nDone++
		} else {
			todo = append(todo, uid)
		}
	}
	sum := &Summary{Discovery: disc, InShard: len(mine), Done: nDone, ByStatus: map[Status]int{}, ByReason: map[string]int{}}
	if opts.OnStart != nil {
		opts.OnStart(disc, len(todo), nDone)
	}

	// The tables are streamed from the database in study order, so
	// writing them needs memory for one row whatever the cohort's size.
	writeTables := func() error {
		tw, err := newTableWriter(s.dir, opts.Labels != nil)
		if err != nil {
			return err
		}
		err = s.eachRow(context.WithoutCancel(ctx), modelSHA, inShard, func(r Row) error {
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

	var (
		mu       sync.Mutex
		firstErr error
		wg       sync.WaitGroup
	)
	next := make(chan string)
	runCtx, cancel := context.WithCancel(ctx)
	defer cancel()
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for uid := range next {
				row, ok := s.scoreStudy(runCtx, opts.Pipeline, opts.OnScored, uid, modelSHA)
				if !ok {
					continue
				}
				if err := s.put(context.WithoutCancel(runCtx), row); err != nil {
					mu.Lock()
					firstErr = cmpErr(firstErr, err)
					mu.Unlock()
					cancel()
					continue
				}
				mu.Lock()
				sum.Scored++
				sum.ByStatus[row.Status]++
				key := string(row.Status)
				if row.Reason != "" {
					key += ":" + row.Reason
				}
				sum.ByReason[key]++
				mu.Unlock()
				if opts.OnRow != nil {
					opts.OnRow(row)
				}
			}
		}()
	}
	every := opts.FlushEvery
	if every <= 0 {
		every = time.Minute
	}
	tick := time.NewTicker(every)
	defer tick.Stop()
feed:
	for _, uid := range todo {
		for {
			select {
			case next <- uid:
				continue feed
			case <-runCtx.Done():
				break feed
			case <-tick.C:
				if err := writeTables(); err != nil {
					mu.Lock()
					firstErr = cmpErr(firstErr, err)
					mu.Unlock()
					cancel()
				}
			}
		}
	}
	close(next)
	wg.Wait()
	if err := writeTables(); err != nil {
		firstErr = cmpErr(firstErr, err)
	}
	sum.Elapsed = time.Since(start)
	if h := sum.Elapsed.Hours(); h > 0 {
		sum.StudiesPerHour = float64(sum.Scored) / h
	}
	if firstErr != nil {
		return sum, firstErr
	}
	return sum, ctx.Err()
}

func cmpErr(first, err error) error {
	if first != nil {
		return first
	}
	return err
}

// scoreStudy runs the Pipeline on one study's files. It returns false
// when the run was cancelled, so the study stays to do.
func (s *Store) scoreStudy(ctx context.Context, p *midsag.Pipeline, onScored func(context.Context, *midsag.Result) error,
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
