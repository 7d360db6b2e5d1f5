"""The journal: the store of every session, the repair log, learning and statistics.

``REPORT_FORMATS`` lists the repair log's formats: ``json`` is the record
itself, each other name ``F`` is the template ``templates/report.F.j2``. A
new format is one template and one word here.
"""

REPORT_FORMATS = ("md", "html", "json")
