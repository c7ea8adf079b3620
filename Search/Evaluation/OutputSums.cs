namespace Bitbudget.Search.Evaluation;

/// <summary>
/// What <see cref="OutputComparer"/> accumulates for one output (or several, added up): noise and signal
/// power, and the per-row KL, cosine and top-1 counts. Sums add across outputs, metrics do not.
/// </summary>
internal readonly record struct OutputSums(double Noise, double Signal, double KlSum, double CosineSum, long Rows, long Agreeing)
{
    public OutputSums Add(OutputSums other) => new(
        Noise + other.Noise,
        Signal + other.Signal,
        KlSum + other.KlSum,
        CosineSum + other.CosineSum,
        Rows + other.Rows,
        Agreeing + other.Agreeing);

    public OutputMetrics ToMetrics(string name)
    {
        double relativeMse = Noise == 0 ? 0 : double.IsNaN(Noise) ? double.PositiveInfinity : Noise / Signal;
        double sqnr = relativeMse == 0 ? double.PositiveInfinity : -10 * Math.Log10(relativeMse);
        double kl = Rows == 0 ? 0 : KlSum / Rows;
        return new OutputMetrics(
            name,
            relativeMse,
            sqnr,
            Rows == 0 ? 1 : Agreeing / (double)Rows,
            double.IsNaN(kl) ? double.PositiveInfinity : kl,
            Rows == 0 ? 1 : CosineSum / Rows);
    }
}
