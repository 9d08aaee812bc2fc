package dimse

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

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
			case phantom.RLELossless:
				args = append(args, "-xr")
			case phantom.DeflatedExplicitVRLE:
				args = append(args, "-xd")
			case phantom.JPEGLosslessSV1:
				args = append(args, "-xs")
			case phantom.ImplicitVRLittleEndian:
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

// checkReceived compares each sent file with what the handler got: equal
// dataset bytes when the transfer syntax was kept, equal dcmdump text of
// the dataset otherwise; dcmdump (DCMTK) must parse every received file.
func checkReceived(t *testing.T, sent map[string][]byte, got *received, callingAE string) {
	t.Helper()
	out := t.TempDir()
	for name, b := range sent {
		sm, err := parsePart10(b)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		rb, ok := got.files[sm.sopInstance]
		if !ok {
			t.Errorf("%s (%s) not received", name, sm.sopInstance)
			continue
		}
		rm, err := parsePart10(rb)
		if err != nil {
			t.Errorf("%s: received file: %v", name, err)
			continue
		}
		if rm.sopClass != sm.sopClass {
			t.Errorf("%s: SOP class %s, sent %s", name, rm.sopClass, sm.sopClass)
		}
		p := filepath.Join(out, name)
		if err := os.WriteFile(p, rb, 0o644); err != nil {
			t.Fatal(err)
		}
		dump, err := dcmtk(t, "dcmdump", "-q", "+L", p)
		if err != nil {
			t.Errorf("%s: dcmdump of received file: %v\n%s", name, err, dump)
			continue
		}
		if !strings.Contains(string(dump), "(0002,0016) AE ["+callingAE+"]") {
			t.Errorf("%s: dcmdump shows no Source AE %s", name, callingAE)
		}
		// Deflated datasets are re-deflated by storescu, so only their
		// content can be compared.
		if rm.transferSyntax == sm.transferSyntax && sm.transferSyntax != phantom.DeflatedExplicitVRLE {
			if !bytes.Equal(rm.dataset, sm.dataset) {
				t.Errorf("%s: dataset differs (%d vs %d bytes)", name, len(rm.dataset), len(sm.dataset))
			}
			continue
		}
		// storescu converted the encoding: the dataset content as DCMTK
		// reads it must still match.
		sp := filepath.Join(out, name+".sent")
		if err := os.WriteFile(sp, b, 0o644); err != nil {
			t.Fatal(err)
		}
		want, err := dcmtk(t, "dcmdump", "-q", "+L", sp)
		if err != nil {
			t.Fatalf("dcmdump of sent file: %v\n%s", err, want)
		}
		if a, b := datasetLines(dump), datasetLines(want); a != b {
			t.Errorf("%s: dataset differs after %s -> %s:\n%s\nvs\n%s", name, sm.transferSyntax, rm.transferSyntax, a, b)
		}
	}
}

// datasetLines keeps dcmdump's element lines outside the meta group.
func datasetLines(dump []byte) string {
	var keep []string
	for _, l := range strings.Split(string(dump), "\n") {
		l = strings.TrimSpace(l)
		if l == "" || strings.HasPrefix(l, "#") || strings.HasPrefix(l, "(0002,") {
			continue
		}
		keep = append(keep, l)
	}
	return strings.Join(keep, "\n")
}
