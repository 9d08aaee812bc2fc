package evaluate

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
)

// Columns names the columns of a table to evaluate.
type Columns struct {
	Score    string // the model's score; higher means positive
	Label    string // the truth, in the table or in the labels file
	Positive string // the label value of a positive case
	Compare  string // optional second score for the paired DeLong test
	Reader   string // optional binary reader calls, 0 or 1
	ID       string // id column joining the table with a labels file
	Time     string // optional follow-up time (≥ 0) for a time-to-event evaluation
	Event    string // with Time: 1 when the event was seen at Time, 0 when censored there
	// Subgroups are columns whose values split the cases into subgroups.
	Subgroups []string
}

// Batch table columns: when the table has them (a midsag batch table),
// ReadTable counts its studies by status and reason for the flow table and
// collects the model's sha256.
const (
	colStatus   = "status"
	colReason   = "reason"
	colModelSHA = "model_sha256"
	scored      = "scored"
)

// Table is the cases read from a CSV table, in file order.
type Table struct {
	IDs     []string  // values of Columns.ID; empty without a join
	Labels  []bool    // true for a positive case
	Scores  []float64 // Columns.Score
	Compare []float64 // Columns.Compare, nil without it
	Reader  []bool    // Columns.Reader (true = called positive), nil without it
	Times   []float64 // Columns.Time, nil without it
	Events  []bool    // Columns.Event (true = event seen), nil without it
	// Groups holds each subgroup column's value per case.
	Groups map[string][]string
	// Flow counts the table's rows before any is left out; Models counts
	// the cases by the model_sha256 column when the table has one.
	Flow   Flow
	Models map[string]int
	// NegativeLabel is the one label value other than Columns.Positive.
	NegativeLabel string
	// Excluded counts rows left out, by reason: "empty_score",
	// "empty_compare", "empty_reader", "empty_label", "empty_time",
	// "empty_event", "no_label" (a table row whose id is missing from the
	// labels file).
	Excluded map[string]int
}

// ReadTable reads cases from a CSV table with a header row. A label
// column (with its positive value) or a time and event column pair, or
// both, must be named. With labels
// non-nil the label column is taken from that second CSV and joined on
// cols.ID. The rule for imperfect rows: a row with an empty cell in a used
// column (or, in a join, no row in the labels file) is excluded and counted
// in Table.Excluded; a cell that is present but not a finite number, a
// reader call other than 0 or 1, a duplicate id or a third label value is
// refused with midsag.ReasonBadTable, naming the file and line. Names are
// only used in messages.
func ReadTable(table io.Reader, tableName string, labels io.Reader, labelsName string, cols Columns) (*Table, error) {
	if err := cols.check(); err != nil {
		return nil, err
	}
	var truth map[string]string
	if labels != nil {
		if cols.ID == "" || cols.Label == "" {
			return nil, errors.New("read table: a labels file needs an id column to join on and a label column")
		}
		var err error
		if truth, err = readLabels(labels, labelsName, cols); err != nil {
			return nil, err
		}
	}
	rows, header, err := readCSV(table, tableName)
	if err != nil {
		return nil, err
	}
	need := append([]string{cols.Score, cols.Compare, cols.Reader, cols.Time, cols.Event}, cols.Subgroups...)
	if truth != nil {
		need = append(need, cols.ID)
	} else {
		need = append(need, cols.Label)
	}
	at, err := columnIndex(header, tableName, need...)
	if err != nil {
		return nil, err
	}
	t := &Table{Excluded: map[string]int{}}
	if cols.Compare != "" {
		t.Compare = []float64{}
	}
	if cols.Reader != "" {
		t.Reader = []bool{}
	}
	if cols.Time != "" {
		t.Times, t.Events = []float64{}, []bool{}
	}
	if len(cols.Subgroups) > 0 {
		t.Groups = map[string][]string{}
	}
	rr := rowReader{t: t, cols: cols, at: at, truth: truth, name: tableName, seen: map[string]int{}, batch: batchColumns(header)}
	t.Flow = Flow{Batch: rr.batch != nil, Status: map[string]int{}, Reasons: map[string]int{}}
	for i, row := range rows {
		if err := rr.add(row, i+2); err != nil { // 1-based, after the header
			return nil, err
		}
	}
	if cols.Label != "" && len(t.Labels) > 0 && !t.anyPositive() {
		return nil, midsag.Rejectf(midsag.ReasonBadTable, "%s: positive label %q matches no case; the label column holds %q",
			tableName, cols.Positive, t.NegativeLabel)
	}
	return t, nil
}

