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
	"os"
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
// ingested (durable) before Score is asked, and only then is anything
// answered.
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
	body := http.MaxBytesReader(w, r.Body, a.cfg.MaxBodyBytes)
	ing := &ingester{backend: a.cfg.Backend, origin: server.Origin{Listener: "rest", Remote: r.RemoteAddr}}
	if err := a.readStudy(r.Context(), r.Header, body, ing); err != nil {
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

// readStudy ingests every instance of an upload: a zip of one study, one
// application/dicom instance, or multipart/related parts of
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
	br := bufio.NewReaderSize(body, 64<<10)
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
		data, err := inputs.ReadEntry(br, a.cfg.Limits)
		if err != nil {
			return prefixed("body", err)
		}
		return ing.ingest(ctx, "body", data)
	}
	return midsag.Rejectf(midsag.ReasonNotDICOM,
		"Content-Type %s is not accepted; send application/zip, application/dicom or multipart/related; type=\"application/dicom\"", mt)
}

// genericType reports whether mt says nothing about the payload: none,
// octet-stream, or the form type curl --data-binary sends by default.
func genericType(mt string) bool {
	return mt == "" || mt == "application/octet-stream" || mt == "application/x-www-form-urlencoded"
}

// readMultipart ingests each part of a multipart/related body within
// the input limits; every part must be application/dicom (PS3.18
// 8.6.1.2).
func (a *httpAPI) readMultipart(ctx context.Context, params map[string]string, body io.Reader, ing *ingester) error {
	mr, err := inputs.Related(params, body)
	if err != nil {
		return err
	}
	return inputs.Parts(mr, a.cfg.Limits, func(n int, part *multipart.Part, data []byte) error {
		if err := partIsDICOM(part); err != nil {
			return midsag.Rejectf(midsag.ReasonNotDICOM, "part %d: %v", n, err)
		}
		return ing.ingest(ctx, fmt.Sprintf("part %d", n), data)
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

// readZip spools the archive to a temporary file (zip needs random
// access; memory stays bounded) and ingests each entry within the input
// limits. Entries that are not DICOM (a README, DICOMDIR-less junk) are
// skipped as the CLI skips them in folders; the upload is refused only if
// none is DICOM.
func (a *httpAPI) readZip(ctx context.Context, body io.Reader, ing *ingester) error {
	f, err := os.CreateTemp("", "midsag-upload-*.zip")
	if err != nil {
		return fmt.Errorf("spool zip: %w", err)
	}
	defer func() {
		f.Close()
		os.Remove(f.Name())
	}()
	size, err := io.Copy(f, body)
	if err != nil {
		return fmt.Errorf("spool zip: %w", err)
	}
	entries, err := inputs.ZipEntries(f, size, "upload", a.cfg.Limits)
	if err != nil {
		return err
	}
	skipped := 0
	for _, e := range entries {
		name := fmt.Sprintf("zip entry %d (%s)", e.Index, e.Path)
		data, err := inputs.ReadSource(e.Source)
		if err != nil {
			return prefixed(name, err)
		}
		if err := ing.ingest(ctx, name, data); err != nil {
			if server.Classify(err).Reason == midsag.ReasonNotDICOM {
				skipped++
				continue
			}
			return err
		}
	}
	if len(ing.uids) == 0 {
		return midsag.Rejectf(midsag.ReasonNotDICOM, "the zip holds no DICOM instance (%d entries skipped)", skipped)
	}
	return nil
}
