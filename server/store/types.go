package store

import (
	"errors"
	"time"
)

// ErrNotFound is returned for an unknown record id.
var ErrNotFound = errors.New("not found")

// ErrLocked is returned by Open when another process holds the folder.
var ErrLocked = errors.New("another process has this data folder open")

// Record statuses.
const (
	StatusPending  = "pending"
	StatusRunning  = "running"
	StatusDone     = "done"
	StatusRejected = "rejected"
	StatusFailed   = "failed"
)

// Instance is one stored DICOM instance.
type Instance struct {
	// Seq is the store-wide arrival sequence number.
	Seq               int64
	StudyInstanceUID  string
	SeriesInstanceUID string
	SOPInstanceUID    string
	SOPClassUID       string
	TransferSyntaxUID string
	// Origin is the listener ("rest", "stow", "grpc", "dicom"); CallingAE
	// and Remote describe the peer.
	Origin     string
	CallingAE  string
	Remote     string
	Size       int64
	SHA256     string
	ReceivedAt time.Time
	// Path is the spool file, relative to the store's folder.
	Path string
}

// StudyState is what the scheduler needs to decide whether a study is due.
type StudyState struct {
	StudyInstanceUID string
	// LastSeq is the newest instance's sequence number; LastReceived its
	// arrival time.
	LastSeq      int64
	LastReceived time.Time
	// ScoredSeq is the newest sequence number covered by a finished or
	// running result (0 when none).
	ScoredSeq int64
}

// Record is one result version of a study.
type Record struct {
	ID               string
	StudyInstanceUID string
	// Version counts results of the same study from 1.
	Version      int
	Status       string
	Reason       string
	Message      string
	ModelName    string
	ModelVersion string
	Explain      bool
	// SOPInstanceUIDs restricts the job to these instances (a direct
	// request); empty means every instance of the study up to CoveredSeq.
	SOPInstanceUIDs []string
	// CoveredSeq is the newest instance sequence number the job covers.
	CoveredSeq int64
	// ResultJSON is the midsag.Result as JSON when Status is done.
	ResultJSON []byte
	CreatedAt  time.Time
	FinishedAt time.Time
}

// Query filters and pages records.
type Query struct {
	StudyInstanceUID string
	Status           string
	// PageSize defaults to 50 and is capped at 500.
	PageSize  int
	PageToken string
}
