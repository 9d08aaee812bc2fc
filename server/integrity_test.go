package server

import (
	"context"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/server/store"
)

// TestCorruptSpoolFileRejectsJob: with a real store, a study one of whose
// spool files was truncated after it was acknowledged is not scored from
// what is left: its job is rejected as corrupt_instance and an ERROR line
// names the instance (with no patient data: the fake instances carry
// none, and the line holds UIDs and the spool path only).
func TestCorruptSpoolFileRejectsJob(t *testing.T) {
	dir := t.TempDir()
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	var logs testtool.Buffer
	c := New(Config{Store: st, Registry: fakeRegistry{def: fakeModel{info: midsag.ModelInfo{Name: "fake", Version: "1"}}},
		Pre: fakePre{minSlices: 3}, Settle: time.Hour, Logger: slog.New(slog.NewJSONHandler(&logs, nil))})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { c.Run(ctx, time.Second); close(done) }()
	defer func() { cancel(); <-done }()

	var sops []string
	for i := range 4 {
		s, err := c.Ingest(context.Background(), Origin{Listener: "test"}, fakeInstance("7.7", "7.7.1", fmt.Sprintf("7.7.1.%d", i+1)))
		if err != nil {
			t.Fatal(err)
		}
		sops = append(sops, s.SOPInstanceUID)
	}
	insts, err := st.InstancesBySOP(context.Background(), sops[1:2])
	if err != nil || len(insts) != 1 {
		t.Fatal(err)
	}
	if err := os.Truncate(filepath.Join(dir, filepath.FromSlash(insts[0].Path)), 3); err != nil {
		t.Fatal(err)
	}
	rec, err := c.Score(context.Background(), ScoreRequest{SOPInstanceUIDs: sops})
	if err != nil {
		t.Fatal(err)
	}
	if rec.Status != StatusRejected || rec.Reason != string(midsag.ReasonCorruptInstance) {
		t.Errorf("job: %s %s %q, want rejected corrupt_instance", rec.Status, rec.Reason, rec.Message)
	}
	line := ""
	for _, l := range strings.Split(logs.String(), "\n") {
		if strings.Contains(l, `"level":"ERROR"`) && strings.Contains(l, "corrupt") {
			line = l
		}
	}
	if !strings.Contains(line, insts[0].SOPInstanceUID) || !strings.Contains(line, string(midsag.ReasonCorruptInstance)) {
		t.Errorf("no ERROR line naming the instance and corrupt_instance in:\n%s", logs.String())
	}
}
