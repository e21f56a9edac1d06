package service

import (
	"context"
	"fmt"
	"net/http"
	"time"

	"github.com/nats-io/nats.go/jetstream"
	"github.com/prometheus/client_golang/prometheus"

	"modewatch/cmd/modewatch/internal/cluster"
	"modewatch/cmd/modewatch/internal/cluster/host"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/stream"
	"modewatch/stream/natsource"
)

// clusterPart is the service's share of a cluster (cluster.instance set):
// the coordinator of leases and the host of the owned units.
type clusterPart struct {
	coord  *cluster.Coordinator
	host   *host.Host
	cancel context.CancelFunc
	done   chan struct{}
	resync chan struct{}
}

// clusterEvent asks for a resync of the owned units after a reconnection.
func (s *Service) clusterEvent(e natsource.Event) {
	if c := s.cluOn.Load(); c != nil && e.Kind == natsource.EventReconnected {
		select {
		case c.resync <- struct{}{}:
		default:
		}
	}
}

// startCluster opens the bucket and the store, and starts the coordinator
// that takes this instance's share of the units, each read through its own
// consumer and restored from the store.
func (s *Service) startCluster(ctx context.Context, chans *stream.Channels, align stream.Options) error {
	k := s.cfg.Cluster
	js, err := jetstream.New(s.conn.NATS())
	if err != nil {
		return fmt.Errorf("service: cluster: %w", err)
	}
	// Each bounded by a minute: a cluster still electing its leaders, or
	// several instances starting at once, take a few attempts.
	octx, cancel := context.WithTimeout(ctx, time.Minute)
	defer cancel()
	reg, err := cluster.OpenRegistry(octx, js, cluster.RegistryConfig{Bucket: k.Bucket, TTL: k.LeaseTTL, Replicas: k.Replicas})
	if err != nil {
		return err
	}
	sctx, scancel := context.WithTimeout(ctx, time.Minute)
	defer scancel()
	store, err := host.OpenStore(sctx, js, k.Store, k.Replicas)
	if err != nil {
		return err
	}
	durable := s.cfg.Intake.JetStream.Durable
	if durable == "" {
		durable = "modewatch"
	}
	h := host.New(host.Options{
		Conn: s.conn, Pipeline: s.pl, Channels: chans, Intake: align,
		Stream: s.cfg.Intake.JetStream.Stream, Durable: durable, Subject: k.Subject, Store: store,
		MaxAckPending: natsource.DefaultMaxAckPending, AckWait: 2*s.cfg.CheckpointInterval + time.Minute,
		Log:         s.log.With("component", "cluster"),
		MaxChannels: func(u string) int { return s.cfg.ModelFor(u).MaxChannels },
	})
	var coord *cluster.Coordinator
	h.SetForfeit(func(u string) { coord.Forfeit(u) })
	coord, err = cluster.NewCoordinator(reg, cluster.CoordinatorConfig{
		Instance: k.Instance, HTTP: s.info.HTTP, Units: k.Units, Pins: k.Pins, Log: s.log.With("component", "cluster"),
	}, h)
	if err != nil {
		return err
	}
	rctx, rcancel := context.WithCancel(context.Background())
	c := &clusterPart{coord: coord, host: h, cancel: rcancel, done: make(chan struct{}), resync: make(chan struct{}, 1)}
	go func() { defer close(c.done); coord.Run(rctx) }()
	s.wg.Add(1)
	go s.everyCheckpoint(h.Early(), func() {
		sctx, cancel := context.WithTimeout(context.Background(), s.cfg.CheckpointInterval)
		defer cancel()
		if err := h.SaveAll(sctx); err != nil {
			s.log.Error("storing unit checkpoints failed", "err", err)
			s.ckptErrors.Add(1)
		} else {
			s.lastCkpt.Store(time.Now().UnixNano())
		}
	})
	s.clu = c
	s.cluOn.Store(c)
	s.wg.Add(1)
	go func() { // start the units again after a reconnection (host.Resync)
		defer s.wg.Done()
		for {
			select {
			case <-s.done:
				return
			case <-c.resync:
			}
			// Under the coordinator's context: stopCluster cancels it
			// before the host's Stop, which waits for this Resync.
			yctx, cancel := context.WithTimeout(rctx, time.Minute)
			h.Resync(yctx)
			cancel()
		}
	}()
	s.met.reg.MustRegister(clusterMetrics{s})
	s.log.Info("cluster member started", "instance", k.Instance, "units", len(k.Units), "lease_ttl", k.LeaseTTL,
		"bucket", k.Bucket, "store", k.Store)
	return nil
}

