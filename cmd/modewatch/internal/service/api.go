package service

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"

	"github.com/prometheus/client_golang/prometheus/promhttp"

	"modewatch/alerts"
	"modewatch/alerts/control"
	"modewatch/cmd/modewatch/internal/access"
	"modewatch/cmd/modewatch/internal/pipeline"
)

// Caution is served by the API index and printed by the demo.
const Caution = "modewatch is advisory: it never acts on the plant. Verify every alert in the field; safety decisions follow site procedures, local codes and licensed practice."

// routes returns the HTTP API:
//
//	GET  /healthz                     the process is alive
//	GET  /readyz                      connected to NATS and consuming (503 otherwise)
//	GET  /metrics                     Prometheus text exposition
//	GET  /api                         index and caution
//	GET  /api/units                   every unit: state, latest scores and limits (in a cluster: and owner)
//	GET  /api/cluster                 the cluster's instances and which units each owns
//	GET  /api/units/{unit}            one unit with its modes (channels, loadings)
//	GET  /api/alerts                  open alert records (?all=1: the recent ones, open or closed)
//	POST /api/alerts/{op}             op = ack | shelve | unshelve; body {"alert_id", "by", ...}
//	POST /api/units/{unit}/maintenance  body {"on": true, "by", "reason"}
//	POST /api/commands                any operator command (alerts.Command JSON)
//	GET  /api/units/{unit}/checkpoint the unit's checkpoint now (model and alarm state)
//	PUT  /api/units/{unit}/checkpoint take over a unit from its checkpoint file
//	                                  (moved from another instance); other units are not touched
//	GET  /, /page/...                 the status page (statuspage.Page.Register)
//
// /healthz and /readyz answer everyone (supervisors probe them); the other
// GET endpoints need the read role and the POST and PUT ones the write
// role (package access). A writer's name is the "by" of its commands. The
// status page's data and event stream take the read role too; its shell
// and assets hold no plant data and answer everyone, so that a browser
// can ask for a token.
func (s *Service) routes() http.Handler {
	mux := &guardedMux{ServeMux: http.NewServeMux(), g: s.guard}
	s.page = s.registerPage(mux.ServeMux, s.guard.Read, s.pageIdentity)
	mux.ServeMux.HandleFunc("GET /healthz", func(w http.ResponseWriter, r *http.Request) {
		writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
	})
	mux.ServeMux.HandleFunc("GET /readyz", s.readyz)
	mux.Handle("GET /metrics", promhttp.HandlerFor(s.met.reg, promhttp.HandlerOpts{ErrorLog: nil}))
	mux.HandleFunc("GET /api", func(w http.ResponseWriter, r *http.Request) {
		writeJSON(w, http.StatusOK, map[string]any{
			"caution": Caution,
			"links": []string{"/ (status page)", "/healthz", "/readyz", "/metrics", "/api/units", "/api/units/{unit}", "/api/alerts",
				"POST /api/alerts/{ack|shelve|unshelve|accept}", "POST /api/units/{unit}/maintenance", "POST /api/units/{unit}/accept", "POST /api/commands",
				"GET /api/units/{unit}/checkpoint", "PUT /api/units/{unit}/checkpoint"},
			"subjects": s.info,
		})
	})
	mux.HandleFunc("GET /api/units", func(w http.ResponseWriter, r *http.Request) {
		views := s.pl.Views()
		for i := range views {
			views[i].Modes = nil // listed per unit
		}
		writeJSON(w, http.StatusOK, s.unitViews(views))
	})
	mux.HandleFunc("GET /api/cluster", s.clusterRoute)
	mux.HandleFunc("GET /api/units/{unit}", func(w http.ResponseWriter, r *http.Request) {
		name := r.PathValue("unit")
		for _, v := range s.pl.Views() {
			if v.Name == name {
				writeJSON(w, http.StatusOK, v)
				return
			}
		}
		writeJSON(w, http.StatusNotFound, map[string]string{"error": "no unit " + name})
	})
	mux.HandleFunc("GET /api/alerts", func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Query().Get("all") != "" {
			writeJSON(w, http.StatusOK, s.Records())
			return
		}
		recs := s.alertsOpen()
		if recs == nil {
			recs = []alerts.Record{}
		}
		writeJSON(w, http.StatusOK, recs)
	})
	mux.HandleFunc("POST /api/alerts/{op}", func(w http.ResponseWriter, r *http.Request) {
		op := r.PathValue("op")
		if op != alerts.OpAck && op != alerts.OpShelve && op != alerts.OpUnshelve && op != alerts.OpAccept {
			writeJSON(w, http.StatusNotFound, alerts.Reply{Error: "unknown operation " + op + " (ack, shelve, unshelve, accept)"})
			return
		}
		s.command(w, r, func(c *alerts.Command) { c.Op = op })
	})
	mux.HandleFunc("POST /api/units/{unit}/maintenance", func(w http.ResponseWriter, r *http.Request) {
		unit := r.PathValue("unit")
		s.command(w, r, func(c *alerts.Command) { c.Op, c.Unit = alerts.OpMaintenance, unit })
	})
	mux.HandleFunc("POST /api/units/{unit}/accept", func(w http.ResponseWriter, r *http.Request) {
		unit := r.PathValue("unit")
		s.command(w, r, func(c *alerts.Command) { c.Op, c.Unit = alerts.OpAccept, unit })
	})
	mux.HandleFunc("POST /api/commands", func(w http.ResponseWriter, r *http.Request) {
		s.command(w, r, func(*alerts.Command) {})
	})
	mux.HandleFunc("GET /api/units/{unit}/checkpoint", s.largeRequest(func(w http.ResponseWriter, r *http.Request) {
		ck, err := s.pl.CheckpointUnit(r.PathValue("unit"))
		switch {
		case errors.Is(err, pipeline.ErrNoUnit):
			writeJSON(w, http.StatusNotFound, map[string]string{"error": err.Error()})
		case err != nil:
			writeJSON(w, http.StatusInternalServerError, map[string]string{"error": err.Error()})
		default:
			writeJSON(w, http.StatusOK, ck)
		}
	}))
	mux.HandleFunc("PUT /api/units/{unit}/checkpoint", s.largeRequest(s.putCheckpoint))
	return mux.ServeMux
}

