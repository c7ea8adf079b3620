using System.Globalization;
using System.IO.Compression;
using System.IO.Pipelines;
using System.Net;
using System.Net.Http.Headers;
using System.Security.Cryptography;
using System.Text;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Tests.Support;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;
using Microsoft.Data.Sqlite;
using Xunit.Abstractions;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// The bad-input corpus: hostile models (<see cref="HostileModels"/>, built with the ONNX protobuf classes),
/// hostile datasets (.npy headers and .npz archives written byte by byte against the NumPy format spec,
/// numpy.lib.format, and PKWARE APPNOTE.TXT) and hostile requests, sent to the real service with the real
/// engine. Each asserts the status, the problem type, a detail that names the field, node, tensor, array or
/// member at fault; then that /healthz answers ok and that every stored blob and every row of the store's
/// tables is exactly what it was before the request.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class BadInputCorpusTests : IClassFixture<RealEngineFixture>
{
    private static readonly IReadOnlyDictionary<string, BadInput> Cases = BuildCases();

    private readonly RealEngineFixture fixture;
    private readonly DemoFolderFixture demo;
    private readonly ITestOutputHelper output;
    private readonly HttpClient client;

    public BadInputCorpusTests(RealEngineFixture fixture, DemoFolderFixture demo, ITestOutputHelper output)
    {
        this.fixture = fixture;
        this.demo = demo;
        this.output = output;
        client = fixture.Factory.CreateAuthorizedClient();
    }

    public static TheoryData<string> Names => new(Cases.Keys);

    [Fact]
    public void TheCorpusHoldsAtLeastEightyDistinctInputs()
    {
        Assert.True(Cases.Count >= 80, $"The corpus holds {Cases.Count} inputs.");
        Assert.Equal(Cases.Count, Cases.Values.Select(c => c.Fingerprint).Distinct().Count());
    }

    [Theory]
    [MemberData(nameof(Names))]
    public async Task HostileInputIsRefusedAndNothingStoredChanges(string name)
    {
        var (modelId, _, datasetId, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        var input = Cases[name];
        var before = Snapshot();

        using var anonymous = fixture.Factory.CreateClient();
        using var response = await input.Send(new Clients(client, anonymous, modelId, datasetId));

        var problem = await response.AssertProblemAsync(input.Status, input.Code);
        var detail = problem.GetProperty("detail").GetString()!;
        Assert.Contains(input.DetailPart, detail, StringComparison.Ordinal);
        Assert.DoesNotContain("Exception", detail, StringComparison.Ordinal);
        await fixture.AssertNothingLostAsync(client);
        Assert.Equal(before, Snapshot());
        output.WriteLine($"| {name} | {(int)input.Status} | {input.Code} | {detail} |");
    }

    /// <summary>Every blob (path and SHA-256 of its content) and every row of the store's tables, as one string.</summary>
    private string Snapshot()
    {
        var text = new StringBuilder();
        var blobs = Path.Combine(fixture.Factory.DataFolder, "blobs");
        foreach (var file in Directory.EnumerateFiles(blobs, "*", SearchOption.AllDirectories).Order(StringComparer.Ordinal))
        {
            text.Append(Path.GetRelativePath(blobs, file)).Append(' ').AppendLine(Convert.ToHexStringLower(SHA256.HashData(File.ReadAllBytes(file))));
        }

        using var connection = new SqliteConnection($"Data Source={Path.Combine(fixture.Factory.DataFolder, "bitbudget.db")};Mode=ReadOnly;Pooling=False");
        connection.Open();
        foreach (var table in new[] { "models", "datasets", "searches", "trials", "results" })
        {
            using var command = connection.CreateCommand();
            command.CommandText = $"SELECT * FROM {table} ORDER BY rowid";
            using var reader = command.ExecuteReader();
            while (reader.Read())
            {
                text.Append(table);
                for (var i = 0; i < reader.FieldCount; i++)
                {
                    text.Append('|').Append(Convert.ToString(reader.GetValue(i), CultureInfo.InvariantCulture));
                }

                text.AppendLine();
            }
        }

        return text.ToString();
    }

    private static Dictionary<string, BadInput> BuildCases()
    {
        var cases = new List<(string Name, BadInput Input)>();
        foreach (var model in HostileModels.All)
        {
            cases.Add(($"model: {model.Name}", BadInput.Upload("/v1/models?name=hostile.onnx", model.Bytes, HttpStatusCode.UnprocessableEntity, model.Code, model.DetailPart)));
        }

        foreach (var (name, bytes, code, detail) in HostileDatasets())
        {
            var status = code == "invalid-request" ? HttpStatusCode.BadRequest : HttpStatusCode.UnprocessableEntity;
            cases.Add(($"dataset: {name}", BadInput.Upload("/v1/datasets", bytes, status, code, detail)));
        }

        cases.AddRange(HostileRequests());
        return cases.ToDictionary(c => c.Name, c => c.Input, StringComparer.Ordinal);
    }

    private static IEnumerable<(string, byte[], string, string)> HostileDatasets()
    {
        var floats16 = new byte[4 * 256 * 4];
        yield return ("random bytes", Noise(4096, 3), "dataset-invalid", "np.save");
        yield return ("a PNG header", [0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A, 0, 0, 0, 13], "dataset-invalid", "neither .npy");
        yield return ("npy format version 9.0", Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (4, 1, 16, 16), }", floats16, major: 9), "dataset-invalid", "version 9.0");
        yield return ("npy header length of 65535 bytes with 10 present", [.. NpyMagic(1), 0xFF, 0xFF, .. "{'descr': "u8], "dataset-invalid", "truncated");
        yield return ("npy version 2.0 header claiming 1 GiB", [.. NpyMagic(2), 0, 0, 0, 0x40, .. "{}"u8], "dataset-invalid", "header");
        yield return ("npy header that is not a dict", Npy("print('hello')", floats16), "dataset-invalid", "Array 'input'");
        yield return ("npy complex64 dtype", Npy("{'descr': '<c8', 'fortran_order': False, 'shape': (4, 256), }", new byte[4 * 256 * 8]), "dataset-invalid", "'<c8'");
        yield return ("npy object dtype", Npy("{'descr': '|O', 'fortran_order': False, 'shape': (4,), }", new byte[32]), "dataset-invalid", "'|O'");
        yield return ("npy structured dtype", Npy("{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (4,), }", new byte[16]), "dataset-invalid", "structured");
        yield return ("npy dtype without byte-order mark", Npy("{'descr': 'f4', 'fortran_order': False, 'shape': (4,), }", new byte[16]), "dataset-invalid", "byte-order");
        yield return ("npy negative dimension", Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (-4, 256), }", floats16), "dataset-invalid", "negative dimension");
        yield return ("npy shape (2**40, 2**40)", Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (1099511627776, 1099511627776), }", floats16), "dataset-too-large", "shape [1099511627776, 1099511627776]");
        yield return ("npy shape of 2**62 elements", Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (4611686018427387904,), }", floats16), "dataset-too-large", "Array 'input'");
        yield return ("npy shape 9999999999999999999999 (past 64 bits)", Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (9999999999999999999999,), }", floats16), "dataset-invalid", "64-bit");
        yield return ("npy promising 64 MiB with 16 KiB present", Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (65536, 1, 16, 16), }", floats16), "dataset-invalid", "truncated");
        yield return ("npy with bytes after its array", Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (4, 1, 16, 16), }", [.. floats16, 1, 2, 3]), "dataset-invalid", "3 bytes after");
        yield return ("npy fortran_order that is not a bool", Npy("{'descr': '<f4', 'fortran_order': 'yes', 'shape': (4, 256), }", floats16), "dataset-invalid", "fortran_order");
        yield return ("npy header with no shape", Npy("{'descr': '<f4', 'fortran_order': False, }", floats16), "dataset-invalid", "'shape'");
        yield return ("npy header with an unterminated string", Npy("{'descr': '<f4, 'fortran_order': False, 'shape': (4, 256), }", floats16), "dataset-invalid", "Array 'input'");
        yield return ("npy magic alone", [.. NpyMagic(1)[..6]], "dataset-invalid", "truncated");
        yield return ("an empty zip archive", Zip(), "dataset-invalid", "no arrays");
        yield return ("npz member that is text", Zip(("x.npy", "a,b,c\n1,2,3\n"u8.ToArray())), "dataset-invalid", "Array 'x'");
        yield return ("npz with two members for one array", Zip(("x.npy", SmallNpy()), ("x", SmallNpy())), "dataset-invalid", "two members for array 'x'");
        yield return ("npz nested inside an npz", Zip(("inner.npy", Zip(("x.npy", SmallNpy())))), "dataset-invalid", "Array 'inner'");
        yield return ("npz member climbing out with ../", Zip(("../escape.npy", SmallNpy())), "dataset-bad-member-name", "'../escape.npy'");
        yield return ("npz member with an absolute path", Zip(("/etc/cron.d/x.npy", SmallNpy())), "dataset-bad-member-name", "absolute path");
        yield return ("npz member with a drive letter", Zip(("C:evil.npy", SmallNpy())), "dataset-bad-member-name", "drive letter");
        yield return ("npz directory member", Zip(("folder/", [])), "dataset-bad-member-name", "directory");
        yield return ("npz member name with a control character", Zip(("x\u0007.npy", SmallNpy())), "dataset-bad-member-name", "control characters");
        yield return ("npz with 65 members", Zip(Enumerable.Range(0, 65).Select(i => ($"a{i}.npy", SmallNpy())).ToArray()), "dataset-too-large", "65 members");
        yield return ("npz whose directory record lists 60000 members", ForgedEntryCount(Zip(("x.npy", SmallNpy())), 60000), "dataset-too-large", "60000 members");
        yield return ("npz zip bomb (64 MiB of zeros)", Zip(CompressionLevel.Optimal, ("spectrogram.npy", NpyBytes(new NpyArray("s", ElementType.Float32, [65536, 256], new float[65536 * 256])))), "dataset-too-large", "zip bomb");
        yield return ("npz whose headers sum past the decoded limit", Zip(("a.npy", HeaderOnlyNpy(60L << 20)), ("b.npy", HeaderOnlyNpy(60L << 20))), "dataset-too-large", "would fit");
        yield return ("npz cut in half", Zip(("x.npy", SmallNpy()))[..60], "dataset-invalid", "zip");
        yield return ("npz with a damaged CRC", DamagedCrc(Zip(CompressionLevel.Optimal, ("x.npy", SmallNpy()))), "dataset-invalid", "CRC-32");
        yield return ("npz with damaged deflate data", DamagedDeflate(Zip(CompressionLevel.Optimal, ("x.npy", NpyBytes(new NpyArray("x", ElementType.Float32, [4096], Enumerable.Range(0, 4096).Select(i => (float)Math.Sin(i)).ToArray()))))), "dataset-invalid", "zip");
    }

    private static IEnumerable<(string, BadInput)> HostileRequests()
    {
        static object Search(Clients b, object? budget = null, object? bits = null) =>
            bits is null
                ? new { modelId = b.ModelId, datasetId = b.DatasetId, budget = budget ?? new { metric = "sqnr", atLeast = 30 } }
                : new { modelId = b.ModelId, datasetId = b.DatasetId, budget = budget ?? new { metric = "sqnr", atLeast = 30 }, bits };

        yield return ("request: empty model body", BadInput.Upload("/v1/models", [], HttpStatusCode.BadRequest, "invalid-request", "empty"));
        yield return ("request: empty dataset body", BadInput.Upload("/v1/datasets", [], HttpStatusCode.BadRequest, "invalid-request", "empty"));
        yield return ("request: model over the limit (Content-Length)", BadInput.Upload("/v1/models", new byte[RealEngineServiceFactory.MaxModelBytes + 1], HttpStatusCode.RequestEntityTooLarge, "payload-too-large", "model is larger"));
        yield return ("request: model over the limit (chunked)", new BadInput(HttpStatusCode.RequestEntityTooLarge, "payload-too-large", "model is larger", "chunked-model",
            async c => await c.Authorized.PostAsync("/v1/models", await Chunked(new byte[RealEngineServiceFactory.MaxModelBytes + 1]))));
        yield return ("request: dataset over the limit (chunked)", new BadInput(HttpStatusCode.RequestEntityTooLarge, "payload-too-large", "dataset is larger", "chunked-dataset",
            async c => await c.Authorized.PostAsync("/v1/datasets", await Chunked(new byte[RealEngineServiceFactory.MaxDatasetBytes + 1]))));
        yield return ("request: no API key", new BadInput(HttpStatusCode.Unauthorized, "unauthorized", "Bearer", "no-key",
            c => Send(c, HttpMethod.Get, "/v1/models", auth: "")));
        yield return ("request: wrong API key", new BadInput(HttpStatusCode.Unauthorized, "unauthorized", "not valid", "wrong-key",
            c => Send(c, HttpMethod.Get, "/v1/models", auth: "Bearer not-the-key")));
        yield return ("request: Basic instead of Bearer", new BadInput(HttpStatusCode.Unauthorized, "unauthorized", "not valid", "basic",
            c => Send(c, HttpMethod.Get, "/v1/models", auth: "Basic dXNlcjpwYXNz")));
        yield return ("request: Bearer with a 16 KiB key", new BadInput(HttpStatusCode.Unauthorized, "unauthorized", "not valid", "long-key",
            c => Send(c, HttpMethod.Get, "/v1/models", auth: "Bearer " + new string('k', 16384))));
        yield return ("request: unknown model id", BadInput.Get("/v1/models/m-nothing-here", HttpStatusCode.NotFound, "not-found", "'m-nothing-here'"));
        yield return ("request: unknown dataset id", BadInput.Get("/v1/datasets/d-nothing-here", HttpStatusCode.NotFound, "not-found", "'d-nothing-here'"));
        yield return ("request: unknown search id", BadInput.Get("/v1/searches/s-nothing-here", HttpStatusCode.NotFound, "not-found", "'s-nothing-here'"));
        yield return ("request: model id of 2000 characters", BadInput.Get("/v1/models/" + new string('m', 2000), HttpStatusCode.NotFound, "not-found", "mmmm"));
        yield return ("request: model id with an escaped path", BadInput.Get("/v1/models/..%2F..%2Fbitbudget.db", HttpStatusCode.NotFound, "not-found", "bitbudget.db"));
        yield return ("request: search JSON cut short", BadInput.Json("{\"modelId\": \"m-1\", ", HttpStatusCode.BadRequest, "invalid-request", "not a valid search request"));
        yield return ("request: search JSON that is an array", BadInput.Json("[1, 2, 3]", HttpStatusCode.BadRequest, "invalid-request", "not a valid search request"));
        yield return ("request: search JSON nested 5000 deep", BadInput.Json(new string('[', 5000) + new string(']', 5000), HttpStatusCode.BadRequest, "invalid-request", "not a valid search request"));
        yield return ("request: search sent as text/plain", new BadInput(HttpStatusCode.UnsupportedMediaType, "unsupported-media-type", "application/json", "text-plain",
            c => c.Authorized.PostAsync("/v1/searches", new StringContent("{}", Encoding.UTF8, "text/plain"))));
        yield return ("request: search without modelId", new BadInput(HttpStatusCode.BadRequest, "invalid-request", "modelId", "no-model",
            c => PostJson(c, new { datasetId = c.DatasetId, budget = new { metric = "sqnr", atLeast = 30 } })));
        yield return ("request: search for an unknown model", new BadInput(HttpStatusCode.NotFound, "not-found", "'m-ghost'", "ghost-model",
            c => PostJson(c, new { modelId = "m-ghost", datasetId = c.DatasetId, budget = new { metric = "sqnr", atLeast = 30 } })));
        yield return ("request: search with an unknown metric", new BadInput(HttpStatusCode.BadRequest, "invalid-request", "Unknown metric 'psnr'", "psnr",
            c => PostJson(c, Search(c, new { metric = "psnr", atLeast = 30 }))));
        yield return ("request: search with bits [99]", new BadInput(HttpStatusCode.BadRequest, "invalid-request", "99", "bits-99",
            c => PostJson(c, Search(c, bits: new[] { 99 }))));
        yield return ("request: search with an SQNR budget of 1e308", new BadInput(HttpStatusCode.BadRequest, "invalid-request", "sqnr budget", "sqnr-huge",
            c => PostJson(c, Search(c, new { metric = "sqnr", atLeast = 1e308 }))));
        yield return ("request: PUT on the models collection", new BadInput(HttpStatusCode.MethodNotAllowed, "method-not-allowed", "PUT", "put",
            c => Send(c, HttpMethod.Put, "/v1/models", auth: "Bearer " + RealEngineServiceFactory.ApiKey)));
    }

    private static byte[] Noise(int length, int seed)
    {
        var bytes = new byte[length];
        new Random(seed).NextBytes(bytes);
        return bytes;
    }

    private static byte[] NpyMagic(byte major) => [0x93, (byte)'N', (byte)'U', (byte)'M', (byte)'P', (byte)'Y', major, 0];

    /// <summary>A .npy with a hand-written header (version 1.0 layout, numpy.lib.format: 2-byte header length, padded to 64 with a newline).</summary>
    private static byte[] Npy(string header, byte[] data, byte major = 1)
    {
        var text = header.PadRight(((header.Length + 11 + 63) / 64 * 64) - 11) + "\n";
        var length = BitConverter.GetBytes((ushort)text.Length);
        return [.. NpyMagic(major), .. length, .. Encoding.Latin1.GetBytes(text), .. data];
    }

    private static byte[] SmallNpy() => NpyBytes(new NpyArray("x", ElementType.Float32, [4, 2], new float[8]));

    private static byte[] NpyBytes(NpyArray array)
    {
        using var stream = new MemoryStream();
        NpyWriter.Write(stream, array);
        return stream.ToArray();
    }

    /// <summary>A .npy whose header promises <paramref name="bytes"/> of float32 data that is not there: only a header pass can judge it.</summary>
    private static byte[] HeaderOnlyNpy(long bytes) =>
        Npy($"{{'descr': '<f4', 'fortran_order': False, 'shape': ({bytes / 1024}, 256), }}", []);

    private static byte[] Zip(params (string Name, byte[] Content)[] members) => Zip(CompressionLevel.NoCompression, members);

    private static byte[] Zip(CompressionLevel level, params (string Name, byte[] Content)[] members)
    {
        var zip = new MemoryStream();
        using (var archive = new ZipArchive(zip, ZipArchiveMode.Create, leaveOpen: true))
        {
            foreach (var (name, content) in members)
            {
                using var member = archive.CreateEntry(name, level).Open();
                member.Write(content);
            }
        }

        return zip.ToArray();
    }

    /// <summary>Rewrites both entry counts of the end-of-central-directory record (PKWARE APPNOTE.TXT 4.3.16, offsets 8 and 10).</summary>
    private static byte[] ForgedEntryCount(byte[] zip, ushort count)
    {
        var at = zip.AsSpan().LastIndexOf((ReadOnlySpan<byte>)[0x50, 0x4B, 0x05, 0x06]);
        BitConverter.TryWriteBytes(zip.AsSpan(at + 8, 2), count);
        BitConverter.TryWriteBytes(zip.AsSpan(at + 10, 2), count);
        return zip;
    }

    /// <summary>Flips the CRC-32 in the local header (offset 14) and the central header (offset 16), PKWARE APPNOTE.TXT 4.3.7 / 4.3.12.</summary>
    private static byte[] DamagedCrc(byte[] zip)
    {
        zip[14] ^= 0xFF;
        var central = zip.AsSpan().IndexOf((ReadOnlySpan<byte>)[0x50, 0x4B, 0x01, 0x02]);
        zip[central + 16] ^= 0xFF;
        return zip;
    }

    /// <summary>Overwrites the middle of the deflate stream of the first member (its data starts after the 30-byte local header and the name).</summary>
    private static byte[] DamagedDeflate(byte[] zip)
    {
        var start = 30 + BitConverter.ToUInt16(zip, 26) + BitConverter.ToUInt16(zip, 28);
        var compressed = (int)BitConverter.ToUInt32(zip, 18);
        for (var i = start + (compressed / 4); i < start + (compressed * 3 / 4); i++)
        {
            zip[i] = 0xFF;
        }

        return zip;
    }

    private static async Task<HttpContent> Chunked(byte[] bytes)
    {
        // A pipe's reading stream cannot seek, so HttpClient cannot know the length and sends the body chunked.
        var pipe = new Pipe(new PipeOptions(pauseWriterThreshold: 0));
        await pipe.Writer.WriteAsync(bytes);
        await pipe.Writer.CompleteAsync();
        var content = new StreamContent(pipe.Reader.AsStream());
        content.Headers.ContentType = new MediaTypeHeaderValue("application/octet-stream");
        return content;
    }

    /// <summary>A request through the anonymous client, with the Authorization header given (none when empty).</summary>
    private static async Task<HttpResponseMessage> Send(Clients clients, HttpMethod method, string url, string? auth = null)
    {
        using var request = new HttpRequestMessage(method, url);
        if (!string.IsNullOrEmpty(auth))
        {
            request.Headers.TryAddWithoutValidation("Authorization", auth);
        }

        if (method == HttpMethod.Put)
        {
            request.Content = new ByteArrayContent([1]);
        }

        return await (auth is null ? clients.Authorized : clients.Anonymous).SendAsync(request);
    }

    private static Task<HttpResponseMessage> PostJson(Clients clients, object body) =>
        clients.Authorized.PostAsync("/v1/searches", System.Net.Http.Json.JsonContent.Create(body));

    /// <summary>The clients a case may use and the baseline upload its requests refer to.</summary>
    private sealed record Clients(HttpClient Authorized, HttpClient Anonymous, string ModelId, string DatasetId);

    /// <summary>One hostile input: how to send it and how it must be refused.</summary>
    private sealed record BadInput(HttpStatusCode Status, string Code, string DetailPart, string Fingerprint, Func<Clients, Task<HttpResponseMessage>> Send)
    {
        public static BadInput Upload(string url, byte[] bytes, HttpStatusCode status, string code, string detailPart) =>
            new(status, code, detailPart, url + Convert.ToHexStringLower(SHA256.HashData(bytes)), c => c.Authorized.PostBytesAsync(url, bytes));

        public static BadInput Get(string url, HttpStatusCode status, string code, string detailPart) =>
            new(status, code, detailPart, "GET " + url, c => c.Authorized.GetAsync(url));

        public static BadInput Json(string json, HttpStatusCode status, string code, string detailPart) =>
            new(status, code, detailPart, "JSON " + json, c => c.Authorized.PostAsync("/v1/searches", new StringContent(json, Encoding.UTF8, "application/json")));
    }
}
