using System.Diagnostics;
using System.Globalization;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;

namespace Bitbudget.Service.Demo;

/// <summary>
/// The invented demo setting end to end: synthesise hive sound, train the small classifier, and
/// write its ONNX model, a labelled calibration set, a held-out set and a README into one folder.
/// Every seed is fixed, so two runs write byte-identical files.
/// </summary>
internal static class HiveMonitorScenario
{
    public const string ModelFileName = "hive-monitor.onnx";
    public const string CalibrationFileName = "calibration.npz";
    public const string HoldoutFileName = "holdout.npz";
    public const string ReadmeFileName = "README.txt";

    public const int TrainingCount = 6144;
    public const int CalibrationCount = 64;
    public const int HoldoutCount = 512;
    public const int Epochs = 4;
    public const int BatchSize = 32;
    public const double LearningRate = 3e-3;

    // Separate seeds per set, so the calibration and held-out patches never repeat training patches.
    private const ulong TrainingSeed = 1001;
    private const ulong CalibrationSeed = 2002;
    private const ulong HoldoutSeed = 3003;
    private const ulong WeightSeed = 4004;
    private const ulong ShuffleSeed = 5005;

    public static DemoResult Generate(string outputFolder, Action<TrainingEpoch>? onEpoch = null)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(outputFolder);
        Stopwatch clock = Stopwatch.StartNew();

        HiveSoundSet training = new HiveSoundSynthesizer(TrainingSeed).Generate(TrainingCount);
        HiveSoundSet calibration = new HiveSoundSynthesizer(CalibrationSeed).Generate(CalibrationCount);
        HiveSoundSet holdout = new HiveSoundSynthesizer(HoldoutSeed).Generate(HoldoutCount);

        HiveNet network = HiveNet.CreateInitialised(WeightSeed);
        IReadOnlyList<TrainingEpoch> epochs = new HiveNetTrainer(network, BatchSize, LearningRate).Train(training, Epochs, ShuffleSeed, onEpoch);
        double holdoutAccuracy = HiveNet.Accuracy(network.Predict(holdout.Spectrograms), holdout.Labels);

        Directory.CreateDirectory(outputFolder);
        var files = new List<DemoFile>
        {
            Write(outputFolder, ModelFileName, HiveNetExporter.Export(network),
                $"FP32 classifier, input '{HiveNetExporter.InputName}' [batch,1,16,16] -> '{HiveNetExporter.OutputName}' [batch,4], opset {HiveNetExporter.Opset}"),
            Write(outputFolder, CalibrationFileName, SampleSetNpz(calibration),
                $"calibration set: spectrogram [{CalibrationCount},1,16,16] float32, labels [{CalibrationCount}] int64"),
            Write(outputFolder, HoldoutFileName, SampleSetNpz(holdout),
                $"held-out set: spectrogram [{HoldoutCount},1,16,16] float32, labels [{HoldoutCount}] int64"),
            Write(outputFolder, ReadmeFileName, System.Text.Encoding.UTF8.GetBytes(Readme(holdoutAccuracy)),
                "what the setting is and what each file holds"),
        };

        clock.Stop();
        return new DemoResult(files, epochs, network, calibration, holdout, holdoutAccuracy, clock.Elapsed);
    }

    /// <summary>A sample set as .npz bytes: "spectrogram" float32 [count,1,16,16] and "labels" int64 [count], deflated.</summary>
    internal static byte[] SampleSetNpz(HiveSoundSet set)
    {
        // NpzWriter stamps every member with a fixed time, which keeps the demo files byte-identical run to run.
        using var buffer = new MemoryStream();
        NpzWriter.Write(
            buffer,
            [
                new NpyArray("spectrogram", ElementType.Float32, [.. set.Shape.Select(d => (long)d)], set.Spectrograms),
                new NpyArray("labels", ElementType.Int64, [set.Count], set.Labels),
            ]);
        return buffer.ToArray();
    }

    private static DemoFile Write(string folder, string name, byte[] bytes, string contents)
    {
        string path = Path.GetFullPath(Path.Combine(folder, name));
        File.WriteAllBytes(path, bytes);
        return new DemoFile(path, bytes.LongLength, contents);
    }

    private static string Readme(double holdoutAccuracy)
    {
        string accuracy = (holdoutAccuracy * 100).ToString("F1", CultureInfo.InvariantCulture);
        return $"""
            Hive monitor demo (an invented setting; every name, number and sound here is made up)
            =====================================================================================

            The Quillbrook Valley Beekeepers' Co-op fits each member's hives with a small listening
            board. Every few seconds the board turns the last moment of hive sound into a 16x16
            spectrogram patch (16 frequency bands, lowest first, by 16 time frames) and a tiny
            network on the board says what state the colony is in:

              0 calm             the steady hum of a settled colony and its second harmonic
              1 swarm-preparing  queens "piping": short high toots that glide upward
              2 queenless        the hum rises, broadens and beats; restless energy in the mid bands
              3 intruder         short broadband bursts at the entrance (a wasp, a mouse)

            The boards have little memory, so the co-op wants the network as small as it can be
            without the alarms going wrong. The sound is synthetic: each state's signature is mixed
            in at a random strength over noise, and faint look-alikes of the other states appear
            now and then, so some patches are honestly ambiguous.

            Files
              {ModelFileName}   FP32 ONNX model (IR {HiveNetExporter.IrVersion}, opset {HiveNetExporter.Opset}), input "{HiveNetExporter.InputName}"
                                  [batch,1,16,16] float32, output "{HiveNetExporter.OutputName}" [batch,4]:
                                  Conv 3x3 (1->8) + BatchNormalization + Relu,
                                  Conv 3x3 stride 2 (8->16) + BatchNormalization + Relu,
                                  Flatten, Gemm (1024->32) + Relu, Gemm (32->4).
              {CalibrationFileName}     spectrogram [{CalibrationCount},1,16,16] float32, labels [{CalibrationCount}] int64
              {HoldoutFileName}         spectrogram [{HoldoutCount},1,16,16] float32, labels [{HoldoutCount}] int64

            FP32 accuracy on the held-out set: {accuracy}% ({HoldoutCount} patches).

            Next: hand the model and calibration.npz to Bitbudget's plan command to choose a bit
            width for each of the four weight layers, then score the result on holdout.npz.

            """.ReplaceLineEndings("\n");
    }
}