// stopCluster hands every owned unit over (checkpoint stored, lease
// released) so that the others take them without waiting for the TTL.
func (s *Service) stopCluster(ctx context.Context) error {
	c := s.clu
	if c == nil {
		return nil
	}
	err := c.coord.Stop(ctx)
	c.cancel()
	<-c.done
	c.host.Stop(ctx) // units the hand-over could not save
	return err
}

// Cluster returns the cluster as this instance sees it, or false when
// clustering is off.
func (s *Service) Cluster() (cluster.Status, bool) {
	// Through cluOn: the HTTP API serves before startCluster sets s.clu.
	c := s.cluOn.Load()
	if c == nil {
		return cluster.Status{}, false
	}
	return c.coord.Status(), true
}

// clusterUnit is a unit in /api/units with its owner.
type clusterUnit struct {
	pipeline.UnitView
	Owner string    `json:"owner"`
	Moved time.Time `json:"moved,omitzero"` // when the owner took it
}

// unitViews returns /api/units: with clustering, every unit of the
// cluster with its owner and when it last moved; the units owned here carry
// their scores.
func (s *Service) unitViews(views []pipeline.UnitView) any {
	st, ok := s.Cluster()
	if !ok {
		return views
	}
	by := map[string]pipeline.UnitView{}
	for _, v := range views {
		by[v.Name] = v
	}
	out := make([]clusterUnit, 0, len(st.Units))
	for _, u := range st.Units {
		v, ok := by[u.Unit]
		if !ok || !u.Mine {
			v = pipeline.UnitView{Name: u.Unit}
		}
		out = append(out, clusterUnit{UnitView: v, Owner: u.Owner, Moved: u.Since})
	}
	return out
}

// clusterRoute serves GET /api/cluster: the instances and their units.
func (s *Service) clusterRoute(w http.ResponseWriter, r *http.Request) {
	st, ok := s.Cluster()
	if !ok {
		writeJSON(w, http.StatusNotFound, map[string]string{"error": "clustering is off (cluster.instance not set)"})
		return
	}
	type inst struct {
		cluster.Member
		Units []string `json:"units"`
	}
	out := struct {
		Instance  string              `json:"instance"`
		Instances []inst              `json:"instances"`
		Units     []cluster.UnitState `json:"units"`
		Read      time.Time           `json:"read"`
	}{Instance: st.Instance, Units: st.Units, Read: st.Read}
	for _, m := range st.Members {
		i := inst{Member: m, Units: []string{}}
		for _, u := range st.Units {
			if u.Owner == m.ID {
				i.Units = append(i.Units, u.Unit)
			}
		}
		out.Instances = append(out.Instances, i)
	}
	writeJSON(w, http.StatusOK, out)
}

// clusterMetrics exposes ownership in /metrics.
type clusterMetrics struct{ s *Service }

var (
	descOwner = prometheus.NewDesc("modewatch_cluster_unit_owner",
		"1 for the instance holding the unit's lease, as this instance last read the cluster.", []string{"unit", "instance"}, nil)
	descMoved = prometheus.NewDesc("modewatch_cluster_unit_moved_timestamp_seconds",
		"When the unit's owner took it (Unix seconds).", []string{"unit", "instance"}, nil)
	descMembers = prometheus.NewDesc("modewatch_cluster_instances",
		"Live instances of the cluster.", nil, nil)
	descSaves = prometheus.NewDesc("modewatch_cluster_checkpoints_stored_total",
		"Unit checkpoints stored in the object store by this instance.", nil, nil)
)

func (m clusterMetrics) Describe(ch chan<- *prometheus.Desc) {
	ch <- descOwner
	ch <- descMoved
	ch <- descMembers
	ch <- descSaves
}

func (m clusterMetrics) Collect(ch chan<- prometheus.Metric) {
	c := m.s.cluOn.Load()
	if c == nil {
		return
	}
	st := c.coord.Status()
	for _, u := range st.Units {
		if u.Owner == "" {
			continue
		}
		ch <- prometheus.MustNewConstMetric(descOwner, prometheus.GaugeValue, 1, u.Unit, u.Owner)
		ch <- prometheus.MustNewConstMetric(descMoved, prometheus.GaugeValue, float64(u.Since.UnixNano())/1e9, u.Unit, u.Owner)
	}
	ch <- prometheus.MustNewConstMetric(descMembers, prometheus.GaugeValue, float64(len(st.Members)))
	ch <- prometheus.MustNewConstMetric(descSaves, prometheus.CounterValue, float64(c.host.Stats().Saves))
}
