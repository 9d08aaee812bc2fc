package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"io"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
)

// Where Debian's orthanc and orthanc-dicomweb packages install the server
// and the DICOMweb plugin (Orthanc 1.10.1, plugin 1.7 on Debian 12).
const (
	orthancBinary   = "/usr/sbin/Orthanc"
	orthancDicomWeb = "/usr/share/orthanc/plugins/libOrthancDicomWeb.so"
)

// orthancAET is the AE title our Orthanc calls midsag with; midsag is
// started with --allow-ae set to it, so a stored instance proves the
// association came from Orthanc.
const orthancAET = "NSIL_PACS"

// orthanc is an Orthanc child process with its own configuration and
// storage in a test folder.
type orthanc struct {
	t      *testing.T
	cmd    *exec.Cmd
	url    string // http://127.0.0.1:PORT
	log    *testtool.Buffer
	exited chan struct{}
	client *http.Client
}

// requireFile skips t, or fails it under MIDSAG_REQUIRE_TOOLS=1, when an
// outside tool's file is missing.
func requireFile(t *testing.T, path, pkg string) {
	t.Helper()
	if _, err := os.Stat(path); err == nil {
		return
	}
	if testtool.Required() {
		t.Fatalf("%s (Debian package %s) is missing and MIDSAG_REQUIRE_TOOLS=1", path, pkg)
	}
	t.Skipf("%s (Debian package %s) is missing; install it or run .ci/run", path, pkg)
}

// startOrthanc starts Orthanc on free loopback ports with midsag
// registered both as a DICOM modality (for C-STORE) and as a DICOMweb
// server (for STOW-RS), and waits until its REST API answers.
func startOrthanc(t *testing.T, s *service) *orthanc {
	t.Helper()
	requireFile(t, orthancBinary, "orthanc")
	requireFile(t, orthancDicomWeb, "orthanc-dicomweb")
	dir := t.TempDir()
	httpPort := port(t, freePort(t))
	dicomPort := port(t, freePort(t))
	midsagDICOM := port(t, s.dicom)
	cfg := map[string]any{
		"Name":                  "midsag-test",
		"StorageDirectory":      filepath.Join(dir, "storage"),
		"IndexDirectory":        filepath.Join(dir, "index"),
		"HttpPort":              httpPort,
		"DicomPort":             dicomPort,
		"DicomAet":              orthancAET,
		"RemoteAccessAllowed":   false,
		"AuthenticationEnabled": false,
		// Orthanc 1.10.1 has no option to bind its DICOM port to one
		// address, so it refuses every association it is not told about:
		// nothing from outside can store into the test's Orthanc.
		"DicomAlwaysAllowEcho":  false,
		"DicomAlwaysAllowStore": false,
		// Close the association to midsag as soon as the store is done,
		// rather than Orthanc's default 5 s, so the test does not leave it
		// open while midsag scores.
		"DicomAssociationCloseDelay": 0,
		"Plugins":                    []string{orthancDicomWeb},
		"DicomModalities": map[string]any{
			"midsag": []any{"MIDSAG", "127.0.0.1", midsagDICOM},
		},
		"DicomWeb": map[string]any{
			"Enable": true,
			"Servers": map[string]any{
				"midsag": []string{"http://" + s.http + "/dicomweb/"},
			},
		},
	}
	cfgJSON, err := json.MarshalIndent(cfg, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	cfgPath := filepath.Join(dir, "orthanc.json")
	if err := os.WriteFile(cfgPath, cfgJSON, 0o600); err != nil {
		t.Fatal(err)
	}
	o := &orthanc{
		t:      t,
		url:    "http://127.0.0.1:" + strconv.Itoa(httpPort),
		log:    &testtool.Buffer{},
		exited: make(chan struct{}),
		client: &http.Client{Timeout: 60 * time.Second},
	}
	o.cmd = exec.Command(orthancBinary, cfgPath)
	o.cmd.Stdout = o.log
	o.cmd.Stderr = o.log
	if err := o.cmd.Start(); err != nil {
		t.Fatalf("start Orthanc: %v", err)
	}
	go func() { o.cmd.Wait(); close(o.exited) }()
	// Registered after t.TempDir, so Orthanc stops before its storage is
	// removed.
	t.Cleanup(o.stop)
	deadline := time.Now().Add(30 * time.Second)
	for time.Now().Before(deadline) {
		resp, err := o.client.Get(o.url + "/system")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return o
			}
		}
		select {
		case <-o.exited:
			t.Fatalf("Orthanc exited during start-up:\n%s", o.log.String())
		case <-time.After(100 * time.Millisecond):
		}
	}
	t.Fatalf("Orthanc not ready after 30 s:\n%s", o.log.String())
	return nil
}

