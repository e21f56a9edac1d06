package natsource

import (
	"crypto/tls"
	"crypto/x509"
	"errors"
	"net"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/nats-io/jwt/v2"
	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nkeys"

	"modewatch/stream/natsource/natstest"
)

// connectAndPing connects with opts and checks the connection carries a
// round trip.
func connectAndPing(t *testing.T, opts Options) error {
	t.Helper()
	c, err := Connect(ctxT(t, 5*time.Second), opts, nil)
	if err != nil {
		return err
	}
	defer c.Close()
	if c.State() != StateConnected {
		t.Errorf("state %v after Connect", c.State())
	}
	return c.NATS().FlushTimeout(5 * time.Second)
}

// wantAuthErr checks a rejected connection's error: it wraps ErrAuth and
// nats.ErrAuthorization and names the method.
func wantAuthErr(t *testing.T, err error, method string) {
	t.Helper()
	if !errors.Is(err, ErrAuth) || !errors.Is(err, nats.ErrAuthorization) {
		t.Fatalf("error %v: want ErrAuth wrapping nats.ErrAuthorization", err)
	}
	mustContain(t, err, "rejected the credentials", method)
}

func TestAuthUserPassword(t *testing.T) {
	checkNoLeak(t)
	o := natstest.JetStreamOptions(t)
	o.Users = []*server.User{{Username: "plant", Password: "s3cret"}}
	s := natstest.Run(t, o)
	url := []string{s.ClientURL()}
	if err := connectAndPing(t, Options{URLs: url, User: "plant", Password: "s3cret"}); err != nil {
		t.Fatalf("good credentials: %v", err)
	}
	err := connectAndPing(t, Options{URLs: url, User: "plant", Password: "wrong"})
	wantAuthErr(t, err, "user/password")
	err = connectAndPing(t, Options{URLs: url})
	wantAuthErr(t, err, "none")
}

func TestAuthToken(t *testing.T) {
	checkNoLeak(t)
	o := natstest.JetStreamOptions(t)
	o.Authorization = "t0ken-abc"
	s := natstest.Run(t, o)
	url := []string{s.ClientURL()}
	if err := connectAndPing(t, Options{URLs: url, Token: "t0ken-abc"}); err != nil {
		t.Fatalf("good token: %v", err)
	}
	wantAuthErr(t, connectAndPing(t, Options{URLs: url, Token: "other"}), "token")
}

func writeFile(t *testing.T, name string, data []byte) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, data, 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestAuthNKeySeedFile(t *testing.T) {
	checkNoLeak(t)
	user, err := nkeys.CreateUser()
	if err != nil {
		t.Fatal(err)
	}
	pub, _ := user.PublicKey()
	seed, _ := user.Seed()
	stranger, _ := nkeys.CreateUser()
	strangerSeed, _ := stranger.Seed()

	o := natstest.JetStreamOptions(t)
	o.Nkeys = []*server.NkeyUser{{Nkey: pub}}
	s := natstest.Run(t, o)
	url := []string{s.ClientURL()}
	if err := connectAndPing(t, Options{URLs: url, NKeySeedFile: writeFile(t, "user.nk", seed)}); err != nil {
		t.Fatalf("listed nkey: %v", err)
	}
	wantAuthErr(t, connectAndPing(t, Options{URLs: url, NKeySeedFile: writeFile(t, "other.nk", strangerSeed)}), "nkey")
	err = connectAndPing(t, Options{URLs: url, NKeySeedFile: writeFile(t, "bad.nk", []byte("not a seed"))})
	if !errors.Is(err, ErrConfig) {
		t.Errorf("garbage seed file: %v, want ErrConfig", err)
	}
}

// operatorSetup builds a decentralised (JWT) trust chain: an operator signs
// an account, the account signs users. The server trusts the operator and
// resolves the account from memory. Returns the server options and a
// function writing a credentials file for a new user signed by signer.
func operatorSetup(t *testing.T) (*server.Options, nkeys.KeyPair, func(signer nkeys.KeyPair, name string) string) {
	t.Helper()
	okp, err := nkeys.CreateOperator()
	if err != nil {
		t.Fatal(err)
	}
	opub, _ := okp.PublicKey()
	oc := jwt.NewOperatorClaims(opub)
	oc.Name = "test-operator"
	ojwt, err := oc.Encode(okp)
	if err != nil {
		t.Fatal(err)
	}
	oclaims, err := jwt.DecodeOperatorClaims(ojwt)
	if err != nil {
		t.Fatal(err)
	}
	akp, _ := nkeys.CreateAccount()
	apub, _ := akp.PublicKey()
	ac := jwt.NewAccountClaims(apub)
	ac.Name = "plant"
	ajwt, err := ac.Encode(okp)
	if err != nil {
		t.Fatal(err)
	}
	res := &server.MemAccResolver{}
	if err := res.Store(apub, ajwt); err != nil {
		t.Fatal(err)
	}
	o := natstest.JetStreamOptions(t)
	o.JetStream = false
	o.TrustedOperators = []*jwt.OperatorClaims{oclaims}
	o.AccountResolver = res

	creds := func(signer nkeys.KeyPair, name string) string {
		ukp, _ := nkeys.CreateUser()
		upub, _ := ukp.PublicKey()
		uc := jwt.NewUserClaims(upub)
		uc.Name = name
		ujwt, err := uc.Encode(signer)
		if err != nil {
			t.Fatal(err)
		}
		seed, _ := ukp.Seed()
		data, err := jwt.FormatUserConfig(ujwt, seed)
		if err != nil {
			t.Fatal(err)
		}
		return writeFile(t, name+".creds", data)
	}
	return o, akp, creds
}

