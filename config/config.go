package config

import (
	"errors"
	"fmt"
	"os"
	"strings"
	"time"
)

// Config is a loaded, validated configuration. Every quantity is SI; every
// relative path is already resolved against the directory of the file.
type Config struct {
	File    string // the file it was read from (the name given to Parse)
	Sites   []Site
	Tanks   []Tank
	Levels  []Level
	Outputs Outputs
}

// Level is a measured level that is not a monitored tank: a basin or sump
// that monitored outlets discharge into (Outlet.DischargesInto), read only
// for the head across those outlets. Its level is measured from its bottom,
// which stands BaseElevationM above the plant datum; HeightM is its depth,
// the range its readings are checked against.
type Level struct {
	ID             string
	Site           string
	Description    string
	BaseElevationM float64
	HeightM        float64
	Sensor         Sensor
	Source         Source
}

// Site groups tanks and may name an InfluxDB server.
type Site struct {
	ID          string
	Description string
	MailTo      []string // the site's mail recipients (default outputs.alert.mail.to)
	Influx      *Influx  // nil when the site has no InfluxDB
}

// Influx is a site's InfluxDB connection. The token is never in the file:
// it comes from the environment variable TokenEnv or the file TokenFile (at
// most one of them; neither for a server without authentication).
type Influx struct {
	URL                 string
	Org                 string        // default "" (ignored by InfluxDB 1.8)
	Bucket              string        // required; "db/rp" or "db" on 1.8
	TokenEnv            string        // name of an environment variable holding the token
	TokenFile           string        // path of a file holding the token
	Measurement         string        // default "tank_level"
	Field               string        // default "level"
	TankTag             string        // default "tank"
	SiteTag             string        // default "": no filter; else only points whose tag SiteTag equals the site id are read
	QueryWindow         time.Duration // default 24 h: the time span of one query
	Timeout             time.Duration // default 30 s: per query or write
	FitsMeasurement     string        // default "outlet_fit": write-back of drain fits
	FindingsMeasurement string        // default "outlet_finding": write-back of findings
	// TransitionsMeasurement (default "outlet_finding_transition"):
	// write-back of every finding transition, new and cleared.
	TransitionsMeasurement string
	SettleDelay            time.Duration // default 5 min: data younger than this is not read yet
	Overlap                time.Duration // default 1 h: re-read before a tank's checkpoint; the command always re-reads at least 12 h
	QueryLanguage          string        // default "flux"; "influxql" reads over the v1 /query API (InfluxDB 3, or Flux turned off)
}

// Token returns the token from TokenEnv or TokenFile (surrounding white space
// removed), or "" when neither is set. The token is a secret: never log it.
func (i *Influx) Token() (string, error) {
	return readSecret(i.TokenEnv, "influx token", i.TokenFile, "influx token file", true)
}

// readSecret reads a secret from the environment variable env or the file
// file (surrounding white space removed); "" when neither is named. envWhat
// and fileWhat name the setting in errors, which never hold the secret or
// the file's content. An empty variable is an error unless allowEmpty.
func readSecret(env, envWhat, file, fileWhat string, allowEmpty bool) (string, error) {
	switch {
	case env != "":
		t, ok := os.LookupEnv(env)
		t = strings.TrimSpace(t)
		switch {
		case !ok && allowEmpty:
			return "", fmt.Errorf("config: %s: environment variable %s is not set", envWhat, env)
		case !ok || t == "" && !allowEmpty:
			return "", fmt.Errorf("config: %s: environment variable %s is empty or not set", envWhat, env)
		}
		return t, nil
	case file != "":
		b, err := os.ReadFile(file)
		if err != nil {
			var pe *os.PathError
			if errors.As(err, &pe) {
				err = pe.Err // the error text never contains file content
			}
			return "", fmt.Errorf("config: %s %s: %w", fileWhat, file, err)
		}
		return strings.TrimSpace(string(b)), nil
	}
	return "", nil
}

