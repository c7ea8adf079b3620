using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Tests.Demo;

public sealed class HiveNetTrainerTests
{
    public static TheoryData<string> ParameterNames =>
        ["conv1.weight", "bn1.scale", "bn1.bias", "conv2.weight", "bn2.scale", "bn2.bias", "fc1.weight", "fc1.bias", "fc2.weight", "fc2.bias"];

    [Theory]
    [MemberData(nameof(ParameterNames))]
    public void BackwardPassMatchesCentralFiniteDifferences(string name)
    {
        // Central differences, (L(w + h) - L(w - h)) / 2h, the textbook check of a hand-written
        // backward pass; checked on the coordinates with the largest analytic gradients, where the
        // float rounding of the loss is small beside the change it measures.
        const int batch = 6;
        HiveSoundSet data = new HiveSoundSynthesizer(77).Generate(batch);
        HiveNet net = HiveNet.CreateInitialised(78);
        var trainer = new HiveNetTrainer(net, batch, learningRate: 0.0);
        float[] parameter = Parameter(net, name);

        trainer.Backpropagate(data.Spectrograms, data.Labels, batch);
        float[] analytic = (float[])trainer.GradientOf(parameter).Clone();
        Assert.Contains(analytic, g => g != 0f);

        int[] largest = Enumerable.Range(0, analytic.Length).OrderByDescending(i => Math.Abs(analytic[i])).ThenBy(i => i).Take(4).ToArray();
        foreach (int i in largest)
        {
            float original = parameter[i];
            float step = Math.Max(2e-4f, Math.Abs(original) * 1e-3f);
            parameter[i] = original + step;
            double up = trainer.Backpropagate(data.Spectrograms, data.Labels, batch).Loss;
            parameter[i] = original - step;
            double down = trainer.Backpropagate(data.Spectrograms, data.Labels, batch).Loss;
            parameter[i] = original;

            double numeric = (up - down) / (2.0 * step);
            double tolerance = (0.03 * Math.Abs(analytic[i])) + 2e-4;
            Assert.True(Math.Abs(numeric - analytic[i]) <= tolerance, $"{name}[{i}]: analytic {analytic[i]}, numeric {numeric}");
        }
    }

    [Fact]
    public void RunningStatisticsMoveTowardTheBatchStatistics()
    {
        HiveSoundSet data = new HiveSoundSynthesizer(79).Generate(8);
        HiveNet net = HiveNet.CreateInitialised(80);
        var trainer = new HiveNetTrainer(net, 8, learningRate: 0.0);
        for (int i = 0; i < 150; i++)
        {
            trainer.Backpropagate(data.Spectrograms, data.Labels, 8);
        }

        // After many passes over the same batch (weights unchanged; 0.9^150 leaves ~1e-7 of the start) the running mean of the first BN
        // equals that batch's per-channel mean of the first convolution's output.
        float[] logits = net.Predict(data.Spectrograms);
        Assert.Equal(data.Count * HiveNet.Classes, logits.Length);
        for (int c = 0; c < HiveNet.Channels1; c++)
        {
            double sum = 0;
            for (int n = 0; n < data.Count; n++)
            {
                for (int p = 0; p < HiveNet.Positions1; p++)
                {
                    int h = p / HiveNet.InputSize;
                    int w = p % HiveNet.InputSize;
                    sum += PlainConv1(net, data.Patch(n), c, h, w);
                }
            }

            double mean = sum / (data.Count * HiveNet.Positions1);
            Assert.Equal(mean, net.Bn1Mean[c], 1e-4);
        }
    }

    private static double PlainConv1(HiveNet net, ReadOnlySpan<float> patch, int channel, int h, int w)
    {
        double total = 0;
        for (int kh = 0; kh < 3; kh++)
        {
            for (int kw = 0; kw < 3; kw++)
            {
                int ih = h + kh - 1;
                int iw = w + kw - 1;
                if (ih >= 0 && ih < 16 && iw >= 0 && iw < 16)
                {
                    total += net.Conv1Weight[(channel * 9) + (kh * 3) + kw] * patch[(ih * 16) + iw];
                }
            }
        }

        return total;
    }

    private static float[] Parameter(HiveNet net, string name) => name switch
    {
        "conv1.weight" => net.Conv1Weight,
        "bn1.scale" => net.Bn1Scale,
        "bn1.bias" => net.Bn1Bias,
        "conv2.weight" => net.Conv2Weight,
        "bn2.scale" => net.Bn2Scale,
        "bn2.bias" => net.Bn2Bias,
        "fc1.weight" => net.Fc1Weight,
        "fc1.bias" => net.Fc1Bias,
        "fc2.weight" => net.Fc2Weight,
        "fc2.bias" => net.Fc2Bias,
        _ => throw new ArgumentOutOfRangeException(nameof(name)),
    };
}
