package cohort

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/atomicfile"
)

// Status is a study's outcome in a batch.
type Status string

// Statuses: scored with a probability; rejected with an input reason
// code; failed on a runtime error (an I/O error, a model error).
const (
	StatusScored   Status = "scored"
	StatusRejected Status = "rejected"
	StatusFailed   Status = "failed"
)

// Output file names in a batch's folder.
const (
	CSVName   = "results.csv"
	JSONLName = "results.jsonl"
)

// Row is one study's line in results.csv and results.jsonl.
type Row struct {
	StudyInstanceUID     string `json:"study_instance_uid"`
	Status               Status `json:"status"`
	Reason               string `json:"reason"`
	Message              string `json:"message"`
	SeriesInstanceUID    string `json:"series_instance_uid"`
	CenterSOPInstanceUID string `json:"center_sop_instance_uid"`
	// CenterFrameNumber is the centre slice's frame in a multi-frame
	// instance (1-based), 0 for a single-frame one.
	CenterFrameNumber int `json:"center_frame_number"`
	// MidlineConfidence is the midline pick's confidence, 0 to 1; nil for
	// a study not scored.
	MidlineConfidence     *float64 `json:"midline_confidence"`
	RawOutput             *float64 `json:"raw_output"`
	Probability           *float64 `json:"probability"`
	CalibratedProbability *float64 `json:"calibrated_probability"`
	Threshold             *float64 `json:"threshold"`
	Decision              string   `json:"decision"`
	QualityFlags          []string `json:"quality_flags"`
	ModelSHA256           string   `json:"model_sha256"`
	Files                 int      `json:"files"`
	ElapsedMS             float64  `json:"elapsed_ms"`
	// Label is set when labels were joined (empty for a study without
	// one); nil leaves the label column out.
	Label  *string `json:"label,omitempty"`
	Notice string  `json:"notice"`
}

// csvHeader is the column order of results.csv; "label" follows
// elapsed_ms when labels were joined.
var csvHeader = []string{"study_instance_uid", "status", "reason", "series_instance_uid", "center_sop_instance_uid",
	"center_frame_number", "midline_confidence", "raw_output", "probability", "calibrated_probability", "threshold", "decision", "quality_flags",
	"model_sha256", "files", "elapsed_ms", "message", "notice"}

func num(f *float64) string {
	if f == nil {
		return ""
	}
	return strconv.FormatFloat(*f, 'g', -1, 64)
}

// WriteTables writes dir/results.csv and dir/results.jsonl from rows,
// sorted by Study Instance UID, each through a synced temporary file and
// a rename, so a reader sees the old table or the new one, never a part.
func WriteTables(dir string, rows []Row) error {
	rows = append([]Row(nil), rows...)
	sort.Slice(rows, func(i, j int) bool { return rows[i].StudyInstanceUID < rows[j].StudyInstanceUID })
	withLabel := false
	for _, r := range rows {
		withLabel = withLabel || r.Label != nil
	}
	tw, err := newTableWriter(dir, withLabel)
	if err != nil {
		return err
	}
	for _, r := range rows {
		if err := tw.write(r); err != nil {
			tw.abort()
			return err
		}
	}
	return tw.commit()
}

// tableWriter streams rows, already in order, into temporary files beside
// results.csv and results.jsonl and renames them into place on commit, so
// writing the tables takes memory for one row, not for the cohort.
type tableWriter struct {
	dir       string
	withLabel bool
	files     [2]*atomicfile.File // csv, jsonl
	cw        *csv.Writer
	jb        *bufio.Writer
	enc       *json.Encoder
}

func newTableWriter(dir string, withLabel bool) (*tableWriter, error) {
	tw := &tableWriter{dir: dir, withLabel: withLabel}
	for i, name := range []string{CSVName, JSONLName} {
		// Outputs are ordinary files other users may read.
		f, err := atomicfile.Create(filepath.Join(dir, name), atomicfile.Perm(0o644))
		if err != nil {
			tw.abort()
			return nil, fmt.Errorf("cohort: write %s: %w", name, err)
		}
		tw.files[i] = f
	}
	tw.cw = csv.NewWriter(bufio.NewWriter(tw.files[0]))
	tw.jb = bufio.NewWriter(tw.files[1])
	tw.enc = json.NewEncoder(tw.jb)
	tw.enc.SetEscapeHTML(false)
	header := append([]string(nil), csvHeader...)
	if withLabel {
		at := slices.Index(csvHeader, "elapsed_ms") + 1
		header = append(header[:at:at], append([]string{"label"}, csvHeader[at:]...)...)
	}
	if err := tw.cw.Write(header); err != nil {
		tw.abort()
		return nil, fmt.Errorf("cohort: write table: %w", err)
	}
	return tw, nil
}

func (tw *tableWriter) write(r Row) error {
	flags, _ := json.Marshal(r.QualityFlags)
	if r.QualityFlags == nil {
		flags = nil
	}
	frame := ""
	if r.CenterFrameNumber > 0 {
		frame = strconv.Itoa(r.CenterFrameNumber)
	}
	rec := []string{r.StudyInstanceUID, string(r.Status), r.Reason, r.SeriesInstanceUID, r.CenterSOPInstanceUID,
		frame, num(r.MidlineConfidence), num(r.RawOutput), num(r.Probability), num(r.CalibratedProbability), num(r.Threshold), r.Decision, string(flags),
		r.ModelSHA256, strconv.Itoa(r.Files), strconv.FormatFloat(r.ElapsedMS, 'f', 1, 64)}
	if tw.withLabel {
		label := ""
		if r.Label != nil {
			label = *r.Label
		}
		rec = append(rec, label)
	}
	rec = append(rec, r.Message, r.Notice)
	if err := tw.cw.Write(rec); err != nil {
		return fmt.Errorf("cohort: write table: %w", err)
	}
	if err := tw.enc.Encode(r); err != nil {
		return fmt.Errorf("cohort: write table: %w", err)
	}
	return nil
}

// commit flushes both files and commits them (atomicfile), so each new
// table survives a crash whole or not at all.
func (tw *tableWriter) commit() error {
	tw.cw.Flush()
	err := tw.cw.Error()
	if err == nil {
		err = tw.jb.Flush()
	}
	if err != nil {
		tw.abort()
		return fmt.Errorf("cohort: write table: %w", err)
	}
	for _, f := range tw.files {
		if err := f.Commit(); err != nil {
			tw.abort()
			return fmt.Errorf("cohort: %w", err)
		}
	}
	return nil
}

// abort removes whatever temporary files are left.
func (tw *tableWriter) abort() {
	for _, f := range tw.files {
		if f != nil {
			f.Abort()
		}
	}
}

// ReadRows reads dir/results.jsonl.
func ReadRows(dir string) ([]Row, error) {
	path := filepath.Join(dir, JSONLName)
	f, err := os.Open(path)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, midsag.Reject(midsag.ReasonNoInput, "no batch results in "+dir, err)
		}
		return nil, fmt.Errorf("cohort: %w", err)
	}
	defer f.Close()
	var out []Row
	sc := bufio.NewScanner(f)
	sc.Buffer(nil, 16<<20)
	for n := 1; sc.Scan(); n++ {
		var r Row
		if err := json.Unmarshal(sc.Bytes(), &r); err != nil {
			return nil, midsag.Reject(midsag.ReasonBadTable, fmt.Sprintf("%s line %d", path, n), err)
		}
		out = append(out, r)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("cohort: read %s: %w", path, err)
	}
	return out, nil
}
