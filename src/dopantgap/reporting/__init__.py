"""Parts of the HTML report (``dopantgap.report.build_report`` puts them together):
``page`` (HTML building blocks), ``findings`` (the summary at the top), ``explanations``
(what drives the predictions)."""
