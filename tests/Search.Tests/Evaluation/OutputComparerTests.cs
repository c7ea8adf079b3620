using Bitbudget.Search.Evaluation;
using static Bitbudget.Search.Tests.Evaluation.DatasetTestData;

namespace Bitbudget.Search.Tests.Evaluation;

public class OutputComparerTests
{
    private static OutputTensor Out(string name, long[] shape, params float[] data) => new(name, data, shape);

    [Fact]
    public void IdenticalOutputsScorePerfectly()
    {
        var logits = Out("y", [2, 3], 1, 5, -2, 0.5f, 0.25f, 3);

        var m = OutputComparer.Compare([logits], [logits with { Data = (float[])logits.Data.Clone() }], [1, 2]);

        Assert.Equal(0, m.RelativeMse);
        Assert.Equal(double.PositiveInfinity, m.SqnrDb);
        Assert.Equal(1, m.Top1Agreement);
        Assert.Equal(0, m.KlDivergence);
        Assert.Equal(1, m.CosineSimilarity, 1e-6);
        Assert.Equal(1, m.Accuracy);
    }

    [Fact]
    public void KnownNoiseGivesKnownSqnrSummedOverAllOutputs()
    {
        // Output a: values +-1 with noise +-0.1 (noise power 0.01 per value); output b: values +-3, no noise.
        // Noise over signal of both: 0.01 n / (1 n + 9 n) = 1e-3, so SQNR = 30 dB. Averaging per output would give 23 dB.
        int n = 64;
        var a = Enumerable.Range(0, n).Select(i => i % 2 == 0 ? 1f : -1f).ToArray();
        var aNoisy = a.Select((v, i) => v + (i % 3 == 0 ? 0.1f : -0.1f)).ToArray();
        var b = Enumerable.Range(0, n).Select(i => i % 5 == 0 ? 3f : -3f).ToArray();

        var m = OutputComparer.Compare([Out("a", [8, 8], a), Out("b", [n], b)], [Out("a", [8, 8], aNoisy), Out("b", [n], b)], null);

        Assert.Equal(1e-3, m.RelativeMse, 1e-9);
        Assert.Equal(30, m.SqnrDb, 1e-5);
        Assert.Null(m.Accuracy);
    }

    [Fact]
    public void SwappingTheArgmaxOfHalfTheRowsHalvesAgreement()
    {
        var reference = Out("y", [4, 3], 0, 1, 5, /**/ 9, 1, 2, /**/ 0, 4, 3, /**/ 1, 1, 2);
        var trial = Out("y", [4, 3], 0, 5, 1, /**/ 9, 1, 2, /**/ 0, 3, 4, /**/ 1, 1, 2);

        Assert.Equal(0.5, OutputComparer.Compare([reference], [trial], null).Top1Agreement);
    }

    [Fact]
    public void ProbabilityRowsAreUsedAsTheyAre()
    {
        // KL([.5, .5] || [.9, .1]) = .5 ln(.5/.9) + .5 ln(.5/.1) = .5 ln(25/9).
        double expected = 0.5 * Math.Log(25.0 / 9);

        var m = OutputComparer.Compare([Out("p", [1, 2], 0.5f, 0.5f)], [Out("p", [1, 2], 0.9f, 0.1f)], null);

        Assert.Equal(expected, m.KlDivergence, 1e-6);
    }

    [Fact]
    public void LogitRowsGoThroughSoftmax()
    {
        // softmax([0, 0]) = [.5, .5]; softmax([ln 9, 0]) = [.9, .1]: the same divergence as above.
        double expected = 0.5 * Math.Log(25.0 / 9);

        var m = OutputComparer.Compare([Out("y", [1, 2], 0, 0)], [Out("y", [1, 2], MathF.Log(9), 0)], null);

        Assert.Equal(expected, m.KlDivergence, 1e-6);
    }

    [Fact]
    public void HugeLogitsDoNotOverflowTheSoftmax()
    {
        // p = [1, e^-1000] ~ [1, 0]; q ~ [0, 1]: KL ~ 1000 nats (e^x of 1000 would overflow float).
        var m = OutputComparer.Compare([Out("y", [1, 2], 1000, 0)], [Out("y", [1, 2], 0, 1000)], null);

        Assert.Equal(1000, m.KlDivergence, 1e-3);
    }

