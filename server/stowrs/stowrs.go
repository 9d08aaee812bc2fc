// Package stowrs serves DICOMweb STOW-RS Store Instances (PS3.18 10.5)
// over a server.Backend: each application/dicom part of a
// multipart/related body is ingested on its own and listed in the DICOM
// JSON response as referenced or failed, with the Failure Reason of its
// reason code (server.ReasonTable). It stores; the Core scores a study
// once it has been quiet.
//
//	mux.Handle("POST /dicomweb/studies", stowrs.Handler(stowrs.Config{Backend: core}))
package stowrs

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"mime"
	"mime/multipart"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/inputs"
	"github.com/midsag/midsag/server"
)

// DICOM tags of the Store Instances response (PS3.18 10.5.3, attributes
// from PS3.3 C.12.1 and the PS3.6 data dictionary).
const (
	tagFailureReason         = "00081197" // (0008,1197) US
	tagFailedSOPSequence     = "00081198" // (0008,1198) SQ
	tagReferencedSOPSeq      = "00081199" // (0008,1199) SQ
	tagReferencedSOPClass    = "00081150" // (0008,1150) UI
	tagReferencedSOPInstance = "00081155" // (0008,1155) UI
)

// dicomJSON is one data set in the DICOM JSON model (PS3.18 F.2): keys
// are 8 upper-case hex digits of the tag.
type dicomJSON map[string]dicomAttr

// dicomAttr is one attribute of the DICOM JSON model (PS3.18 F.2.2); an
// empty value is written without "Value" (F.2.5).
type dicomAttr struct {
	VR    string `json:"vr"`
	Value []any  `json:"Value,omitempty"`
}

func uiAttr(uid string) dicomAttr {
	if uid == "" {
		return dicomAttr{VR: "UI"}
	}
	return dicomAttr{VR: "UI", Value: []any{uid}}
}

// Config configures the STOW-RS handler.
type Config struct {
	// Backend stores each instance.
	Backend server.Backend
	// MaxBodyBytes bounds one request body; zero means no bound beyond
	// Limits.
	MaxBodyBytes int64
	// Limits bound the parts and each instance; zero fields are
	// inputs.DefaultLimits.
	Limits inputs.Limits
	// Logger receives one line per refused part; nil discards.
	Logger *slog.Logger
	// ReadIdle and MinReadRate close a stalled or too slow body
	// (server.BodyLimits); zero means the defaults there.
	ReadIdle    time.Duration
	MinReadRate int64
}

// handler is the STOW-RS handler built from a Config.
type handler struct{ cfg Config }

// Handler returns the STOW-RS handler for POST /dicomweb/studies and
// /dicomweb/studies/{study}: the path's study, when given, must be every
// part's. Authentication is the caller's (the REST API wraps it).
func Handler(cfg Config) http.Handler {
	if cfg.MaxBodyBytes <= 0 {
		cfg.MaxBodyBytes = math.MaxInt64
	}
	cfg.Limits = cfg.Limits.OrDefault()
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.DiscardHandler)
	}
	return &handler{cfg: cfg}
}

// ServeHTTP serves STOW-RS Store Instances (PS3.18 10.5). It does not
// score: the core's settle scheduler does once the study has been quiet.
// The response has no Retrieve URL (0008,1190) because midsag serves no
// WADO-RS to retrieve from.
func (a *handler) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	if err := acceptable(r.Header.Values("Accept")); err != nil {
		server.WriteError(w, a.cfg.Logger, err)
		return
	}
	if r.ContentLength > a.cfg.MaxBodyBytes {
		server.WriteError(w, a.cfg.Logger, server.TooLarge(a.cfg.MaxBodyBytes))
		return
	}
	mt, params, err := mime.ParseMediaType(r.Header.Get("Content-Type"))
	if err != nil || mt != "multipart/related" {
		server.WriteError(w, a.cfg.Logger, midsag.Rejectf(midsag.ReasonNotDICOM,
			`STOW-RS takes multipart/related; type="application/dicom" (PS3.18 10.5.1)`))
		return
	}
	body := server.NewBody(w, r, server.BodyLimits{MaxBytes: a.cfg.MaxBodyBytes, Idle: a.cfg.ReadIdle, MinRate: a.cfg.MinReadRate})
	defer body.Done()
	mr, err := inputs.Related(params, body)
	if err != nil {
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
	}
	origin := server.Origin{Listener: "stow", Remote: r.RemoteAddr, Study: r.PathValue("study")}
	held := map[string]func(){}
	defer func() {
		for _, release := range held {
			release()
		}
	}()
	refs, fails, err := a.stowParts(r.Context(), origin, mr, held)
	if err != nil && len(refs) == 0 {
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
	}
	if err != nil {
		// PS3.18 10.5: each instance is stored on its own. The parts
		// before the broken one are stored and listed; the broken body is
		// one failed item, so the client learns both and may resend,
		// which stores nothing twice.
		item, code := a.stowFailed(dicomJSON{tagReferencedSOPClass: uiAttr(""), tagReferencedSOPInstance: uiAttr("")}, len(refs)+len(fails)+1, err)
		item[tagFailureReason] = dicomAttr{VR: "US", Value: []any{code}}
		fails = append(fails, item)
	}
	if len(refs)+len(fails) == 0 {
		server.WriteError(w, a.cfg.Logger, midsag.Rejectf(midsag.ReasonNoInput, "the multipart body has no parts"))
		return
	}
	resp := dicomJSON{}
	if len(refs) > 0 {
		resp[tagReferencedSOPSeq] = dicomAttr{VR: "SQ", Value: refs}
	}
	if len(fails) > 0 {
		resp[tagFailedSOPSequence] = dicomAttr{VR: "SQ", Value: fails}
	}
	// PS3.18 10.5.3: 200 all stored, 202 some failed, 409 none stored
	// (status choice from memory).
	code := http.StatusOK
	switch {
	case len(refs) == 0:
		code = http.StatusConflict
	case len(fails) > 0:
		code = http.StatusAccepted
	}
	server.WriteJSON(w, code, mediaType, resp)
}

