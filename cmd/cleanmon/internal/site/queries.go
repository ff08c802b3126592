package site

import (
	"time"

	"github.com/prometheus/common/model"
)

// QueriesConfig bounds what one range query over the stored readings may
// ask: how long a raw range may be, and how many such queries a token may
// run at once. Zero takes the API's default (a year and two days; two).
type QueriesConfig struct {
	MaxRawRange   model.Duration `yaml:"max_raw_range"`
	HeavyPerToken int            `yaml:"heavy_per_token"`
}

// checkQueries adds the problems of the queries section.
func (d *nodeDecoder) checkQueries(q QueriesConfig) {
	if q.MaxRawRange < 0 {
		d.add("queries.max_raw_range", "%s: must be positive", time.Duration(q.MaxRawRange))
	}
	if q.HeavyPerToken < 0 {
		d.add("queries.heavy_per_token", "%d: must be positive", q.HeavyPerToken)
	}
}
