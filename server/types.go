package server

import (
	"context"
	"io"

	"github.com/midsag/midsag/server/store"
)

// Record is one result version of a study, as kept by the store.
type Record = store.Record

// Query filters and pages result records.
type Query = store.Query

// Record statuses.
const (
	StatusPending  = store.StatusPending
	StatusRunning  = store.StatusRunning
	StatusDone     = store.StatusDone
	StatusRejected = store.StatusRejected
	StatusFailed   = store.StatusFailed
)

// Origin says where an instance came from; it is recorded with the
// instance and never holds patient data.
type Origin struct {
	// Listener is "rest", "stow", "grpc" or "dicom".
	Listener string
	// CallingAE is the peer's AE title for the DICOM listener.
	CallingAE string
	// Remote is the peer's network address.
	Remote string
	// Study, when set, is the only Study Instance UID Ingest accepts
	// (STOW-RS /studies/{study}): an instance of another study is refused
	// as midsag.ReasonMultipleStudies before anything is stored.
	Study string
}

// Stored identifies an instance after Ingest has made it durable.
type Stored struct {
	StudyInstanceUID  string
	SeriesInstanceUID string
	SOPInstanceUID    string
	SOPClassUID       string
	// Duplicate is true when the same SOP Instance UID with the same bytes
	// was already stored; nothing new was written.
	Duplicate bool
}

// ScoreRequest asks for the instances of one request to be scored as one
// study, without waiting for the settle time.
type ScoreRequest struct {
	// SOPInstanceUIDs are the request's instances, already ingested.
	SOPInstanceUIDs []string
	// Model and ModelVersion name a model of the registry; empty means
	// the default model.
	Model        string
	ModelVersion string
	Explain      bool
	// Async returns at once with a pending record instead of waiting.
	Async bool
}

// ModelEntry describes one model the service can run.
type ModelEntry struct {
	Name        string
	Version     string
	SHA256      string
	Default     bool
	Labels      []string
	IntendedUse string
	Source      string
}

// Backend is what every listener calls. Core implements it.
type Backend interface {
	// Ingest parses the header of one DICOM Part 10 instance and stores it
	// durably (spool file and database row) before returning. A refusal
	// after the header was read comes with the Stored UIDs it names.
	Ingest(ctx context.Context, origin Origin, data []byte) (Stored, error)
	// IngestFrom is Ingest streaming from r, at most limit bytes when
	// limit > 0 (too_large beyond): the instance is copied to its spool
	// file through one small buffer.
	IngestFrom(ctx context.Context, origin Origin, r io.Reader, limit int64) (Stored, error)
	// Receive streams one instance from r into the spool and reads its
	// header without storing it; Commit stores it, Staged.Abort discards
	// it. A refusal after the header was read may return a Staged naming
	// the instance (already discarded).
	Receive(ctx context.Context, origin Origin, r io.Reader, limit int64) (*Staged, error)
	Commit(ctx context.Context, st *Staged) (Stored, error)
	// Hold keeps a study from settling while a request or session is
	// still sending to it, until the returned function is called (once or
	// more); the settle time counts from then.
	Hold(study string) func()
	// NewUpload returns a temporary file in the store's spool for an
	// upload that must be on disk before it is read (a zip archive).
	NewUpload() (Upload, error)
	// Score scores the request's instances as one study. Without Async it
	// waits for the result; with Async it returns the pending record.
	// Refusals are *midsag.Error values; a full queue is
	// midsag.ReasonOverloaded.
	Score(ctx context.Context, req ScoreRequest) (Record, error)
	// Result returns one record by id (store.ErrNotFound if unknown).
	Result(ctx context.Context, id string) (Record, error)
	// Results lists records matching q, newest first, with a next-page
	// token ("" on the last page).
	Results(ctx context.Context, q Query) ([]Record, string, error)
	// Models lists the models that can be named in a ScoreRequest.
	Models(ctx context.Context) []ModelEntry
	// Artifact returns a file made with a result, such as "heatmap.png"
	// for an explained result (store.ErrNotFound if there is none).
	Artifact(ctx context.Context, id, name string) ([]byte, error)
}
