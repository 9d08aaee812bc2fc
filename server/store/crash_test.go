package store

import (
	"bufio"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"hash/fnv"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// Environment of the helper process started by TestCrashKill.
const (
	crashDirEnv = "MIDSAG_STORE_CRASH_DIR"
	crashGCEnv  = "MIDSAG_STORE_CRASH_GROUP_COMMIT"
)

// crashSize varies instance sizes (16–64 KiB) so a kill lands in the
// middle of a write often enough to matter.
func crashSize(uid string) int {
	h := fnv.New32a()
	h.Write([]byte(uid))
	return 16<<10 + int(h.Sum32()%(48<<10))
}

// TestHelperProcess is not a test: TestCrashKill runs the test binary again
// with it selected, and this Puts instances until killed, printing each
// SOP Instance UID only after Put returned.
func TestHelperProcess(t *testing.T) {
	dir := os.Getenv(crashDirEnv)
	if dir == "" {
		t.Skip("helper process for TestCrashKill")
	}
	gc, err := time.ParseDuration(os.Getenv(crashGCEnv))
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(3)
	}
	s, err := Open(dir, Options{GroupCommit: gc})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(3)
	}
	// Bounded so a parent that fails to kill it does not hang the run.
	deadline := time.Now().Add(4 * time.Second)
	var out sync.Mutex
	var wg sync.WaitGroup
	for g := range 4 {
		wg.Go(func() {
			for i := 0; i < 500 && time.Now().Before(deadline); i++ {
				study := fmt.Sprintf("1.2.826.0.1.%d", i%3)
				sop := fmt.Sprintf("%s.%d.%d", study, g, i)
				if _, _, err := s.Put(context.Background(), inst(study, sop), payload(sop, 0, crashSize(sop))); err != nil {
					fmt.Fprintln(os.Stderr, err)
					os.Exit(3)
				}
				out.Lock()
				// One write(2) per line to the pipe, so what the parent
				// reads is exactly what was acknowledged.
				os.Stdout.WriteString("ack " + sop + "\n")
				out.Unlock()
			}
		})
	}
	wg.Wait()
	os.Exit(0)
}

// TestCrashKill kills a process that is Putting instances with SIGKILL at
// a random moment, then checks the acknowledgement contract on a fresh
// Store: every UID printed after Put returned is present with a readable
// file of the right SHA-256, and no row points to a missing or partial
// file. SIGKILL ends the process but keeps the kernel's page cache, so this
// tests process crashes; power loss additionally relies on the fsyncs,
// which no unprivileged test can cut.
func TestCrashKill(t *testing.T) {
	if testing.Short() {
		t.Skip("starts helper processes")
	}
	for _, gc := range []time.Duration{0, 2 * time.Millisecond} {
		t.Run(fmt.Sprint("group=", gc), func(t *testing.T) {
			for round := range 2 {
				crashRound(t, gc, round)
			}
		})
	}
}

func crashRound(t *testing.T, gc time.Duration, round int) {
	dir := t.TempDir()
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperProcess$")
	cmd.Env = append(os.Environ(), crashDirEnv+"="+dir, crashGCEnv+"="+gc.String())
	var stderr strings.Builder
	cmd.Stderr = &stderr
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	first := make(chan struct{})
	var acked []string
	readDone := make(chan struct{})
	go func() {
		defer close(readDone)
		sc := bufio.NewScanner(stdout)
		for sc.Scan() {
			if uid, ok := strings.CutPrefix(sc.Text(), "ack "); ok {
				if len(acked) == 0 {
					close(first)
				}
				acked = append(acked, uid)
			}
		}
	}()
	select {
	case <-first:
	case <-time.After(5 * time.Second):
		cmd.Process.Kill()
		t.Fatalf("helper acknowledged nothing; stderr: %s", stderr.String())
	}
	time.Sleep(time.Duration(20+rand.IntN(300)) * time.Millisecond)
	if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	<-readDone
	cmd.Wait()
	ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus)
	if !ok || !ws.Signaled() || ws.Signal() != syscall.SIGKILL {
		t.Fatalf("helper was not killed mid-run (state %v); stderr: %s", cmd.ProcessState, stderr.String())
	}

	s := openT(t, dir, Options{})
	ctx := context.Background()
	got, err := s.InstancesBySOP(ctx, acked)
	if err != nil {
		t.Fatal(err)
	}
	bySOP := map[string]Instance{}
	for _, in := range got {
		bySOP[in.SOPInstanceUID] = in
	}
	for _, uid := range acked {
		in, ok := bySOP[uid]
		if !ok {
			t.Fatalf("acknowledged %s lost", uid)
		}
		want := sha256.Sum256(payload(uid, 0, crashSize(uid)))
		if in.SHA256 != hex.EncodeToString(want[:]) {
			t.Fatalf("%s: row sha256 %s is not what was sent", uid, in.SHA256)
		}
	}
	// Every row, acknowledged or not, must point to a complete file.
	rows := 0
	for i := range 3 {
		list, err := s.Instances(ctx, fmt.Sprintf("1.2.826.0.1.%d", i), 0)
		if err != nil {
			t.Fatal(err)
		}
		for _, in := range list {
			if sum := fileSHA(t, s, in); sum != in.SHA256 {
				t.Fatalf("%s: file sha256 %s, row %s", in.SOPInstanceUID, sum, in.SHA256)
			}
			rows++
		}
	}
	// Nothing unacknowledged stays behind either: the sweep leaves exactly
	// one file per row.
	files, err := filepath.Glob(filepath.Join(dir, "spool", "*", "*"))
	if err != nil {
		t.Fatal(err)
	}
	if len(files) != rows {
		t.Fatalf("%d files in the spool for %d rows", len(files), rows)
	}
	t.Logf("round %d: %d acknowledged, %d rows after kill", round, len(acked), rows)
}
