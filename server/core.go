package server

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"slices"
	"sync"
	"time"

	"golang.org/x/sync/errgroup"
	"golang.org/x/sync/semaphore"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/explain"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/server/store"
)

// Store is where Core keeps instances, jobs and results durably.
// *store.Store implements it.
type Store interface {
	// NewUpload starts an instance's upload: a temporary file in the
	// spool, removed by Abort or at the next start.
	NewUpload() (store.Upload, error)
	// PutUpload stores an upload's bytes and the instance's row; the bool
	// is true for an identical duplicate. store.ErrStudyFull refuses a
	// full study.
	PutUpload(ctx context.Context, inst store.Instance, u store.Upload) (store.Instance, bool, error)
	// Open opens an instance's stored bytes once they match their stored
	// sha256 (an error wrapping store.ErrCorrupt otherwise).
	Open(inst store.Instance) (io.ReadCloser, error)
	// Instances lists a study's instances up to maxSeq (all when <= 0) in
	// arrival order; InstancesBySOP those among the UIDs.
	Instances(ctx context.Context, studyUID string, maxSeq int64) ([]store.Instance, error)
	InstancesBySOP(ctx context.Context, sopUIDs []string) ([]store.Instance, error)
	// DueStudies lists studies quiet since quietSince with instances no
	// whole-study record covers.
	DueStudies(ctx context.Context, quietSince time.Time) ([]store.StudyState, error)
	CreateRecord(ctx context.Context, r Record) (Record, error)
	UpdateRecord(ctx context.Context, r Record) error
	Record(ctx context.Context, id string) (Record, error)
	ListRecords(ctx context.Context, q Query) ([]Record, string, error)
	// Unfinished lists records left pending or running.
	Unfinished(ctx context.Context) ([]Record, error)
	WriteArtifact(id, name string, data []byte) error
	ReadArtifact(id, name string) ([]byte, error)
}

// Registry holds the models Core can score with. *models.Registry
// implements it.
type Registry interface {
	// Acquire returns a model by name and version ("" for the default)
	// and a release function the caller must call when done.
	Acquire(name, version string) (midsag.Model, func(), error)
	// List describes every model in service, the default first.
	List() []models.RegistryEntry
}

// Preprocessor reads headers at ingest and prepares studies for the
// Pipeline. *preprocess.Preprocessor implements it.
type Preprocessor interface {
	midsag.Preprocessor
	// ReadHeader parses a stream of size bytes up to its pixel data.
	ReadHeader(name string, r io.Reader, size int64) (*midsag.Instance, error)
}

// Config configures a Core.
type Config struct {
	Store    Store
	Registry Registry
	Pre      Preprocessor
	// Explainer makes the occlusion maps of jobs that ask for one, or of
	// every job with Explain; nil refuses such jobs as failed.
	Explainer midsag.Explainer
	// Settle is how long a study must receive nothing before it is scored.
	Settle time.Duration
	// Workers is the number of studies scored at once (default 1: each
	// model run already uses every core).
	Workers int
	// QueueSize bounds the jobs waiting for a worker (default 64); beyond
	// it direct requests are refused as overloaded.
	QueueSize int
	// MaxInstancesPerRequest bounds one direct request (default 5000).
	MaxInstancesPerRequest int
	// InflightBytes bounds the copy buffers of every instance being
	// received at once (default DefaultInflightBytes); an instance beyond
	// it waits for a buffer.
	InflightBytes int64
	Logger        *slog.Logger
	Metrics       *Metrics
	// Explain adds an occlusion map to every job, not only to requests
	// that ask for one.
	Explain bool
	// SendTo, when set, receives the map of every explained result as a
	// DICOM Secondary Capture (Part 10 bytes), e.g. to C-STORE it back to
	// the PACS. A failure is logged; the result stands.
	SendTo func(ctx context.Context, part10 []byte) error
}

