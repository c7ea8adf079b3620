using Bitbudget.Search.Planning;

namespace Bitbudget.Service.Commands;

/// <summary>
/// Progress of <c>plan</c> on standard error. On a terminal one bar is redrawn in place with <c>\r</c> (each
/// stage's bar ends its own line, padded over what the longer bar before it left); otherwise (a log, a pipe) one
/// plain line when a stage starts and one when it ends, so a log holds no carriage returns. Quiet prints nothing.
/// </summary>
internal sealed class PlanProgress(TextWriter error, PlanProgress.Mode mode) : IProgress<SearchProgress>
{
    private const int Width = 30;
    private SearchStage? stage;
    private bool stageEnded;
    private int drawnLength;
    private SearchProgress? last;

    public enum Mode
    {
        Terminal,
        Lines,
        Quiet,
    }

    public void Report(SearchProgress value)
    {
        if (mode == Mode.Quiet)
        {
            return;
        }

        if (stage != value.Stage)
        {
            Finish();
            stage = value.Stage;
            stageEnded = false;
            if (mode == Mode.Lines)
            {
                error.WriteLine($"{WireNames.Format(value.Stage)}: started ({value.Total} steps)");
            }
        }

        last = value;
        if (mode == Mode.Terminal)
        {
            var filled = value.Total == 0 ? Width : Math.Clamp(value.Done * Width / value.Total, 0, Width);
            var bar = $"{WireNames.Format(value.Stage),-9} [{new string('#', filled)}{new string('.', Width - filled)}] {value.Done}/{value.Total}";

            // Padded over the longer bar drawn before, so no digit of it stays behind.
            error.Write("\r" + bar.PadRight(drawnLength));
            drawnLength = Math.Max(drawnLength, bar.Length);
        }
        else if (value.Done >= value.Total)
        {
            Finish();
        }
    }

    /// <summary>
    /// Ends the current stage's output: the bar's line on a terminal, the "done" line otherwise (a stage may end
    /// before its last step, e.g. validation that meets the budget early, so its line says how far it got).
    /// </summary>
    public void Finish()
    {
        if (mode == Mode.Terminal && drawnLength > 0)
        {
            error.WriteLine();
            drawnLength = 0;
        }
        else if (mode == Mode.Lines && last is { } reached && !stageEnded)
        {
            error.WriteLine($"{WireNames.Format(reached.Stage)}: done ({reached.Done}/{reached.Total})");
        }

        stageEnded = true;
    }
}
