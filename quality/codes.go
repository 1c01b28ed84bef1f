package quality

import "github.com/flowcat-catalog/flowcat/schema"

// Dimension names, after ISO/IEC 25012 (completeness, accuracy,
// consistency, currentness); uniqueness is common practice.
const (
	DimCompleteness = "completeness"
	DimAccuracy     = "accuracy"
	DimConsistency  = "consistency"
	DimCurrentness  = "currentness"
	DimUniqueness   = "uniqueness"
)

// Finding codes. Findings derived from rejected rows use the
// [schema.Reason] as their code. SCORING.md gives each code's formula.
const (
	// completeness
	CodeEmptyValue      = "empty_value"        // an optional field is empty
	CodeStageNoArrival  = "stage_no_arrival"   // cases without an arrival
	CodeStageNoStart    = "stage_no_start"     // cases without a start
	CodeStageNoComplete = "stage_no_complete"  // cases without a complete
	CodeStageNoDepart   = "stage_no_departure" // cases without a departure
	CodeWaitNoEnqueue   = "wait_no_enqueue"    // a start with no arrival or enqueue before it
	CodeWaitNoStart     = "wait_no_start"      // an enqueue never followed by a start, abandon or transfer
	// accuracy
	CodeLaterThanUpload        = "later_than_upload"
	CodeOutsideWindow          = "outside_window"
	CodeFarInstant             = "far_instant"
	CodeClockBackwards         = "clock_backwards"
	CodeFileNotTimeOrdered     = "file_not_time_ordered"
	CodeStartBeforeArrival     = "start_before_arrival"
	CodeCompleteBeforeStart    = "complete_before_start"
	CodeDepartureBeforeArrival = "departure_before_arrival"
	CodeActivityAfterDeparture = "activity_after_departure"
	CodeCaseTooLong            = "case_too_long"
	CodeServiceTooLong         = "service_too_long"
	CodeSameInstantOrder       = "same_instant_order"
	CodeSameInstant            = "same_instant"
	CodeHeaping                = "heaping" // with Grid set
	// consistency
	CodeResourceOverlap           = "resource_overlap"
	CodeSiteChangeWithoutTransfer = "site_change_without_transfer"
	CodeCensusNegative            = "census_negative"
	CodeLittlesLawMismatch        = "littles_law_mismatch"
	// currentness
	CodeGapHour   = "gap_hour"
	CodeGapDay    = "gap_day"
	CodeStaleSite = "stale_site"
	// uniqueness
	CodeExactDuplicate        = "exact_duplicate"
	CodeDuplicateEventID      = "duplicate_event_id"
	CodeDuplicateCaseTypeTime = "duplicate_case_type_time"
	// CodeDuplicateAcrossFiles counts, in a version's report, the
	// duplicates of case, type, activity (instance) and instant whose
	// rows are in different files of the version (see WithCases).
	CodeDuplicateAcrossFiles = "duplicate_across_files"
	// internal
	CodeOrderBreach = "order_breach" // the ingest broke the time order
)

// dimensionWeights are the weights of the overall score, in report order;
// SCORING.md states the same numbers.
var dimensionWeights = [...]struct {
	name   string
	weight float64
}{
	{DimCompleteness, 0.25},
	{DimAccuracy, 0.30},
	{DimConsistency, 0.20},
	{DimCurrentness, 0.10},
	{DimUniqueness, 0.15},
}

