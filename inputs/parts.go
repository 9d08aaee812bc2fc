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
// lim.MaxEntries parts. fn gets each part's 1-based number, its header and
// a reader of its bytes, which refuses more than lim.MaxEntryBytes with
// ReasonTooLarge; the part is streamed, never held whole. An error from fn
// stops the reading. A body that breaks off or is not valid MIME is
// ReasonTruncated, wrapping the reader's error (such as the transport's
// size limit), from NextRawPart or from the part's reader.
func Parts(mr *multipart.Reader, lim Limits, fn func(n int, p *multipart.Part, r io.Reader) error) error {
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
		if err := fn(n, part, &partReader{r: part, n: n, left: lim.MaxEntryBytes, limit: lim.MaxEntryBytes}); err != nil {
			return err
		}
	}
}

// partReader reads one part within MaxEntryBytes and names its errors.
type partReader struct {
	r     io.Reader
	n     int
	left  int64
	limit int64
}

func (p *partReader) Read(b []byte) (int, error) {
	if int64(len(b)) > p.left+1 {
		b = b[:p.left+1]
	}
	k, err := p.r.Read(b)
	p.left -= int64(k)
	if p.left < 0 {
		return 0, malformedPart(p.n, midsag.Rejectf(midsag.ReasonTooLarge, "an instance is larger than the %d-byte limit", p.limit))
	}
	if err != nil && !errors.Is(err, io.EOF) {
		return k, malformedPart(p.n, err)
	}
	return k, err
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
