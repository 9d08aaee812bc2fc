package inputs

import (
	"errors"
	"fmt"
	"io"
	"mime/multipart"
	"strings"

	"github.com/midsag/midsag"
)

// Parts reads every part of a multipart body (multipart/related, PS3.18
// 8.6.1.2, for REST uploads and STOW-RS) within lim: at most
// lim.MaxEntries parts of at most lim.MaxEntryBytes each, refused with
// ReasonTooLarge beyond. fn gets each part's 1-based number, its header
// and its bytes; an error from fn stops the reading. A body that breaks
// off or is not valid MIME is ReasonTruncated, wrapping the reader's
// error (such as the transport's size limit).
func Parts(mr *multipart.Reader, lim Limits, fn func(n int, p *multipart.Part, data []byte) error) error {
	lim = lim.OrDefault()
	for n := 1; ; n++ {
		part, err := mr.NextRawPart()
		if errors.Is(err, io.EOF) {
			return nil
		}
		if err != nil {
			return malformedPart(n, err)
		}
		if n > lim.MaxEntries {
			return tooManyEntries("the multipart body", n, lim)
		}
		data, err := ReadEntry(part, lim)
		if err != nil {
			return malformedPart(n, err)
		}
		if err := fn(n, part, data); err != nil {
			return err
		}
	}
}

// malformedPart names the part a read error is about; a refusal (a part
// beyond the limit) keeps its reason.
func malformedPart(n int, err error) error {
	if e := midsag.RefusalOf(err); e != nil {
		return e.WithDetail("source", fmt.Sprintf("part %d", n))
	}
	return midsag.Reject(midsag.ReasonTruncated, fmt.Sprintf("multipart body is malformed at part %d", n), err)
}

// Related checks a multipart/related media type's parameters and
// returns a reader of its parts. A type parameter other than
// application/dicom is refused; a missing one is taken as DICOM.
func Related(params map[string]string, body io.Reader) (*multipart.Reader, error) {
	if t := params["type"]; t != "" && !strings.EqualFold(t, "application/dicom") {
		return nil, midsag.Rejectf(midsag.ReasonNotDICOM,
			"multipart/related type %q is not accepted; only application/dicom parts are (PS3.18 8.6.1.2)", t)
	}
	if params["boundary"] == "" {
		return nil, midsag.Rejectf(midsag.ReasonBadRequest, "multipart/related without a boundary parameter")
	}
	return multipart.NewReader(body, params["boundary"]), nil
}