// Core implements Backend: it stores what listeners receive, schedules
// scoring and runs every job through midsag.Pipeline.
type Core struct {
	cfg   Config
	log   *slog.Logger
	slots chan struct{}
	queue chan string
	// budget holds InflightBytes; each instance in flight takes one
	// ingest buffer from it.
	budget *semaphore.Weighted

	mu      sync.Mutex
	waiters map[string][]chan struct{}
	queued  map[string]bool
	// holds counts the requests and sessions still sending to a study;
	// activity is when one of its instances last arrived or a hold ended.
	// A study settles only once it has no hold and has been quiet since
	// activity for the settle time, so a slow upload (an instance that
	// takes long to stream, a REST request stored at its end) is not
	// scored half-way.
	holds    map[string]int
	activity map[string]time.Time
}

var (
	_ Backend  = (*Core)(nil)
	_ Store    = (*store.Store)(nil)
	_ Registry = (*models.Registry)(nil)
)

// New returns a Core; call Run to start its workers and scheduler.
func New(cfg Config) *Core {
	if cfg.Workers <= 0 {
		cfg.Workers = 1
	}
	if cfg.QueueSize <= 0 {
		cfg.QueueSize = 64
	}
	if cfg.MaxInstancesPerRequest <= 0 {
		cfg.MaxInstancesPerRequest = 5000
	}
	if cfg.InflightBytes < ingestBuffer {
		cfg.InflightBytes = DefaultInflightBytes
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.DiscardHandler)
	}
	return &Core{
		budget:   semaphore.NewWeighted(cfg.InflightBytes),
		cfg:      cfg,
		log:      cfg.Logger,
		slots:    make(chan struct{}, cfg.QueueSize),
		queue:    make(chan string, cfg.QueueSize),
		waiters:  map[string][]chan struct{}{},
		queued:   map[string]bool{},
		holds:    map[string]int{},
		activity: map[string]time.Time{},
	}
}

// QueueDepth returns the number of jobs waiting or running.
func (c *Core) QueueDepth() int { return len(c.slots) }

// Score creates a job for the request's instances and, unless Async,
// waits for its result.
func (c *Core) Score(ctx context.Context, req ScoreRequest) (Record, error) {
	if len(req.SOPInstanceUIDs) == 0 {
		return Record{}, midsag.Rejectf(midsag.ReasonNoInput, "the request holds no DICOM instances")
	}
	if len(req.SOPInstanceUIDs) > c.cfg.MaxInstancesPerRequest {
		return Record{}, midsag.Rejectf(midsag.ReasonTooLarge, "%d instances in one request, above the limit of %d",
			len(req.SOPInstanceUIDs), c.cfg.MaxInstancesPerRequest)
	}
	m, release, err := c.cfg.Registry.Acquire(req.Model, req.ModelVersion)
	if err != nil {
		return Record{}, err
	}
	info := m.Info()
	release()
	insts, err := c.cfg.Store.InstancesBySOP(ctx, req.SOPInstanceUIDs)
	if err != nil {
		return Record{}, fmt.Errorf("look up instances: %w", err)
	}
	if len(insts) == 0 {
		return Record{}, midsag.Rejectf(midsag.ReasonNoInput, "none of the request's instances is stored")
	}
	var covered int64
	studies := map[string]bool{}
	for _, in := range insts {
		covered = max(covered, in.Seq)
		studies[in.StudyInstanceUID] = true
	}
	if len(studies) > 1 {
		return Record{}, midsag.Rejectf(midsag.ReasonMultipleStudies, "the request holds %d studies; send one study at a time", len(studies))
	}
	// A request holding every stored instance of its study is a
	// whole-study job, so the settle scheduler does not score it again.
	scope := req.SOPInstanceUIDs
	all, err := c.cfg.Store.Instances(ctx, insts[0].StudyInstanceUID, covered)
	if err != nil {
		return Record{}, fmt.Errorf("look up study: %w", err)
	}
	if len(all) == len(insts) {
		scope = nil
	}
	select {
	case c.slots <- struct{}{}:
	default:
		return Record{}, midsag.Rejectf(midsag.ReasonOverloaded, "%d jobs are already queued; retry later", cap(c.slots))
	}
	rec, err := c.cfg.Store.CreateRecord(ctx, Record{
		StudyInstanceUID: insts[0].StudyInstanceUID,
		Status:           StatusPending,
		ModelName:        req.Model,
		ModelVersion:     req.ModelVersion,
		Explain:          req.Explain,
		SOPInstanceUIDs:  scope,
		CoveredSeq:       covered,
	})
	if err != nil {
		<-c.slots
		return Record{}, fmt.Errorf("create record: %w", err)
	}
	if rec.ModelName == "" {
		rec.ModelName, rec.ModelVersion = info.Name, info.Version
	}
	done := c.watch(rec.ID)
	c.enqueue(rec.ID)
	if req.Async {
		return rec, nil
	}
	select {
	case <-done:
	case <-ctx.Done():
		return rec, ctx.Err()
	}
	return c.cfg.Store.Record(context.WithoutCancel(ctx), rec.ID)
}

