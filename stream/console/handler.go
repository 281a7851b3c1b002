package console

import (
	"embed"
	"encoding/json"
	"errors"
	"html"
	"io"
	"mime"
	"net/http"
	"strconv"
	"strings"

	"stopgap/internal/vocab"
)

//go:embed web/index.html web/console.js web/console.css
var webFS embed.FS

// pageCSP allows only this origin's script, style and API: the page loads no
// external resources and runs no inline code.
const pageCSP = "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; " +
	"connect-src 'self'; media-src 'self' blob:; base-uri 'none'; form-action 'none'; frame-ancestors 'none'"

// routes builds the handler tree.
func (c *Console) routes() http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /{$}", c.page())
	mux.HandleFunc("GET /console.js", c.asset("web/console.js", "text/javascript; charset=utf-8"))
	mux.HandleFunc("GET /console.css", c.asset("web/console.css", "text/css; charset=utf-8"))
	mux.Handle("POST /api/view", c.authed(c.handleOffer))
	mux.Handle("DELETE /api/view/{id}", c.authed(c.handleDelete))
	mux.Handle("GET /api/state", c.authed(c.handleState))
	mux.Handle("POST /api/cutoff", c.authed(c.handleCutoff))
	mux.Handle("GET /api/meta", c.authed(c.handleMeta))
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		h := w.Header()
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("Referrer-Policy", "no-referrer")
		h.Set("X-Frame-Options", "DENY")
		h.Set("Cache-Control", "no-store")
		mux.ServeHTTP(w, r)
	})
}

// page serves index.html with the shared caution of package vocab filled
// in, so that the console cannot carry a text of its own.
func (c *Console) page() http.HandlerFunc {
	data, err := webFS.ReadFile("web/index.html")
	if err == nil {
		fill := strings.NewReplacer(
			"{{CAUTION_TITLE}}", html.EscapeString(vocab.CautionTitle),
			"{{CAUTION}}", html.EscapeString(vocab.Caution),
		)
		data = []byte(fill.Replace(string(data)))
	}
	return serve(data, err, "web/index.html", "text/html; charset=utf-8")
}

// asset serves one embedded file.
func (c *Console) asset(name, ctype string) http.HandlerFunc {
	data, err := webFS.ReadFile(name)
	return serve(data, err, name, ctype)
}

// serve answers with data, or with a 500 if reading it failed (err).
func serve(data []byte, err error, name, ctype string) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		if err != nil { // cannot happen: go:embed fails the build for a missing file
			writeError(w, http.StatusInternalServerError, "embedded asset missing: "+name)
			return
		}
		w.Header().Set("Content-Type", ctype)
		w.Header().Set("Content-Security-Policy", pageCSP)
		w.Header().Set("Content-Length", strconv.Itoa(len(data)))
		w.Write(data)
	}
}

// authed requires the bearer token (RFC 6750 section 3: 401 with
// WWW-Authenticate).
func (c *Console) authed(next http.HandlerFunc) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if !c.auth.check(r) {
			w.Header().Set("WWW-Authenticate", `Bearer realm="stopgap"`)
			writeError(w, http.StatusUnauthorized, "missing or wrong bearer token; open the console with the URL that includes #token=")
			return
		}
		next(w, r)
	})
}

// writeError writes {"error": msg} with status.
func writeError(w http.ResponseWriter, status int, msg string) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(status)
	json.NewEncoder(w).Encode(struct {
		Error string `json:"error"`
	}{msg})
}

// writeJSON writes v as JSON with status.
func writeJSON(w http.ResponseWriter, status int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(status)
	json.NewEncoder(w).Encode(v)
}

// readBody reads at most limit bytes of r's body with content type ctype;
// on failure it has written the response and returns false.
func readBody(w http.ResponseWriter, r *http.Request, ctype string, limit int64) ([]byte, bool) {
	mt, _, err := mime.ParseMediaType(r.Header.Get("Content-Type"))
	if err != nil || mt != ctype {
		writeError(w, http.StatusUnsupportedMediaType, "Content-Type must be "+ctype)
		return nil, false
	}
	body, err := io.ReadAll(http.MaxBytesReader(w, r.Body, limit))
	if err != nil {
		var mbe *http.MaxBytesError
		if errors.As(err, &mbe) {
			writeError(w, http.StatusRequestEntityTooLarge, "body larger than "+strconv.FormatInt(limit, 10)+" bytes")
		} else {
			writeError(w, http.StatusBadRequest, "cannot read body: "+err.Error())
		}
		return nil, false
	}
	return body, true
}

// handleOffer answers a viewer's SDP offer (RFC 9725 conventions).
func (c *Console) handleOffer(w http.ResponseWriter, r *http.Request) {
	body, ok := readBody(w, r, "application/sdp", MaxOfferBytes)
	if !ok {
		return
	}
	s, answer, err := c.newSession(r.Context(), string(body))
	switch {
	case err == nil:
	case errors.Is(err, ErrTooManyViewers), errors.Is(err, ErrClosed):
		w.Header().Set("Retry-After", "5")
		writeError(w, http.StatusServiceUnavailable, err.Error())
		return
	case errors.Is(err, ErrBadOffer):
		writeError(w, http.StatusBadRequest, err.Error())
		return
	default:
		c.log.Warn("console: offer failed", "err", err)
		writeError(w, http.StatusInternalServerError, err.Error())
		return
	}
	w.Header().Set("Location", "/api/view/"+s.id)
	w.Header().Set("Content-Type", "application/sdp")
	w.WriteHeader(http.StatusCreated)
	io.WriteString(w, answer)
}

// handleDelete ends a session.
func (c *Console) handleDelete(w http.ResponseWriter, r *http.Request) {
	c.mu.Lock()
	s := c.sessions[r.PathValue("id")]
	c.mu.Unlock()
	if s == nil {
		writeError(w, http.StatusNotFound, "no such session")
		return
	}
	c.endSession(s, "deleted by viewer")
	w.WriteHeader(http.StatusOK)
}

// handleState returns the control state.
func (c *Console) handleState(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, http.StatusOK, c.State())
}

// handleCutoff changes profile and/or cutoff within the limits.
func (c *Console) handleCutoff(w http.ResponseWriter, r *http.Request) {
	body, ok := readBody(w, r, "application/json", MaxJSONBytes)
	if !ok {
		return
	}
	req, err := parseCutoffRequest(body)
	if err != nil {
		writeError(w, http.StatusBadRequest, err.Error())
		return
	}
	st, err := c.SetCutoff(req)
	var pfe *ProfilesFileError
	switch {
	case err == nil:
		writeJSON(w, http.StatusOK, st)
	case errors.As(err, &pfe):
		c.log.Error("console: cannot save profiles; change not applied", "err", err)
		writeError(w, http.StatusInternalServerError, "change not applied: "+err.Error())
	default:
		writeError(w, http.StatusBadRequest, err.Error())
	}
}

// handleMeta returns the last meta message.
func (c *Console) handleMeta(w http.ResponseWriter, r *http.Request) {
	b, ok := c.eg.appendLastMeta(nil)
	if !ok {
		w.WriteHeader(http.StatusNoContent)
		return
	}
	w.Header().Set("Content-Type", "application/json")
	w.Write(b)
}