    [Fact]
    public void AccuracyUsesTheFirstOutputsArgmaxAgainstLabels()
    {
        var reference = Out("y", [4, 3], 0, 1, 5, 9, 1, 2, 0, 4, 3, 1, 1, 2);
        var second = Out("z", [2], 1, 2);

        var m = OutputComparer.Compare([reference, second], [reference, second], [2, 0, 0, 2]);
        Assert.Equal(0.75, m.Accuracy);

        // A row count that is not the label count leaves accuracy out rather than guessing.
        Assert.Null(OutputComparer.Compare([reference], [reference], [2, 0, 1]).Accuracy);
    }

    [Fact]
    public void CosineOfZeroRowsIsOneWhenBothAreZeroAndZeroWhenOneIs()
    {
        var zeros = Out("y", [2, 2], 0, 0, 0, 0);
        var oneZero = Out("y", [2, 2], 0, 0, 1, 1);

        Assert.Equal(1, OutputComparer.Compare([zeros], [zeros], null).CosineSimilarity);
        Assert.Equal(0.5, OutputComparer.Compare([zeros], [oneZero], null).CosineSimilarity);
    }

    [Fact]
    public void NonFiniteTrialScoresWorst()
    {
        var reference = Out("y", [2, 2], 1, 2, 3, 4);
        var broken = Out("y", [2, 2], 1, float.NaN, 3, 4);

        var m = OutputComparer.Compare([reference], [broken], null);

        Assert.Equal(double.PositiveInfinity, m.RelativeMse);
        Assert.Equal(double.NegativeInfinity, m.SqnrDb);
        Assert.Equal(double.PositiveInfinity, m.KlDivergence);
        Assert.Equal((-1 + 1) / 2.0, m.CosineSimilarity, 1e-6);
    }

    [Fact]
    public void MismatchedOutputsAreAProgrammingError()
    {
        var a = Out("y", [2], 1, 2);

        Assert.Throws<ArgumentException>(() => OutputComparer.Compare([a], [a with { Name = "z" }], null));
        Assert.Throws<ArgumentException>(() => OutputComparer.Compare([a], [a with { Shape = [1, 2] }], null));
        Assert.Throws<ArgumentException>(() => OutputComparer.Compare([a], [a, a], null));
        Assert.Throws<ArgumentException>(() => OutputComparer.Compare([a], [a with { Data = [1f] }], null));
        Assert.Throws<ArgumentException>(() => OutputComparer.Compare([Out("e", [3, 0])], [Out("e", [3, 0])], null));
    }

    /// <summary>
    /// metrics_logits.npz and metrics_probabilities.npz: seeded float32 outputs (6, 4, 10) and the metrics
    /// NumPy computed from them in float64 (make_fixtures.py: log-softmax KL, or p log(p/q) for the
    /// probability case); expected = [relative MSE, SQNR dB, top-1 agreement, KL, cosine].
    /// </summary>
    [Theory]
    [InlineData("metrics_logits.npz")]
    [InlineData("metrics_probabilities.npz")]
    public void MetricsMatchNumpy(string file)
    {
        var arrays = DatasetReader.Read(File.ReadAllBytes(Fixture(file))).ToDictionary(a => a.Name);
        var reference = new OutputTensor("y", (float[])arrays["reference"].Data, arrays["reference"].Shape);
        var trial = new OutputTensor("y", (float[])arrays["trial"].Data, arrays["trial"].Shape);
        var expected = (double[])arrays["expected"].Data;

        var m = OutputComparer.Compare([reference], [trial], null);

        Assert.Equal(expected[0], m.RelativeMse, expected[0] * 1e-5);
        Assert.Equal(expected[1], m.SqnrDb, 1e-4);
        Assert.Equal(expected[2], m.Top1Agreement, 1e-12);
        Assert.Equal(expected[3], m.KlDivergence, expected[3] * 1e-4);
        Assert.Equal(expected[4], m.CosineSimilarity, 1e-6);
        Assert.InRange(expected[2], 0.05, 0.95); // the case really exercises disagreement
    }