// Result returns one record.
func (c *Core) Result(ctx context.Context, id string) (Record, error) {
	return c.cfg.Store.Record(ctx, id)
}

// Results lists records.
func (c *Core) Results(ctx context.Context, q Query) ([]Record, string, error) {
	return c.cfg.Store.ListRecords(ctx, q)
}

// Models lists the registry's models.
func (c *Core) Models(ctx context.Context) []ModelEntry {
	var out []ModelEntry
	for _, e := range c.cfg.Registry.List() {
		me := ModelEntry{Name: e.Info.Name, Version: e.Info.Version, SHA256: e.Info.SHA256, Default: e.Default, Source: "bundled"}
		if e.Path != "" {
			me.Source = e.Path
		}
		if e.Manifest != nil {
			me.Labels, me.IntendedUse = e.Manifest.Labels, e.Manifest.IntendedUse
		}
		out = append(out, me)
	}
	return out
}

// watch registers interest in a job's completion.
func (c *Core) watch(id string) <-chan struct{} {
	ch := make(chan struct{})
	c.mu.Lock()
	c.waiters[id] = append(c.waiters[id], ch)
	c.mu.Unlock()
	return ch
}

// enqueue hands a job whose slot is already reserved to the workers.
func (c *Core) enqueue(id string) {
	c.mu.Lock()
	c.queued[id] = true
	c.mu.Unlock()
	c.queue <- id
}

func (c *Core) finish(id string) {
	c.mu.Lock()
	ws := c.waiters[id]
	delete(c.waiters, id)
	delete(c.queued, id)
	c.mu.Unlock()
	for _, ch := range ws {
		close(ch)
	}
	<-c.slots
}

// Run re-queues jobs left unfinished by a previous run, then runs the
// workers and the settle scheduler until ctx is cancelled. In-flight jobs
// are given grace to finish; what does not finish stays in the store and
// is picked up by the next Run.
func (c *Core) Run(ctx context.Context, grace time.Duration) error {
	unfinished, err := c.cfg.Store.Unfinished(ctx)
	if err != nil {
		return fmt.Errorf("find unfinished jobs: %w", err)
	}
	workCtx, cancelWork := context.WithCancel(context.WithoutCancel(ctx))
	defer cancelWork()
	jobs := make(chan *errgroup.Group, 1)
	go func() { jobs <- c.dispatch(ctx, workCtx) }()
	go c.resume(ctx, unfinished)
	c.schedule(ctx)
	// Shutting down: running jobs get grace, then their context ends.
	timer := time.AfterFunc(grace, cancelWork)
	defer timer.Stop()
	running := <-jobs
	_ = running.Wait() // jobs record their own failures
	return nil
}

// dispatch runs queued jobs, at most Workers at once, with workCtx until
// ctx is cancelled, and returns the group of jobs still running. Jobs
// run with workCtx, not ctx, so a shutdown gives them the grace period.
func (c *Core) dispatch(ctx, workCtx context.Context) *errgroup.Group {
	g := &errgroup.Group{}
	g.SetLimit(c.cfg.Workers)
	for {
		select {
		case <-ctx.Done():
			return g
		case id := <-c.queue:
			g.Go(func() error {
				c.runJob(workCtx, id)
				return nil
			})
		}
	}
}

// resume re-queues jobs interrupted by a previous run. It runs in the
// background: they may outnumber the queue, and the workers are already
// draining it.
func (c *Core) resume(ctx context.Context, unfinished []Record) {
	for _, r := range unfinished {
		select {
		case c.slots <- struct{}{}:
			c.log.Info("resuming job", "result_id", r.ID, "study_instance_uid", r.StudyInstanceUID)
			c.enqueue(r.ID)
		case <-ctx.Done():
			return
		}
	}
}

