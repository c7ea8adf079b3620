namespace Bitbudget.Search.Quantization;

/// <summary>
/// Finds the grid step (equivalently the clip) that minimises the squared quantization error of a set of
/// values on a given <see cref="LevelGrid"/>: a coarse sweep of candidate steps, then golden-section
/// refinement between the neighbours of the best candidate.
/// </summary>
internal static class MseClipSearch
{
    private const int CoarseCandidates = 64;
    private const int RefineIterations = 40;
    private static readonly double InverseGolden = (Math.Sqrt(5) - 1) / 2;

    /// <summary>
    /// The best step in (0, <paramref name="widestStep"/>], where the widest step is the one that just covers
    /// every value (min-max clip).
    /// </summary>
    public static float FindStep(ReadOnlySpan<float> values, LevelGrid grid, float widestStep)
    {
        if (values.IsEmpty || !(widestStep > 0f))
        {
            return widestStep;
        }

        // Candidates at (i / n)^2 of the widest step: dense near small clips, where a single outlier can put
        // the optimum far below min-max, and still fine enough near 1 to bracket a smooth minimum.
        int bestIndex = CoarseCandidates;
        float bestStep = widestStep;
        double bestError = grid.SquaredError(values, widestStep);
        for (int i = 1; i < CoarseCandidates; i++)
        {
            float step = Fraction(i) * widestStep;
            double error = grid.SquaredError(values, step);
            if (error < bestError)
            {
                (bestIndex, bestStep, bestError) = (i, step, error);
            }
        }

        double a = Fraction(bestIndex - 1) * widestStep;
        double b = Fraction(Math.Min(bestIndex + 1, CoarseCandidates)) * widestStep;
        double c = b - (InverseGolden * (b - a));
        double d = a + (InverseGolden * (b - a));
        double fc = Evaluate(values, grid, c, ref bestStep, ref bestError);
        double fd = Evaluate(values, grid, d, ref bestStep, ref bestError);
        for (int iteration = 0; iteration < RefineIterations; iteration++)
        {
            if (fc <= fd)
            {
                (b, d, fd) = (d, c, fc);
                c = b - (InverseGolden * (b - a));
                fc = Evaluate(values, grid, c, ref bestStep, ref bestError);
            }
            else
            {
                (a, c, fc) = (c, d, fd);
                d = a + (InverseGolden * (b - a));
                fd = Evaluate(values, grid, d, ref bestStep, ref bestError);
            }
        }

        return bestStep;
    }

    private static float Fraction(int index)
    {
        float f = (float)index / CoarseCandidates;
        return f * f;
    }

    private static double Evaluate(ReadOnlySpan<float> values, LevelGrid grid, double step, ref float bestStep, ref double bestError)
    {
        float s = (float)step;
        if (!(s > 0f))
        {
            return double.PositiveInfinity;
        }

        double error = grid.SquaredError(values, s);
        if (error < bestError)
        {
            (bestStep, bestError) = (s, error);
        }

        return error;
    }
}
