package dimse

import (
	"fmt"
	"strings"
)

// SOPClass is one Storage SOP Class of PS3.4 Annex B.
type SOPClass struct {
	// UID is the SOP Class UID (PS3.6 Table A-1).
	UID string
	// Keyword is the class's keyword in PS3.6 Table A-1.
	Keyword string
	// Retired marks a class PS3.6 lists as retired; a PACS may still
	// hold instances of it, so it is accepted too.
	Retired bool
}

// StorageSOPClassUIDs returns the UIDs of StorageSOPClasses, the classes
// the listener accepts by default.
func StorageSOPClassUIDs() []string {
	out := make([]string, len(StorageSOPClasses))
	for i, c := range StorageSOPClasses {
		out[i] = c.UID
	}
	return out
}

// ParseSOPClasses reads a comma-separated list of SOP Class UIDs or
// PS3.6 keywords (e.g. "CTImageStorage,1.2.840.10008.5.1.4.1.1.128")
// into UIDs; a keyword must name a Storage SOP Class of the table.
func ParseSOPClasses(s string) ([]string, error) {
	var out []string
	for _, f := range strings.Split(s, ",") {
		f = strings.TrimSpace(f)
		if f == "" {
			continue
		}
		uid, ok := lookupSOPClass(f)
		if !ok {
			return nil, fmt.Errorf("%q is neither a UID nor the keyword of a Storage SOP Class (PS3.6 Table A-1)", f)
		}
		out = append(out, uid)
	}
	return out, nil
}

func lookupSOPClass(f string) (string, bool) {
	for _, c := range StorageSOPClasses {
		if c.UID == f || strings.EqualFold(c.Keyword, f) {
			return c.UID, true
		}
	}
	// A UID of a class newer than the table is taken as written.
	if f[0] >= '0' && f[0] <= '9' && strings.Trim(f, "0123456789.") == "" && len(f) <= 64 {
		return f, true
	}
	return "", false
}
