package service

import (
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"modewatch/stream/natsource"
)

// metrics exposes the service's state in the Prometheus text format. The
// values are read at scrape time from the pipeline, intake, alarm engine,
// NATS connection and delivery targets, so nothing is counted twice.
type metrics struct {
	s   *Service
	reg *prometheus.Registry

	frames, unitFrames, lines, rejected, readings                        *prometheus.Desc
	stat, limit, ready, nEff, modes, iters, missing, warming             *prometheus.Desc
	refreshes, refreshTime                                               *prometheus.Desc
	alertsOpen, alertsOpened, alertsHour, floods, inMaint                *prometheus.Desc
	natsUp, natsReconnects, natsDisconnects                              *prometheus.Desc
	queueDepth, dropped, deliveryDepth, deliveryPending, deliveryDropped *prometheus.Desc
	deliveryDone, ckptTime, ckptErrors, scoreErrors                      *prometheus.Desc
	unitMemory, unitRefused                                              *prometheus.Desc
	consuming, stalledSec, authRejects, recreations                      *prometheus.Desc
}

func newMetrics(s *Service) *metrics {
	d := func(name, help string, labels ...string) *prometheus.Desc {
		return prometheus.NewDesc("modewatch_"+name, help, labels, nil)
	}
	m := &metrics{
		s:               s,
		reg:             prometheus.NewRegistry(),
		frames:          d("frames_total", "Frames emitted by the aligner."),
		unitFrames:      d("unit_frames_total", "Frames scored per unit.", "unit"),
		lines:           d("lines_total", "Line-protocol lines by outcome.", "outcome"),
		rejected:        d("lines_rejected_total", "Rejected lines by reason.", "reason"),
		readings:        d("readings_total", "Readings (field values) by outcome.", "outcome"),
		stat:            d("statistic", "Latest value of a monitoring statistic (dimensionless).", "unit", "statistic"),
		limit:           d("statistic_limit", "Control limit of a monitoring statistic at the configured false-alarm rate.", "unit", "statistic"),
		ready:           d("unit_scoring", "1 when the unit's model is out of warm-up and scoring.", "unit"),
		nEff:            d("unit_effective_samples", "Effective sample size of the unit's model.", "unit"),
		modes:           d("unit_modes", "Number of sparse modes of the unit's model.", "unit"),
		iters:           d("unit_refresh_iterations", "Solver iterations of the unit's last mode refresh.", "unit"),
		missing:         d("unit_missing_channels", "Channels missing in the unit's latest frame.", "unit"),
		warming:         d("unit_warming_channels", "Channels that joined the unit after its model was built and are not yet in it (no alarm).", "unit"),
		refreshes:       d("unit_refreshes_total", "Refreshes of the unit's modes and limits.", "unit"),
		refreshTime:     d("unit_last_refresh_seconds", "Wall time of the frame step that did the unit's last refresh.", "unit"),
		alertsOpen:      d("alerts_open", "Open alert incidents.", "unit"),
		alertsOpened:    d("alerts_opened_total", "Alert incidents opened.", "unit"),
		alertsHour:      d("alerts_last_hour", "New alerts in the trailing hour of frame time.", "unit"),
		floods:          d("alert_floods_total", "Alert floods begun.", "unit"),
		inMaint:         d("unit_maintenance", "1 while the unit is in maintenance.", "unit"),
		natsUp:          d("nats_connected", "1 while connected to a NATS server."),
		natsReconnects:  d("nats_reconnects_total", "Reconnections to NATS."),
		natsDisconnects: d("nats_disconnects_total", "Disconnections from NATS."),
		consuming:       d("readings_consumed", "1 while readings are being consumed (connected, consumer running); 0 says readiness fails."),
		stalledSec:      d("readings_stalled_seconds", "Seconds since readings stopped being consumed (0 while they are)."),
		authRejects:     d("nats_auth_rejections_total", "Reconnect attempts the NATS server refused for the credentials."),
		recreations:     d("jetstream_consumer_recreations_total", "Times the JetStream consumer (or its stream) was recreated after its deletion."),
		queueDepth:      d("readings_queue_depth", "Messages waiting in the readings queue."),
		dropped:         d("readings_dropped_total", "Messages dropped because the readings queue was full."),
		deliveryDepth:   d("delivery_queue_depth", "Alert records waiting in a delivery target's queue.", "target"),
		deliveryPending: d("delivery_spool_pending_bytes", "Spooled bytes not yet delivered to a delivery target.", "target"),
		deliveryDropped: d("delivery_dropped_total", "Alert records a delivery target could not keep.", "target"),
		deliveryDone:    d("delivery_delivered_total", "Alert records delivered to a delivery target.", "target"),
		ckptTime:        d("checkpoint_last_success_timestamp_seconds", "Time of the last successful checkpoint (Unix seconds)."),
		ckptErrors:      d("checkpoint_errors_total", "Checkpoints that failed."),
		scoreErrors:     d("score_publish_errors_total", "Score lines that could not be published."),
		unitMemory:      d("unit_model_bytes", "Estimated memory of the unit's models in bytes (18·p² + 6000·p for p channels, per operating state).", "unit"),
		unitRefused:     d("unit_refused_channels_total", "Channels refused because the unit was at its channel cap (model.max_channels).", "unit"),
	}
	m.reg.MustRegister(m, collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return m
}

// Describe implements prometheus.Collector.
func (m *metrics) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{m.frames, m.unitFrames, m.lines, m.rejected, m.readings, m.stat, m.limit, m.ready,
		m.nEff, m.modes, m.iters, m.missing, m.warming, m.refreshes, m.refreshTime, m.alertsOpen, m.alertsOpened, m.alertsHour, m.floods, m.inMaint, m.natsUp,
		m.natsReconnects, m.natsDisconnects, m.queueDepth, m.dropped, m.deliveryDepth, m.deliveryPending, m.deliveryDropped,
		m.deliveryDone, m.ckptTime, m.ckptErrors, m.scoreErrors, m.unitMemory, m.unitRefused,
		m.consuming, m.stalledSec, m.authRejects, m.recreations} {
		ch <- d
	}
}

