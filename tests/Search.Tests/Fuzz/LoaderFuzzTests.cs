using System.Globalization;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Onnx;
using Bitbudget.Search.Tests.Support;
using Google.Protobuf;
using Xunit.Abstractions;

namespace Bitbudget.Search.Tests.Fuzz;

/// <summary>
/// A fixed number of mutation-fuzz executions of the ONNX loader and the .npy/.npz reader (set
/// BITBUDGET_FUZZ_EXECUTIONS for a longer run). Seeds: small models built in code, the hostile models, and the
/// NumPy-written fixtures. Oracle: only <see cref="EngineException"/> may escape, nothing hangs, nothing
/// allocates past <see cref="FuzzRun.MaxAllocatedBytes"/>; for datasets also that the upload path (headers and a
/// streamed pass) and the decoding path agree on every array they both accept.
/// ONNX Runtime itself is not fuzzed here: a crash in native code would take the test process down.
/// </summary>
public sealed class LoaderFuzzTests(ITestOutputHelper output)
{
    private static readonly DatasetLimits Limits = new(MaxTotalBytes: 16L << 20, MaxArrayBytes: 16L << 20);

    private static int Executions(int ci) =>
        int.TryParse(Environment.GetEnvironmentVariable("BITBUDGET_FUZZ_EXECUTIONS"), CultureInfo.InvariantCulture, out var n) ? n : ci;

    [Fact]
    public void OnnxLoaderAnswersEveryMutantWithAModelOrAnEngineRefusal()
    {
        var seeds = new List<byte[]>
        {
            HostileModels.MatMul().ToBytes(),
            WeightLocationTests.IfModel(),
            SmallModels.Mlp().Proto.ToByteArray(),
            SmallModels.Mlp(opset: 21, batch: 4, seed: 7).Proto.ToByteArray(),
        };
        seeds.AddRange(HostileModels.All.Where(m => m.Bytes.Length < 64 * 1024).Select(m => m.Bytes));

        var result = new FuzzRun("onnx", seeds, bytes =>
        {
            var model = OnnxModel.Load(bytes, "fuzz");
            // What a search does next with a loaded model: read every weight and build the weights-as-inputs variant.
            foreach (var layer in model.Layers)
            {
                model.GetWeight(layer);
            }

            model.BuildWeightsAsInputs();
        }).Run(Executions(20_000), seed: 20261202);

        Report(result);
    }

    [Fact]
    public void DatasetReaderAnswersEveryMutantWithArraysOrAnEngineRefusal()
    {
        var folder = Path.Combine(AppContext.BaseDirectory, "Fixtures", "numpy");
        var seeds = Directory.GetFiles(folder).Where(f => f.EndsWith(".npy", StringComparison.Ordinal) || f.EndsWith(".npz", StringComparison.Ordinal))
            .Order(StringComparer.Ordinal).Select(File.ReadAllBytes).ToList();

        var result = new FuzzRun("dataset", seeds, bytes =>
        {
            IReadOnlyList<NpyArray>? decoded = null;
            IReadOnlyList<NpyArrayInfo>? described = null;
            EngineException? decodeRefusal = null;
            try
            {
                decoded = DatasetReader.Read(bytes, Limits);
            }
            catch (EngineException e)
            {
                decodeRefusal = e;
            }

            using (var stream = new MemoryStream(bytes, writable: false))
            {
                try
                {
                    described = DatasetReader.Inspect(stream, Limits);
                }
                catch (EngineException) when (decodeRefusal is not null)
                {
                    throw decodeRefusal;
                }
                catch (EngineException e)
                {
                    throw new InvalidOperationException($"Decoding accepted what the upload path refused: {e.Message}");
                }
            }

            if (decoded is null)
            {
                throw new InvalidOperationException($"The upload path accepted what decoding refused: {decodeRefusal!.Message}");
            }

            Assert.Equal(decoded.Select(a => (a.Name, a.ElementType, string.Join(",", a.Shape), a.ByteCount)), described!.Select(a => (a.Name, a.ElementType, string.Join(",", a.Shape), a.ByteCount)));
        }).Run(Executions(40_000), seed: 1202);

        Report(result);
    }

    private void Report(FuzzRun.Result result)
    {
        output.WriteLine($"{result.Executions} executions in {result.Seconds:0.0} s ({result.PerSecond:0} per second), {result.Refused} refused by the engine, {result.Findings.Count} findings");
        Assert.True(result.Findings.Count == 0, string.Join("\n\n", result.Findings));
    }
}
