"""Every caution and disclaimer text chimeline prints or writes, in one place."""

#: The full caution: README, every report, every JSON output, every console summary and ``--help``.
CAUTION = ("Results assist a qualified tank engineer or authorized inspector; they do not replace them and are not "
           "a fitness-for-service determination. The governing edition of the standard, local regulations and the "
           "owner's procedures prevail. Verify inputs (units, material, shell height) before acting; when in doubt, "
           "do a rigorous analysis or repair.")

#: Which results rest on the scan's vertical reference (scanner levelling and registration).
VERTICAL_REFERENCE = ("elevations, tilt and base elevation rely on the scanners' levelling and the registration unless "
                      "the scan is tied to survey control; out-of-plane settlement does not depend on a small tilt "
                      "error")

#: Said wherever the packaged permissible settled-arc table is used.
ILLUSTRATIVE_TABLE = ("ILLUSTRATIVE demo table, not the standard's values: this verdict is a demonstration only")

#: Said wherever shell geometry (out-of-plumbness, roundness) is judged against a tolerance.
GEOMETRY_TOLERANCES = ("The shell geometry tolerances are the standard's construction tolerances, recalled from memory "
                       "(out-of-plumbness H/100, max 5 in, API 653 10.5.2, or H/200, API 650 7.5.2; radius by diameter "
                       "band, API 650 7.5.3, stated there at 1 ft above the bottom): verify them against the governing "
                       "edition. They are used for assessment at the engineer's discretion and never set the settlement "
                       "verdict. Out-of-plumbness rests on the scan's vertical reference (scanner levelling and "
                       "registration); roundness does not.")

#: Said in a settlement history when a scan's stations share no azimuth bins (their registration cannot be measured).
UNOBSERVED_REGISTRATION = ("the scanner stations of the {scans} share no azimuth bins, so the registration error "
                           "between them cannot be measured and is not in these uncertainties: the uniform change "
                           "and the per-azimuth differences may be off by the stations' registration error (typically "
                           "1-3 mm) more than their standard errors say; the out-of-plane change within one station's "
                           "arc is not affected")
