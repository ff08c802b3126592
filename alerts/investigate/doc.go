// Package investigate answers the engineer's questions after an alarm:
// what else happened around it, which production runs were in the room,
// and how a month of monitoring looked. It is pure computation over plain
// series of times and values that the caller reads from the store; it
// imports no other package of the project and does no I/O.
//
// # Coincident events
//
// Investigate takes everything recorded in a window around an alarm (the
// zone's locations and sizes, the DP of every sensor on its boundary with
// its minimum, the neighbouring zones on the cascade, operating-state
// changes, environment channels and each counter's flow and status), finds
// the onset of the zone's rise, counts the door openings per DP sensor and
// ranks the coincident events.
//
// How the events are ranked, in one paragraph: every series is compared
// with its own baseline, the samples from the start of the window to 30
// minutes before the alarm, summarised by their median and their median
// absolute deviation (scaled by 1.4826 to match a standard deviation, and
// floored at the sensor's resolution so that a very quiet sensor does not
// magnify a wobble; concentrations on a log scale because their scatter
// grows with their level). A stretch where a series moves at least 4 of
// these robust deviations the way that matters (DP and airflow down,
// concentrations up, flow, temperature and humidity either way) for at
// least 15 s is an event; a fault status and a change of operating state
// are events of fixed size (20 and 6). Falls of two or more DP or airflow
// sensors that begin within two minutes of each other and each last two
// minutes or more are one supply failure. Each event scores ln(1 + z) × w × p: z its largest robust
// deviation; w its lead-time weight, 1 when it began up to 15 minutes
// before the rise and was still under way within a minute of it, decaying
// with a 5-minute time constant when it began earlier or was over before
// the rise, and halved and decaying when it began after the rise (then it
// is more likely an effect than a cause); p the plausibility of its kind
// as a cause of particles: a door held open for two minutes or more, a
// flow reversal and a supply failure 1, a brief door passage 0.5 to 1 by
// how long it was open, a neighbour's rise 0.9, airflow alone 0.7, a
// state change 0.6, a DP dip that stayed above its minimum 0.5,
// temperature or humidity 0.3, and a counter fault 1 when the rise is at
// its location alone but 0.3 when the zone's other locations rose too.
// The highest score ranks first; every event carries its evidence in
// words, its z, w and p, so a reader can check the order by hand. The
// plausibility factors are the order in which an engineer checks things,
// not measured probabilities (common practice, no source).
//
// The ranking suggests where to look first. It does not decide a cause:
// that stays with the site's qualified people, following its procedures
// and the applicable regulations. When a series is missing or too short
// to judge, Result.Unknown says so rather than leaving it out silently.
//
// # Exposure of production runs
//
// RunExposure lists, for a production run, the alarms of its zone that
// overlapped it, edges included (an alarm that cleared the second the run
// began did overlap it; an open run or alarm lasts until now), its time
// at each attention level (time with no level on record is "unknown",
// never "none"), and the peak concentration per size; AlarmRuns gives the
// runs an alarm overlapped. ReadRunsCSV reads runs to import. The lists
// are the input to an impact assessment that the site's QA makes and
// signs; they do not replace it.
//
// # A month on one page
//
// Month summarises a zone's month beside the month before: per location
// and size the mean, the 95th and 99th percentiles and the samples above
// the alert level, the action level and the class limit; alarms by kind
// and level; door openings per day; time by attention level. Percentiles
// are nearest-rank (Percentile): always a measured value, the same as
// the daemon's level advice uses, so a reader can find the sample.
//
// SimulateIncident stages incidents of known cause (a door held open, a
// fan failure, a counter fault, a neighbour's excursion) on the demo
// site's assembly room, with noise on every series and unrelated door
// passages and state changes mixed in; the tests rank them and record how
// often the true cause comes first.
package investigate
