package alerts

import (
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"time"
)

// A receiver checks each delivery by recomputing the HMAC over the exact
// body, and drops a delivery key it has already accepted.
func ExampleWebhook() {
	const secret = "shared-with-the-receiver"
	seen := map[string]bool{}
	receiver := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		body, _ := io.ReadAll(r.Body)
		m := hmac.New(sha256.New, []byte(secret))
		m.Write(body)
		if !hmac.Equal([]byte(r.Header.Get(SignatureHeader)), []byte("sha256="+hex.EncodeToString(m.Sum(nil)))) {
			http.Error(w, "bad signature", http.StatusUnauthorized)
			return
		}
		key := r.Header.Get(DeliveryHeader)
		if seen[key] {
			return // a repeat: acknowledge, act once
		}
		seen[key] = true
		var msg WebhookMessage
		_ = json.Unmarshal(body, &msg)
		fmt.Printf("%s: %s %s in %s → %s\n", key, msg.Alarm.Level, msg.Alarm.Kind, msg.Alarm.Zone, msg.To)
	}))
	defer receiver.Close()

	hook, err := NewWebhook(WebhookConfig{Name: "facilities", URL: receiver.URL, Secret: secret}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	since := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	t := Transition{
		Key: "alm-7/1/active", AlarmID: "alm-7", Time: since, From: StateDelayed, To: StateActive,
		Alarm: Alarm{ID: "alm-7", Zone: "metrology", Kind: KindExcursion, Level: LevelAction, State: StateActive, Since: since},
	}
	for range 2 { // the second is a retry after a lost answer
		if err := hook.Notify(context.Background(), t); err != nil {
			fmt.Println(err)
		}
	}
	// Output:
	// alm-7/1/active: action excursion in metrology → active
}