// Collect implements prometheus.Collector.
func (m *metrics) Collect(ch chan<- prometheus.Metric) {
	s := m.s
	c := func(d *prometheus.Desc, v float64, labels ...string) {
		ch <- prometheus.MustNewConstMetric(d, prometheus.CounterValue, v, labels...)
	}
	g := func(d *prometheus.Desc, v float64, labels ...string) {
		ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, v, labels...)
	}
	b := func(v bool) float64 {
		if v {
			return 1
		}
		return 0
	}
	if s.in != nil {
		st := s.in.Stats()
		c(m.frames, float64(st.Frames))
		c(m.lines, float64(st.Accepted), "accepted")
		c(m.lines, float64(st.Rejected()), "rejected")
		for reason, v := range map[string]uint64{"syntax": st.RejectedSyntax, "value": st.RejectedValue, "too_long": st.RejectedTooLong,
			"no_time": st.RejectedNoTime, "time_range": st.RejectedTimeRange} {
			c(m.rejected, float64(v), reason)
		}
		for outcome, v := range map[string]uint64{"accepted": st.Readings, "late": st.Late, "duplicate": st.Duplicate,
			"out_of_range": st.OutOfRange, "nonfinite": st.NonFinite, "refused": st.Refused, "unmapped": st.Unmapped} {
			c(m.readings, float64(v), outcome)
		}
	}
	if s.pl != nil {
		for _, v := range s.pl.Views() {
			c(m.unitFrames, float64(v.Frames), v.Name)
			g(m.unitMemory, float64(v.MemoryBytes), v.Name)
			c(m.unitRefused, float64(v.RefusedChannels), v.Name)
			g(m.nEff, v.EffectiveN, v.Name)
			g(m.modes, float64(len(v.Modes)), v.Name)
			g(m.iters, float64(v.RefreshIterations), v.Name)
			c(m.refreshes, float64(v.Refreshes), v.Name)
			g(m.refreshTime, v.LastRefreshS, v.Name)
			scoring := v.Latest != nil && v.Latest.Ready
			g(m.ready, b(scoring), v.Name)
			if v.Latest != nil {
				g(m.missing, float64(len(v.Latest.Missing)), v.Name)
				g(m.warming, float64(len(v.Latest.Warming)), v.Name)
			}
			if scoring {
				for _, st := range []struct {
					name     string
					val, lim *float64
				}{{"t2", v.Latest.T2, v.Latest.T2Limit}, {"spe", v.Latest.SPE, v.Latest.SPELimit}, {"phi", v.Latest.Phi, v.Latest.PhiLimit}} {
					if st.val != nil {
						g(m.stat, *st.val, v.Name, st.name)
					}
					if st.lim != nil {
						g(m.limit, *st.lim, v.Name, st.name)
					}
				}
			}
		}
		for _, uc := range s.pl.Alerts().Counters(nil) {
			g(m.alertsOpen, float64(uc.Open), uc.Unit)
			c(m.alertsOpened, float64(uc.Opened), uc.Unit)
			g(m.alertsHour, float64(uc.LastHour), uc.Unit)
			c(m.floods, float64(uc.Floods), uc.Unit)
			g(m.inMaint, b(uc.InMaint), uc.Unit)
		}
	}
	if s.conn != nil {
		cs := s.conn.Stats()
		g(m.natsUp, b(cs.State == natsource.StateConnected))
		c(m.natsReconnects, float64(cs.Reconnects))
		c(m.natsDisconnects, float64(cs.Disconnects))
		c(m.authRejects, float64(cs.AuthRejects))
		ok, _ := s.consuming()
		g(m.consuming, b(ok))
		g(m.stalledSec, s.stalled().Seconds())
		c(m.recreations, float64(s.recreations.Load()))
	}
	if s.core != nil {
		cs := s.core.Stats()
		g(m.queueDepth, float64(cs.Queued))
		c(m.dropped, float64(cs.Dropped))
	}
	if s.sinks != nil {
		for _, k := range s.sinks.Sinks() {
			st := k.Stats()
			g(m.deliveryDepth, float64(st.QueueDepth), k.Name())
			g(m.deliveryPending, float64(st.Pending), k.Name())
			c(m.deliveryDropped, float64(st.Dropped), k.Name())
			c(m.deliveryDone, float64(st.Delivered), k.Name())
		}
	}
	if t := s.lastCkpt.Load(); t > 0 {
		g(m.ckptTime, float64(t)/1e9)
	}
	c(m.ckptErrors, float64(s.ckptErrors.Load()))
	c(m.scoreErrors, float64(s.scoreErrs.Load()))
}

// natsEvent logs connection changes (the counters come from Conn.Stats).
func (m *metrics) natsEvent(e natsource.Event) {
	m.s.log.Info("nats connection", "event", e.Kind.String(), "url", e.URL, "err", e.Err)
}
