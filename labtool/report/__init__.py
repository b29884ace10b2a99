"""Reports: plots, the workbook and the self-contained HTML page of a campaign."""
