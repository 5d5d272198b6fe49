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
