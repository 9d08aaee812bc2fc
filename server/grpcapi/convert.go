package grpcapi

import (
	"fmt"
	"time"

	"google.golang.org/protobuf/encoding/protojson"

	"github.com/midsag/midsag"
	midsagv1 "github.com/midsag/midsag/api/midsag/v1"
	"github.com/midsag/midsag/server"
)

// resultJSON is how every Result goes out over REST: proto field names
// (the result contract's snake_case) and every field present, so clients
// see the same keys whether a value is zero or not.
var resultJSON = protojson.MarshalOptions{UseProtoNames: true, EmitUnpopulated: true}

// ResultProto converts a stored record into the API's Result. The
// record's ResultJSON (a midsag.Result encoded with encoding/json) is
// decoded field by field into the proto, whose names match its JSON tags;
// fields the proto does not know are dropped rather than refused so an
// older API still reads newer records. The record fields (version,
// status, reason, message, finished_at) are then set from rec, and the
// identity fields filled in for records that have no result yet.
func ResultProto(rec server.Record) (*midsagv1.Result, error) {
	res := &midsagv1.Result{}
	if len(rec.ResultJSON) > 0 {
		if err := (protojson.UnmarshalOptions{DiscardUnknown: true}).Unmarshal(rec.ResultJSON, res); err != nil {
			return nil, fmt.Errorf("decode result %s: %w", rec.ID, err)
		}
	}
	if res.ResultId == "" {
		res.ResultId = rec.ID
	}
	if res.StudyInstanceUid == "" {
		res.StudyInstanceUid = rec.StudyInstanceUID
	}
	if res.CreatedAt == "" {
		res.CreatedAt = rfc3339(rec.CreatedAt)
	}
	if res.Model == nil && (rec.ModelName != "" || rec.ModelVersion != "") {
		res.Model = &midsagv1.ModelInfo{Name: rec.ModelName, Version: rec.ModelVersion}
	}
	if res.Notice == "" {
		// Every output of midsag carries the research-use notice, pending
		// records included.
		res.Notice = midsag.Notice
	}
	res.Version = int32(rec.Version)
	res.Status = rec.Status
	res.Reason = rec.Reason
	res.Message = rec.Message
	res.FinishedAt = rfc3339(rec.FinishedAt)
	return res, nil
}

// rfc3339 formats t as encoding/json does (RFC 3339 with nanoseconds),
// and the zero time as "".
func rfc3339(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.UTC().Format(time.RFC3339Nano)
}

// modelsProto converts the Backend's model list.
func modelsProto(entries []server.ModelEntry) *midsagv1.ListModelsResponse {
	out := &midsagv1.ListModelsResponse{Models: make([]*midsagv1.ModelEntry, 0, len(entries))}
	for _, m := range entries {
		out.Models = append(out.Models, &midsagv1.ModelEntry{
			Name:        m.Name,
			Version:     m.Version,
			Sha256:      m.SHA256,
			Default:     m.Default,
			Labels:      m.Labels,
			IntendedUse: m.IntendedUse,
			Source:      m.Source,
		})
	}
	return out
}