func (t *Table) anyPositive() bool {
	for _, l := range t.Labels {
		if l {
			return true
		}
	}
	return false
}

// rowReader adds the rows of one table to t.
type rowReader struct {
	t     *Table
	cols  Columns
	at    map[string]int
	truth map[string]string // id → label from the labels file, or nil
	name  string
	seen  map[string]int // id → line, for a join
	batch map[string]int // positions of the batch table's columns, or nil
}

// batchColumns finds the status, reason and model columns of a batch
// table; nil when the table has no status column.
func batchColumns(header []string) map[string]int {
	at := map[string]int{}
	for i, h := range header {
		switch h = strings.TrimSpace(h); h {
		case colStatus, colReason, colModelSHA:
			at[h] = i
		}
	}
	if _, ok := at[colStatus]; !ok {
		return nil
	}
	return at
}

// batchRow counts a batch table's row by status and reports whether it
// was scored (only scored studies go on to be evaluated).
func (rr *rowReader) batchRow(row []string) bool {
	if rr.batch == nil {
		return true
	}
	get := func(c string) string {
		if i, ok := rr.batch[c]; ok && i < len(row) {
			return strings.TrimSpace(row[i])
		}
		return ""
	}
	st := get(colStatus)
	rr.t.Flow.Status[st]++
	if st != scored {
		rr.t.Flow.Reasons[st+": "+get(colReason)]++
		return false
	}
	if m := get(colModelSHA); m != "" {
		if rr.t.Models == nil {
			rr.t.Models = map[string]int{}
		}
		rr.t.Models[m]++
	}
	return true
}

// add adds one row (at line) to the table, counts it as excluded, or
// refuses it.
func (rr *rowReader) add(row []string, line int) error {
	cols := rr.cols
	rr.t.Flow.Rows++
	if !rr.batchRow(row) {
		return nil
	}
	id, label, ok, err := rr.idLabel(row, line)
	if err != nil || !ok {
		return err
	}
	cell := func(c string) string { return strings.TrimSpace(row[rr.at[c]]) }
	if reason := emptyCell(label, cell, cols); reason != "" {
		rr.t.Excluded[reason]++
		return nil
	}
	bad := func(format string, args ...any) error {
		return midsag.Rejectf(midsag.ReasonBadTable, "%s line %d: "+format, append([]any{rr.name, line}, args...)...)
	}
	s, err := number(cell(cols.Score))
	if err != nil {
		return bad("column %q: %v", cols.Score, err)
	}
	if err := rr.addFollowUp(cell); err != nil {
		return bad("%v", err)
	}
	if cols.Label != "" {
		pos, err := rr.t.label(strings.TrimSpace(label), cols.Positive)
		if err != nil {
			return bad("%v", err)
		}
		rr.t.Labels = append(rr.t.Labels, pos)
	}
	for _, g := range cols.Subgroups {
		rr.t.Groups[g] = append(rr.t.Groups[g], cell(g))
	}
	if cols.Compare != "" {
		c, err := number(cell(cols.Compare))
		if err != nil {
			return bad("column %q: %v", cols.Compare, err)
		}
		rr.t.Compare = append(rr.t.Compare, c)
	}
	if cols.Reader != "" {
		switch r := cell(cols.Reader); r {
		case "0", "1":
			rr.t.Reader = append(rr.t.Reader, r == "1")
		default:
			return bad("reader call %q in column %q is not 0 or 1", r, cols.Reader)
		}
	}
	rr.t.IDs = append(rr.t.IDs, id)
	rr.t.Scores = append(rr.t.Scores, s)
	return nil
}

// check says which combinations of columns can be evaluated.
func (cols Columns) check() error {
	switch {
	case cols.Score == "":
		return errors.New("read table: the score column is required")
	case (cols.Label == "") != (cols.Positive == ""):
		return errors.New("read table: a label column and its positive value go together")
	case (cols.Time == "") != (cols.Event == ""):
		return errors.New("read table: a time column and an event column go together")
	case cols.Label == "" && cols.Time == "":
		return errors.New("read table: a label column or a time and event column pair is required")
	}
	return nil
}

// addFollowUp appends the row's follow-up time and event; the row's
// values are checked before anything of it is appended.
func (rr *rowReader) addFollowUp(cell func(string) string) error {
	if rr.cols.Time == "" {
		return nil
	}
	tm, err := number(cell(rr.cols.Time))
	if err != nil || tm < 0 {
		return fmt.Errorf("column %q: follow-up time %q is not a finite number ≥ 0", rr.cols.Time, cell(rr.cols.Time))
	}
	ev := cell(rr.cols.Event)
	if ev != "0" && ev != "1" {
		return fmt.Errorf("event %q in column %q is not 0 (censored) or 1 (event)", ev, rr.cols.Event)
	}
	rr.t.Times = append(rr.t.Times, tm)
	rr.t.Events = append(rr.t.Events, ev == "1")
	return nil
}

