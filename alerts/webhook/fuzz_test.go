package webhook

import (
	"bytes"
	"net/http"
	"testing"
	"time"
)

// FuzzVerify feeds Verify arbitrary headers and bodies: it never panics,
// accepts a request exactly as Sign signed it, and rejects it once the body
// changes.
func FuzzVerify(f *testing.F) {
	body := []byte(`{"format":"curvewatch-alert/1"}`)
	now := time.Unix(1714964512, 0)
	f.Add("whsec", "1714964512", Sign("whsec", now, body), body)
	f.Add("whsec", "1714964512", "v1=00, v1="+Sign("whsec", now, body)[3:], body)
	f.Add("k", "", "", []byte{})
	f.Add("k", "1714964512", "v1=zz,,=,v1,v1=", []byte("x"))
	f.Add("k", "99999999999999999999", "v1=", []byte("x"))
	f.Add("k", "-1", " v1 = ab ", []byte("x"))
	f.Fuzz(func(t *testing.T, secret, ts, sig string, body []byte) {
		h := http.Header{}
		h.Set(HeaderTimestamp, ts)
		h.Set(HeaderSignature, sig)
		_ = Verify(secret, h, body, now, time.Hour)
		_ = ParseSignature(sig)

		if secret == "" {
			return
		}
		h.Set(HeaderTimestamp, "1714964512")
		h.Set(HeaderSignature, Sign(secret, now, body))
		if err := Verify(secret, h, body, now, time.Minute); err != nil {
			t.Fatalf("a signed request does not verify: %v", err)
		}
		changed := append(bytes.Clone(body), '!')
		if err := Verify(secret, h, changed, now, time.Minute); err == nil {
			t.Fatalf("a changed body verifies")
		}
	})
}

// FuzzParseSignature checks that every signature ParseSignature returns is
// a whole SHA-256 MAC, and that there are at most maxSignatures.
func FuzzParseSignature(f *testing.F) {
	f.Add("v1=" + string(bytes.Repeat([]byte("ab"), 32)))
	f.Add("v1=ab,v0=cd, v1=" + string(bytes.Repeat([]byte("0"), 64)))
	f.Add(",,,=")
	f.Fuzz(func(t *testing.T, v string) {
		sigs := ParseSignature(v)
		if len(sigs) > maxSignatures {
			t.Fatalf("%d signatures", len(sigs))
		}
		for _, s := range sigs {
			if len(s) != 32 {
				t.Fatalf("signature of %d bytes", len(s))
			}
		}
	})
}
