package grpcapi

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"mime"
	"mime/multipart"
	"net/http"
	"net/url"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
	midsagv1 "github.com/midsag/midsag/api/midsag/v1"
	"github.com/midsag/midsag/inputs"
	"github.com/midsag/midsag/server"
)

// gzipRefusal is the answer to a gzip body: the service cannot tell a
// gzipped zip from a gzipped DICOM file, so it asks for the plain form.
const gzipRefusal = "gzip is not accepted; send a zip or application/dicom"

// sniffLen covers the 128-byte preamble and "DICM" (PS3.10 7.1) and the
// zip and gzip signatures.
const sniffLen = 132

// score serves POST /v1/studies:score: every instance of the body is
// received into the spool and its header read before any is stored, so a
// refused request stores nothing; then all are stored (durable) and only
// then scored and answered.
func (a *httpAPI) score(w http.ResponseWriter, r *http.Request) {
	opts, err := scoreOptions(r.URL.Query())
	if err != nil {
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
	}
	if r.ContentLength > a.cfg.MaxBodyBytes {
		server.WriteError(w, a.cfg.Logger, server.TooLarge(a.cfg.MaxBodyBytes))
		return
	}
	body := server.NewBody(w, r, a.bodyLimits())
	ing := &ingester{backend: a.cfg.Backend, origin: server.Origin{Listener: "rest", Remote: r.RemoteAddr}}
	defer ing.abort()
	err = a.readStudy(r.Context(), r.Header, body, ing)
	body.Done()
	if err == nil {
		err = ing.commit(r.Context())
	}
	if err != nil {
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
	}
	res, err := score(r.Context(), a.cfg.Backend, ing.uids, opts)
	if err != nil {
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
	}
	b, err := resultJSON.Marshal(res)
	if err != nil {
		server.WriteError(w, a.cfg.Logger, server.Classify(fmt.Errorf("encode result: %w", err)))
		return
	}
	code := http.StatusOK
	if opts.GetAsync() {
		w.Header().Set("Location", "/v1/results/"+url.PathEscape(res.GetResultId()))
		code = http.StatusAccepted
	}
	server.WriteBytes(w, code, "application/json", append(b, '\n'))
}

// bodyLimits are the limits of every request body this API reads.
func (a *httpAPI) bodyLimits() server.BodyLimits {
	return server.BodyLimits{MaxBytes: a.cfg.MaxBodyBytes, Idle: a.cfg.ReadIdle, MinRate: a.cfg.MinReadRate}
}

// scoreOptions reads the query parameters model, model_version, explain
// and async.
func scoreOptions(q url.Values) (*midsagv1.ScoreOptions, error) {
	opts := &midsagv1.ScoreOptions{Model: q.Get("model"), ModelVersion: q.Get("model_version")}
	for name, dst := range map[string]*bool{"explain": &opts.Explain, "async": &opts.Async} {
		if v := q.Get(name); v != "" {
			b, err := strconv.ParseBool(v)
			if err != nil {
				return nil, midsag.Rejectf(midsag.ReasonBadRequest, "%s=%q is not true or false", name, v)
			}
			*dst = b
		}
	}
	return opts, nil
}