// putCheckpoint takes over a unit from the checkpoint in the body. The
// body is limited by the unit's channel cap (CheckpointBodyBytes) before
// it is read, and every size in it is checked against the cap before
// anything is built from it; a refused body gets 413 or 400 with the
// reason, and the unit is untouched.
func (s *Service) putCheckpoint(w http.ResponseWriter, r *http.Request) {
	unit := r.PathValue("unit")
	limit := pipeline.CheckpointBodyBytes(s.cfg.ModelFor(unit).MaxChannels)
	if r.ContentLength > limit {
		writeJSON(w, http.StatusRequestEntityTooLarge, map[string]string{
			"error": fmt.Sprintf("checkpoint of %d bytes is over the %d bytes of a unit of model.max_channels %d", r.ContentLength, limit, s.cfg.ModelFor(unit).MaxChannels)})
		return
	}
	ck, err := pipeline.DecodeModel(http.MaxBytesReader(w, r.Body, limit))
	var tooLarge *http.MaxBytesError
	switch {
	case errors.As(err, &tooLarge):
		writeJSON(w, http.StatusRequestEntityTooLarge, map[string]string{
			"error": fmt.Sprintf("checkpoint over the %d bytes of a unit of model.max_channels %d", limit, s.cfg.ModelFor(unit).MaxChannels)})
		return
	case err != nil:
		writeJSON(w, http.StatusBadRequest, map[string]string{"error": err.Error()})
		return
	}
	if err := s.Adopt(ck, unit); err != nil {
		code := http.StatusConflict // the unit runs here already, or another period
		if errors.Is(err, pipeline.ErrModelFile) {
			code = http.StatusBadRequest
		}
		writeJSON(w, code, map[string]string{"error": err.Error()})
		return
	}
	writeJSON(w, http.StatusOK, map[string]string{"status": "restored", "unit": unit})
}

// guardedMux registers every handler behind the guard: GET with the read
// role, any other method with the write role.
type guardedMux struct {
	*http.ServeMux
	g *access.Guard
}

func (m *guardedMux) Handle(pattern string, h http.Handler) {
	if strings.HasPrefix(pattern, "GET ") {
		m.ServeMux.Handle(pattern, m.g.Read(h))
	} else {
		m.ServeMux.Handle(pattern, m.g.Write(h))
	}
}

func (m *guardedMux) HandleFunc(pattern string, h http.HandlerFunc) { m.Handle(pattern, h) }

func (s *Service) readyz(w http.ResponseWriter, r *http.Request) {
	if !s.ready.Load() {
		writeJSON(w, http.StatusServiceUnavailable, map[string]string{"status": "not ready", "reason": "starting or stopping"})
		return
	}
	if ok, why := s.consuming(); !ok {
		body := map[string]any{"status": "not ready", "reason": "readings are not consumed: " + why}
		if d := s.stalled(); d > 0 {
			body["stalled_s"] = d.Seconds()
		}
		writeJSON(w, http.StatusServiceUnavailable, body)
		return
	}
	writeJSON(w, http.StatusOK, map[string]string{"status": "ready"})
}

// command decodes an operator command from the body (at most 64 KiB),
// lets fix set the fields the path gives, and applies it.
func (s *Service) command(w http.ResponseWriter, r *http.Request, fix func(*alerts.Command)) {
	body, err := io.ReadAll(http.MaxBytesReader(w, r.Body, control.MaxRequest))
	var tooLarge *http.MaxBytesError
	switch {
	case errors.As(err, &tooLarge):
		writeJSON(w, http.StatusRequestEntityTooLarge, alerts.Reply{Error: fmt.Sprintf("a command is at most %d bytes", control.MaxRequest)})
		return
	case err != nil:
		writeJSON(w, http.StatusBadRequest, alerts.Reply{Error: "body unreadable: " + err.Error()})
		return
	}
	if strings.TrimSpace(string(body)) == "" {
		body = []byte("{}")
	}
	var c alerts.Command
	dec := json.NewDecoder(strings.NewReader(string(body)))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&c); err != nil {
		writeJSON(w, http.StatusBadRequest, alerts.Reply{Error: "bad JSON: " + err.Error()})
		return
	}
	fix(&c)
	if id, ok := access.From(r.Context()); ok && id.Name != "" {
		c.By = id.Name // an authenticated caller speaks for itself
	}
	if err := c.Validate(); err != nil {
		writeJSON(w, http.StatusBadRequest, alerts.Reply{Error: err.Error(), AlertID: c.AlertID, Unit: c.Unit})
		return
	}
	rep := s.pl.Alerts().Handle(r.Context(), c)
	code := http.StatusOK
	if !rep.OK {
		code = http.StatusConflict
	}
	writeJSON(w, code, rep)
}

func writeJSON(w http.ResponseWriter, code int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	_ = enc.Encode(v)
}
