package service

import (
	"bytes"
	"fmt"
	"io"
	"net/http"
	"strings"
	"testing"

	"modewatch/cmd/modewatch/internal/pipeline"
)

// TestPutHostileCheckpoint: checkpoint uploads made to hurt get 4xx with
// the reason and leave the unit alone: a list of 200,000 channels (2 MB)
// 400 with the cap, a body over the unit's limit 413 (sent without a
// length, so the server stops reading at the limit), truncated JSON 400.
func TestPutHostileCheckpoint(t *testing.T) {
	cfg := serviceConfig(t, `model: {max_channels: 50}
server: {embedded_port: -1}
http: {listen: "127.0.0.1:0"}`)
	svc, _ := startWithClient(t, Options{Config: cfg})
	url := svc.Info().HTTP + "/api/units/victim/checkpoint"

	var names bytes.Buffer
	for i := 0; i < 200000; i++ {
		fmt.Fprintf(&names, `,"c%d"`, i)
	}
	huge := `{"format":"modewatch-model","version":1,"period":"1s","units":[{"name":"victim","channels":[` +
		names.String()[1:] + `],"state":"TVdUSwIA"}]}`
	limit := pipeline.CheckpointBodyBytes(50)
	cases := []struct {
		name string
		body io.Reader
		code int
		want string
	}{
		{"200000 channels", strings.NewReader(huge), http.StatusBadRequest, "over this unit's cap of 50"},
		{"over the body limit", io.MultiReader(strings.NewReader(`{"format":"`), bytes.NewReader(bytes.Repeat([]byte("a"), int(limit)))), http.StatusRequestEntityTooLarge, "model.max_channels 50"},
		{"truncated", strings.NewReader(huge[:1000]), http.StatusBadRequest, "not a model file"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			req, _ := http.NewRequest("PUT", url, io.NopCloser(c.body)) // no length: chunked
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			b, _ := io.ReadAll(resp.Body)
			resp.Body.Close()
			if resp.StatusCode != c.code || !strings.Contains(string(b), c.want) {
				t.Errorf("%d %s, want %d and %q", resp.StatusCode, b, c.code, c.want)
			}
			if svc.Pipeline().Unit("victim") != nil {
				t.Error("the refused checkpoint created the unit")
			}
		})
	}
}
