package configs

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestHTTPNetworkListenNeedsAuthentication: a listen address reachable
// from the network without tokens or client certificates is refused with
// its position, unless open_access is set; loopback needs nothing.
func TestHTTPNetworkListenNeedsAuthentication(t *testing.T) {
	hash := "sha256:" + strings.Repeat("ab", 32)
	cases := []struct {
		name, http string
		refused    bool
	}{
		{"loopback v4", `{listen: "127.0.0.1:7480"}`, false},
		{"loopback v6", `{listen: "[::1]:7480"}`, false},
		{"localhost", `{listen: "localhost:7480"}`, false},
		{"every interface", `{listen: ":7480"}`, true},
		{"any address", `{listen: "0.0.0.0:7480"}`, true},
		{"plant address", `{listen: "10.1.2.3:7480"}`, true},
		{"plant address, open access", `{listen: "10.1.2.3:7480", open_access: true}`, false},
		{"plant address, tokens", `{listen: "10.1.2.3:7480", tokens: [{name: jo, role: write, hash: "` + hash + `"}]}`, false},
		{"plant address, tokens file", `{listen: "10.1.2.3:7480", tokens_file: /etc/modewatch/tokens}`, false},
		{"plant address, client CA without clients", `{listen: "10.1.2.3:7480", tls: {cert: a, key: b, client_ca: c}}`, true},
		{"off", `{listen: "off"}`, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse("net.yaml", []byte("http: "+c.http+"\n"))
			got := err != nil && strings.Contains(err.Error(), "net.yaml:1:") && strings.Contains(err.Error(), "no authentication")
			if got != c.refused {
				t.Errorf("refused=%v, want %v (err %v)", got, c.refused, err)
			}
		})
	}
}

func TestHTTPTokenEntries(t *testing.T) {
	good := "sha256:" + strings.Repeat("0f", 32)
	cases := []struct {
		name, tokens, want string
	}{
		{"good", `[{name: jo, role: read, hash: "` + good + `"}]`, ""},
		{"plain token", `[{name: jo, role: read, hash: "hunter2hunter2"}]`, "hash must be"},
		{"short hash", `[{name: jo, role: read, hash: "sha256:abcd"}]`, "hash must be"},
		{"bad role", `[{name: jo, role: admin, hash: "` + good + `"}]`, `role "admin"`},
		{"no name", `[{role: read, hash: "` + good + `"}]`, "name"},
		{"duplicate", `[{name: jo, role: read, hash: "` + good + `"}, {name: jo, role: write, hash: "` + good + `"}]`, "also the name"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) { wantParse(t, "http: {tokens: "+c.tokens+"}\n", c.want) })
	}
}

func TestReadTokensFile(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "tokens")
	good := "sha256:" + strings.Repeat("0f", 32)
	os.WriteFile(p, []byte("# operators\njo write "+good+"\n\nhist read "+good+" # collector\n"), 0o600)
	toks, err := ReadTokensFile(p)
	if err != nil || len(toks) != 2 || toks[0] != (Token{"jo", "write", good}) || toks[1].Name != "hist" {
		t.Fatalf("%+v %v", toks, err)
	}
	os.WriteFile(p, []byte("jo write "+good+"\nhist read\n"), 0o600)
	if _, err := ReadTokensFile(p); err == nil || !strings.Contains(err.Error(), "tokens:2:") {
		t.Errorf("err %v, want the file and line 2", err)
	}
	c, err := Parse("f.yaml", []byte("http: {tokens_file: "+p+"}\n"))
	if err != nil {
		t.Fatal(err)
	}
	if err := c.CheckFiles(); err == nil || !strings.Contains(err.Error(), "f.yaml:1:") {
		t.Errorf("CheckFiles: %v, want the tokens file's error at its key", err)
	}
}

func TestNATSUsers(t *testing.T) {
	bc := "$2a$11$CZU.L4wXEpch6GPCcqRIJ.aztVUH6e6N6tNpGSKVajnkliGmrJy4q"
	nk := "U" + strings.Repeat("A", 55)
	cases := []struct {
		name, users, want string
	}{
		{"three roles", `[{name: gw, password: "` + bc + `", publish: ["modewatch.readings.>"]}, {name: jo, nkey: ` + nk + `, operator: true}, {name: hist, password: "` + bc + `", subscribe: ["modewatch.alerts.>"]}]`, ""},
		{"plain password", `[{name: gw, password: hunter2}]`, "not a bcrypt hash"},
		{"both", `[{name: gw, password: "` + bc + `", nkey: ` + nk + `}]`, "exactly one"},
		{"bad nkey", `[{name: gw, nkey: SUAB}]`, "not a user public NKey"},
		{"control by wildcard", `[{name: gw, password: "` + bc + `", publish: ["modewatch.>"]}]`, "reaches the control subjects"},
		{"control of another", `[{name: gw, password: "` + bc + `", publish: ["modewatch.control.jo"]}]`, "reaches the control subjects"},
		{"control by star", `[{name: gw, password: "` + bc + `", publish: ["modewatch.*.jo"]}]`, "reaches the control subjects"},
		{"dotted name", `[{name: a.b, password: "` + bc + `"}]`, "without spaces"},
		{"service name", `[{name: modewatch-service, password: "` + bc + `"}]`, "service's own user"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) { wantParse(t, "server: {users: "+c.users+"}\n", c.want) })
	}
	if _, err := Parse("u.yaml", []byte("server: {urls: [nats://x:4222], users: [{name: gw, password: \""+bc+"\"}]}\n")); err == nil {
		t.Error("users with urls accepted")
	}
}

// wantParse parses yaml and checks that it is accepted (want "") or
// refused with an error containing want.
func wantParse(t *testing.T, yaml, want string) {
	t.Helper()
	_, err := Parse("t.yaml", []byte(yaml))
	switch {
	case want == "" && err != nil:
		t.Fatal(err)
	case want != "" && (err == nil || !strings.Contains(err.Error(), want)):
		t.Errorf("err %v, want %q", err, want)
	}
}
