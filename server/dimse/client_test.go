package dimse

import (
	"bytes"
	"context"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/part10"
	"github.com/midsag/midsag/phantom"
)

// startStorescp runs DCMTK's storescp (the reference Storage SCP) on a
// free loopback port, writing into the returned folder, until the test
// ends.
func startStorescp(t testing.TB) (addr, dir string) {
	t.Helper()
	path := testtool.Command(t, "storescp")
	dir = t.TempDir()
	port := freePort(t)
	// +xa accepts every transfer syntax storescp knows; -aet names it.
	cmd := exec.Command(path, "-aet", "DCMTKSCP", "+xa", "-od", dir, port)
	cmd.Env = append(os.Environ(), "TCP_NODELAY=1")
	var log bytes.Buffer
	cmd.Stdout, cmd.Stderr = &log, &log
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		_ = cmd.Process.Kill()
		_ = cmd.Wait()
		if t.Failed() {
			t.Logf("storescp output:\n%s", log.String())
		}
	})
	addr = "127.0.0.1:" + port
	for i := 0; ; i++ {
		c, err := net.DialTimeout("tcp", addr, time.Second)
		if err == nil {
			c.Close()
			return addr, dir
		}
		if i == 100 {
			t.Fatalf("storescp did not listen on %s: %v", addr, err)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// TestClientAgainstStorescp: our SCU's Echo and Store against DCMTK's
// storescp; the files storescp writes must show, in DCMTK's dcmdump, the
// same dataset as the files we sent.
func TestClientAgainstStorescp(t *testing.T) {
	addr, dir := startStorescp(t)
	c := &Client{CallingAE: "MIDSAG", CalledAE: "DCMTKSCP", Timeout: 10 * time.Second}
	ctx := context.Background()
	if err := c.Echo(ctx, addr); err != nil {
		t.Fatalf("Echo: %v", err)
	}
	_, sent := studyDir(t, 2, midsag.ExplicitVRLittleEndian)
	var files [][]byte
	var names []string
	for name, b := range sent {
		files = append(files, b)
		names = append(names, name)
	}
	statuses, err := c.Store(ctx, addr, files)
	if err != nil {
		t.Fatalf("Store: %v", err)
	}
	for i, st := range statuses {
		if st != StatusSuccess {
			t.Errorf("%s: status 0x%04x", names[i], st)
		}
	}
	var sentPaths, gotPaths []string
	for i, b := range files {
		m, err := parsePart10(b)
		if err != nil {
			t.Fatal(err)
		}
		// storescp names files <modality>.<SOP Instance UID> (DCMTK
		// default, observed).
		got := filepath.Join(dir, "MR."+m.SOPInstanceUID)
		if _, err := os.Stat(got); err != nil {
			t.Errorf("%s: storescp wrote no %s", names[i], got)
			continue
		}
		p := filepath.Join(t.TempDir(), names[i])
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		sentPaths, gotPaths = append(sentPaths, p), append(gotPaths, got)
	}
	sd, gd := dumps(t, sentPaths), dumps(t, gotPaths)
	for i := range sd {
		if a, b := datasetLines(sd[i]), datasetLines(gd[i]); a != b {
			t.Errorf("%s: storescp's copy differs:\n%.2000s\nvs\n%.2000s", sentPaths[i], b, a)
		}
	}
}

// TestRoundTripSmallPDU: our SCU to our SCP with 4096-byte PDUs on both
// sides, so every dataset is split into many PDVs; each dataset must
// arrive byte for byte inside the Part 10 file Part10 would build, with
// the negotiated transfer syntax. The expectation comes from the phantom
// writer's own files, not from this package.
func TestRoundTripSmallPDU(t *testing.T) {
	var got received
	_, addr, _ := startSCP(t, Config{MaxPDULength: 4096}, got.handler(StatusSuccess))
	files, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 3}, 0)
	if err != nil {
		t.Fatal(err)
	}
	c := &Client{CallingAE: "ROUNDTRIP", CalledAE: "MIDSAG", MaxPDULength: 4096, Timeout: 10 * time.Second}
	var all [][]byte
	for _, f := range files {
		all = append(all, f.Data)
	}
	statuses, err := c.Store(context.Background(), addr, all)
	if err != nil {
		t.Fatalf("Store: %v", err)
	}
	if len(statuses) != len(all) {
		t.Fatalf("%d statuses for %d files", len(statuses), len(all))
	}
	for i, f := range files {
		if statuses[i] != StatusSuccess {
			t.Errorf("%s: status 0x%04x", f.Name, statuses[i])
		}
		m, err := parsePart10(f.Data)
		if err != nil {
			t.Fatal(err)
		}
		want := part10.Wrap(part10.Meta{SOPClassUID: m.SOPClassUID, SOPInstanceUID: m.SOPInstanceUID, TransferSyntaxUID: m.TransferSyntaxUID, SourceAETitle: "ROUNDTRIP"}, m.dataset)
		if !bytes.Equal(got.files[m.SOPInstanceUID], want) {
			t.Errorf("%s: received Part 10 file differs from the one expected", f.Name)
		}
	}
	if err := c.Echo(context.Background(), addr); err != nil {
		t.Errorf("Echo: %v", err)
	}
}

// TestStoreStatuses: the handler's status reaches the SCU, a dataset
// above MaxDatasetBytes is answered A700 without calling the handler, and
// a SOP class outside a restricted accepted list is never sent.
func TestStoreStatuses(t *testing.T) {
	files, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 4}, 0)
	if err != nil {
		t.Fatal(err)
	}
	one := files[0].Data
	ct, err := os.ReadFile(testtool.PydicomFile(t, "CT_small.dcm"))
	if err != nil {
		t.Fatal(err)
	}
	c := &Client{CallingAE: "A", CalledAE: "MIDSAG", Timeout: 10 * time.Second}

	var warn received
	_, addr, _ := startSCP(t, Config{SOPClasses: []string{midsag.MRImageStorage}}, warn.handler(0xB007))
	st, err := c.Store(context.Background(), addr, [][]byte{one, ct})
	if err != nil {
		t.Fatal(err)
	}
	// 0xB007 is a storage warning (PS3.4 B.2.3, data set does not match
	// SOP class), returned as is.
	if st[0] != 0xB007 || st[1] != StatusSOPClassNotSupported {
		t.Errorf("statuses %04x, want b007 and 0122", st)
	}

	var big received
	s, addr, _ := startSCP(t, Config{MaxDatasetBytes: 1000}, big.handler(StatusSuccess))
	st, err = c.Store(context.Background(), addr, [][]byte{one, one})
	if err != nil {
		t.Fatal(err)
	}
	if st[0] != StatusOutOfResources || st[1] != StatusOutOfResources || big.count() != 0 {
		t.Errorf("statuses %04x with %d files handled, want a700 twice and none", st, big.count())
	}
	if stats := s.Stats(); stats.StoresFailed != 2 || stats.StoresOK != 0 {
		t.Errorf("stats %+v", stats)
	}
}