// readStudy receives every instance of an upload: a zip of one study,
// one application/dicom instance, or multipart/related parts of
// application/dicom (PS3.18 8.6.1.2). The media type decides; a generic
// or missing one is settled by the body's first bytes.
func (a *httpAPI) readStudy(ctx context.Context, h http.Header, body io.Reader, ing *ingester) error {
	if strings.Contains(strings.ToLower(h.Get("Content-Encoding")), "gzip") {
		return midsag.Rejectf(midsag.ReasonNotDICOM, "%s", gzipRefusal)
	}
	mt, params, err := mime.ParseMediaType(h.Get("Content-Type"))
	if err != nil && h.Get("Content-Type") != "" {
		return midsag.Rejectf(midsag.ReasonBadRequest, "Content-Type is malformed: %v", err)
	}
	if mt == "multipart/related" {
		return a.readMultipart(ctx, params, body, ing)
	}
	br := bufio.NewReaderSize(body, sniffLen)
	head, err := br.Peek(sniffLen)
	if err != nil && !errors.Is(err, io.EOF) {
		return fmt.Errorf("read body: %w", err)
	}
	isZip := inputs.IsZip(head)
	switch {
	case len(head) == 0:
		return midsag.Rejectf(midsag.ReasonNoInput, "the request body is empty")
	case bytes.HasPrefix(head, []byte{0x1f, 0x8b}), mt == "application/gzip", mt == "application/x-gzip":
		return midsag.Rejectf(midsag.ReasonNotDICOM, "%s", gzipRefusal)
	case mt == "application/zip", mt == "application/x-zip-compressed", isZip && genericType(mt):
		return a.readZip(ctx, br, ing)
	case mt == "application/dicom", genericType(mt):
		return ing.receive(ctx, "body", br, a.cfg.Limits.MaxEntryBytes)
	}
	return midsag.Rejectf(midsag.ReasonNotDICOM,
		"Content-Type %s is not accepted; send application/zip, application/dicom or multipart/related; type=\"application/dicom\"", mt)
}

// genericType reports whether mt says nothing about the payload: none,
// octet-stream, or the form type curl --data-binary sends by default.
func genericType(mt string) bool {
	return mt == "" || mt == "application/octet-stream" || mt == "application/x-www-form-urlencoded"
}

// readMultipart receives each part of a multipart/related body within
// the input limits; every part must be application/dicom (PS3.18
// 8.6.1.2).
func (a *httpAPI) readMultipart(ctx context.Context, params map[string]string, body io.Reader, ing *ingester) error {
	mr, err := inputs.Related(params, body)
	if err != nil {
		return err
	}
	return inputs.Parts(mr, a.cfg.Limits, func(n int, part *multipart.Part, r io.Reader) error {
		if err := partIsDICOM(part); err != nil {
			return midsag.Rejectf(midsag.ReasonNotDICOM, "part %d: %v", n, err)
		}
		return ing.receive(ctx, fmt.Sprintf("part %d", n), r, 0)
	})
}

// partIsDICOM refuses a part whose own Content-Type is not
// application/dicom; a part without one inherits the type parameter.
func partIsDICOM(p *multipart.Part) error {
	ct := p.Header.Get("Content-Type")
	if ct == "" {
		return nil
	}
	mt, _, err := mime.ParseMediaType(ct)
	if err != nil || mt != "application/dicom" {
		return fmt.Errorf("Content-Type %q is not application/dicom", ct)
	}
	return nil
}

// zipCopyBuffer is the buffer the archive is copied to the spool through.
const zipCopyBuffer = 64 << 10

// readZip spools the archive to a temporary file under the store's folder
// (zip needs random access; memory stays bounded; a crash leaves nothing
// the next start does not remove) and receives each entry within the
// input limits. Entries that are not DICOM (a README, DICOMDIR-less junk)
// are skipped as the CLI skips them in folders; the upload is refused
// only if none is DICOM.
func (a *httpAPI) readZip(ctx context.Context, body io.Reader, ing *ingester) error {
	up, err := a.cfg.Backend.NewUpload()
	if err != nil {
		return err
	}
	defer up.Abort()
	// Wrapped so neither side's WriterTo or ReaderFrom replaces the buffer.
	size, err := io.CopyBuffer(struct{ io.Writer }{up}, struct{ io.Reader }{body}, make([]byte, zipCopyBuffer))
	if err != nil {
		return fmt.Errorf("spool zip: %w", err)
	}
	entries, err := inputs.ZipEntries(up, size, "upload", a.cfg.Limits)
	if err != nil {
		return err
	}
	skipped := 0
	for _, e := range entries {
		name := fmt.Sprintf("zip entry %d (%s)", e.Index, e.Path)
		err := ing.receiveSource(ctx, name, e.Source)
		if err != nil && server.Classify(err).Reason == midsag.ReasonNotDICOM {
			skipped++
			continue
		}
		if err != nil {
			return err
		}
	}
	if len(ing.staged) == 0 {
		return midsag.Rejectf(midsag.ReasonNotDICOM, "the zip holds no DICOM instance (%d entries skipped)", skipped)
	}
	return nil
}
