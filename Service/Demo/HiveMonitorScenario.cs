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
    public const string StreamModelFileName = "hive-stream.onnx";
    public const string StreamCalibrationFileName = "stream-calibration.npz";
    public const string StreamHoldoutFileName = "stream-holdout.npz";

    /// <summary>Frames (spectrogram columns) of each calibration patch the streaming set takes, the state carried up to each.</summary>
    public static readonly int[] StreamCalibrationSteps = [5, 11];
    public const int StreamHoldoutPatches = 256;
    public const int StreamHoldoutStep = 8;
    public static int StreamCalibrationCount => CalibrationCount * StreamCalibrationSteps.Length;

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
    private const ulong StreamSeed = 6006;

    /// <param name="version">1 for the first training; a higher number is a retrain of the same network on the same data from
    /// another weight initialisation and batch order (seeds moved by version - 1), as a team's next retrain would be: new bytes
    /// under the same model name, whose layers' sensitivities (and chosen widths) move.</param>
    public static DemoResult Generate(string outputFolder, Action<TrainingEpoch>? onEpoch = null, int version = 1)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(outputFolder);
        ArgumentOutOfRangeException.ThrowIfLessThan(version, 1);
        Stopwatch clock = Stopwatch.StartNew();

        HiveSoundSet training = new HiveSoundSynthesizer(TrainingSeed).Generate(TrainingCount);
        HiveSoundSet calibration = new HiveSoundSynthesizer(CalibrationSeed).Generate(CalibrationCount);
        HiveSoundSet holdout = new HiveSoundSynthesizer(HoldoutSeed).Generate(HoldoutCount);

        HiveNet network = HiveNet.CreateInitialised(WeightSeed + (ulong)(version - 1));
        IReadOnlyList<TrainingEpoch> epochs = new HiveNetTrainer(network, BatchSize, LearningRate).Train(training, Epochs, ShuffleSeed + (ulong)(version - 1), onEpoch);
        double holdoutAccuracy = HiveNet.Accuracy(network.Predict(holdout.Spectrograms), holdout.Labels);

        HiveStream stream = HiveStream.Create(StreamSeed);
        Directory.CreateDirectory(outputFolder);
        var files = new List<DemoFile>
        {
            Write(outputFolder, ModelFileName, HiveNetExporter.Export(network),
                $"FP32 classifier, input '{HiveNetExporter.InputName}' [batch,1,16,16] -> '{HiveNetExporter.OutputName}' [batch,4], opset {HiveNetExporter.Opset}"),
            Write(outputFolder, CalibrationFileName, SampleSetNpz(calibration),
                $"calibration set: spectrogram [{CalibrationCount},1,16,16] float32, labels [{CalibrationCount}] int64"),
            Write(outputFolder, HoldoutFileName, SampleSetNpz(holdout),
                $"held-out set: spectrogram [{HoldoutCount},1,16,16] float32, labels [{HoldoutCount}] int64"),
            Write(outputFolder, StreamModelFileName, HiveStreamExporter.Export(stream),
                $"FP32 streaming swarm detector: '{HiveStreamExporter.FrameName}' [batch,16], '{HiveStreamExporter.StateName}' [2,batch,12], '{HiveStreamExporter.SampleRateName}' int64 scalar -> '{HiveStreamExporter.ProbabilityName}' [batch,1], '{HiveStreamExporter.NextStateName}' [2,batch,12]"),
            Write(outputFolder, StreamCalibrationFileName, StreamSetNpz(stream, calibration, CalibrationCount, StreamCalibrationSteps),
                $"streaming calibration set: frame [{StreamCalibrationCount},16], state [2,{StreamCalibrationCount},12] float32, sample_rate int64 0-d"),
            Write(outputFolder, StreamHoldoutFileName, StreamSetNpz(stream, holdout, StreamHoldoutPatches, [StreamHoldoutStep]),
                $"streaming held-out set: frame [{StreamHoldoutPatches},16], state [2,{StreamHoldoutPatches},12] float32, sample_rate int64 0-d"),
            Write(outputFolder, ReadmeFileName, System.Text.Encoding.UTF8.GetBytes(Readme(holdoutAccuracy)),
                "what the setting is and what each file holds"),
        };

        clock.Stop();
        return new DemoResult(files, epochs, network, calibration, holdout, holdoutAccuracy, clock.Elapsed, stream);
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

    /// <summary>
    /// A streaming set as .npz bytes: for each of the first <paramref name="patches"/> patches and each step t,
    /// the patch's column t as "frame" [n,16], the state the detector carries after columns 0..t-1 (from zeros)
    /// as "state" [2,n,12] (fast memory, then slow; samples on axis 1), and "sample_rate" as a 0-d int64 constant.
    /// </summary>
    internal static byte[] StreamSetNpz(HiveStream stream, HiveSoundSet set, int patches, IReadOnlyList<int> steps)
    {
        int n = patches * steps.Count;
        var frames = new float[n * HiveStream.Bands];
        var state = new float[2 * n * HiveStream.Units];
        int sample = 0;
        for (int p = 0; p < patches; p++)
        {
            var patch = set.Patch(p);
            foreach (int step in steps)
            {
                var fast = new float[HiveStream.Units];
                var slow = new float[HiveStream.Units];
                for (int t = 0; t < step; t++) (fast, slow) = stream.Step(Column(patch, t), fast, slow, HiveStream.SampleRate);
                Column(patch, step).CopyTo(frames.AsSpan(sample * HiveStream.Bands));
                fast.CopyTo(state.AsSpan(sample * HiveStream.Units));
                slow.CopyTo(state.AsSpan((n + sample) * HiveStream.Units));
                sample++;
            }
        }

        using var buffer = new MemoryStream();
        NpzWriter.Write(
            buffer,
            [
                new NpyArray(HiveStreamExporter.FrameName, ElementType.Float32, [n, HiveStream.Bands], frames),
                new NpyArray(HiveStreamExporter.StateName, ElementType.Float32, [2, n, HiveStream.Units], state),
                new NpyArray(HiveStreamExporter.SampleRateName, ElementType.Int64, [], new[] { HiveStream.SampleRate }),
            ]);
        return buffer.ToArray();
    }

    /// <summary>Column <paramref name="frame"/> of a [1, Bands, Frames] patch: one band value per row.</summary>
    internal static float[] Column(ReadOnlySpan<float> patch, int frame)
    {
        var column = new float[HiveSoundSet.Bands];
        for (int b = 0; b < HiveSoundSet.Bands; b++) column[b] = patch[(b * HiveSoundSet.Frames) + frame];
        return column;
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

            Streaming
              {StreamModelFileName}    a tiny streaming swarm detector with fixed seeded weights (not
                                  trained): it hears one column of 16 bands at a time and carries a
                                  fast and a slow memory between calls. Inputs "frame" [batch,16],
                                  "state" [2,batch,12] (samples on axis 1), "sample_rate" int64 scalar;
                                  outputs "swarm_probability" [batch,1], "next_state" [2,batch,12].
              {StreamCalibrationFileName} columns 5 and 11 of each calibration patch with the state
                                  carried up to them ({StreamCalibrationCount} samples); sample_rate is a
                                  0-d array, fed unchanged to every run.
              {StreamHoldoutFileName}     column 8 of {StreamHoldoutPatches} held-out patches.

            """.ReplaceLineEndings("\n");
    }
}
