// Package config loads drainsight's YAML configuration file, converts every
// quantity to SI once, applies defaults and validates the whole file,
// reporting every problem at once with its line number.
//
// Quantities carry their unit in the text: "80 mm", "3.2 m", "12.5 kPa",
// "998.2 kg/m3", "5 min", "2 h", "5 y". A bare 0 needs no unit. The unit
// parsers are exported (ParseLength, ParsePressure, ParseDensity, ParseFlow,
// ParseVolume, ParseDuration, ParseOutletConstant); their factors come from
// NIST SP 811 (2008), Appendix B (see the constants FootM, InchM, PsiPa,
// BarPa, MetreWaterPa, LitreM3, USGallonM3, ImperialGallonM3, CubicFootM3,
// BarrelM3). Durations use ms, s, min, h, d, w and y (the Julian year,
// 365.25 d); "m" is refused as ambiguous.
//
// Relative paths (token_file, source paths, strapping and calibration
// files, outputs) are resolved against the directory of the configuration
// file.
//
// # Schema
//
// A commented example of every key is testdata/example.yaml. Defaults in
// parentheses; keys without a default are required unless marked optional.
//
//	version                      optional, 1
//	sites[]                      optional
//	  id                         letters, digits, _ - . ; unique
//	  description                optional
//	  influx                     optional; needed by tanks with source.format influx
//	    url                      http(s)://host:port; no credentials in it
//	    org                      ("")
//	    bucket                   "db/rp" or "db" on InfluxDB 1.8
//	    token_env | token_file   optional, at most one; a literal "token" key is an error
//	    measurement              (tank_level)
//	    field                    (level)
//	    tank_tag                 (tank)
//	    site_tag                 (none) read only points whose tag of this name equals the site id
//	    query_window             (24 h) span of one query
//	    timeout                  (30 s) per query or write
//	    fits_measurement         (outlet_fit) write-back of fits
//	    findings_measurement     (outlet_finding) write-back of findings
//	    transitions_measurement  (outlet_finding_transition) write-back of every finding transition
//	    settle_delay             (5 min) data younger than this waits for the next scan
//	    overlap                  (1 h) extra re-read before a tank's checkpoint; at least 12 h is always re-read
//	defaults                     optional; any tank key except id, merged into every tank:
//	                             mappings merge key by key, lists and values are replaced
//	tanks[]                      at least one
//	  id                         as for sites; unique
//	  site                       (the only site, when there is exactly one)
//	  description                optional
//	  base_elevation             (0 m) the vessel bottom above a datum common to the plant;
//	                             used between tanks linked by outlet.discharges_into
//	  geometry
//	    shape                    vertical_cylinder: diameter, height
//	                             rectangular: length, width, height
//	                             horizontal_cylinder: diameter, length
//	                             sphere: diameter
//	                             cone_bottom_cylinder: diameter, height (total), cone_height < height
//	                             strapping_table: points [[level, volume], ...] or file
//	                               (CSV, header level_<unit>,volume_<unit>, e.g. level_m,volume_m3);
//	                               at least 2 points, levels strictly increasing, volumes not falling;
//	                               volume units m3 L cm3 mL "US gal" "imp gal" ft3 bbl (42 US gal),
//	                               in a header US_gal, imp_gal; a bare "gal" is refused as ambiguous
//	  outlet
//	    diameter                 optional (unknown): the bore
//	    elevation                above the vessel bottom, below the vessel height, or "unknown"
//	                             (ElevationKnown false: the datum is estimated per drain)
//	    design_cd                optional, in (0, 1]
//	    discharges_into          optional: id of the tank or level (same site, read the same
//	                             way) the outlet discharges into; its level above this outlet
//	                             makes the outlet submerged (model.Series.SubmergedM)
//	  sensor
//	    kind                     depth | pressure
//	    unit                     depth: m cm mm km ft in, or percent (with span);
//	                             pressure: Pa hPa kPa MPa mbar bar psi mH2O cmH2O mmH2O;
//	                             with a calibration: the raw reading's name (mA, V, counts, ...)
//	    span                     percent only: the level at 100 %
//	    zero_offset              (0) the reading at zero level, in the sensor's unit; not with a calibration
//	    calibration              optional (none): a raw transmitter signal; exactly one of
//	      gain                     level (depth) or pressure (pressure) per reading unit, not 0,
//	                               e.g. "0.2 m/mA" or "0.2 m" ("/unit" must be the sensor's unit)
//	      offset                   (0) with gain: the level or pressure at reading 0
//	      points                   [[reading, level or pressure], ...], e.g. [[4 mA, 0 m], [20 mA, 3.2 m]];
//	                               2 points: the straight line through them; 3 or more: a table
//	      file                     a table as CSV, header reading or reading_<unit> (the sensor's),
//	                               then level_<length unit> (depth) or pressure_<pressure unit>
//	                             A table needs at least 2 points, readings and values each strictly
//	                             increasing or strictly decreasing; it is interpolated by a monotone
//	                             cubic and extrapolated along its end segments (see ingest.Calibration).
//	    density                  (998.2067 kg/m3, water at 20 °C, Tanaka et al. 2001, Metrologia 38:301)
//	    damping                  (0) the reading's first-order time constant (transmitter damping
//	                             setting plus any stilling well), e.g. "20 s"; the fit models the lag
//	    inflow                   optional meter: unit (m3/s m3/min m3/h L/s L/min L/h), field (inflow)
//	  source
//	    format                   csv | line_protocol | influx
//	    paths[]                  csv and line_protocol: files or globs
//	    measurement              (tank_level) line protocol
//	    field                    (level) line protocol
//	    tank_tag                 (tank) line protocol
//	    precision                (auto) numeric times: auto, s, ms, us, ns
//	  detection                  optional
//	    baseline_drains          (8) at least 3
//	    design_k                 optional, m^2.5/s (unit optional)
//	    false_alarm_interval     (10 y) mean time between false outlet findings per tank (all charts together)
//	    cusum_k                  (0.5) reference value, standard deviations
//	    ewma_lambda              (0.1) in (0, 1]
//	    maintenance_fraction     (0.8) in (0, 1)
//	    min_drop                 (5 cm)
//	    min_drain_duration       (2 min)
//	    transient                (30 s)
//	    settle                   (5 min)
//	    gap_limit                (5 min)
//	    feed_silent_limit        (4 h) a feed without samples this long gets one feed notice, and one when it returns
//	levels[]                     optional: measured levels that are not monitored tanks (a
//	                             basin an outlet discharges into), read only for that head
//	  id                         unique among tanks and levels
//	  site, description          as for tanks
//	  base_elevation             (0 m) the basin's bottom (its zero level) above the plant datum
//	  height                     the basin's depth; readings beyond it by the tanks' margin are refused
//	  sensor, source             as for tanks (no inflow meter)
//	outputs                      optional
//	  directory                  (out)
//	  new_state                  (false) a first run: scan, backfill and serve may create a
//	                             missing state file (as with --new-state); otherwise it is an error
//	  state_file                 (<directory>/state.db) bbolt
//	  scan_schedule              ("*/15 * * * *") cron: 5 fields or a descriptor
//	  report
//	    schedule                 ("0 6 * * 1") cron; a CRON_TZ=Zone prefix is allowed
//	    time_zone                (UTC) IANA name
//	  alert
//	    log                      (true)
//	    webhook_url | webhook_url_env   optional, at most one
//	    command[]                optional argv, run without a shell
//	    mail                     optional: each site's transitions of a round in one message
//	      host, from             required
//	      port                   (587)
//	      tls                    (starttls) starttls | opportunistic | implicit | none
//	      ca_file                optional PEM of the CAs that sign the server's certificate
//	      username               optional; then password_env or password_file (never the password)
//	      to[]                   recipients of every site without its own sites[].mail_to
//
// Unknown and repeated keys are errors. YAML anchors, aliases and merge keys
// (<<) work. Schedules are checked with robfig/cron's standard parser (a
// CRON_TZ= prefix with nothing after it, which makes that parser panic, is
// refused first).
//
// # Errors
//
// Parse and Load return a *ValidationError listing every problem as
//
//	file:line: path: message
//
// e.g. "plant.yaml:14: tanks[2].outlet.diameter: unknown length unit ...".
// A problem inside the defaults block is reported once, under "defaults".
// Messages never repeat a token or webhook URL.
//
// The package imports none of drainsight's other packages; cmd/drainsight
// copies the values onto each part's options.
package config