    [Theory]
    [InlineData(1)]
    [InlineData(7)]
    [InlineData(8)]
    [InlineData(9)]
    [InlineData(15)]
    [InlineData(16)]
    [InlineData(17)]
    [InlineData(31)]
    [InlineData(32)]
    [InlineData(33)]
    [InlineData(1000)]
    [InlineData(4097)]
    public void EveryRowLengthMatchesAScalarDoubleReference(int rowLength)
    {
        var rng = new Random(1234 + rowLength);
        int rows = Math.Max(3, 5000 / rowLength);
        var r = new float[rows * rowLength];
        var t = new float[r.Length];
        for (int i = 0; i < r.Length; i++)
        {
            r[i] = (float)(rng.NextDouble() * 6 - 3);
            t[i] = r[i] + (float)(rng.NextDouble() - 0.5) * 0.2f;
        }
        var labels = Enumerable.Range(0, rows).Select(_ => (long)rng.Next(rowLength)).ToArray();

        var m = OutputComparer.Compare([new("y", r, [rows, rowLength])], [new("y", t, [rows, rowLength])], labels);

        var e = ScalarReference(r, t, rowLength, labels);
        Assert.Equal(e.RelativeMse, m.RelativeMse, e.RelativeMse * 1e-5);
        Assert.Equal(e.SqnrDb, m.SqnrDb, 1e-4);
        Assert.Equal(e.Top1Agreement, m.Top1Agreement, 1e-12);
        Assert.Equal(e.KlDivergence, m.KlDivergence, e.KlDivergence * 1e-3 + 1e-6);
        Assert.Equal(e.CosineSimilarity, m.CosineSimilarity, 1e-6);
        Assert.Equal(e.Accuracy!.Value, m.Accuracy!.Value, 1e-12);
    }

    /// <summary>Plain double loops, written from the metric definitions without TensorPrimitives.</summary>
    [Fact]
    public void EveryOutputGetsItsOwnMetricsBesideThePooledOnes()
    {
        // Output a: values +-1, noise +-0.1 (20 dB); output b: values +-3, no noise (infinite). Pooled: 30 dB (see above).
        int n = 64;
        var a = Enumerable.Range(0, n).Select(i => i % 2 == 0 ? 1f : -1f).ToArray();
        var b = Enumerable.Range(0, n).Select(i => i % 2 == 0 ? 3f : -3f).ToArray();
        var noisyA = a.Select((v, i) => v + (i % 3 == 0 ? 0.1f : -0.1f)).ToArray();

        var m = OutputComparer.Compare([Out("a", [n], a), Out("b", [n], b)], [Out("a", [n], noisyA), Out("b", [n], (float[])b.Clone())], null);

        Assert.Equal(30, m.SqnrDb, 4);
        Assert.Equal(["a", "b"], m.PerOutput.Select(o => o.Name));
        Assert.Equal(20, m.PerOutput[0].SqnrDb, 4);
        Assert.Equal(0.01, m.PerOutput[0].RelativeMse, 6);
        Assert.True(double.IsPositiveInfinity(m.PerOutput[1].SqnrDb));
    }

    [Theory]
    [InlineData("sigmoid")]
    [InlineData("softmax")]
    public void LogitSpaceSqnrMatchesNumPy(string kind)
    {
        // metrics_logit_space.npz: NumPy (make_fixtures.py) computes SQNR of log(p/(1-p)) for a sigmoid output and of
        // log p minus the row mean for a softmax output, in float64 with p clipped to [1e-6, 1 - 1e-6].
        var arrays = DatasetReader.Read(File.ReadAllBytes(Fixture("metrics_logit_space.npz"))).ToDictionary(x => x.Name);
        var reference = arrays[$"{kind}_reference"];
        var trial = arrays[$"{kind}_trial"];
        var expected = ((double[])arrays[$"{kind}_sqnr"].Data)[0];

        var logit = OutputComparer.Compare([Out("p", reference.Shape.ToArray(), (float[])reference.Data)], [Out("p", trial.Shape.ToArray(), (float[])trial.Data)], null, MetricSpace.Logit);
        var linear = OutputComparer.Compare([Out("p", reference.Shape.ToArray(), (float[])reference.Data)], [Out("p", trial.Shape.ToArray(), (float[])trial.Data)], null);

        Assert.Equal(expected, logit.SqnrDb, 1);
        Assert.NotEqual(Math.Round(linear.SqnrDb, 1), Math.Round(logit.SqnrDb, 1));
    }