// TestAuthCredentialsFile uses an operator/account/user JWT chain and a
// ".creds" file, the decentralised authentication of nats-server.
func TestAuthCredentialsFile(t *testing.T) {
	checkNoLeak(t)
	o, akp, creds := operatorSetup(t)
	s := natstest.Run(t, o)
	url := []string{s.ClientURL()}
	if err := connectAndPing(t, Options{URLs: url, CredentialsFile: creds(akp, "monitor")}); err != nil {
		t.Fatalf("valid credentials file: %v", err)
	}
	// A user signed by an account the server does not know.
	otherAcc, _ := nkeys.CreateAccount()
	wantAuthErr(t, connectAndPing(t, Options{URLs: url, CredentialsFile: creds(otherAcc, "intruder")}), "credentials file")
	// A missing file is a configuration error naming the field.
	err := connectAndPing(t, Options{URLs: url, CredentialsFile: filepath.Join(t.TempDir(), "none.creds")})
	if !errors.Is(err, ErrConfig) {
		t.Fatalf("missing creds file: %v, want ErrConfig", err)
	}
	mustContain(t, err, "credentials_file", "none.creds")
}

// tlsFiles writes a self-signed CA, a server certificate for 127.0.0.1 and
// a client certificate, all signed by the CA, as PEM files.
type tlsFiles struct{ ca, serverCert, serverKey, clientCert, clientKey string }

func makeTLS(t *testing.T) tlsFiles {
	t.Helper()
	dir := t.TempDir()
	ca := natstest.NewCA(t, "test CA")
	var f tlsFiles
	f.ca = natstest.WritePEM(t, dir, "ca.pem", "CERTIFICATE", ca.Cert.Raw)
	f.serverCert, f.serverKey = ca.IssueFiles(t, dir, "server", x509.ExtKeyUsageServerAuth, net.ParseIP("127.0.0.1"))
	f.clientCert, f.clientKey = ca.IssueFiles(t, dir, "client", x509.ExtKeyUsageClientAuth, nil)
	return f
}

// TestTLSMutual: the server requires TLS and a client certificate signed by
// the CA. With CA, certificate and key the client connects; without its
// certificate, or trusting another CA, it is refused.
func TestTLSMutual(t *testing.T) {
	checkNoLeak(t)
	f := makeTLS(t)
	tc, err := server.GenTLSConfig(&server.TLSConfigOpts{CertFile: f.serverCert, KeyFile: f.serverKey, CaFile: f.ca, Verify: true})
	if err != nil {
		t.Fatal(err)
	}
	if tc.ClientAuth != tls.RequireAndVerifyClientCert {
		t.Fatalf("server does not require client certificates: %v", tc.ClientAuth)
	}
	o := natstest.JetStreamOptions(t)
	o.TLS, o.TLSVerify, o.TLSConfig, o.TLSTimeout = true, true, tc, 5
	s := natstest.Run(t, o)
	url := []string{s.ClientURL()}

	good := Options{URLs: url, TLS: TLSOptions{CAFile: f.ca, CertFile: f.clientCert, KeyFile: f.clientKey}}
	if err := connectAndPing(t, good); err != nil {
		t.Fatalf("mutual TLS: %v", err)
	}
	if err := connectAndPing(t, Options{URLs: url, TLS: TLSOptions{CAFile: f.ca}}); err == nil {
		t.Error("connected without a client certificate")
	}
	other := makeTLS(t)
	err = connectAndPing(t, Options{URLs: url, TLS: TLSOptions{CAFile: other.ca, CertFile: f.clientCert, KeyFile: f.clientKey}})
	if err == nil {
		t.Error("connected trusting the wrong CA")
	} else {
		var uae x509.UnknownAuthorityError
		if !errors.As(err, &uae) {
			t.Logf("wrong CA error (not x509.UnknownAuthorityError): %v", err)
		}
	}
	err = connectAndPing(t, Options{URLs: url, TLS: TLSOptions{CertFile: f.clientCert}})
	if !errors.Is(err, ErrConfig) {
		t.Errorf("cert without key: %v, want ErrConfig", err)
	}
}
