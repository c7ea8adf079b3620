using Bitbudget.Service.Tests.Support;
using Npgsql;

namespace Bitbudget.Service.Tests.EndToEnd;

/// <summary>
/// Scale-out with real processes of the built binary: one API and two workers on one PostgreSQL database and one
/// blob folder run the real OCR classifier's search split into sweep parts; one worker is killed (SIGKILL) while
/// it holds a part. The reference is the same search run uninterrupted by one all-in-one process on SQLite.
/// </summary>
public sealed class DistributedSearchTests : IDisposable
{
    private readonly string root = Directory.CreateTempSubdirectory("bitbudget-scale-").FullName;
    private readonly string database = TestPostgres.CreateDatabase();

    [Fact]
    public async Task AWorkerKilledMidPartLosesNothingAndTheSearchEqualsASingleProcessRun()
    {
        var model = await File.ReadAllBytesAsync(OcrModels.Classifier);
        var dataset = RealBinaryTests.OcrDataset(samples: 4);
        var body = new { modelId = "", datasetId = "", budget = new { metric = "sqnr", atLeast = 30 }, bits = new[] { 2, 4, 8 } };
        // One ONNX Runtime thread everywhere: the same arithmetic in every process, so metrics can be compared exactly.
        string[] common = ["--Bitbudget:OnnxThreads=1", "--Bitbudget:QueuePollIntervalMs=100"];

        Dictionary<string, string> singleTrials;
        string singleManifest;
        byte[] singleModel;
        using (var single = await ServiceProcess.StartAsync(Folder("single"), common))
        {
            var (modelId, datasetId) = await single.Client.UploadAsync("ocr-classifier", model, dataset);
            var id = (await single.Client.StartSearchAsync(body with { modelId = modelId, datasetId = datasetId })).GetProperty("id").GetString()!;
            Assert.Equal("succeeded", (await RealBinaryTests.WaitAsync(single.Client, id, TimeSpan.FromSeconds(120)))["state"]!.GetValue<string>());
            singleTrials = await RealBinaryTests.TrialsAsync(single.Client, id);
            singleManifest = RealBinaryTests.WithoutTimestamp(await single.Client.GetStringAsync($"/v1/searches/{id}/manifest"));
            singleModel = await single.Client.GetByteArrayAsync($"/v1/searches/{id}/model");
        }

        string[] shared = [.. common, "--Bitbudget:Store=postgres", $"--Bitbudget:ConnectionString={database}", $"--Bitbudget:BlobFolder={Folder("blobs")}"];
        string[] worker = [.. shared, "--Bitbudget:Role=worker", "--Bitbudget:SweepParts=8", "--Bitbudget:Workers=1"];
        using var api = await ServiceProcess.StartAsync(Folder("api"), [.. shared, "--Bitbudget:Role=api"]);
        using var killed = await ServiceProcess.StartAsync(Folder("worker-a"), worker);
        using var survivor = await ServiceProcess.StartAsync(Folder("worker-b"), worker);
        var (mId, dId) = await api.Client.UploadAsync("ocr-classifier", model, dataset);
        var searchId = (await api.Client.StartSearchAsync(body with { modelId = mId, datasetId = dId })).GetProperty("id").GetString()!;

        // Kill worker A while it holds a part it has measured trials of.
        var a = $"{Environment.MachineName}:{killed.ProcessId}";
        var b = $"{Environment.MachineName}:{survivor.ProcessId}";
        var deadline = DateTime.UtcNow.AddSeconds(90);
        int heldPart;
        while (true)
        {
            var held = Scalar<int?>("""
                SELECT p.part FROM sweep_parts p
                WHERE p.search_id = @id AND p.state = 'pending' AND p.lease_owner LIKE @owner
                  AND EXISTS (SELECT 1 FROM trials t WHERE t.search_id = p.search_id AND t.measured_by = @worker
                              AND t.layer IN (SELECT jsonb_array_elements_text(p.layers_json::jsonb)))
                LIMIT 1;
                """, ("@id", searchId), ("@owner", a + "/%"), ("@worker", a));
            if (held is { } part)
            {
                heldPart = part;
                break;
            }

            Assert.True(DateTime.UtcNow < deadline, "Worker A never held a part with trials measured.");
            await Task.Delay(10);
        }

        killed.Crash();
        var killedTrials = Scalar<long>("SELECT COUNT(*) FROM trials WHERE search_id = @id AND measured_by = @worker;", ("@id", searchId), ("@worker", a));

        var done = await RealBinaryTests.WaitAsync(api.Client, searchId, TimeSpan.FromSeconds(120));
        Assert.Equal("succeeded", done["state"]!.GetValue<string>());

        // The part A held was finished by B, and the trials A had measured before it died were kept, not redone.
        Assert.Equal(b, Scalar<string>("SELECT finished_by FROM sweep_parts WHERE search_id = @id AND part = @part;", ("@id", searchId), ("@part", heldPart)));
        Assert.Equal(killedTrials, Scalar<long>("SELECT COUNT(*) FROM trials WHERE search_id = @id AND measured_by = @worker;", ("@id", searchId), ("@worker", a)));
        Assert.True(killedTrials > 0);
        Assert.True(Scalar<long>("SELECT COUNT(*) FROM trials WHERE search_id = @id AND measured_by = @worker AND kind = 'sensitivity';", ("@id", searchId), ("@worker", b)) > 0);
        Assert.Equal(0, Scalar<long>("SELECT COUNT(*) FROM sweep_parts WHERE search_id = @id AND state <> 'done';", ("@id", searchId)));

        // Exactly the trials (keys and metrics), the manifest and the model of the single-process run.
        var trials = await RealBinaryTests.TrialsAsync(api.Client, searchId);
        Assert.Equal(singleTrials.Keys.Order(StringComparer.Ordinal), trials.Keys.Order(StringComparer.Ordinal));
        foreach (var (key, metrics) in singleTrials)
        {
            Assert.True(metrics == trials[key], $"Trial {key}: {trials[key]} where one process measured {metrics}");
        }

        Assert.Equal(singleManifest, RealBinaryTests.WithoutTimestamp(await api.Client.GetStringAsync($"/v1/searches/{searchId}/manifest")));
        Assert.Equal(singleModel, await api.Client.GetByteArrayAsync($"/v1/searches/{searchId}/model"));
    }

    public void Dispose()
    {
        TestPostgres.DropDatabase(database);
        try
        {
            Directory.Delete(root, recursive: true);
        }
        catch (IOException)
        {
            // A killed process may still hold a file for a moment; the folder is under the temp directory anyway.
        }
    }

    private string Folder(string name) => Directory.CreateDirectory(Path.Combine(root, name)).FullName;

    private T Scalar<T>(string sql, params (string Name, object Value)[] parameters)
    {
        using var connection = new NpgsqlConnection(database);
        connection.Open();
        using var command = new NpgsqlCommand(sql, connection);
        foreach (var (name, value) in parameters)
        {
            command.Parameters.AddWithValue(name, value);
        }

        var result = command.ExecuteScalar();
        return result is null or DBNull ? default! : (T)result;
    }
}