// stop asks Orthanc to shut down and kills it if it has not within 15 s.
func (o *orthanc) stop() {
	if o.cmd.Process == nil {
		return
	}
	o.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-o.exited:
	case <-time.After(15 * time.Second):
		o.cmd.Process.Kill()
		<-o.exited
	}
}

// post sends body to an Orthanc REST route and decodes its JSON answer
// into out, failing the test on any status but 200.
func (o *orthanc) post(route, contentType string, body []byte, out any) {
	o.t.Helper()
	resp, err := o.client.Post(o.url+route, contentType, bytes.NewReader(body))
	if err != nil {
		o.t.Fatalf("POST %s: %v\nOrthanc log:\n%s", route, err, o.log.String())
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		o.t.Fatalf("POST %s: read answer: %v", route, err)
	}
	if resp.StatusCode != http.StatusOK {
		o.t.Fatalf("POST %s: HTTP %d %s\nOrthanc log:\n%s", route, resp.StatusCode, b, o.log.String())
	}
	if err := json.Unmarshal(b, out); err != nil {
		o.t.Fatalf("POST %s: answer %q is not JSON: %v", route, b, err)
	}
}

// get decodes the JSON answer of an Orthanc REST route into out.
func (o *orthanc) get(route string, out any) {
	o.t.Helper()
	resp, err := o.client.Get(o.url + route)
	if err != nil {
		o.t.Fatalf("GET %s: %v", route, err)
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		b, _ := io.ReadAll(resp.Body)
		o.t.Fatalf("GET %s: HTTP %d %s", route, resp.StatusCode, b)
	}
	if err := json.NewDecoder(resp.Body).Decode(out); err != nil {
		o.t.Fatalf("GET %s: decode answer: %v", route, err)
	}
}

// upload stores every file of a study folder in Orthanc and returns the
// Orthanc ID of the study and the number of files.
func (o *orthanc) upload(dir string) (string, int) {
	o.t.Helper()
	entries, err := os.ReadDir(dir)
	if err != nil {
		o.t.Fatal(err)
	}
	study := ""
	n := 0
	for _, e := range entries {
		if e.IsDir() {
			continue
		}
		data, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			o.t.Fatal(err)
		}
		var ans struct{ ID, ParentStudy, Status string }
		o.post("/instances", "application/dicom", data, &ans)
		// "AlreadyStored" would mean two phantom files share a SOP
		// Instance UID, and the counts below would no longer hold.
		if ans.Status != "Success" {
			o.t.Fatalf("upload %s: Orthanc status %q", e.Name(), ans.Status)
		}
		if study != "" && ans.ParentStudy != study {
			o.t.Fatalf("upload %s: Orthanc study %s, earlier files went to %s", e.Name(), ans.ParentStudy, study)
		}
		study = ans.ParentStudy
		n++
	}
	var insts []json.RawMessage
	o.get("/studies/"+study+"/instances", &insts)
	if len(insts) != n {
		o.t.Fatalf("Orthanc holds %d instances of study %s, %d uploaded", len(insts), study, n)
	}
	return study, n
}

func port(t *testing.T, addr string) int {
	t.Helper()
	_, p, err := net.SplitHostPort(addr)
	if err != nil {
		t.Fatal(err)
	}
	n, err := strconv.Atoi(p)
	if err != nil {
		t.Fatal(err)
	}
	return n
}

