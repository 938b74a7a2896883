"""The screening caution: one text, shown by the command line, the demo and the HTML report."""

CAUTION = ("Caution: ratescape is a screening aid, not an appraisal or professional advice. Results rest on the "
           "assumptions shown; tax and depreciation rules vary by jurisdiction and year; decisions rest with "
           "qualified professionals under local rules.")