// Why sentences, one per finding code.
var why = map[string]string{
	string(schema.ReasonMissingRequired):  "Rows without a site, case, event type or time cannot be placed on a case's timeline, so they are missing from the snapshot.",
	string(schema.ReasonUnknownCode):      "Rows whose code has no mapping are missing from the snapshot, so counts per event type are too low.",
	string(schema.ReasonBadTimestamp):     "Rows whose time cannot be read are missing from the snapshot, which lowers arrival counts and biases waits.",
	string(schema.ReasonNonexistentLocal): "A wall-clock time skipped by a daylight-saving change points to a clock or export fault, and such rows are missing from the snapshot.",
	string(schema.ReasonAmbiguousLocal):   "A wall-clock time repeated by a daylight-saving change cannot be placed on one instant, and such rows are missing from the snapshot.",
	string(schema.ReasonFieldCount):       "Rows with the wrong number of fields may be shifted or cut, so they are missing from the snapshot.",
	string(schema.ReasonMalformedRow):     "Rows that cannot be parsed are missing from the snapshot, so counts computed from it are too low.",
	string(schema.ReasonBadValue):         "Rows with a value of the wrong type are missing from the snapshot, so counts computed from it are too low.",
	CodeEmptyValue:                        "Rows without this value drop out of any analysis split or filtered by this field.",
	CodeStageNoArrival:                    "Cases without an arrival have no known start of stay, so length of stay and arrival rates miss them.",
	CodeStageNoStart:                      "Cases without a start have no measurable wait or service time.",
	CodeStageNoComplete:                   "Cases without a complete have no measurable service time.",
	CodeStageNoDepart:                     "Cases without a departure have no known end of stay, so they look as if still in the system.",
	CodeWaitNoEnqueue:                     "A service start with no arrival or enqueue before it has no measurable wait, so waits for this queue are biased toward the cases that have one.",
	CodeWaitNoStart:                       "An enqueue never followed by a start, abandonment or transfer has no known end of wait, so waits for this queue are censored.",
	CodeLaterThanUpload:                   "Events dated after the upload cannot have happened yet, so their clock or time zone is likely wrong.",
	CodeOutsideWindow:                     "Events outside the declared period distort per-period counts and may belong to another export.",
	CodeClockBackwards:                    "A site's time stepping back in a time-ordered export points to a clock reset or a merged second export, whose rows may be shifted.",
	CodeFileNotTimeOrdered:                "The file is not written in time order (grouped by case, say), so backward clock steps cannot be judged; this is not a fault by itself.",
	CodeStartBeforeArrival:                "A case served before it arrived gives a negative wait, which corrupts waiting-time statistics.",
	CodeCompleteBeforeStart:               "A service that ends before it begins gives a negative service time, which corrupts service-time statistics.",
	CodeDepartureBeforeArrival:            "A case that leaves before it arrives gives a negative length of stay.",
	CodeActivityAfterDeparture:            "Service events after a case left mean a lost re-arrival or a wrong time, and stretch lengths of stay.",
	CodeCaseTooLong:                       "A case longer than the plausible maximum usually joins two visits under one id or carries a wrong date, and inflates mean lengths of stay.",
	CodeServiceTooLong:                    "A service step longer than the plausible maximum usually means a lost complete or a wrong date, and inflates service times.",
	CodeSameInstantOrder:                  "Two events of one case that bound one interval share an instant, so the interval is zero and their order is left to chance.",
	CodeSameInstant:                       "Events of one case sharing an instant cannot be ordered by time alone; sequence analyses must break the tie some other way.",
	CodeHeaping:                           "Times heaped on round values are typed in or rounded, so short waits and services are measured coarsely and biased.",
	CodeResourceOverlap:                   "A resource serving more cases at once than it can points to lost completes or shared ids, and inflates utilization.",
	CodeSiteChangeWithoutTransfer:         "A case that moves between sites without a transfer event may be two cases sharing an id, which merges their timelines.",
	CodeCensusNegative:                    "More departures than entries so far means duplicated departures or lost arrivals, so occupancy counts are wrong.",
	CodeLittlesLawMismatch:                "The mean number in system disagrees with arrival rate times mean time in system, a sign of lost or duplicated arrivals or departures.",
	CodeFarInstant:                        "An event more than a year away from the rest of its site's events is most likely a mistyped date; it stretches spans and rates computed over time.",
	CodeGapHour:                           "An hour without events where the site's own history expects many points to a lost part of the export, which lowers rates for that period.",
	CodeGapDay:                            "A day without events where the site's own history expects many points to a missing export day.",
	CodeStaleSite:                         "The site's newest event is old, so recent analyses miss it.",
	CodeExactDuplicate:                    "Repeated copies of one event inflate arrival and service counts.",
	CodeDuplicateEventID:                  "Two different events sharing an event id means an id is reused or a row was re-exported with changes, so joins on event_id go wrong.",
	CodeDuplicateCaseTypeTime:             "Two events of one case with the same type, activity and instant are likely one event exported twice with a changed detail, which inflates counts.",
	CodeDuplicateAcrossFiles:              "The same event of a case (type, activity, instant) sent in two files of the version, likely re-exported with a changed detail: no check of one file alone can see it, and every count over the version includes it twice.",
	CodeOrderBreach:                       "The ingest fed events out of time order, so duplicate and per-case checks skipped them; this is a program fault, not a data fault.",
}

func whyOf(code string) string {
	if s, ok := why[code]; ok {
		return s
	}
	return "Rejected rows are missing from the snapshot, so counts computed from it are too low."
}
