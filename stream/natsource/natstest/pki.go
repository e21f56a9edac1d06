package natstest

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"sync/atomic"
	"testing"
	"time"
)

// CA is a certificate authority for TLS tests: an ECDSA P-256 key and a
// self-signed certificate valid from an hour before it was made to an
// hour after.
type CA struct {
	Cert *x509.Certificate
	Key  *ecdsa.PrivateKey
}

// serial numbers the certificates of a test process (1 and up).
var serial atomic.Int64

// NewCA makes a certificate authority with common name name.
func NewCA(t testing.TB, name string) *CA {
	t.Helper()
	k := newKey(t)
	tpl := template(name)
	tpl.IsCA, tpl.BasicConstraintsValid, tpl.KeyUsage = true, true, x509.KeyUsageCertSign
	der, err := x509.CreateCertificate(rand.Reader, tpl, tpl, &k.PublicKey, k)
	if err != nil {
		t.Fatal(err)
	}
	c, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatal(err)
	}
	return &CA{Cert: c, Key: k}
}

// Issue returns the DER certificate and the key of a new ECDSA P-256 leaf
// for common name cn with extended key usage usage (server or client
// authentication), signed by ca; ip, when not nil, is its one IP address.
func (ca *CA) Issue(t testing.TB, cn string, usage x509.ExtKeyUsage, ip net.IP) ([]byte, *ecdsa.PrivateKey) {
	t.Helper()
	k := newKey(t)
	tpl := template(cn)
	tpl.KeyUsage, tpl.ExtKeyUsage = x509.KeyUsageDigitalSignature, []x509.ExtKeyUsage{usage}
	if ip != nil {
		tpl.IPAddresses = []net.IP{ip}
	}
	der, err := x509.CreateCertificate(rand.Reader, tpl, ca.Cert, &k.PublicKey, ca.Key)
	if err != nil {
		t.Fatal(err)
	}
	return der, k
}

// IssueFiles is Issue with the certificate and its key written as PEM
// files cn.pem and cn-key.pem in dir; it returns their paths.
func (ca *CA) IssueFiles(t testing.TB, dir, cn string, usage x509.ExtKeyUsage, ip net.IP) (cert, key string) {
	t.Helper()
	der, k := ca.Issue(t, cn, usage, ip)
	kder, err := x509.MarshalECPrivateKey(k)
	if err != nil {
		t.Fatal(err)
	}
	return WritePEM(t, dir, cn+".pem", "CERTIFICATE", der), WritePEM(t, dir, cn+"-key.pem", "EC PRIVATE KEY", kder)
}

// WritePEM writes der as one PEM block of type typ to dir/name (mode
// 0600) and returns the path.
func WritePEM(t testing.TB, dir, name, typ string, der []byte) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

func newKey(t testing.TB) *ecdsa.PrivateKey {
	t.Helper()
	k, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	return k
}

// template is a certificate for common name cn valid from an hour ago to
// an hour from now, with the next serial number.
func template(cn string) *x509.Certificate {
	now := time.Now()
	return &x509.Certificate{SerialNumber: big.NewInt(serial.Add(1)), Subject: pkix.Name{CommonName: cn},
		NotBefore: now.Add(-time.Hour), NotAfter: now.Add(time.Hour)}
}