// idLabel returns the row's id and label: from the labels file in a join
// (ok false, counted as no_label, when the id has none there; a duplicate
// id refused), else from the label column.
func (rr *rowReader) idLabel(row []string, line int) (id, label string, ok bool, err error) {
	if rr.truth == nil {
		if rr.cols.Label == "" {
			return "", "", true, nil
		}
		return "", row[rr.at[rr.cols.Label]], true, nil
	}
	id = row[rr.at[rr.cols.ID]]
	if prev, dup := rr.seen[id]; dup {
		return "", "", false, midsag.Rejectf(midsag.ReasonBadTable, "%s line %d: id %q already on line %d", rr.name, line, id, prev)
	}
	rr.seen[id] = line
	if label, ok = rr.truth[id]; !ok {
		rr.t.Excluded["no_label"]++
	}
	return id, label, ok, nil
}

// emptyCell names the exclusion of a row with an empty cell in a used
// column, or "" when every used cell holds something.
func emptyCell(label string, cell func(string) string, cols Columns) string {
	switch {
	case cols.Label != "" && strings.TrimSpace(label) == "":
		return "empty_label"
	case cell(cols.Score) == "":
		return "empty_score"
	case cols.Compare != "" && cell(cols.Compare) == "":
		return "empty_compare"
	case cols.Reader != "" && cell(cols.Reader) == "":
		return "empty_reader"
	case cols.Time != "" && cell(cols.Time) == "":
		return "empty_time"
	case cols.Time != "" && cell(cols.Event) == "":
		return "empty_event"
	}
	return ""
}

// label maps a label value to positive or negative, allowing exactly one
// value other than the positive one.
func (t *Table) label(v, positive string) (bool, error) {
	if v == positive {
		return true, nil
	}
	if t.NegativeLabel == "" {
		t.NegativeLabel = v
	}
	if v != t.NegativeLabel {
		if !t.anyPositive() {
			return false, fmt.Errorf("positive label %q matches none of the values read so far (%q, %q)", positive, t.NegativeLabel, v)
		}
		return false, fmt.Errorf("label %q is a third value (positive %q, negative %q)", v, positive, t.NegativeLabel)
	}
	return false, nil
}

func number(s string) (float64, error) {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%q is not a finite number", s)
	}
	return v, nil
}

// readLabels reads id → label from the labels file.
func readLabels(r io.Reader, name string, cols Columns) (map[string]string, error) {
	rows, header, err := readCSV(r, name)
	if err != nil {
		return nil, err
	}
	at, err := columnIndex(header, name, cols.ID, cols.Label)
	if err != nil {
		return nil, err
	}
	truth := make(map[string]string, len(rows))
	for i, row := range rows {
		id := row[at[cols.ID]]
		if _, dup := truth[id]; dup {
			return nil, midsag.Rejectf(midsag.ReasonBadTable, "%s line %d: id %q appears twice", name, i+2, id)
		}
		truth[id] = row[at[cols.Label]]
	}
	return truth, nil
}

func readCSV(r io.Reader, name string) (rows [][]string, header []string, err error) {
	cr := csv.NewReader(r)
	all, err := cr.ReadAll()
	if err != nil {
		return nil, nil, midsag.Reject(midsag.ReasonBadTable, "read "+name, err)
	}
	if len(all) == 0 {
		return nil, nil, midsag.Rejectf(midsag.ReasonBadTable, "%s is empty (a header row is needed)", name)
	}
	header = all[0]
	if len(header) > 0 {
		header[0] = strings.TrimPrefix(header[0], "\ufeff") // spreadsheet exports add a BOM
	}
	return all[1:], header, nil
}

// columnIndex maps each non-empty wanted column to its position in header.
func columnIndex(header []string, name string, want ...string) (map[string]int, error) {
	at := map[string]int{}
	for i, h := range header {
		at[strings.TrimSpace(h)] = i
	}
	out := map[string]int{}
	for _, w := range want {
		if w == "" {
			continue
		}
		i, ok := at[w]
		if !ok {
			have := append([]string(nil), header...)
			sort.Strings(have)
			return nil, midsag.Rejectf(midsag.ReasonBadTable, "%s has no column %q (columns: %s)", name, w, strings.Join(have, ", "))
		}
		out[w] = i
	}
	return out, nil
}
