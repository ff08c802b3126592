package people

import (
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"strings"
	"testing"

	"golang.org/x/crypto/argon2"
)

func TestCheckPassword(t *testing.T) {
	cases := []struct {
		name, password, user, full string
		min                        int
		ok                         bool
		says                       string
	}{
		{"long enough", "cascade-of-pressure-12", "ines", "Ines Varga", 15, true, ""},
		{"too short", "short-one-12", "ines", "Ines Varga", 15, false, "12 characters, at least 15"},
		{"characters not bytes", "ääääääääääääääö", "ines", "Ines Varga", 15, true, ""},
		{"floor of 8 holds", "abc-1234", "ines", "Ines Varga", 4, true, ""},
		{"below floor", "abc-123", "ines", "Ines Varga", 4, false, "at least 8"},
		{"contains name", "my-INES-password-2026", "ines", "Ines Varga", 15, false, "account name"},
		{"contains surname", "laminar-varga-flow-99", "ines", "Ines Varga", 15, false, "full name"},
		{"two-letter word of full name is no rule", "jo-laminar-flow-9911", "jl", "Jo Lu", 15, true, ""},
		{"only spaces", strings.Repeat(" ", 20), "ines", "Ines Varga", 15, false, "only spaces"},
		{"too long", strings.Repeat("x", MaxPasswordLen+1), "ines", "Ines Varga", 15, false, "at most 256"},
		{"invalid UTF-8", "abcdefghijklmnop\xff", "ines", "Ines Varga", 15, false, "UTF-8"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			err := CheckPassword(tc.password, tc.user, tc.full, tc.min)
			if tc.ok {
				if err != nil {
					t.Fatalf("refused: %v", err)
				}
				return
			}
			if !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), tc.says) {
				t.Fatalf("err = %v, want ErrInvalid saying %q", err, tc.says)
			}
			if len(tc.password) > 3 && strings.Contains(err.Error(), tc.password) {
				t.Fatalf("error shows the password: %v", err)
			}
		})
	}
}

// The stored form is checked against argon2.IDKey directly, not through
// the package's own parser alone.
func TestHashDefaultParamsAgainstArgon2(t *testing.T) {
	enc, err := hashPassword(inesPassword, DefaultHashParams)
	if err != nil {
		t.Fatal(err)
	}
	parts := strings.Split(enc, "$")
	if len(parts) != 6 || parts[1] != "argon2id" || parts[2] != "v=19" || parts[3] != "m=65536,t=3,p=4" {
		t.Fatalf("encoded = %q, want $argon2id$v=19$m=65536,t=3,p=4$…", enc)
	}
	salt, _ := base64.RawStdEncoding.DecodeString(parts[4])
	key, _ := base64.RawStdEncoding.DecodeString(parts[5])
	if len(salt) != 16 || len(key) != 32 {
		t.Fatalf("salt %d bytes, key %d bytes; want 16 and 32", len(salt), len(key))
	}
	want := argon2.IDKey([]byte(inesPassword), salt, 3, 64*1024, 4, 32)
	if subtle.ConstantTimeCompare(want, key) != 1 {
		t.Fatal("stored key differs from argon2.IDKey of the same inputs")
	}
	ok, err := checkPasswordHash(inesPassword, enc)
	if err != nil || !ok {
		t.Fatalf("right password: ok=%v err=%v", ok, err)
	}
}

func TestHashCheck(t *testing.T) {
	enc, err := hashPassword(inesPassword, testHash)
	if err != nil {
		t.Fatal(err)
	}
	again, _ := hashPassword(inesPassword, testHash)
	if enc == again {
		t.Fatal("two hashes of one password are equal: the salt is not random")
	}
	for _, tc := range []struct {
		password string
		ok       bool
	}{
		{inesPassword, true},
		{inesPassword + " ", false},
		{strings.ToUpper(inesPassword), false},
		{"", false},
	} {
		ok, err := checkPasswordHash(tc.password, enc)
		if err != nil || ok != tc.ok {
			t.Errorf("check(%q) = %v, %v; want %v", tc.password, ok, err, tc.ok)
		}
	}
	for _, bad := range []string{
		"", "plain", "$argon2i$v=19$m=1024,t=1,p=1$c2FsdHNhbHRzYWx0$a2V5a2V5a2V5a2V5a2V5",
		"$argon2id$v=16$m=1024,t=1,p=1$c2FsdHNhbHRzYWx0$a2V5a2V5a2V5a2V5a2V5",
		"$argon2id$v=19$m=1024,t=0,p=1$c2FsdHNhbHRzYWx0$a2V5a2V5a2V5a2V5a2V5",
		"$argon2id$v=19$m=1024,t=1,p=1$!!$a2V5a2V5a2V5a2V5a2V5",
		"$argon2id$v=19$m=99999999,t=1,p=1$c2FsdHNhbHRzYWx0$a2V5a2V5a2V5a2V5a2V5",
	} {
		if ok, err := checkPasswordHash(inesPassword, bad); ok || !errors.Is(err, ErrInvalid) {
			t.Errorf("malformed %q: ok=%v err=%v, want refusal", bad, ok, err)
		}
	}
}

func TestGeneratePassword(t *testing.T) {
	seen := map[string]bool{}
	for i := 0; i < 50; i++ {
		p, err := GeneratePassword("admin", "Site Administrator")
		if err != nil {
			t.Fatal(err)
		}
		if len(p) != 23 || strings.Count(p, "-") != 3 || strings.ContainsAny(p, "01ilo") {
			t.Fatalf("generated %q: want four groups of five from the unambiguous alphabet", p)
		}
		if err := CheckPassword(p, "admin", "Site Administrator", DefaultMinPasswordLen); err != nil {
			t.Fatalf("generated %q fails the rules: %v", p, err)
		}
		if seen[p] {
			t.Fatalf("generated %q twice", p)
		}
		seen[p] = true
	}
}

// BenchmarkHashDefault shows what one sign-in costs under
// DefaultHashParams on this machine.
func BenchmarkHashDefault(b *testing.B) {
	enc, err := hashPassword(inesPassword, DefaultHashParams)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		if ok, _ := checkPasswordHash(inesPassword, enc); !ok {
			b.Fatal("no match")
		}
	}
}
