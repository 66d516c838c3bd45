// Package detect watches each tank's outlet constant K against its own
// baseline and reports restrictions, excess outflow, tank leaks and sensor
// faults, each with the false-alarm rate it was designed for.
//
// The package is pure: no I/O, no clock (every evaluation takes now), no
// goroutines, deterministic. A State is plain data with JSON tags; the store
// persists it and a later run continues the statistics.
//
// # Statistics primitives
//
//   - CUSUM: two-sided tabular CUSUM on standardised data; CUSUMARL
//     (Nyström solution of Page's integral equation, 64 Gauss-Legendre nodes),
//     CUSUMARLMarkov (Brook & Evans 1972), CUSUMARLTwoSidedMarkov (joint
//     (C+, C-) chain, needed with a head start), SiegmundARL (Siegmund 1985)
//     and ThresholdForARL(k, arl0), which solves the two-sided h.
//   - EWMA with fixed limits; EWMAARL (Nyström), EWMAARLMarkov (Lucas &
//     Saccucci 1990) and EWMALimitForARL(λ, arl0).
//   - MannKendall (tie-corrected), MannKendallCorrected (Hamed & Rao 1998
//     effective sample size), TheilSen (Sen 1968 slope, Conover intercept,
//     Gilbert 1987 interval).
//   - MeanShift: likelihood-ratio change point with a profile-likelihood
//     onset interval (drop of χ²_1(0.95)/2 = 1.92).
//   - BenjaminiHochberg step-up adjusted p-values.
//
// # Per-tank detector (State, Options)
//
// Baseline. The first BaselineDrains (8) accepted drains (grade >= MinQuality,
// default B) after commissioning or maintenance give the median and scaled
// MAD of ln K (or ln DesignKM25s); drains beyond 3.5 MAD are set aside and the
// rest seed a running mean and variance. Every later drain that is not
// signalling and lies within |T| < 6 joins the reference (self-starting,
// Hawkins 1987). Each drain is scored
//
//	T = (ln K - mean) / sqrt(s^2 (1 + 1/n) + max(0, se^2/K^2 - mean se^2/K^2)),
//	z = Φ^{-1}(F_{t,n-1}(T)),  clipped to ±4,
//
// so z ~ N(0, 1) on a healthy tank although the reference is estimated; s^2
// (floored at MinScatter^2 = 0.005^2) holds the between-drain scatter
// tau^2 plus the fit error. A reference frozen after a few tens of drains
// would keep its estimation error for ever and, at the in-control ARLs used
// here, multiply the false-alarm rate several times; so by default it keeps
// learning (LearnDrains = 0).
//
// Commissioning. A baseline started by an accepted commissioning test
// (State.Commission) begins with the test's drains; when it is set, the
// later baseline drains are compared with the test's by a pooled
// two-sample t test (TestComparison, Student 1908), once per baseline, and
// p < 0.001 is reported as a restriction or excess outflow of subtype
// since_commissioning: an outlet that fouled or a valve left partly shut
// between the test and the baseline, which the baseline learned from those
// drains cannot show. On 2000 simulated healthy tanks 4.95 % fall below
// p = 0.05 and 2 below 0.001. With a one-drain test and the 8-drain
// baseline the test finds a change of about 6 between-drain scatters (t
// above 5.96 with 6 dof); more test drains find less.
//
// Maintenance that did not work. A cleaning or repair keeps the baseline it
// ends (State.Prior); the first BaselineDrains drains after it (from the
// fourth) are compared with it by Welch's t, one-sided, at 0.001/8 each
// (Bonferroni: 0.001 per maintenance record), and a K still low is a
// restriction of subtype not_restored, open until the next maintenance
// record, so a blocked K does not silently become the new baseline. On
// 1000 simulated healthy tanks cleaned for nothing, none was said not
// restored; a 35 % blockage cleaned without effect is found at the fourth
// drain. A replacement or commissioning drops the prior baseline.
//
// Charts and their false-alarm rate. The budget is one false outlet or leak
// finding per tank per Y = FalseAlarmYears (default 10, so 0.1 per
// tank-year), split in exact thirds: with D the drains per year, each chart
// gets in-control ARL Y D / (1/3) = 3 Y D observations:
//
//   - two-sided CUSUM on z, k = CUSUMK (0.5), h = ThresholdForARL(k, 3 Y D)
//     (about 8.8 for Y = 10, D = 730);
//   - two-sided EWMA on z, λ = EWMALambda (0.1), L = EWMALimitForARL(λ, 3 Y D);
//   - one-sided CUSUM (k = 0.5) on the idle leak scores LeakK/LeakKSE, ARL
//     3 Y × idle periods per year.
//
// The sum 1/(3Y) × 3 = 1/Y is a union bound: the CUSUM and the EWMA watch the
// same z and often signal together, so the measured rate is lower (the study
// measures 0.048 per tank-year against the 0.1 design at the default).
// D is the observed rate once two weeks and 8 drains are seen; before that
// it is the larger of 365 and the upper 97.5 % Poisson bound of the rate
// (capped at 48 a day), so the limits are never looser than the tank's true
// frequency calls for. ARL0 values are rounded to two significant digits
// before the limits are solved (at most 5 % off the stated rate). The sensor
// tests below have their own, separately stated, budget.
//
// Classification. A K fall (lower CUSUM or EWMA) is a restriction. Its shape
// is decided on ln K of every drain since the reference (baseline drains
// included): a step and a broken line (ramp from a kink), each with a free
// pre-change level and profiled over the change point, are compared by
// log-likelihood ΔLL = (RSS_step - RSS_ramp)/(2σ²) with σ² the reference
// variance (both have three parameters, so this is also half the BIC
// difference). ΔLL >= 2 is gradual; a fitted step smaller than 2 sd is
// gradual unless ΔLL <= -4 (such a small fall takes many drains to be caught,
// as the start of a ramp does; a real step of 2 sd or more is caught within
// a few drains); ΔLL <= -2 is abrupt; in between, gradual only when Mann-
// Kendall finds a trend (TrendAlpha) in the at least 8 drains after the
// fitted step. The rule is re-applied at every Evaluate and settles as
// drains arrive (the study's "right after settling" column reads it 20 drains
// after the first finding). Onset and its interval come from the chosen
// model's profile (drop of 1.92 log-likelihood units). A K rise is a tank_leak when
// the idle periods since the onset show a combined leak score above 3 (or the
// leak chart signals), else excess_outflow. A level falling while the
// outlet is shut is a leak or a falling sensor drift, and the first finding
// waits until the evidence tells which (leakOrDrift): after the first
// clearly falling idle period of the episode (since the leak CUSUM last
// rose from zero), a drift moves the empty-tank reading of complete drains
// at the idle fall rate and a leak leaves it unchanged; their log-likelihood
// ratio (empty readings' scatter from the last baseline ones, floored at
// 0.5 mm; the drift's start profiled over the episode's idle starts)
// decides at ±ln 100. Without complete drains the head decides, over at
// least 6 falling idle periods spanning 1.5× in head: a fall rate growing
// with the head (exponent above 0.25 and 5 SE) is a leak, one that does not
// (within 2 SE of 0, SE at most 0.05, more than 3 SE from 0.5) a drift.
// Until one of them decides, a leak-chart signal or a K rise with falling
// idle periods is withheld, for at most 7 days; then it is reported as a
// tank_leak saying it was not told from drift. A drift so told is
// sensor_fault/drift and withholds the outlet findings. A drain fit with K
// below 5 % of the reference is a fall through a leak with the outlet shut:
// it enters neither the outlet charts nor the sensor records and feeds the
// leak chart as an idle period. Magnitude is in percent of the baseline K.
//
// Forecast. For a restriction the Theil-Sen line of ln K against days after
// the onset is projected to MaintenanceFraction (0.8) × baseline K; DateLo and
// DateHi come from the ends of the slope's 95 % interval. Drain times scale
// the baseline's median (span × K) by 1/K.
//
// Sensor checks (per evaluation; while any is active, outlet and leak
// findings are withheld, so a sensor fault is never reported as a
// restriction).
//
// Sensor budget. The three sensor tests with a probability model (stuck,
// noise, spikes) share one false sensor finding per FalseAlarmYears per
// tank, split in thirds over the evaluations: with one evaluation per
// EvalInterval (default 15 min, 35 064 a year) each test runs at
//
//	α = EvalInterval / (3 × FalseAlarmYears × 1 year) = 9.5e-7
//
// per evaluation at the defaults (SensorAlpha overrides it). The union bound
// over evaluations gives at most 1/FalseAlarmYears = 0.1 false sensor
// findings per tank-year; a healthy tank's statistics change slowly, so
// consecutive evaluations are strongly dependent and the number of distinct
// false episodes is lower still. The drift rule has no probability model
// and is not in the budget. The checks:
//
//   - stuck: derived from the sensor's own noise and resolution. σ is the
//     median noise of the first 8 idle periods since the sensor epoch (drain
//     fit noise when idle periods are missing), q the smallest non-zero step
//     between consecutive readings (0 for a continuous reading). A healthy
//     reading repeats with chance at most p = 2Φ(q/(2σ)) - 1, so a run of k
//     identical readings has chance at most p^(k-1); the rule flags
//     k = max(30, 1 + ceil(ln α / ln p)) identical readings lasting at least
//     StuckMin (30 min). For a continuous reading (p = 0) it is 30 samples to
//     the last bit. A sensor whose noise is below its resolution (σ < q)
//     legitimately repeats and is never called stuck. Until a noise
//     estimate exists the fixed rule StuckAfter (12 h) applies. The finding
//     stands while the current run is flat; a run that met the rule and has
//     ended is reported, with its start as onset and its end in the evidence,
//     for 24 h after it ended (fits made during it are suspect), then clears.
//     Without raw series the rule is applied to the latest idle period's
//     flat run when its noise is zero.
//   - noise: median noise of the last 5 idle periods (or drain fits) at least
//     NoiseFactor (2) × the baseline median and an F test p < α (idle noise
//     is MAD-based, so 37 % of its samples count as degrees of freedom).
//     A rise in the drain fits alone, with the idle periods as quiet as at
//     baseline, is no noisier sensor: when the latest complete drain's
//     empty reading lies more than DriftM from the baseline ones it is
//     drift (every reading offset, so drains fitted to the outlet's datum
//     misfit); otherwise the drains no longer follow the square-root law
//     (a leak off the outlet, say) and no sensor finding is raised.
//   - spikes: the spike rate of the last 5 segments at least SpikeFactor (3)
//     × the baseline rate and a Poisson p < α, the baseline rate estimated
//     from the first 8 segments since the sensor epoch ((spikes + 0.5) /
//     samples). Spikes present since commissioning (or since the last
//     sensor-calibrated reset) are part of the baseline, so they are the
//     sensor's normal character and raise no finding; only a rise of the
//     rate against it does. The baseline rate is itself estimated, so the
//     real per-evaluation level is somewhat above α when the baseline holds
//     few spikes; the factor 3 keeps such a noisy baseline from signalling
//     on its own.
//   - drift: the median empty-tank reading of the last 5 complete drains
//     moved more than DriftM (0.01 m) from the baseline, with all five on the
//     same side; or the level rose (rate > 3 SE) in at least 4 of the last 5
//     idle periods; or the idle fall rate ignores head (above).
//
// A stretch without samples longer than GapLimit (15 min) ends a flat run as
// a changed reading does: no stuck run spans it.
//
// # Feed status
//
// Data availability is the data path's condition, not the tank's, so it is
// never a Finding. Feed reports a tank's level feed at a time: ok, gap (no
// sample for more than GapLimit, measured from now minus ReadLag) or silent
// (no sample for more than SilentLimit, default 4 h), with the last sample,
// how long it has been silent and the share of the last 24 h without
// samples. While the feed is in a gap or silent, Evaluate returns nil: the
// tank's findings are withheld, neither raised from too little data nor
// cleared, and a caller keeping a lifecycle must keep them as they were.
// FeedStatus.Notice is the one feed notice (kind feed, subtype silent) due
// while a feed is silent; it clears as soon as samples come back.
//
// # Fleet view
//
// RankFleet ranks tanks by the smallest of their chart tail p-values
// (p = 1 - exp(-n/ARL0(current value)), the chance that a healthy chart
// reaches the current value within the n drains monitored) and finding
// p-values, and marks the watch list by Benjamini-Hochberg at alpha (0.05).
// Every p-value lies in [0, 1]: chart values far beyond the limits have
// ARL0s beyond what the Nyström solve can resolve in double precision (about
// 1e12), and there CUSUMARL continues on Siegmund's exponential growth and
// EWMAARL on the stationary Gaussian tail (see each).
//
// # Detection study
//
// Study simulates histories of many tanks and reports detection rate, delay,
// classification and false findings; FormatStudyTable renders it.
// StudySensor does the same for sensor faults (drift 2-10 mm/day, stuck
// 2-12 h, noise ×2-×5) fed as drain fits, idle fits and raw samples, and
// reports detection, delay and the share never reported as an outlet fault
// (100 % in every cell at 200 tanks: drift found in a median 152, 80 and 58 h,
// stuck in 0.7 h, noise in 30-33 h); FormatSensorStudyTable renders it.
// StudyLeakDrift measures the kind of the first finding on tank leaks of
// 5-80 mm/h at top fill (opening above and below the outlet) and drifts of
// ±5-40 mm/day (FormatKindStudyTable; figures in DEVELOPERS.md). Run the
// full studies with go test ./detect -run
// 'StudySmall|StudySensor|StudyLeakDrift' -v -args -study.
package detect
