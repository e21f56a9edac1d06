package service

import (
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/access"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/statuspage"
)

// pageSource gives the status page the same views as /api/*.
type pageSource struct{ s *Service }

func (p pageSource) Views() []pipeline.UnitView { return p.s.pl.Views() }
func (p pageSource) Open() []alerts.Record      { return p.s.alertsOpen() }
func (p pageSource) Records() []alerts.Record   { return p.s.Records() }

// pageOps are the operator commands the API takes, as the page offers them.
var pageOps = []string{alerts.OpAck, alerts.OpShelve, alerts.OpUnshelve, alerts.OpMaintenance, alerts.OpAccept}

// registerPage serves the status page at / on mux, behind read (the read
// permission of the API; nil: none), drawing trends from the service's
// history ring.
func (s *Service) registerPage(mux *http.ServeMux, read func(http.Handler) http.Handler, identify func(*http.Request) statuspage.Identity) *statuspage.Page {
	pg := s.StatusPage(statuspage.Options{Read: read, Identify: identify})
	pg.Register(mux)
	s.met.reg.MustRegister(
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "modewatch_page_clients", Help: "Open event streams of the status page."},
			func() float64 { n, _ := pg.Clients(); return float64(n) }),
		prometheus.NewCounterFunc(prometheus.CounterOpts{Name: "modewatch_page_clients_refused_total", Help: "Event streams of the status page refused at the client limit."},
			func() float64 { _, n := pg.Clients(); return float64(n) }),
		prometheus.NewCounterFunc(prometheus.CounterOpts{Name: "modewatch_page_history_dropped_total", Help: "Scored frames the status page's history did not keep (unit limit reached)."},
			func() float64 { return float64(s.hist.Dropped()) }),
	)
	return pg
}

// StatusPage returns a status page over this service's units, incidents
// and trend history with opt; the operations the API takes, the severity
// names and the caution are filled in when opt leaves them empty. The
// service serves one at /; tests serve another behind their own front.
func (s *Service) StatusPage(opt statuspage.Options) *statuspage.Page {
	if opt.Ops == nil {
		opt.Ops = pageOps
	}
	if opt.Severities == nil {
		for _, b := range s.cfg.Alerts.Severity {
			opt.Severities = append(opt.Severities, b.Name)
		}
	}
	if opt.Caution == "" {
		opt.Caution = Caution
	}
	return statuspage.New(pageSource{s}, s.hist, opt)
}

// recordHistory keeps a scored frame of u in the history ring the page's
// trends are drawn from (fixed memory per unit; no allocation after the
// unit's first frame).
func (s *Service) recordHistory(u *pipeline.Unit, t time.Time) {
	sc := u.Score()
	if !sc.Ready {
		return
	}
	s.hist.Add(u.Name, t, statuspage.Stats{T2: sc.T2, T2Limit: sc.T2Limit, SPE: sc.SPE, SPELimit: sc.SPELimit, Phi: sc.Phi, PhiLimit: sc.PhiLimit})
}

// pageIdentity tells the status page who a request (already through the
// guard) is: its token's or certificate's name, and whether it holds the
// write role.
func (s *Service) pageIdentity(r *http.Request) statuspage.Identity {
	id, _ := access.From(r.Context())
	return statuspage.Identity{Name: id.Name, CanWrite: id.Role >= access.Write, Auth: !s.guard.Open()}
}