// schedule creates whole-study jobs for studies that have been quiet for
// the settle time, until ctx is cancelled.
func (c *Core) schedule(ctx context.Context) {
	tick := min(max(c.cfg.Settle/4, 50*time.Millisecond), time.Second)
	t := time.NewTicker(tick)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		due, err := c.cfg.Store.DueStudies(ctx, time.Now().Add(-c.cfg.Settle))
		if err != nil {
			if ctx.Err() == nil {
				c.log.Error("find due studies", "err", err)
			}
			continue
		}
		now := time.Now()
		c.forgetQuiet(now)
	studies:
		for _, st := range due {
			if c.settling(st.StudyInstanceUID, now) {
				continue
			}
			select {
			case c.slots <- struct{}{}:
			default:
				// Queue full: the study stays due and is taken next tick.
				break studies
			}
			rec, err := c.cfg.Store.CreateRecord(ctx, Record{StudyInstanceUID: st.StudyInstanceUID, Status: StatusPending, CoveredSeq: st.LastSeq})
			if err != nil {
				<-c.slots
				c.log.Error("create job", "study_instance_uid", st.StudyInstanceUID, "err", err)
				continue
			}
			c.log.Info("study settled; scoring", "study_instance_uid", st.StudyInstanceUID, "result_id", rec.ID, "version", rec.Version)
			c.enqueue(rec.ID)
		}
	}
}

// Hold marks a study as still being sent to (a STOW-RS request, a REST
// upload, a DICOM association) until the returned function is called; the
// settle time counts from then. Calling the function again does nothing.
func (c *Core) Hold(study string) func() {
	c.mu.Lock()
	c.holds[study]++
	c.mu.Unlock()
	var once sync.Once
	return func() {
		once.Do(func() {
			c.mu.Lock()
			defer c.mu.Unlock()
			if c.holds[study]--; c.holds[study] <= 0 {
				delete(c.holds, study)
			}
			c.activity[study] = time.Now()
		})
	}
}

// touch records that an instance of the study arrived.
func (c *Core) touch(study string) {
	c.mu.Lock()
	c.activity[study] = time.Now()
	c.mu.Unlock()
}

// settling reports whether the study is held or had activity within the
// settle time.
func (c *Core) settling(study string, now time.Time) bool {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.holds[study] > 0 {
		return true
	}
	at, ok := c.activity[study]
	return ok && now.Sub(at) < c.cfg.Settle
}

// forgetQuiet drops activity older than the settle time, which no longer
// delays anything.
func (c *Core) forgetQuiet(now time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	for study, at := range c.activity {
		if now.Sub(at) >= c.cfg.Settle {
			delete(c.activity, study)
		}
	}
}

// runJob scores one record's instances through the Pipeline and stores
// the outcome.
func (c *Core) runJob(ctx context.Context, id string) {
	defer c.finish(id)
	rec, err := c.cfg.Store.Record(ctx, id)
	if err != nil {
		c.log.Error("load job", "result_id", id, "err", err)
		return
	}
	rec.Status = StatusRunning
	if err := c.cfg.Store.UpdateRecord(ctx, rec); err != nil {
		c.log.Error("mark job running", "result_id", id, "err", err)
		return
	}
	start := time.Now()
	res, err := c.score(ctx, rec)
	rec.FinishedAt = time.Now().UTC()
	switch e := midsag.RefusalOf(err); {
	case err == nil:
		rec.Status = StatusDone
		rec.ModelName, rec.ModelVersion = res.Model.Name, res.Model.Version
		rec.ResultJSON, err = json.Marshal(res)
		if err != nil {
			rec.Status, rec.Message = StatusFailed, "encode result: "+err.Error()
		}
		c.cfg.Metrics.observeResult(res)
	case e != nil:
		rec.Status, rec.Reason, rec.Message = StatusRejected, string(e.Reason), err.Error()
	default:
		if ctx.Err() != nil {
			// Shutting down: leave the job for the next run.
			c.log.Warn("job interrupted by shutdown", "result_id", id)
			return
		}
		rec.Status, rec.Message = StatusFailed, err.Error()
	}
	if err := c.cfg.Store.UpdateRecord(context.WithoutCancel(ctx), rec); err != nil {
		c.log.Error("save result", "result_id", id, "err", err)
		return
	}
	c.cfg.Metrics.jobDone(rec.Status, time.Since(start))
	c.log.Info("job finished", "result_id", id, "study_instance_uid", rec.StudyInstanceUID, "version", rec.Version,
		"status", rec.Status, "reason", rec.Reason, "ms", time.Since(start).Milliseconds())
}

