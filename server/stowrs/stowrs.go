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
	"fmt"
	"log/slog"
	"math"
	"mime"
	"mime/multipart"
	"net/http"

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
	mr, err := inputs.Related(params, http.MaxBytesReader(w, r.Body, a.cfg.MaxBodyBytes))
	if err != nil {
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
	}
	origin := server.Origin{Listener: "stow", Remote: r.RemoteAddr, Study: r.PathValue("study")}
	refs, fails, err := a.stowParts(r.Context(), origin, mr)
	if err != nil {
		// Parts before the broken one are stored (each is durable on its
		// own); the client learns the body broke and may resend, which
		// stores nothing twice.
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
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
	server.WriteJSON(w, code, "application/dicom+json", resp)
}

// stowParts ingests every part of mr and returns the Referenced SOP items
// of those stored and the failed items of the rest; the error is a body
// that breaks off, is not valid MIME or is beyond the input limits.
func (a *handler) stowParts(ctx context.Context, origin server.Origin, mr *multipart.Reader) (refs, fails []any, err error) {
	err = inputs.Parts(mr, a.cfg.Limits, func(n int, part *multipart.Part, data []byte) error {
		ref, code := a.stowPart(ctx, origin, n, part.Header.Get("Content-Type"), data)
		if code != 0 {
			ref[tagFailureReason] = dicomAttr{VR: "US", Value: []any{code}}
			fails = append(fails, ref)
			return nil
		}
		refs = append(refs, ref)
		return nil
	})
	if err != nil {
		return nil, nil, err
	}
	return refs, fails, nil
}

// stowPart stores one part and returns its Referenced SOP item, with a
// nonzero Failure Reason when it was not stored. The part is parsed once,
// by Ingest, which also refuses an instance of another study than
// origin.Study before storing it.
func (a *handler) stowPart(ctx context.Context, origin server.Origin, n int, contentType string, data []byte) (dicomJSON, int) {
	item := dicomJSON{tagReferencedSOPClass: uiAttr(""), tagReferencedSOPInstance: uiAttr("")}
	if contentType != "" {
		if mt, _, err := mime.ParseMediaType(contentType); err != nil || mt != "application/dicom" {
			return a.stowFailed(item, n, midsag.Rejectf(midsag.ReasonNotDICOM, "part is not application/dicom"))
		}
	}
	st, err := a.cfg.Backend.Ingest(ctx, origin, data)
	item[tagReferencedSOPClass] = uiAttr(st.SOPClassUID)
	item[tagReferencedSOPInstance] = uiAttr(st.SOPInstanceUID)
	if err != nil {
		return a.stowFailed(item, n, err)
	}
	return item, 0
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
