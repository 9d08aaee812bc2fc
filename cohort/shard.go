package cohort

import (
	"encoding/csv"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"os"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
)

// Shard selects part I of N of a cohort (0 <= I < N). The zero value and
// 0/1 select everything.
type Shard struct{ Index, Count int }

// ParseShard parses "I/N".
func ParseShard(s string) (Shard, error) {
	i, n, ok := strings.Cut(s, "/")
	if !ok {
		return Shard{}, fmt.Errorf("shard %q: want I/N", s)
	}
	a, err1 := strconv.Atoi(i)
	b, err2 := strconv.Atoi(n)
	if err1 != nil || err2 != nil || b < 1 || a < 0 || a >= b {
		return Shard{}, fmt.Errorf("shard %q: want I/N with 0 <= I < N", s)
	}
	return Shard{Index: a, Count: b}, nil
}

// Has reports whether the study belongs to the shard: FNV-1a 64 of the
// Study Instance UID's bytes, modulo N, equals I. The hash depends on the
// UID alone, so every machine and every rerun makes the same partition.
func (s Shard) Has(studyUID string) bool {
	if s.Count <= 1 {
		return true
	}
	h := fnv.New64a()
	h.Write([]byte(studyUID))
	return h.Sum64()%uint64(s.Count) == uint64(s.Index)
}

// String returns "I/N".
func (s Shard) String() string { return fmt.Sprintf("%d/%d", s.Index, max(s.Count, 1)) }

// ReadLabels reads a CSV table with study_instance_uid and label columns
// (other columns are ignored) into a map from study to label.
func ReadLabels(path string) (map[string]string, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonNoInput, "cannot open labels", err)
	}
	defer f.Close()
	cr := csv.NewReader(f)
	cr.FieldsPerRecord = -1
	header, err := cr.Read()
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonBadTable, path+" has no header row", err)
	}
	uidCol, labelCol := -1, -1
	for i, h := range header {
		switch strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")) {
		case "study_instance_uid":
			uidCol = i
		case "label":
			labelCol = i
		}
	}
	if uidCol < 0 || labelCol < 0 {
		return nil, midsag.Rejectf(midsag.ReasonBadTable, "%s needs study_instance_uid and label columns", path)
	}
	out := map[string]string{}
	for line := 2; ; line++ {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			return out, nil
		}
		if err != nil {
			return nil, midsag.Reject(midsag.ReasonBadTable, fmt.Sprintf("%s line %d", path, line), err)
		}
		if uidCol >= len(rec) || labelCol >= len(rec) {
			return nil, midsag.Rejectf(midsag.ReasonBadTable, "%s line %d has too few columns", path, line)
		}
		uid := strings.TrimSpace(rec[uidCol])
		if prev, dup := out[uid]; dup && prev != rec[labelCol] {
			return nil, midsag.Rejectf(midsag.ReasonBadTable, "%s gives study on line %d two labels", path, line)
		}
		out[uid] = strings.TrimSpace(rec[labelCol])
	}
}
