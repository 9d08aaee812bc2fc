package grpcapi

import (
	"encoding/json"
	"reflect"
	"testing"
	"time"

	"github.com/midsag/midsag/server"
)

// TestResultProtoKeepsEveryContractField checks the proto Result against
// the contract's other encoding: a midsag.Result marshalled with
// encoding/json must come out of ResultProto and protojson with every key
// and value unchanged. A field added to midsag.Result without the proto
// fails here, because DiscardUnknown would drop it silently.
func TestResultProtoKeepsEveryContractField(t *testing.T) {
	want := sampleResult()
	raw, err := json.Marshal(want)
	if err != nil {
		t.Fatal(err)
	}
	rec := server.Record{ID: want.ResultID, StudyInstanceUID: want.StudyInstanceUID, Version: 3,
		Status: server.StatusDone, ResultJSON: raw, CreatedAt: time.Unix(0, 0),
		FinishedAt: time.Date(2025, 3, 4, 5, 6, 9, 0, time.UTC)}
	res, err := ResultProto(rec)
	if err != nil {
		t.Fatal(err)
	}
	out, err := resultJSON.Marshal(res)
	if err != nil {
		t.Fatal(err)
	}
	var contract, got map[string]any
	if err := json.Unmarshal(raw, &contract); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(out, &got); err != nil {
		t.Fatal(err)
	}
	for k, v := range contract {
		if !reflect.DeepEqual(got[k], v) {
			t.Errorf("%s: proto JSON has %#v, encoding/json has %#v", k, got[k], v)
		}
	}
	records := map[string]any{"version": 3.0, "status": "done", "reason": "", "message": "",
		"finished_at": "2025-03-04T05:06:09Z"}
	for k, v := range records {
		if got[k] != v {
			t.Errorf("record field %s = %#v, want %#v", k, got[k], v)
		}
	}
}

// TestResultProtoPending: a record without a result still names itself
// and carries the research notice.
func TestResultProtoPending(t *testing.T) {
	rec := server.Record{ID: "r9", StudyInstanceUID: "1.2", Version: 1, Status: server.StatusPending,
		ModelName: "m", CreatedAt: time.Date(2025, 1, 2, 3, 4, 5, 0, time.UTC)}
	res, err := ResultProto(rec)
	if err != nil {
		t.Fatal(err)
	}
	if res.GetResultId() != "r9" || res.GetStudyInstanceUid() != "1.2" || res.GetCreatedAt() != "2025-01-02T03:04:05Z" ||
		res.GetStatus() != "pending" || res.GetModel().GetName() != "m" || res.GetNotice() == "" || res.GetFinishedAt() != "" {
		t.Errorf("pending record converted to %v", res)
	}
}

// TestResultProtoRefusesCorruptJSON: a damaged stored result is an error,
// not an empty result.
func TestResultProtoRefusesCorruptJSON(t *testing.T) {
	if _, err := ResultProto(server.Record{ID: "x", ResultJSON: []byte(`{"probability":"high"`)}); err == nil {
		t.Fatal("no error for corrupt result JSON")
	}
}
