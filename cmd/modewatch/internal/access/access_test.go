package access

import (
	"net/http"
	"net/http/httptest"
	"testing"

	"modewatch/configs"
)

// TestHashToken checks the stored form against the SHA-256 example of
// FIPS 180-2, appendix B.1 (message "abc").
func TestHashToken(t *testing.T) {
	const want = "sha256:ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
	if got := HashToken("abc"); got != want {
		t.Fatalf("HashToken(abc) = %s, want %s", got, want)
	}
	tok, err := NewToken()
	if err != nil || len(tok) != 43 {
		t.Fatalf("NewToken: %q %v, want 43 characters", tok, err)
	}
	if err := configs.CheckToken(configs.Token{Name: "x", Role: "read", Hash: HashToken(tok)}); err != nil {
		t.Fatal(err)
	}
}

func TestGuard(t *testing.T) {
	g, err := New(configs.HTTP{Tokens: []configs.Token{
		{Name: "ro", Role: "read", Hash: HashToken("read-secret-000000")},
		{Name: "rw", Role: "write", Hash: HashToken("write-secret-00000")},
	}})
	if err != nil {
		t.Fatal(err)
	}
	var seen Identity
	h := http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { seen, _ = From(r.Context()) })
	cases := []struct {
		name, auth string
		write      bool
		code       int
		who        string
	}{
		{"none", "", false, 401, ""},
		{"basic scheme", "Basic cm86cmVhZC1zZWNyZXQ=", false, 401, ""},
		{"empty bearer", "Bearer ", false, 401, ""},
		{"unknown", "Bearer nope", false, 401, ""},
		{"reader reads", "Bearer read-secret-000000", false, 200, "ro"},
		{"reader writes", "Bearer read-secret-000000", true, 403, ""},
		{"writer writes", "bearer write-secret-00000", true, 200, "rw"},
		{"writer reads", "Bearer write-secret-00000", false, 200, "rw"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			seen = Identity{}
			req := httptest.NewRequest("GET", "/x", nil)
			if c.auth != "" {
				req.Header.Set("Authorization", c.auth)
			}
			rec := httptest.NewRecorder()
			wrap := g.Read
			if c.write {
				wrap = g.Write
			}
			wrap(h).ServeHTTP(rec, req)
			if rec.Code != c.code || seen.Name != c.who {
				t.Errorf("status %d caller %q, want %d %q", rec.Code, seen.Name, c.code, c.who)
			}
			if c.code == 401 && rec.Header().Get("WWW-Authenticate") == "" {
				t.Error("401 without WWW-Authenticate")
			}
		})
	}
	open, _ := New(configs.HTTP{})
	if !open.Open() {
		t.Fatal("no tokens: want an open guard")
	}
}
