package dimse

import (
	"bytes"
	"io"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
)

// TestEchoscuAgainstSCP: DCMTK echoscu (the reference Verification SCU)
// must succeed against our SCP.
func TestEchoscuAgainstSCP(t *testing.T) {
	s, _, port := startSCP(t, Config{}, (&received{}).handler(StatusSuccess))
	out, err := dcmtk(t, "echoscu", "-aet", "X", "-aec", "MIDSAG", "127.0.0.1", port)
	if err != nil {
		t.Fatalf("echoscu: %v\n%s", err, out)
	}
	if st := s.Stats(); st.Echoes != 1 || st.Total != 1 {
		t.Errorf("stats after one echo: %+v", st)
	}
}

// TestStorescuPhantomStudy: DCMTK storescu sends a phantom study in each
// transfer syntax the phantom writes; every file must arrive as a Part 10
// file that DCMTK's dcmdump parses and whose dataset equals the sent one.
func TestStorescuPhantomStudy(t *testing.T) {
	for _, ts := range phantom.SupportedSyntaxes() {
		t.Run(ts, func(t *testing.T) {
			var got received
			_, _, port := startSCP(t, Config{}, got.handler(StatusSuccess))
			dir, sent := studyDir(t, 1, ts)
			// storescu's proposal options (storescu --help): -xr adds RLE,
			// -xd Deflated, -xs JPEG lossless, -xi Implicit VR only;
			// default proposes the uncompressed syntaxes.
			args := []string{"-aet", "PACS", "-aec", "MIDSAG", "+sd", "+r"}
			switch ts {
			case midsag.RLELossless:
				args = append(args, "-xr")
			case midsag.DeflatedExplicitVRLittleEndian:
				args = append(args, "-xd")
			case midsag.JPEGLosslessSV1:
				args = append(args, "-xs")
			case midsag.ImplicitVRLittleEndian:
				args = append(args, "-xi")
			}
			out, err := dcmtk(t, "storescu", append(args, "127.0.0.1", port, dir)...)
			if err != nil {
				t.Fatalf("storescu: %v\n%s", err, out)
			}
			if got.count() != len(sent) {
				t.Fatalf("handler got %d files, storescu sent %d\n%s", got.count(), len(sent), out)
			}
			checkReceived(t, sent, &got, "PACS")
		})
	}
}

// checkReceived compares each sent file with what the handler got: the
// handler saw callingAE; dataset bytes are equal when the transfer syntax
// was kept; otherwise DCMTK's dcmdump must show the same dataset
// elements. dcmdump must parse every received file.
func checkReceived(t *testing.T, sent map[string][]byte, got *received, callingAE string) {
	t.Helper()
	dir := t.TempDir()
	var names, rpaths, spaths []string
	for name, b := range sent {
		sm, err := parsePart10(b)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		rb, ok := got.files[sm.SOPInstanceUID]
		if !ok {
			t.Errorf("%s (%s) not received", name, sm.SOPInstanceUID)
			continue
		}
		rm, err := parsePart10(rb)
		if err != nil {
			t.Errorf("%s: received file: %v", name, err)
			continue
		}
		if rm.SOPClassUID != sm.SOPClassUID {
			t.Errorf("%s: SOP class %s, sent %s", name, rm.SOPClassUID, sm.SOPClassUID)
		}
		names = append(names, name)
		rpaths = append(rpaths, filepath.Join(dir, name+".rcv"))
		spaths = append(spaths, filepath.Join(dir, name+".snd"))
		if err := os.WriteFile(rpaths[len(rpaths)-1], rb, 0o644); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(spaths[len(spaths)-1], b, 0o644); err != nil {
			t.Fatal(err)
		}
		// Deflated datasets are re-deflated by storescu, so only their
		// content can be compared.
		if rm.TransferSyntaxUID == sm.TransferSyntaxUID && sm.TransferSyntaxUID != midsag.DeflatedExplicitVRLittleEndian &&
			!bytes.Equal(rm.dataset, sm.dataset) {
			t.Errorf("%s: dataset differs (%d vs %d bytes)", name, len(rm.dataset), len(sm.dataset))
		}
	}
	rdump := dumps(t, rpaths)
	sdump := dumps(t, spaths)
	for i, name := range names {
		if !strings.Contains(rdump[i], "(0002,0016) AE ["+callingAE+"]") {
			t.Errorf("%s: dcmdump shows no Source AE %s", name, callingAE)
		}
		if a, b := datasetLines(rdump[i]), datasetLines(sdump[i]); a != b {
			t.Errorf("%s: dcmdump of the dataset differs:\n%.2000s\nvs\n%.2000s", name, a, b)
		}
	}
}

// dumps runs DCMTK's dcmdump once over paths and splits its output per
// file at the "# Dicom-File-Format" line it prints for each.
func dumps(t testing.TB, paths []string) []string {
	t.Helper()
	if len(paths) == 0 {
		return nil
	}
	out, err := dcmtk(t, "dcmdump", append([]string{"-q", "+L"}, paths...)...)
	if err != nil {
		t.Fatalf("dcmdump: %v\n%.2000s", err, out)
	}
	parts := strings.Split(string(out), "# Dicom-File-Format")[1:]
	if len(parts) != len(paths) {
		t.Fatalf("dcmdump printed %d files, want %d", len(parts), len(paths))
	}
	return parts
}

