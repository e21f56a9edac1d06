package host

import (
	"bytes"
	"context"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"modewatch/stream/natsource/natstest"
)

// TestLoadCheckpointBounded: a stored checkpoint object over the unit's
// bound (a corrupt or hostile object in the shared store) is refused with
// the reason instead of being read whole into memory; a missing object is
// no checkpoint and no error.
func TestLoadCheckpointBounded(t *testing.T) {
	s := natstest.StartJetStream(t)
	js, err := jetstream.New(natstest.Connect(t, s))
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	st, err := OpenStore(ctx, js, "ck_test", 1)
	if err != nil {
		t.Fatal(err)
	}
	if ck, err := LoadCheckpointWithin(ctx, st, "absent", 1<<10); ck != nil || err != nil {
		t.Fatalf("missing object: %v, %v; want nil, nil", ck, err)
	}
	const limit = 64 << 10
	if _, err := st.PutBytes(ctx, objectName("big"), bytes.Repeat([]byte(" "), 4*limit)); err != nil {
		t.Fatal(err)
	}
	ck, err := LoadCheckpointWithin(ctx, st, "big", limit)
	if ck != nil || err == nil || !strings.Contains(err.Error(), "over the 65536 bytes") {
		t.Errorf("object of %d bytes with a bound of %d: %v, %v; want refused", 4*limit, limit, ck, err)
	}
}