// storedByListener reads midsag_instances_stored_total from the
// service's Prometheus text exposition, by listener label.
func storedByListener(t *testing.T, s *service) map[string]int {
	t.Helper()
	resp, err := http.Get("http://" + s.http + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	out := map[string]int{}
	sc := bufio.NewScanner(resp.Body)
	const prefix = `midsag_instances_stored_total{listener="`
	for sc.Scan() {
		line := sc.Text()
		rest, ok := strings.CutPrefix(line, prefix)
		if !ok {
			continue
		}
		label, value, ok := strings.Cut(rest, `"} `)
		if !ok {
			t.Fatalf("metrics line %q", line)
		}
		v, err := strconv.ParseFloat(value, 64)
		if err != nil {
			t.Fatalf("metrics line %q: %v", line, err)
		}
		out[label] = int(v)
	}
	if err := sc.Err(); err != nil {
		t.Fatalf("read metrics: %v", err)
	}
	return out
}

// TestServeOrthancPushes has Orthanc 1.10.1, a standard open-source PACS
// (Debian packages orthanc and orthanc-dicomweb), push one phantom study
// to midsag by C-STORE and another by STOW-RS through its DICOMweb
// plugin. Both must be scored to the phantom's true midline slice, and
// midsag's metrics must count each study's instances under the listener
// that received them.
func TestServeOrthancPushes(t *testing.T) {
	dir := t.TempDir()
	truths, err := phantom.Generate(dir, phantom.Options{Studies: 2, Seed: 71, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	// Orthanc's store call returns only when every instance is sent, but
	// a settle longer than the harness's 500 ms keeps a pause inside
	// Orthanc's association from getting half a study scored.
	s := startService(t, t.TempDir(), "--settle", "2s", "--allow-ae", orthancAET)
	o := startOrthanc(t, s)

	cstoreID, cstoreFiles := o.upload(filepath.Join(dir, truths[0].Study))
	stowID, stowFiles := o.upload(filepath.Join(dir, truths[1].Study))

	// Orthanc's answer to /modalities/{id}/store (Orthanc REST API,
	// 1.10.1) counts the instances sent and those that failed.
	var cstore struct {
		InstancesCount       int
		FailedInstancesCount int
	}
	o.post("/modalities/midsag/store", "text/plain", []byte(cstoreID), &cstore)
	if cstore.FailedInstancesCount != 0 || cstore.InstancesCount != cstoreFiles {
		t.Errorf("C-STORE: Orthanc sent %d instances, %d failed; want %d sent, none failed\nOrthanc log:\n%s",
			cstore.InstancesCount, cstore.FailedInstancesCount, cstoreFiles, o.log.String())
	}

	stowBody, err := json.Marshal(map[string]any{"Resources": []string{stowID}})
	if err != nil {
		t.Fatal(err)
	}
	// The DICOMweb plugin (1.7) answers 200 with the count of instances
	// sent only when midsag's Store Instances response lists every one
	// in its Referenced SOP Sequence; a partial or unreadable response
	// becomes an HTTP 500 ("The STOW-RS server was only able to receive
	// N instances out of M"), which post fails on; seen by answering the
	// plugin from a stub server that left one instance out. The plugin
	// writes the count as a JSON string ("48").
	var stow struct {
		InstancesCount int `json:",string"`
	}
	o.post("/dicom-web/servers/midsag/stow", "application/json", stowBody, &stow)
	if stow.InstancesCount != stowFiles {
		t.Errorf("STOW-RS: Orthanc sent %d instances, want %d\nOrthanc log:\n%s", stow.InstancesCount, stowFiles, o.log.String())
	}

	for i, want := range truths {
		r := s.waitResult(want.StudyInstanceUID)
		if r["status"] != "done" || r["center_sop_instance_uid"] != want.CenterSOPInstanceUID {
			t.Errorf("study %d (%s): status %v reason %v centre %v, truth %s", i, want.Study,
				r["status"], r["reason"], r["center_sop_instance_uid"], want.CenterSOPInstanceUID)
		}
	}

	got := storedByListener(t, s)
	want := map[string]int{"dicom": cstoreFiles, "stow": stowFiles}
	for l, n := range want {
		if got[l] != n {
			t.Errorf("midsag_instances_stored_total{listener=%q} = %d, want %d", l, got[l], n)
		}
	}
	t.Logf("Orthanc pushed %d instances by C-STORE and %d by STOW-RS; both studies scored to the true centre slice", cstoreFiles, stowFiles)
}
