"""What people read: report.html and summary.md, both rendered from a run folder's files,
their pictures, the track-record section, the history picture and the starter spec's text."""