// datasetLines keeps dcmdump's element lines outside the meta group.
func datasetLines(dump string) string {
	var keep []string
	for _, l := range strings.Split(dump, "\n") {
		l = strings.TrimSpace(l)
		if l == "" || strings.HasPrefix(l, "#") || strings.HasPrefix(l, "(0002,") {
			continue
		}
		keep = append(keep, l)
	}
	return strings.Join(keep, "\n")
}

// TestStorescuUnsupportedSOPClass: pydicom's CT_small.dcm is CT Image
// Storage, which we do not accept; DCMTK storescu must fail for lack of
// an accepted presentation context and nothing reaches the handler.
func TestStorescuUnsupportedSOPClass(t *testing.T) {
	ct := testtool.PydicomFile(t, "CT_small.dcm")
	var got received
	_, _, port := startSCP(t, Config{}, got.handler(StatusSuccess))
	out, err := dcmtk(t, "storescu", "-aet", "PACS", "-aec", "MIDSAG", "127.0.0.1", port, ct)
	if err == nil {
		t.Fatalf("storescu succeeded with an unsupported SOP class:\n%s", out)
	}
	if !strings.Contains(strings.ToLower(string(out)), "presentation context") {
		t.Errorf("storescu output does not mention the presentation context:\n%s", out)
	}
	if got.count() != 0 {
		t.Errorf("handler got %d files", got.count())
	}
}

// TestEchoscuRejected: DCMTK echoscu must fail with an association
// rejection when its calling AE is not allowed or it calls another AE.
func TestEchoscuRejected(t *testing.T) {
	for _, tc := range []struct{ name, calling, called, want string }{
		{"calling AE not allowed", "INTRUDER", "MIDSAG", "Calling AE Title Not Recognized"},
		{"wrong called AE", "PACS", "OTHER", "Called AE Title Not Recognized"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s, _, port := startSCP(t, Config{AllowedCallingAEs: []string{"PACS"}}, (&received{}).handler(StatusSuccess))
			out, err := dcmtk(t, "echoscu", "-aet", tc.calling, "-aec", tc.called, "127.0.0.1", port)
			if err == nil {
				t.Fatalf("echoscu succeeded:\n%s", out)
			}
			// echoscu prints "Association Rejected" and the reason in the
			// standard's words (observed with DCMTK 3.6.7).
			if !strings.Contains(string(out), "Association Rejected") || !strings.Contains(string(out), tc.want) {
				t.Errorf("echoscu output lacks the rejection %q:\n%s", tc.want, out)
			}
			if testing.Verbose() {
				t.Logf("%s", out)
			}
			if st := s.Stats(); st.Rejected != 1 || st.Total != 0 {
				t.Errorf("stats: %+v", st)
			}
		})
	}
	// The allowed AE still gets in: the rejection is not blanket.
	_, _, port := startSCP(t, Config{AllowedCallingAEs: []string{"PACS"}}, (&received{}).handler(StatusSuccess))
	if out, err := dcmtk(t, "echoscu", "-aet", "PACS", "-aec", "MIDSAG", "127.0.0.1", port); err != nil {
		t.Fatalf("echoscu from an allowed AE: %v\n%s", err, out)
	}
}

// TestEchoscuLocalLimit: with MaxAssociations 1 and one association
// held open, DCMTK echoscu must be rejected transiently for the local
// limit; after the first is released, echoscu gets in.
func TestEchoscuLocalLimit(t *testing.T) {
	s, addr, port := startSCP(t, Config{MaxAssociations: 1}, (&received{}).handler(StatusSuccess))
	c, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	if _, err := c.Write(echoRQ()); err != nil {
		t.Fatal(err)
	}
	var h [1]byte
	if _, err := io.ReadFull(c, h[:]); err != nil || h[0] != pduAssociateAC {
		t.Fatalf("first association: % x, %v", h, err)
	}
	out, err := dcmtk(t, "echoscu", "-aet", "X", "-aec", "MIDSAG", "127.0.0.1", port)
	if err == nil {
		t.Fatalf("echoscu succeeded beyond the limit:\n%s", out)
	}
	// DCMTK 3.6.7 prints the PS3.8 reason text (observed).
	if !strings.Contains(string(out), "Rejected Transient") || !strings.Contains(string(out), "Local Limit Exceeded") {
		t.Errorf("echoscu output lacks the transient local-limit rejection:\n%s", out)
	}
	if st := s.Stats(); st.Active != 1 || st.Rejected != 1 {
		t.Errorf("stats %+v", st)
	}
	c.Close()
	for i := 0; s.Stats().Active != 0; i++ {
		if i == 200 {
			t.Fatal("first association still active 2 s after close")
		}
		time.Sleep(10 * time.Millisecond)
	}
	if out, err := dcmtk(t, "echoscu", "-aet", "X", "-aec", "MIDSAG", "127.0.0.1", port); err != nil {
		t.Fatalf("echoscu after the slot freed: %v\n%s", err, out)
	}
}
