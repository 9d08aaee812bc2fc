package main

import (
	"errors"
	"fmt"
	"testing"

	"github.com/midsag/midsag"
)

// TestExitCodesOfReasons: docs/ARCHITECTURE.md's exit codes, 3 for an input
// rejected with a reason code and 1 for a runtime failure; the failure
// codes (internal, error) are runtime failures even though they carry a
// code.
func TestExitCodesOfReasons(t *testing.T) {
	for _, c := range []struct {
		err  error
		want int
	}{
		{fmt.Errorf("read a.dcm: %w", midsag.Rejectf(midsag.ReasonNotDICOM, "no DICM")), exitRejected},
		{midsag.Rejectf(midsag.ReasonBadTable, "no score column"), exitRejected},
		{midsag.Rejectf(midsag.ReasonMixedModels, "two models"), exitRejected},
		{midsag.Reject(midsag.ReasonInternal, "internal error", errors.New("disk")), 0},
		{midsag.Rejectf(midsag.ReasonError, "study failed"), 0},
		{errors.New("plain failure"), 0},
	} {
		if got := rejectionCode(c.err); got != c.want {
			t.Errorf("%v: rejection code %d, want %d", c.err, got, c.want)
		}
	}
}
