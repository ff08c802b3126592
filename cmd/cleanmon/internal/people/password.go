package people

import (
	"crypto/rand"
	"crypto/subtle"
	"encoding/base64"
	"fmt"
	"strings"
	"unicode"
	"unicode/utf8"

	"golang.org/x/crypto/argon2"
)

// HashParams are the argon2id cost parameters. They are written into
// every encoded hash, so a hash made under older parameters still
// verifies after they change.
type HashParams struct {
	Time    uint32 // passes over memory
	Memory  uint32 // KiB
	Threads uint8  // lanes
	SaltLen uint32 // bytes
	KeyLen  uint32 // bytes
}

// DefaultHashParams follow the second recommended option of RFC 9106
// (Argon2, 2021) §4 for systems that cannot spend 2 GiB per hash: t=3,
// 64 MiB, 4 lanes, 128-bit salt, 256-bit tag (from memory). 64 MiB makes
// a guessing rig pay in memory, not only in time; the daemon checks at
// most MaxConcurrentHashes passwords at once so a burst of sign-ins
// cannot take more than a few hundred MiB. Four lanes on two cores still
// runs in well under a second.
var DefaultHashParams = HashParams{Time: 3, Memory: 64 * 1024, Threads: 4, SaltLen: 16, KeyLen: 32}

// MaxConcurrentHashes bounds the argon2id computations in flight.
const MaxConcurrentHashes = 2

// Password rules. NIST SP 800-63B-4 §3.1.1.2 asks at least 15 characters
// for a password used alone and no composition rules (from memory); a
// site can lower the minimum in its configuration, never below 8.
const (
	DefaultMinPasswordLen = 15
	MinPasswordLenFloor   = 8
	MaxPasswordLen        = 256 // characters; longer is surely a paste error
)

// hashPassword encodes an argon2id hash in the usual PHC string form:
// $argon2id$v=19$m=65536,t=3,p=4$<salt>$<key>, base64 without padding.
func hashPassword(password string, p HashParams) (string, error) {
	salt := make([]byte, p.SaltLen)
	if _, err := rand.Read(salt); err != nil {
		return "", fmt.Errorf("people: salt: %w", err)
	}
	key := argon2.IDKey([]byte(password), salt, p.Time, p.Memory, p.Threads, p.KeyLen)
	return fmt.Sprintf("$argon2id$v=%d$m=%d,t=%d,p=%d$%s$%s", argon2.Version, p.Memory, p.Time, p.Threads,
		base64.RawStdEncoding.EncodeToString(salt), base64.RawStdEncoding.EncodeToString(key)), nil
}

// parseHash reads an encoded hash back into its parameters, salt and key.
func parseHash(encoded string) (p HashParams, salt, key []byte, err error) {
	parts := strings.Split(encoded, "$")
	bad := func(why string) (HashParams, []byte, []byte, error) {
		return HashParams{}, nil, nil, fmt.Errorf("%w: stored password hash: %s", ErrInvalid, why)
	}
	if len(parts) != 6 || parts[0] != "" || parts[1] != "argon2id" {
		return bad("not an argon2id hash")
	}
	var version int
	if _, err := fmt.Sscanf(parts[2], "v=%d", &version); err != nil || version != argon2.Version {
		return bad(fmt.Sprintf("version %q, want v=%d", parts[2], argon2.Version))
	}
	if _, err := fmt.Sscanf(parts[3], "m=%d,t=%d,p=%d", &p.Memory, &p.Time, &p.Threads); err != nil {
		return bad(fmt.Sprintf("parameters %q", parts[3]))
	}
	if p.Time == 0 || p.Threads == 0 || p.Memory < 8*uint32(p.Threads) || p.Memory > 4<<20 {
		return bad(fmt.Sprintf("parameters %q out of range", parts[3]))
	}
	if salt, err = base64.RawStdEncoding.DecodeString(parts[4]); err != nil || len(salt) < 8 {
		return bad("salt")
	}
	if key, err = base64.RawStdEncoding.DecodeString(parts[5]); err != nil || len(key) < 16 {
		return bad("key")
	}
	p.SaltLen, p.KeyLen = uint32(len(salt)), uint32(len(key))
	return p, salt, key, nil
}

// checkPasswordHash reports whether password matches encoded, comparing
// in constant time. A malformed hash is an error, never a match.
func checkPasswordHash(password, encoded string) (bool, error) {
	p, salt, key, err := parseHash(encoded)
	if err != nil {
		return false, err
	}
	got := argon2.IDKey([]byte(password), salt, p.Time, p.Memory, p.Threads, p.KeyLen)
	return subtle.ConstantTimeCompare(got, key) == 1, nil
}

// CheckPassword applies the password rules to a new password of the
// account name with full name fullName: at least minLen characters, at
// most MaxPasswordLen, not only spaces, and not containing the account
// name or any word of three or more letters of the full name, ignoring
// case. The error says which rule, never the password.
func CheckPassword(password, name, fullName string, minLen int) error {
	if minLen < MinPasswordLenFloor {
		minLen = MinPasswordLenFloor
	}
	if !utf8.ValidString(password) {
		return fmt.Errorf("%w: password is not valid UTF-8", ErrInvalid)
	}
	n := utf8.RuneCountInString(password)
	switch {
	case n < minLen:
		return fmt.Errorf("%w: password has %d characters, at least %d are needed", ErrInvalid, n, minLen)
	case n > MaxPasswordLen:
		return fmt.Errorf("%w: password has %d characters, at most %d are allowed", ErrInvalid, n, MaxPasswordLen)
	case strings.TrimSpace(password) == "":
		return fmt.Errorf("%w: password is only spaces", ErrInvalid)
	}
	lower := strings.ToLower(password)
	if name != "" && strings.Contains(lower, strings.ToLower(name)) {
		return fmt.Errorf("%w: password contains the account name", ErrInvalid)
	}
	words := strings.FieldsFunc(strings.ToLower(fullName), func(r rune) bool { return !unicode.IsLetter(r) })
	for _, w := range words {
		if utf8.RuneCountInString(w) >= 3 && strings.Contains(lower, w) {
			return fmt.Errorf("%w: password contains a part of the full name", ErrInvalid)
		}
	}
	return nil
}

// passwordAlphabet leaves out letters and digits that look alike on a
// printed sheet or a terminal (0/o, 1/l/i).
const passwordAlphabet = "abcdefghjkmnpqrstuvwxyz23456789"

// GeneratePassword makes a random password for a new or reset account
// (the demo's first admin, `user reset`): four groups of five from a
// 31-character alphabet, about 99 bits, that passes CheckPassword for
// this name and full name.
func GeneratePassword(name, fullName string) (string, error) {
	for try := 0; try < 10; try++ {
		var b strings.Builder
		for n := 0; n < 20; {
			var buf [32]byte
			if _, err := rand.Read(buf[:]); err != nil {
				return "", fmt.Errorf("people: random: %w", err)
			}
			for _, x := range buf {
				// Rejection keeps every character equally likely.
				if n == 20 || int(x) >= 256/len(passwordAlphabet)*len(passwordAlphabet) {
					continue
				}
				if n > 0 && n%5 == 0 {
					b.WriteByte('-')
				}
				b.WriteByte(passwordAlphabet[int(x)%len(passwordAlphabet)])
				n++
			}
		}
		if p := b.String(); CheckPassword(p, name, fullName, DefaultMinPasswordLen) == nil {
			return p, nil
		}
	}
	return "", fmt.Errorf("%w: no random password passed the rules for %q in 10 tries", ErrInvalid, name)
}
