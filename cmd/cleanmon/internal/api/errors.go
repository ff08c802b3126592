package api

import (
	"net/http"

	"cleanmon/alerts"
	"cleanmon/alerts/investigate"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
	"cleanmon/store"
)

// Errors is the one table from the error values of the daemon's packages
// to HTTP statuses; an error no rule names is the daemon's side failing
// (503), or 504 for a request out of time. The pages use it too.
var Errors = httpx.Table{
	{Err: store.ErrRunExists, Status: http.StatusConflict},
	{Err: store.ErrNotFound, Status: http.StatusNotFound},
	{Err: investigate.ErrInput, Status: http.StatusBadRequest},
	{Err: store.ErrInvalid, Status: http.StatusBadRequest},
	{Err: collector.ErrInput, Status: http.StatusBadRequest},
	{Err: collector.ErrContentType, Status: http.StatusUnsupportedMediaType},
	{Err: collector.ErrTooLarge, Status: http.StatusRequestEntityTooLarge},
	{Err: collector.ErrCommit, Status: http.StatusServiceUnavailable},
	{Err: alerts.ErrNoAlarm, Status: http.StatusNotFound},
	{Err: alerts.ErrAlreadyAcked, Status: http.StatusConflict},
	{Err: alerts.ErrAlarmCleared, Status: http.StatusConflict},
	{Err: alerts.ErrAlarmDelayed, Status: http.StatusConflict},
	{Err: alerts.ErrAck, Status: http.StatusBadRequest},
	{Err: alerts.ErrOperatingState, Status: http.StatusBadRequest},
}
