package service

import (
	"fmt"
	"time"

	"modewatch/stream/natsource"
)

// consuming reports whether readings can be consumed now and, if not, why:
// the NATS connection is up, and the JetStream consumer (when used) is
// running and not being recreated.
func (s *Service) consuming() (bool, string) {
	if s.conn == nil {
		return false, "starting"
	}
	if st := s.conn.State(); st != natsource.StateConnected {
		reason := "NATS " + st.String()
		if n := s.conn.Stats().AuthRejects; n > 0 && st == natsource.StateReconnecting {
			reason += fmt.Sprintf(" (the server rejected the credentials %d time(s))", n)
		}
		return false, reason
	}
	if s.js != nil {
		select {
		case <-s.js.Done():
			return false, fmt.Sprintf("JetStream consumer stopped: %v", s.js.Err())
		default:
		}
		if down, why := s.js.Down(); down {
			return false, why
		}
	}
	return true, ""
}

// Failed is closed with Err set when the service gives up: readings could
// not be consumed for intake.stall_exit. The caller shuts the service down
// and exits non-zero, so that a supervisor restarts it.
func (s *Service) Failed() <-chan struct{} { return s.failed }

// Err returns why the service failed (after Failed is closed).
func (s *Service) Err() error {
	select {
	case <-s.failed:
		return s.failErr
	default:
		return nil
	}
}

// stallLoop checks every second whether readings are consumed; it logs
// when consuming stops and resumes, keeps the stall's start for
// /readyz and /metrics, and gives up after intake.stall_exit.
func (s *Service) stallLoop() {
	defer s.wg.Done()
	t := time.NewTicker(time.Second)
	defer t.Stop()
	exit := s.cfg.Intake.StallExit
	for {
		select {
		case <-s.done:
			return
		case now := <-t.C:
			ok, why := s.consuming()
			since := s.stalledSince.Load()
			switch {
			case ok && since != 0:
				s.stalledSince.Store(0)
				s.log.Info("readings are consumed again", "stalled_for", now.Sub(time.Unix(0, since)).Round(time.Second))
			case !ok && since == 0:
				s.stalledSince.Store(now.UnixNano())
				s.log.Error("readings are not being consumed", "reason", why)
			case !ok && !exit.Off && now.Sub(time.Unix(0, since)) >= exit.After:
				s.failErr = fmt.Errorf("service: readings not consumed for %v (intake.stall_exit): %s", exit.After, why)
				s.log.Error("giving up so that a supervisor restarts the service", "err", s.failErr)
				close(s.failed)
				return
			}
		}
	}
}

// stalled returns for how long readings have not been consumed (0 when
// they are).
func (s *Service) stalled() time.Duration {
	if since := s.stalledSince.Load(); since != 0 {
		return time.Since(time.Unix(0, since))
	}
	return 0
}

// onRecreate reports a JetStream consumer (or stream) recreated after its
// deletion on the server: readings published while it was gone, and with
// a deleted stream everything it held, may be missing from every unit.
func (s *Service) onRecreate(ev natsource.Recreated) {
	s.recreations.Add(1)
	s.pl.NoteIntakeGap() // a quality alert of each unit at its next frame
	units := make([]string, 0, 8)
	for _, u := range s.pl.Units() {
		units = append(units, u.Name)
	}
	s.log.Error("readings consumer recreated after its deletion on the server: the units may miss the readings of the gap",
		"stream_recreated", ev.StreamRecreated, "after_stream_seq", ev.AfterSeq, "gap_from", ev.Since, "gap_to", ev.Time,
		"units", units, "cause", ev.Err)
}