    [Fact]
    public void LogitSpaceLeavesOutputsOutsideZeroToOneLinear()
    {
        var r = Out("y", [4], -2, 0.5f, 3, 1);
        var t = Out("y", [4], -2.1f, 0.5f, 3, 1.1f);

        Assert.Equal(OutputComparer.Compare([r], [t], null).SqnrDb, OutputComparer.Compare([r], [t], null, MetricSpace.Logit).SqnrDb);
    }

    [Fact]
    public void LogitSpaceIsStableWhereLinearSqnrIsDecidedByAFewLargeProbabilities()
    {
        // A near-zero sigmoid output (a rare event): the same small logit noise on every sample. Linear SQNR is decided by
        // the one sample whose probability is not tiny and moves with that sample's noise; logit SQNR does not.
        int n = 200;
        var z = Enumerable.Range(0, n).Select(i => i == 7 ? 1.0 : -9.0 - i % 5).ToArray();
        double Sqnr(MetricSpace space, int seed)
        {
            var random = new Random(seed);
            var noise = z.Select(_ => 0.05 * (random.NextDouble() * 2 - 1)).ToArray();
            noise[7] = seed * 0.02; // only the one large sample's noise differs between the runs
            var p = z.Select(v => (float)(1 / (1 + Math.Exp(-v)))).ToArray();
            var q = z.Select((v, i) => (float)(1 / (1 + Math.Exp(-(v + noise[i]))))).ToArray();
            return OutputComparer.Compare([Out("p", [n, 1], p)], [Out("p", [n, 1], q)], null, space).SqnrDb;
        }

        var linearSpread = Math.Abs(Sqnr(MetricSpace.Linear, 1) - Sqnr(MetricSpace.Linear, 3));
        var logitSpread = Math.Abs(Sqnr(MetricSpace.Logit, 1) - Sqnr(MetricSpace.Logit, 3));
        Assert.True(linearSpread > 5 * logitSpread, $"linear moved {linearSpread:0.00} dB, logit {logitSpread:0.00} dB");
    }

    [Fact]
    public void TopSampleShareCountsPowerPerSampleAlongTheSampleAxis()
    {
        // Shape [2, 6, 1] with samples on axis 1: sample 0 holds 10 in both halves, the others 1.
        var data = new float[12];
        Array.Fill(data, 1f);
        data[0] = 10;
        data[6] = 10;
        var output = new OutputTensor("s", data, [2, 6, 1], SampleAxis: 1);

        var one = OutputComparer.TopSampleShare(output, 1)!.Value;

        Assert.Equal(6, one.Samples);
        Assert.Equal(200.0 / 210, one.Share, 12);
        Assert.Null(OutputComparer.TopSampleShare(output with { SampleAxis = null }, 1));
    }

    private static MetricSet ScalarReference(float[] r, float[] t, int rowLength, long[] labels)
    {
        double noise = 0, signal = 0, kl = 0, cosine = 0;
        int rows = r.Length / rowLength, agree = 0, correct = 0;
        for (int row = 0; row < rows; row++)
        {
            int o = row * rowLength;
            int argR = 0, argT = 0;
            double maxR = double.NegativeInfinity, maxT = double.NegativeInfinity, dot = 0, nr = 0, nt = 0;
            for (int i = 0; i < rowLength; i++)
            {
                double a = r[o + i], b = t[o + i];
                noise += (a - b) * (a - b);
                signal += a * a;
                dot += a * b;
                nr += a * a;
                nt += b * b;
                if (a > maxR) { maxR = a; argR = i; }
                if (b > maxT) { maxT = b; argT = i; }
            }
            double sr = 0, st = 0;
            for (int i = 0; i < rowLength; i++) { sr += Math.Exp(r[o + i] - maxR); st += Math.Exp(t[o + i] - maxT); }
            for (int i = 0; i < rowLength; i++)
            {
                double logP = r[o + i] - maxR - Math.Log(sr), logQ = t[o + i] - maxT - Math.Log(st);
                kl += Math.Exp(logP) * (logP - logQ);
            }
            cosine += dot / Math.Sqrt(nr * nt);
            if (argR == argT) agree++;
            if (argT == labels[row]) correct++;
        }
        double rel = noise / signal;
        return new MetricSet(rel, -10 * Math.Log10(rel), agree / (double)rows, kl / rows, cosine / rows, correct / (double)rows);
    }
}
