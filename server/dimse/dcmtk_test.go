package dimse

import (
	"bytes"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
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

// TestStorescuCompressedAndLegacyConverted: DCMTK storescu sends a
// phantom series re-encoded by GDCM (gdcmconv --j2k, --jpegls: JPEG 2000
// and JPEG-LS lossless), proposing that syntax beside the uncompressed
// ones (storescu --help: -xv, -xt), and a Legacy Converted Enhanced MR
// instance (PS3.4 B.5). The listener must accept each, keep the file's
// own transfer syntax, and store the dataset unchanged.
func TestStorescuCompressedAndLegacyConverted(t *testing.T) {
	gdcm := testtool.GDCMConv(t)
	study, _ := studyDir(t, 3, midsag.ExplicitVRLittleEndian)
	ents, err := os.ReadDir(study)
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name, flag, ts string
		encode         []string
	}{
		{"jpeg2000 lossless", "-xv", midsag.JPEG2000Lossless, []string{gdcm, "--j2k"}},
		{"jpeg-ls lossless", "-xt", midsag.JPEGLSLossless, []string{gdcm, "--jpegls"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			sent := map[string][]byte{}
			for _, e := range ents[:4] {
				out := filepath.Join(dir, e.Name())
				if b, err := exec.Command(c.encode[0], append(c.encode[1:], filepath.Join(study, e.Name()), out)...).CombinedOutput(); err != nil {
					t.Fatalf("%v: %v\n%s", c.encode, err, b)
				}
				b, err := os.ReadFile(out)
				if err != nil {
					t.Fatal(err)
				}
				if m, err := parsePart10(b); err != nil || m.TransferSyntaxUID != c.ts {
					t.Fatalf("%s: GDCM wrote %+v (%v), want %s", e.Name(), m, err, c.ts)
				}
				sent[e.Name()] = b
			}
			storeAndCheck(t, dir, sent, c.flag)
		})
	}
	t.Run("legacy converted enhanced mr", func(t *testing.T) {
		files, _, err := phantom.GenerateStudy(phantom.Options{Seed: 3, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 0)
		if err != nil {
			t.Fatal(err)
		}
		enh, err := phantom.ToEnhancedMR([][]phantom.File{files}, phantom.EnhancedOptions{SOPClassUID: midsag.LegacyConvertedEnhancedMRImageStorage})
		if err != nil {
			t.Fatal(err)
		}
		dir := t.TempDir()
		testtool.WriteFile(t, dir, "legacy.dcm", enh.Data)
		// storescu proposes the files' own SOP classes only with -R. It
		// re-encodes sequences with undefined lengths, so the content is
		// compared, not the bytes.
		got := store(t, dir, 1, "-R")
		m, err := parsePart10(enh.Data)
		if err != nil {
			t.Fatal(err)
		}
		rb := got.files[m.SOPInstanceUID]
		rcv := testtool.WriteFile(t, t.TempDir(), "rcv.dcm", rb)
		d := dumps(t, []string{filepath.Join(dir, "legacy.dcm"), rcv})
		if a, b := contentLines(d[0]), contentLines(d[1]); a != b || a == "" {
			t.Errorf("dcmdump of the received dataset differs from the sent one:\n%.2000s\nvs\n%.2000s", b, a)
		}
	})
}

// storeAndCheck sends dir with storescu (extra proposal flags after the
// defaults) and checks every file arrived unchanged.
func storeAndCheck(t *testing.T, dir string, sent map[string][]byte, flags ...string) {
	t.Helper()
	got := store(t, dir, len(sent), flags...)
	checkReceived(t, sent, got, "PACS")
}

// store sends dir with storescu and returns what the listener received,
// which must be n files.
func store(t *testing.T, dir string, n int, flags ...string) *received {
	t.Helper()
	got := &received{}
	_, _, port := startSCP(t, Config{}, got.handler(StatusSuccess))
	args := append([]string{"-aet", "PACS", "-aec", "MIDSAG", "+sd", "+r"}, flags...)
	out, err := dcmtk(t, "storescu", append(args, "127.0.0.1", port, dir)...)
	if err != nil {
		t.Fatalf("storescu: %v\n%s", err, out)
	}
	if got.count() != n {
		t.Fatalf("handler got %d files, storescu sent %d\n%s", got.count(), n, out)
	}
	return got
}

// lengthMarker is dcmdump's note on how a sequence or item was encoded.
var lengthMarker = regexp.MustCompile(`\((Sequence|Item) with (explicit|undefined) length #=\d+\)`)

// contentLines keeps dcmdump's dataset element lines without the length
// comments and the sequence and item delimiters, which differ between
// defined- and undefined-length encodings of the same content.
func contentLines(dump string) string {
	var keep []string
	for _, l := range strings.Split(datasetLines(dump), "\n") {
		if strings.Contains(l, "Delimitation") {
			continue
		}
		l = lengthMarker.ReplaceAllString(l, "")
		if i := strings.LastIndex(l, "#"); i > 0 {
			l = strings.TrimSpace(l[:i])
		}
		keep = append(keep, l)
	}
	return strings.Join(keep, "\n")
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
// Storage, which a listener restricted to MR does not accept; DCMTK
// storescu must fail for lack of an accepted presentation context and
// nothing reaches the handler.
func TestStorescuUnsupportedSOPClass(t *testing.T) {
	ct := testtool.PydicomFile(t, "CT_small.dcm")
	var got received
	_, _, port := startSCP(t, Config{SOPClasses: []string{midsag.MRImageStorage}}, got.handler(StatusSuccess))
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
	c := dialEcho(t, addr)
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