// Shape names a vessel geometry.
type Shape string

// The shapes and the dimensions each needs (all measured inside).
const (
	VerticalCylinder   Shape = "vertical_cylinder"    // diameter, height
	Rectangular        Shape = "rectangular"          // length, width, height
	HorizontalCylinder Shape = "horizontal_cylinder"  // diameter, length (height = diameter)
	Sphere             Shape = "sphere"               // diameter (height = diameter)
	ConeBottomCylinder Shape = "cone_bottom_cylinder" // diameter, height (total), cone_height
	StrappingTable     Shape = "strapping_table"      // points or file (height = last level)
)

// Geometry is a vessel's shape and internal dimensions, m. Dimensions the
// shape does not use are 0.
type Geometry struct {
	Shape       Shape
	DiameterM   float64
	LengthM     float64
	WidthM      float64
	HeightM     float64 // internal height; derived for horizontal_cylinder, sphere and strapping_table
	ConeHeightM float64
	Strapping   []StrappingPoint // strapping_table only, levels strictly increasing
}

// StrappingPoint is one row of a strapping table: the volume below a level.
type StrappingPoint struct {
	LevelM   float64
	VolumeM3 float64
}

// Outlet describes the drain outlet.
type Outlet struct {
	DiameterM  float64 // bore, m; 0 when unknown
	ElevationM float64 // above the vessel bottom, m; 0 when unknown
	// ElevationKnown is false when the file says "unknown": the datum is then
	// estimated per drain.
	ElevationKnown bool
	DesignCd       float64 // design discharge coefficient; 0 when not given
	// Kind is what the outlet is, for judging a commissioning test:
	// "orifice" (sharp-edged), "short_tube", "valve", or "" (not said).
	Kind string
	// KvM3h is a valve's flow coefficient from its data sheet (m^3/h of
	// water at 1 bar across it); 0 when not given.
	KvM3h float64
	// DischargesInto is the id of the configured tank, or of a Level (a
	// basin whose level is measured), that this outlet discharges into; ""
	// for a free discharge. Its level, with the two BaseElevationM, gives
	// the level on the far side of the outlet (model.Series.SubmergedM).
	DischargesInto string
}

// SensorKind is "depth" or "pressure".
type SensorKind string

const (
	Depth    SensorKind = "depth"
	Pressure SensorKind = "pressure"
)

// Sensor describes the level instrument. Readings convert to level as
// documented in package ingest (Sensor).
type Sensor struct {
	Kind SensorKind
	// Unit as written: m, cm, mm, ft, in, percent; Pa, hPa, kPa, MPa, mbar,
	// bar, psi, mH2O, cmH2O, mmH2O; with a Calibration, the name of the raw
	// reading (mA, V, counts, ...).
	Unit string
	// UnitToSI is metres (depth) or pascals (pressure) per reading unit; 0
	// for percent, where SpanM applies, and with a Calibration.
	UnitToSI    float64
	SpanM       float64      // percent only: the level at 100 %, m
	ZeroOffset  float64      // reading at zero level, in the sensor's unit; default 0; 0 with a Calibration
	DensityKgM3 float64      // default 998.2067 (water at 20 °C); used by pressure sensors
	Calibration *Calibration // raw transmitter signals only; nil otherwise
	// Damping is the first-order time constant of the reading (the
	// transmitter's damping setting plus any stilling well); 0: none. The
	// fit then models the lagged reading (model.Tank.SensorLagS).
	Damping time.Duration
	Inflow  *InflowMeter
}

// Calibration converts a raw transmitter reading (in Sensor.Unit: mA, V,
// counts, ...) to the level above the vessel bottom (depth sensors, m) or
// the gauge pressure (pressure sensors, Pa). It is the line GainSI·reading +
// OffsetSI when Points is empty, else the points: two give the straight line
// through them, more a table interpolated monotonically (see ingest
// Calibration; readings beyond the table are extrapolated along its end
// segments).
type Calibration struct {
	GainSI   float64            // m or Pa per reading unit, not 0; 0 with Points
	OffsetSI float64            // m or Pa at reading 0; default 0
	Points   []CalibrationPoint // in the order written: at least 2, readings and values each strictly monotone
	File     string             // the table file the points came from (resolved), or ""
}