func (c *Core) score(ctx context.Context, rec Record) (*midsag.Result, error) {
	var insts []store.Instance
	var err error
	if len(rec.SOPInstanceUIDs) > 0 {
		insts, err = c.cfg.Store.InstancesBySOP(ctx, rec.SOPInstanceUIDs)
	} else {
		insts, err = c.cfg.Store.Instances(ctx, rec.StudyInstanceUID, rec.CoveredSeq)
	}
	if err != nil {
		return nil, fmt.Errorf("list instances: %w", err)
	}
	// Every Storage SOP Class is stored; only MR is scored.
	insts = slices.DeleteFunc(insts, func(in store.Instance) bool { return !midsag.IsMRImageStorage(in.SOPClassUID) })
	sources := make([]midsag.Source, len(insts))
	for i, in := range insts {
		sources[i] = midsag.Source{Name: in.SOPInstanceUID, Open: func() (io.ReadCloser, error) { return c.openStored(rec, in) }}
	}
	name, version := rec.ModelName, rec.ModelVersion
	m, release, err := c.cfg.Registry.Acquire(name, version)
	if err != nil {
		return nil, err
	}
	defer release()
	p := &midsag.Pipeline{Pre: c.cfg.Pre, Model: m, NewID: func() string { return rec.ID }}
	if rec.Explain || c.cfg.Explain {
		if c.cfg.Explainer == nil {
			return nil, errors.New("an occlusion map was asked for and this service has no explainer")
		}
		p.Explainer = c.cfg.Explainer
	}
	res, err := p.Run(ctx, sources)
	if errors.Is(err, store.ErrCorrupt) {
		return nil, midsag.Reject(midsag.ReasonCorruptInstance, "a stored instance of the study is damaged; resend it", err)
	}
	if err != nil || res.Explanation == nil {
		return res, err
	}
	// The picture behind the map lives only in memory: render it now.
	png, err := explain.Heatmap(res)
	if err != nil {
		return nil, fmt.Errorf("render heatmap: %w", err)
	}
	if err := c.cfg.Store.WriteArtifact(rec.ID, HeatmapPNG, png); err != nil {
		return nil, err
	}
	if c.cfg.SendTo != nil {
		sc, err := explain.SecondaryCapture(res, explain.SCOptions{})
		if err == nil {
			err = c.cfg.SendTo(ctx, sc)
		}
		if err != nil {
			c.log.Error("send heatmap", "result_id", rec.ID, "study_instance_uid", rec.StudyInstanceUID, "err", err)
		} else {
			c.log.Info("heatmap sent", "result_id", rec.ID, "study_instance_uid", rec.StudyInstanceUID)
		}
	}
	return res, nil
}

// openStored opens one stored instance for a job. A spool file that no
// longer matches its stored sha256 fails the job (the Pipeline stops at a
// read error that is not a refusal) and is logged at ERROR: the disk, or
// someone, changed what was acknowledged.
func (c *Core) openStored(rec Record, in store.Instance) (io.ReadCloser, error) {
	rc, err := c.cfg.Store.Open(in)
	if errors.Is(err, store.ErrCorrupt) {
		c.log.Error("stored instance is corrupt", "reason", midsag.ReasonCorruptInstance, "result_id", rec.ID,
			"study_instance_uid", in.StudyInstanceUID, "sop_instance_uid", in.SOPInstanceUID, "path", in.Path, "err", err)
	}
	return rc, err
}

// HeatmapPNG is the artifact name of an explained result's heatmap.
const HeatmapPNG = "heatmap.png"

// Artifact returns a file made with a result.
func (c *Core) Artifact(ctx context.Context, id, name string) ([]byte, error) {
	return c.cfg.Store.ReadArtifact(id, name)
}
