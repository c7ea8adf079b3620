using System.IO.Compression;
using System.IO.Pipelines;
using System.Net;
using System.Net.Http.Headers;
using System.Net.Http.Json;
using System.Text.Json;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;
using Google.Protobuf;
using Xunit.Abstractions;
using P = global::Onnx;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// Bad input against the real engine (EngineAdapter, ONNX Runtime), through the whole HTTP pipeline. Each case
/// checks the status, an RFC 9457 problem (application/problem+json) with its own stable type, a detail
/// sentence that says what to do, no stack trace, and that nothing stored was lost: /healthz is ok, the demo
/// model and dataset uploaded first are served exactly as before and every blob still hashes to its name.
/// Outside sources: the PNG signature (RFC 2083, section 3.1), the ZIP local/central header layout
/// (PKWARE APPNOTE.TXT 4.3.7 and 4.3.12) and the ONNX QuantizeLinear/DequantizeLinear operators (onnx.ai operator docs).
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class RealEngineBadInputTests : IClassFixture<RealEngineFixture>
{
    private readonly RealEngineFixture fixture;
    private readonly DemoFolderFixture demo;
    private readonly ITestOutputHelper output;
    private readonly HttpClient client;

    public RealEngineBadInputTests(RealEngineFixture fixture, DemoFolderFixture demo, ITestOutputHelper output)
    {
        this.fixture = fixture;
        this.demo = demo;
        this.output = output;
        client = fixture.Factory.CreateAuthorizedClient();
    }

    private byte[] DemoModel => File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName));

    [Fact]
    public async Task EmptyModelBodyIsAnInvalidRequest() =>
        await Refused("empty model body", await client.PostBytesAsync("/v1/models", []), HttpStatusCode.BadRequest, "invalid-request", "empty");

    [Fact]
    public async Task EmptyDatasetBodyIsAnInvalidRequest() =>
        await Refused("empty dataset body", await client.PostBytesAsync("/v1/datasets", []), HttpStatusCode.BadRequest, "invalid-request", "empty");

    [Fact]
    public async Task HalfOfTheDemoModelIsNotOnnx()
    {
        var bytes = DemoModel;
        await Refused("truncated ONNX (first half of the demo model)", await client.PostBytesAsync("/v1/models?name=half.onnx", bytes[..(bytes.Length / 2)]),
            HttpStatusCode.UnprocessableEntity, "model-not-onnx", "truncated");
    }

    [Fact]
    public async Task RandomBytesAreNeitherAModelNorADataset()
    {
        var bytes = new byte[4096];
        new Random(20240611).NextBytes(bytes);
        await Refused("random bytes as model", await client.PostBytesAsync("/v1/models?name=noise.onnx", bytes), HttpStatusCode.UnprocessableEntity, "model-not-onnx", "noise");
        await Refused("random bytes as dataset", await client.PostBytesAsync("/v1/datasets", bytes), HttpStatusCode.UnprocessableEntity, "dataset-invalid", "np.save");
    }

    [Fact]
    public async Task PngHeaderIsRefusedAsAnImage()
    {
        // PNG signature, RFC 2083 section 3.1, then the start of an IHDR chunk.
        byte[] png = [0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A, 0, 0, 0, 13, (byte)'I', (byte)'H', (byte)'D', (byte)'R', 0, 0, 0, 16, 0, 0, 0, 16, 8, 2, 0, 0, 0];
        await Refused("PNG header as model", await client.PostBytesAsync("/v1/models?name=photo.png", png), HttpStatusCode.UnprocessableEntity, "model-not-onnx", "PNG image");
        await Refused("PNG header as dataset", await client.PostBytesAsync("/v1/datasets", png), HttpStatusCode.UnprocessableEntity, "dataset-invalid", "neither .npy");
    }

    [Fact]
    public async Task AlreadyQuantizedModelIsRefusedNamingTheNode()
    {
        var bytes = QuantizedModel();
        await Refused("already-quantized model (QuantizeLinear node)", await client.PostBytesAsync("/v1/models?name=quantized.onnx", bytes),
            HttpStatusCode.UnprocessableEntity, "model-already-quantized", "'x_quantize' is QuantizeLinear");
    }

    [Fact]
    public async Task ZipBombDatasetIsRefusedBeforeItInflates()
    {
        // 64 MiB of zeros deflate to about 64 KiB: a member that claims 64x the service's 1 MiB dataset limit at a ratio near 1000.
        var bomb = ZipBomb();
        Assert.True(bomb.Length < RealEngineServiceFactory.MaxDatasetBytes, $"The bomb is {bomb.Length} bytes, over the upload limit.");
        await Refused("zip bomb .npz (64 MiB of zeros, honest sizes)", await client.PostBytesAsync("/v1/datasets", bomb), HttpStatusCode.UnprocessableEntity, "dataset-too-large", "zip bomb");
    }

    [Fact]
    public async Task ZipBombWhoseHeadersUnderstateTheSizeInflatesOnlyWhatTheyDeclare()
    {
        var bomb = ZipBomb();
        // Rewrite the uncompressed size as 1000 bytes in the local header (offset 22) and the central header (offset 24),
        // PKWARE APPNOTE.TXT 4.3.7 / 4.3.12, so only counting real inflated bytes can catch it.
        var central = IndexOf(bomb, [0x50, 0x4B, 0x01, 0x02]);
        BitConverter.TryWriteBytes(bomb.AsSpan(22, 4), 1000u);
        BitConverter.TryWriteBytes(bomb.AsSpan(central + 24, 4), 1000u);
        // System.IO.Compression stops a member's stream at its declared size, so only 1000 bytes are ever inflated
        // and the reader finds a header that promises 64 MiB of data behind it: a truncated array, not a full inflation.
        await Refused("zip bomb .npz (sizes understated as 1000 bytes in both headers)", await client.PostBytesAsync("/v1/datasets", bomb),
            HttpStatusCode.UnprocessableEntity, "dataset-invalid", "truncated");
    }

    [Fact]
    public async Task NpzMemberThatClimbsOutOfTheArchiveIsRefused()
    {
        var npy = new MemoryStream();
        NpyWriter.Write(npy, Spectrograms(4, 1, 16, 16, seed: 3));
        var zip = ZipWithOneMember("../../evil.npy", npy.ToArray(), CompressionLevel.NoCompression);
        await Refused("path-traversal member ../../evil.npy", await client.PostBytesAsync("/v1/datasets", zip), HttpStatusCode.UnprocessableEntity, "dataset-bad-member-name", "'..'");
        Assert.False(File.Exists(Path.GetFullPath(Path.Combine(fixture.Factory.DataFolder, "..", "..", "evil.npy"))));
        Assert.Empty(Directory.EnumerateFiles(fixture.Factory.DataFolder, "evil*", SearchOption.AllDirectories));
    }

    [Fact]
    public async Task DatasetWhoseShapeDoesNotFitTheModelIsAMismatchWhenTheSearchStarts()
    {
        var (modelId, _, _, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var datasetId = await UploadDataset(Spectrograms(4, 1, 8, 8, seed: 5));
        await Refused("dataset shape [4,1,8,8] for input [batch,1,16,16]", await PostSearch(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 30 } }),
            HttpStatusCode.UnprocessableEntity, "dataset-mismatch", "axis 2 is 8, the model needs 16");
    }

    [Fact]
    public async Task DatasetWhoseDtypeDoesNotFitTheModelIsAMismatchWhenTheSearchStarts()
    {
        var (modelId, _, _, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var datasetId = await UploadDataset(new NpyArray(HiveNetExporter.InputName, ElementType.Int32, [4, 1, 16, 16], new int[4 * 256]));
        await Refused("dataset dtype int32 for a float32 input", await PostSearch(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 30 } }),
            HttpStatusCode.UnprocessableEntity, "dataset-mismatch", "holds int32 but model input 'spectrogram' takes float32");
    }

    [Fact]
    public async Task TargetOpsetOverAnOperatorTheRaiseCannotConvertIsRefusedNamingTheNode()
    {
        var (_, _, datasetId, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var upload = await client.PostBytesAsync("/v1/models?name=old-scaler.onnx", OldModelWithImageScaler());
        Assert.True(upload.IsSuccessStatusCode, await upload.Content.ReadAsStringAsync());
        var modelId = (await upload.JsonAsync()).GetProperty("id").GetString()!;

        await Refused("targetOpset 13 on an opset-9 model with an ImageScaler node", await PostSearch(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 30 }, targetOpset = 13 }),
            HttpStatusCode.UnprocessableEntity, "opset-raise-unsupported", "ImageScaler node 'scaler'");
    }

    [Fact]
    public async Task NaNInTheDataNamesTheArrayAndTheIndex()
    {
        var (modelId, _, _, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var array = Spectrograms(4, 1, 16, 16, seed: 7);
        ((float[])array.Data)[(2 * 256) + (3 * 16) + 5] = float.NaN;
        var datasetId = await UploadDataset(array);
        await Refused("NaN at [2,0,3,5]", await PostSearch(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 30 } }),
            HttpStatusCode.UnprocessableEntity, "dataset-non-finite", "Array 'spectrogram' holds NaN at index [2, 0, 3, 5]");
    }

    [Fact]
    public async Task UnknownMetricIsAnInvalidRequestListingTheMetrics()
    {
        var (modelId, _, datasetId, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var problem = await Refused("unknown metric 'psnr'", await PostSearch(new { modelId, datasetId, budget = new { metric = "psnr", atLeast = 30 } }),
            HttpStatusCode.BadRequest, "invalid-request", "Unknown metric 'psnr'; use one of sqnr");
        Assert.True(problem.GetProperty("errors").TryGetProperty("budget.metric", out _));
    }

    [Theory]
    [InlineData(-5)]
    [InlineData(1000)]
    public async Task SqnrBudgetOutOfRangeIsAnInvalidRequestGivingTheRange(double atLeast)
    {
        var (modelId, _, datasetId, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var problem = await Refused($"sqnr atLeast {atLeast}", await PostSearch(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast } }),
            HttpStatusCode.BadRequest, "invalid-request", "The sqnr budget must lie in (0, 200] dB; got " + atLeast.ToString(System.Globalization.CultureInfo.InvariantCulture));
        Assert.True(problem.GetProperty("errors").TryGetProperty("budget.atLeast", out _));
    }

    [Fact]
    public async Task EmptyBitsListIsAnInvalidRequest()
    {
        var (modelId, _, datasetId, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var problem = await Refused("empty bits list", await PostSearch(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 30 }, bits = Array.Empty<int>() }),
            HttpStatusCode.BadRequest, "invalid-request", "bits must list at least one");
        Assert.True(problem.GetProperty("errors").TryGetProperty("bits", out _));
    }

    [Fact]
    public async Task UnknownIdsAreNotFound()
    {
        var (modelId, _, datasetId, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        await Refused("unknown model id (GET)", await client.GetAsync("/v1/models/m-nothing-here"), HttpStatusCode.NotFound, "not-found", "'m-nothing-here'");
        await Refused("unknown dataset id (GET)", await client.GetAsync("/v1/datasets/d-nothing-here"), HttpStatusCode.NotFound, "not-found", "'d-nothing-here'");
        await Refused("unknown search id (GET)", await client.GetAsync("/v1/searches/s-nothing-here"), HttpStatusCode.NotFound, "not-found", "'s-nothing-here'");
        await Refused("unknown search id (manifest)", await client.GetAsync("/v1/searches/s-nothing-here/manifest"), HttpStatusCode.NotFound, "not-found", "'s-nothing-here'");
        await Refused("unknown model id (POST search)", await PostSearch(new { modelId = "m-nothing-here", datasetId, budget = new { metric = "sqnr", atLeast = 30 } }),
            HttpStatusCode.NotFound, "not-found", "upload it with POST /v1/models first");
        await Refused("unknown dataset id (POST search)", await PostSearch(new { modelId, datasetId = "d-nothing-here", budget = new { metric = "sqnr", atLeast = 30 } }),
            HttpStatusCode.NotFound, "not-found", "upload it with POST /v1/datasets first");
    }

    [Fact]
    public async Task MissingOrWrongApiKeyIsUnauthorized()
    {
        await fixture.EnsureBaselineAsync(client, demo.Folder);
        using var anonymous = fixture.Factory.CreateClient();
        await Refused("missing API key", await anonymous.PostBytesAsync("/v1/models", DemoModel), HttpStatusCode.Unauthorized, "unauthorized", "Authorization: Bearer");
        using var wrong = fixture.Factory.CreateAuthorizedClient("not-the-key");
        await Refused("wrong API key", await wrong.GetAsync("/v1/models"), HttpStatusCode.Unauthorized, "unauthorized", "not valid");
    }

    [Theory]
    [InlineData("/v1/models", RealEngineServiceFactory.MaxModelBytes, true)]
    [InlineData("/v1/models", RealEngineServiceFactory.MaxModelBytes, false)]
    [InlineData("/v1/datasets", RealEngineServiceFactory.MaxDatasetBytes, true)]
    [InlineData("/v1/datasets", RealEngineServiceFactory.MaxDatasetBytes, false)]
    public async Task UploadOverTheLimitIsTooLargeWithOrWithoutContentLength(string url, long limitBytes, bool sendLength)
    {
        await fixture.EnsureBaselineAsync(client, demo.Folder);
        var bytes = new byte[limitBytes + 1];
        HttpContent content;
        if (sendLength)
        {
            content = new ByteArrayContent(bytes);
        }
        else
        {
            // A pipe's reading stream cannot seek, so HttpClient cannot know the length and sends the body chunked.
            var pipe = new Pipe(new PipeOptions(pauseWriterThreshold: 0));
            await pipe.Writer.WriteAsync(bytes);
            await pipe.Writer.CompleteAsync();
            content = new StreamContent(pipe.Reader.AsStream());
            Assert.Null(content.Headers.ContentLength);
        }

        content.Headers.ContentType = new MediaTypeHeaderValue("application/octet-stream");
        await Refused($"oversize {url} upload ({limitBytes + 1} bytes, {(sendLength ? "with" : "without")} Content-Length)", await client.PostAsync(url, content),
            HttpStatusCode.RequestEntityTooLarge, "payload-too-large", "larger than the");
    }

    /// <summary>Asserts the refusal, then that nothing stored was lost, and prints the row of the bad-input table.</summary>
    private async Task<JsonElement> Refused(string label, HttpResponseMessage response, HttpStatusCode status, string code, string detailPart)
    {
        await fixture.EnsureBaselineAsync(client, demo.Folder);
        var problem = await response.AssertProblemAsync(status, code);
        var detail = problem.GetProperty("detail").GetString()!;
        Assert.Contains(detailPart, detail, StringComparison.Ordinal);
        Assert.True(detail.TrimEnd().EndsWith('.') || detail.TrimEnd().EndsWith(')'), $"The detail is not a sentence: {detail}");
        var body = await response.Content.ReadAsStringAsync();
        Assert.DoesNotContain("Exception", body, StringComparison.Ordinal);
        Assert.DoesNotContain(".cs:line", body, StringComparison.Ordinal);
        await fixture.AssertNothingLostAsync(client);
        output.WriteLine($"| {label} | {(int)status} | {code} | {detail} |");
        return problem;
    }

    private async Task<HttpResponseMessage> PostSearch(object body) => await client.PostAsync("/v1/searches", JsonContent.Create(body));

    private async Task<string> UploadDataset(NpyArray array)
    {
        var npz = new MemoryStream();
        NpzWriter.Write(npz, [array]);
        var response = await client.PostBytesAsync("/v1/datasets", npz.ToArray());
        Assert.True(response.IsSuccessStatusCode, await response.Content.ReadAsStringAsync());
        return (await response.JsonAsync()).GetProperty("id").GetString()!;
    }

    private static NpyArray Spectrograms(long samples, long channels, long bands, long frames, int seed)
    {
        var random = new Random(seed);
        var data = new float[samples * channels * bands * frames];
        for (var i = 0; i < data.Length; i++)
        {
            data[i] = (float)random.NextDouble();
        }

        return new NpyArray(HiveNetExporter.InputName, ElementType.Float32, [samples, channels, bands, frames], data);
    }

    /// <summary>A valid .npy of 65536 zero spectrograms (64 MiB) as the one member of an .npz.</summary>
    private static byte[] ZipBomb()
    {
        var npy = new MemoryStream();
        NpyWriter.Write(npy, new NpyArray(HiveNetExporter.InputName, ElementType.Float32, [65536, 1, 16, 16], new float[65536 * 256]));
        return ZipWithOneMember("spectrogram.npy", npy.ToArray(), CompressionLevel.Optimal);
    }

    private static byte[] ZipWithOneMember(string name, byte[] content, CompressionLevel level)
    {
        var zip = new MemoryStream();
        using (var archive = new ZipArchive(zip, ZipArchiveMode.Create, leaveOpen: true))
        {
            using var member = archive.CreateEntry(name, level).Open();
            member.Write(content);
        }

        return zip.ToArray();
    }

    private static int IndexOf(byte[] haystack, byte[] needle)
    {
        var at = haystack.AsSpan().IndexOf(needle);
        Assert.True(at >= 0, "The ZIP has no central directory header.");
        return at;
    }

    /// <summary>x -> MatMul(W) -> ImageScaler -> y at opset 9: ImageScaler is an experimental operator of opset 1 that later opsets dropped.</summary>
    private static byte[] OldModelWithImageScaler()
    {
        var graph = new P.GraphProto { Name = "old-scaler" };
        graph.Input.Add(FloatValue("x", 1, 3, 4));
        graph.Output.Add(FloatValue("y", 1, 3, 3));
        var weight = new P.TensorProto { Name = "w", DataType = (int)P.TensorProto.Types.DataType.Float };
        weight.Dims.Add([4, 3]);
        weight.FloatData.Add(Enumerable.Range(0, 12).Select(i => (i - 6) / 10f));
        graph.Initializer.Add(weight);
        graph.Node.Add(new P.NodeProto { Name = "fc", OpType = "MatMul", Input = { "x", "w" }, Output = { "m" } });
        // ImageScaler's scale and bias attributes (ONNX operator docs, ImageScaler-1): ONNX Runtime checks every model
        // at upload and cannot build the node without them.
        var scale = new P.AttributeProto { Name = "scale", Type = P.AttributeProto.Types.AttributeType.Float, F = 1f };
        var bias = new P.AttributeProto { Name = "bias", Type = P.AttributeProto.Types.AttributeType.Floats, Floats = { 0f } };
        graph.Node.Add(new P.NodeProto { Name = "scaler", OpType = "ImageScaler", Input = { "m" }, Output = { "y" }, Attribute = { scale, bias } });
        var model = new P.ModelProto { IrVersion = 4, Graph = graph };
        model.OpsetImport.Add(new P.OperatorSetIdProto { Domain = "", Version = 9 });
        return model.ToByteArray();
    }

    private static P.ValueInfoProto FloatValue(string name, params long[] dims)
    {
        var shape = new P.TensorShapeProto();
        foreach (var d in dims)
        {
            shape.Dim.Add(new P.TensorShapeProto.Types.Dimension { DimValue = d });
        }

        return new P.ValueInfoProto
        {
            Name = name,
            Type = new P.TypeProto { TensorType = new P.TypeProto.Types.Tensor { ElemType = (int)P.TensorProto.Types.DataType.Float, Shape = shape } },
        };
    }

    /// <summary>x -> QuantizeLinear -> DequantizeLinear -> MatMul(W) -> y at opset 13, as ONNX defines the two operators.</summary>
    private static byte[] QuantizedModel()
    {
        static P.ValueInfoProto Value(string name, params long[] dims)
        {
            var shape = new P.TensorShapeProto();
            foreach (var d in dims)
            {
                shape.Dim.Add(new P.TensorShapeProto.Types.Dimension { DimValue = d });
            }

            return new P.ValueInfoProto
            {
                Name = name,
                Type = new P.TypeProto { TensorType = new P.TypeProto.Types.Tensor { ElemType = (int)P.TensorProto.Types.DataType.Float, Shape = shape } },
            };
        }

        var graph = new P.GraphProto { Name = "already-quantized" };
        graph.Input.Add(Value("x", 1, 4));
        graph.Output.Add(Value("y", 1, 3));
        var scale = new P.TensorProto { Name = "x_scale", DataType = (int)P.TensorProto.Types.DataType.Float };
        scale.FloatData.Add(0.05f);
        var zeroPoint = new P.TensorProto { Name = "x_zero_point", DataType = (int)P.TensorProto.Types.DataType.Uint8, RawData = ByteString.CopyFrom(128) };
        var weight = new P.TensorProto { Name = "w", DataType = (int)P.TensorProto.Types.DataType.Float };
        weight.Dims.Add([4, 3]);
        weight.FloatData.Add(Enumerable.Range(0, 12).Select(i => (i - 6) / 10f));
        graph.Initializer.Add([scale, zeroPoint, weight]);
        graph.Node.Add(new P.NodeProto { Name = "x_quantize", OpType = "QuantizeLinear", Input = { "x", "x_scale", "x_zero_point" }, Output = { "x_q" } });
        graph.Node.Add(new P.NodeProto { Name = "x_dequantize", OpType = "DequantizeLinear", Input = { "x_q", "x_scale", "x_zero_point" }, Output = { "x_dq" } });
        graph.Node.Add(new P.NodeProto { Name = "fc", OpType = "MatMul", Input = { "x_dq", "w" }, Output = { "y" } });
        var model = new P.ModelProto { IrVersion = 8, Graph = graph };
        model.OpsetImport.Add(new P.OperatorSetIdProto { Domain = "", Version = 13 });
        return model.ToByteArray();
    }
}