// CalibrationPoint is one row of a calibration: a raw reading and the level
// (m) or pressure (Pa) it stands for.
type CalibrationPoint struct {
	Reading float64
	ValueSI float64
}

// Table returns the points as two slices, readings and values.
func (c *Calibration) Table() (readings, valuesSI []float64) {
	readings = make([]float64, len(c.Points))
	valuesSI = make([]float64, len(c.Points))
	for i, p := range c.Points {
		readings[i], valuesSI[i] = p.Reading, p.ValueSI
	}
	return readings, valuesSI
}

// InflowMeter is an optional meter of the flow into the tank.
type InflowMeter struct {
	Unit  string  // as written: m3/s, m3/min, m3/h, L/s, L/min, L/h
	ToSI  float64 // m^3/s per reading unit
	Field string  // line protocol / InfluxDB field; default "inflow"
}

// Source says where a tank's level history comes from.
type Source struct {
	Format      string   // "csv", "line_protocol" or "influx"
	Paths       []string // file globs (csv, line_protocol), resolved against the config's directory
	Measurement string   // line protocol measurement; default "tank_level" ("" in the file means the default)
	Field       string   // line protocol field; default "level"
	TankTag     string   // line protocol tag; default "tank"
	Precision   string   // numeric time unit: auto (default), s, ms, us, ns
}

// Detection tunes drain cutting and change detection for one tank.
type Detection struct {
	BaselineDrains      int           // default 8: good drains that start the baseline (the detector's default)
	DesignKM25s         float64       // design outlet constant, m^2.5/s; 0 when not given
	FeedSilentLimit     time.Duration // default 4 h: a feed without samples this long gets one feed notice (and one when it returns)
	FalseAlarmInterval  time.Duration // default 10 y: mean time between false outlet findings per tank, all charts together
	CusumK              float64       // default 0.5: CUSUM reference value, in standard deviations
	EWMALambda          float64       // default 0.1: EWMA weight of the newest drain (the detector's default)
	MaintenanceFraction float64       // default 0.8: K below this fraction of baseline is due for maintenance
	MinDropM            float64       // default 0.05 m: smallest level fall that counts as a drain
	MinDrainDuration    time.Duration // default 2 min: shortest drain that is fitted
	Transient           time.Duration // default 30 s: trimmed after the outlet opens
	Settle              time.Duration // default 5 min: quiet time after a drain before it is decided (a longer pause splits a drain)
	GapLimit            time.Duration // default 5 min: longer gaps between samples split or flag a segment
}

// Tank is one monitored tank, with the defaults block applied.
type Tank struct {
	ID          string
	Site        string
	Description string
	// BaseElevationM is the elevation of the vessel bottom above a datum
	// common to the plant (m, default 0); it matters only between tanks
	// linked by Outlet.DischargesInto.
	BaseElevationM float64
	Geometry       Geometry
	Outlet         Outlet
	Sensor         Sensor
	Source         Source
	Detection      Detection
}

// Outputs says where results go.
type Outputs struct {
	Directory string // default "out", relative to the config file
	Report    ReportSettings
	Alert     AlertSettings
	StateFile string // bbolt file; default Directory/state.db
	// NewState says this is a first run: scan, backfill and serve may
	// create a missing state file (as with --new-state). Without it a
	// missing state file is an error, so that a state volume that did not
	// mount never passes for a plant with no history.
	NewState     bool
	ScanSchedule string // cron spec (5 fields or @descriptor); default "*/15 * * * *"
	Delivery     DeliverySettings
	HTTP         HTTPSettings
}

