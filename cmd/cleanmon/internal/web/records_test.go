package web

import (
	"context"
	"net/http"
)

// fakeRecords has no run and no month: every report is a 404 as the API
// gives it.
type fakeRecords struct{}

func (fakeRecords) ExposureJSON(context.Context, string) (int, []byte) {
	return http.StatusNotFound, []byte(`{"error":"store: not found: run"}`)
}

func (fakeRecords) TrendJSON(context.Context, string, string) (int, []byte) {
	return http.StatusNotFound, []byte(`{"error":"store: not found: zone"}`)
}
