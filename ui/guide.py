"""The short user guide behind Help -> User guide: bundled with the app (a Python string, so the desktop
bundle and a pip install carry it without data files), shown offline in a text browser."""
from __future__ import annotations

from PySide6.QtWidgets import QDialog, QDialogButtonBox, QTextBrowser, QVBoxLayout

GUIDE_HTML = """
<h2>aspectus: a pilot study from start to finish</h2>
<p>aspectus measures eye movements (fixations, saccades, blinks) in recorded webcam clips of students, on this
computer, without any internet connection. Everything below is done from the menus and buttons; no terminal
is needed.</p>

<h3>1. Before you record</h3>
<ul>
<li>Record only with informed consent of parents or guardians, the students' assent and your ethics board's
approval. Keep the videos only as long as your protocol allows.</li>
<li>The numbers are research estimates with known error: never use them to judge, grade or monitor a single
student.</li>
<li>Record at 30 frames per second or more, face well lit, the whole face in the picture.</li>
<li>To measure each student's gaze quality without a lab tracker, press <b>Target sequence&hellip;</b> (beside
<b>Process clips</b>), give the classroom screen's size and the viewing distance, and show the page it writes
(<i>targets.html</i>, full screen, space bar) at the start of each recording. Then select the clip and press
<b>Check against target sequence&hellip;</b> under the video (or right-click the clip) and pick the
<i>schedule.json</i> the page was made with: the check measures accuracy, precision and data loss on the
sequence (processing the clip first if needed; <b>Cancel</b> beside its progress bar stops it and writes
nothing), and the clip view shows these figures.</li>
</ul>

<h3>2. Make a study</h3>
<ol>
<li><b>Study &rarr; New study&hellip;</b> and choose where the study file goes. Results are written to a
<i>results</i> folder beside it.</li>
<li>Add your clips with <b>Add clips&hellip;</b> or <b>Add folder&hellip;</b>, or drop video files on the
window. The study saves itself as you work.</li>
<li>Optional, per clip (right-click a clip): a <b>task segments</b> file (a table with the columns
<i>label, onset_s, offset_s</i>) to get features per task, and a <b>reference recording</b> of a lab eye
tracker for validation.</li>
</ol>

<h3>3. Process</h3>
<p>Press <b>Process clips</b>. Each clip gets a progress bar; the bar at the bottom shows the whole study and
the time remaining. <b>Cancel</b> stops; finished clips keep their results. A clip that cannot be read shows
why when you select it; the others go on.</p>

<h3>4. Look at a clip</h3>
<p>The <b>Clip and gaze trace</b> tab shows the video with the tracked face (blurred unless you tick
<i>Show faces unblurred</i>), a verdict on the clip's quality, and the gaze over time: coloured bands are
fixations; blinks and lost data are marked. Click the trace to jump the video there. The clip list's
<i>Face</i> column is the share of frames in which the face was found; <i>Usable</i> is the verdict in one word:
<i>yes</i> (fixation and saccade measures can be used), <i>partly</i> (the gaze is too unsteady for them; the
verdict names what can be used) or <i>no</i>.</p>
<p>Under the video, <i>Noise, sample to sample</i> and <i>SD within fixations</i> are the clip's gaze precision,
in degrees of visual angle (lower is steadier): how far the gaze estimate moves from one frame to the next while
the eyes rest on one spot (RMS-S2S), and how widely the samples of one fixation scatter about its centre (SD).
The verdict reads both, with the size of the irises in the picture, and says in words which features of the clip
can be trusted and, where fixation counts and durations cannot, which figure is too high or too small.
{precision_limits} Both figures are read because a smoothed gaze signal moves little from frame to frame while
it still wanders. Hover over a figure for its definition.</p>

<h3>5. Parameters</h3>
<p>The <b>Parameters</b> panel on the right starts with the defaults, which suit webcam clips. Hover over a
name to read what it does, its unit and its default. A value you changed is marked with a dot
(&#9679;) and in bold; <b>Restore defaults</b> sets them all back. Changing a detection parameter re-runs
detection at once from the saved gaze data. The <i>Gaze measurement</i> choices and the processing settings
further down apply only when clips are processed again (the face is tracked again); after such a change the
panel offers to process the affected clips. For clips recorded mirrored left to right, as many webcam programs
show the picture, choose <i>mirrored left to right</i> under <i>The clips show the student</i> (Gaze
measurement) before processing.</p>

<h3>6. Features and export</h3>
<p>The <b>Features</b> tab lists the features per clip, per fixed window and per task segment (fixation count
and durations, saccades, blinks, data quality), with a histogram of fixation durations. Clips whose gaze
precision is too low for fixation counts and durations are named above the table; <i>quality summary</i> lists
each clip's precision tier and verdict. <b>Export</b> saves the table as CSV (for spreadsheets) or Parquet.</p>

<h3>7. Validate against a lab eye tracker</h3>
<p>Before trusting webcam measures, record a few sessions with the webcam and a lab eye tracker at once.
Give each clip its reference recording (BIDS files are read directly; for a plain table a dialog asks which
column is time and which are gaze). In the <b>Validation</b> tab, <b>Compare</b> aligns the two clocks,
runs the same detection on both and shows how well they agree; <b>Compare all clips</b> does every clip and
pools them. The report (an HTML file, opens in any browser) explains each figure. With fewer than about ten
windows no agreement statistics are given: use shorter windows or add clips.</p>

<h3>Where things are</h3>
<ul>
<li>Results per clip: <i>results/&lt;clip name&gt;/</i> - <i>features.csv</i>, <i>events.csv</i>,
<i>samples.csv</i> and <i>run.json</i> (every parameter used). <b>Study &rarr; Open results folder</b>
opens it.</li>
<li>Validation of all clips: <i>results/validation/</i> with <i>report.html</i>.</li>
</ul>
"""


def guide_html() -> str:
    """:data:`GUIDE_HTML` with the precision tiers' limits filled in from the library (one rule in one place)."""
    from aspectus.webcam.pipeline import precision_limits_text

    return GUIDE_HTML.replace("{precision_limits}", precision_limits_text())


class GuideDialog(QDialog):
    """A non-modal window with the user guide."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setWindowTitle("aspectus user guide")
        self.browser = QTextBrowser()
        self.browser.setOpenExternalLinks(False)
        self.browser.setHtml(guide_html())
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.close)
        lay = QVBoxLayout(self)
        lay.addWidget(self.browser, 1)
        lay.addWidget(buttons)
        self.resize(720, 620)