// HTTPSettings are serve's read-only HTTP endpoints (/healthz, /readyz,
// /metrics, the status page).
type HTTPSettings struct {
	Address string // default "127.0.0.1:9470"; "off" serves nothing
	// The bearer token guarding all but /healthz: from the environment
	// variable TokenEnv or the file TokenFile, never the config. Neither:
	// no token (keep the address on loopback then).
	TokenEnv, TokenFile string
}

// Token returns the bearer token ("" when none is configured).
func (h *HTTPSettings) Token() (string, error) {
	return readSecret(h.TokenEnv, "outputs.http.token_env", h.TokenFile, "outputs.http.token_file", false)
}

// DeliverySettings govern the outbox in the state file: notifications and
// InfluxDB write-back that failed wait RetryMin after the first failure,
// doubling to RetryMax (wall-clock time), and are dropped with a log line
// after ExpireAfter.
type DeliverySettings struct {
	RetryMin    time.Duration // default 1 min; 0 retries at the next pass
	RetryMax    time.Duration // default 1 h
	ExpireAfter time.Duration // default 30 days
}

// ReportSettings schedule the weekly report.
type ReportSettings struct {
	Schedule string         // cron spec; default "0 6 * * 1" (Monday 06:00)
	TimeZone string         // IANA name; default "UTC"
	Location *time.Location // TimeZone loaded
}

// AlertSettings choose the notifiers.
type AlertSettings struct {
	Log           bool     // default true: alerts go to the log
	WebhookURL    string   // optional; a secret in many services: never log it
	WebhookURLEnv string   // optional: environment variable holding the webhook URL
	Command       []string // optional argv run per alert (no shell)
	// The webhook's signing secret (HMAC-SHA256, see alert.Sign): from the
	// environment variable SecretEnv or the file SecretFile, never the
	// config. Neither set: requests are not signed.
	SecretEnv, SecretFile string
	// Mail, when set, sends each site's transitions of a round as one
	// message over SMTP.
	Mail *MailSettings
}

// MailSettings are the SMTP alert settings (outputs.alert.mail). The
// password comes from PasswordEnv or PasswordFile, never the config.
type MailSettings struct {
	Host     string
	Port     int    // default 587
	TLS      string // starttls (default), opportunistic, implicit or none
	CAFile   string // optional PEM file of the CAs that sign the server's certificate
	Username string // optional: no authentication without it
	From     string
	To       []string // recipients of every site without its own mail_to
	// PasswordEnv, PasswordFile: where the password is (one of them with
	// a username).
	PasswordEnv, PasswordFile string
}

// Password returns the SMTP password ("" without a username). It is a
// secret: never log it.
func (m *MailSettings) Password() (string, error) {
	if m.Username == "" {
		return "", nil
	}
	return readSecret(m.PasswordEnv, "outputs.alert.mail.password_env", m.PasswordFile, "outputs.alert.mail.password_file", false)
}

// Secret returns the webhook signing secret ("" when none is configured).
// It is a secret: never log it.
func (a *AlertSettings) Secret() (string, error) {
	return readSecret(a.SecretEnv, "outputs.alert.webhook_secret_env", a.SecretFile, "outputs.alert.webhook_secret_file", false)
}

// Tank returns the tank with the given id, or nil.
func (c *Config) Tank(id string) *Tank {
	for i := range c.Tanks {
		if c.Tanks[i].ID == id {
			return &c.Tanks[i]
		}
	}
	return nil
}

// Level returns the level with the given id, or nil.
func (c *Config) Level(id string) *Level {
	for i := range c.Levels {
		if c.Levels[i].ID == id {
			return &c.Levels[i]
		}
	}
	return nil
}

// Site returns the site with the given id, or nil.
func (c *Config) Site(id string) *Site {
	for i := range c.Sites {
		if c.Sites[i].ID == id {
			return &c.Sites[i]
		}
	}
	return nil
}