// mediaType is the one response type served: the DICOM JSON model
// (PS3.18 F.2, 10.5.3).
const mediaType = "application/dicom+json"

// acceptable refuses an Accept header (RFC 9110 12.5.1) that admits no
// DICOM JSON: application/dicom+json, application/json, application/*
// or */* with a nonzero quality, or no header at all, are accepted.
func acceptable(values []string) *midsag.Error {
	if len(values) == 0 {
		return nil
	}
	for _, v := range values {
		for _, r := range strings.Split(v, ",") {
			mt, params, err := mime.ParseMediaType(strings.TrimSpace(r))
			if err != nil {
				continue
			}
			if q := params["q"]; q != "" {
				if f, err := strconv.ParseFloat(q, 64); err != nil || f <= 0 {
					continue
				}
			}
			switch mt {
			case mediaType, "application/json", "application/*", "*/*":
				return nil
			}
		}
	}
	return midsag.Rejectf(midsag.ReasonNotAcceptable,
		"Accept %q admits no response this service makes; STOW-RS answers in %s (PS3.18 10.5.3)", strings.Join(values, ", "), mediaType)
}

// stowParts ingests every part of mr, holding each study stored to in
// held, and returns the Referenced SOP items
// of those stored and the failed items of the rest; the error is a body
// that breaks off, is not valid MIME or is beyond the input limits,
// returned with the items of the parts before it.
func (a *handler) stowParts(ctx context.Context, origin server.Origin, mr *multipart.Reader, held map[string]func()) (refs, fails []any, err error) {
	err = inputs.Parts(mr, a.cfg.Limits, func(n int, part *multipart.Part, r io.Reader) error {
		ref, code, err := a.stowPart(ctx, origin, n, part.Header.Get("Content-Type"), r, held)
		if err != nil {
			return err
		}
		if code != 0 {
			ref[tagFailureReason] = dicomAttr{VR: "US", Value: []any{code}}
			fails = append(fails, ref)
			return nil
		}
		refs = append(refs, ref)
		return nil
	})
	return refs, fails, err
}

// stowPart streams one part into the store and returns its Referenced SOP
// item, with a nonzero Failure Reason when it was not stored. The part is
// parsed once, by Ingest, which also refuses an instance of another study
// than origin.Study before storing it. The error is the body's, which
// ends the request.
func (a *handler) stowPart(ctx context.Context, origin server.Origin, n int, contentType string, r io.Reader, held map[string]func()) (dicomJSON, int, error) {
	item := dicomJSON{tagReferencedSOPClass: uiAttr(""), tagReferencedSOPInstance: uiAttr("")}
	if contentType != "" {
		if mt, _, err := mime.ParseMediaType(contentType); err != nil || mt != "application/dicom" {
			item, code := a.stowFailed(item, n, midsag.Rejectf(midsag.ReasonNotDICOM, "part is not application/dicom"))
			return item, code, nil
		}
	}
	tr := &trackReader{r: r}
	st, err := a.cfg.Backend.IngestFrom(ctx, origin, tr, 0)
	if tr.broken() {
		return nil, 0, tr.err
	}
	item[tagReferencedSOPClass] = uiAttr(st.SOPClassUID)
	item[tagReferencedSOPInstance] = uiAttr(st.SOPInstanceUID)
	if err != nil {
		item, code := a.stowFailed(item, n, err)
		return item, code, nil
	}
	if _, ok := held[st.StudyInstanceUID]; !ok {
		// The study settles from the request's end, not from this part.
		held[st.StudyInstanceUID] = a.cfg.Backend.Hold(st.StudyInstanceUID)
	}
	return item, 0, nil
}

// trackReader remembers the error its reader returned.
type trackReader struct {
	r   io.Reader
	err error
}

func (t *trackReader) Read(p []byte) (int, error) {
	n, err := t.r.Read(p)
	if err != nil && !errors.Is(err, io.EOF) {
		t.err = err
	}
	return n, err
}

// broken reports whether the body failed (cut off, malformed, too slow,
// beyond the request's limit), after which no further part can be read;
// a part beyond the instance limit fails alone.
func (t *trackReader) broken() bool {
	if t.err == nil {
		return false
	}
	var mbe *http.MaxBytesError
	if errors.As(t.err, &mbe) {
		return true
	}
	r, ok := midsag.ReasonOf(t.err)
	return !ok || r != midsag.ReasonTooLarge
}

// stowFailed logs a refused part and returns its item with the Failure
// Reason for err.
func (a *handler) stowFailed(item dicomJSON, n int, err error) (dicomJSON, int) {
	e, code := server.Classify(err), failureCode(err)
	attrs := []any{"part", n, "failure_reason", fmt.Sprintf("0x%04X", code), "reason", e.Reason}
	if e.Err != nil {
		attrs = append(attrs, "err", e.Err)
	}
	a.cfg.Logger.Info("stow part refused", attrs...)
	return item, code
}

// failureCode is the Failure Reason of a refused part: the DIMSE status
// of its reason in server.ReasonTable.
func failureCode(err error) int {
	return int(server.DICOMStatus(server.Classify(err).Reason))
}
