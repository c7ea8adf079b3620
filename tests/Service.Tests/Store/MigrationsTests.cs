using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Tests.Store;

/// <summary>Migration 3 (one vocabulary): a search stored before it resumes with every trial found.</summary>
public sealed class MigrationsTests : IDisposable
{
    private readonly string folder = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));

    [Fact]
    public void AStoredSearchKeepsItsClipAndFindsItsTrialsUnderTheNewKeys()
    {
        Directory.CreateDirectory(folder);
        var database = new Database(Path.Combine(folder, "store.db"));
        using (var connection = database.Open())
        using (var command = connection.CreateCommand())
        {
            // A store as version 2 left it: settings say "calibration", sensitivity keys run the enum names together.
            // A layer whose name contains an old spelling keeps its name.
            command.CommandText = "CREATE TABLE schema_version (version INTEGER NOT NULL, applied_at TEXT NOT NULL);"
                + string.Concat(Migrations.All.Where(m => m.Version <= 2).Select(m => m.Sqlite))
                + """
                INSERT INTO schema_version VALUES (1, '2026-01-01T00:00:00Z'), (2, '2026-01-01T00:00:00Z');
                INSERT INTO models VALUES ('mdl_1', 'sha', 'm', 1, '{}', '2026-01-01T00:00:00Z');
                INSERT INTO datasets VALUES ('dst_1', 'sha', 1, '{}', '2026-01-01T00:00:00Z');
                INSERT INTO searches (id, model_id, dataset_id, settings_json, state, request_hash, created_at)
                    VALUES ('srch_1', 'mdl_1', 'dst_1',
                    '{"budget":{"metric":"sqnr","atLeast":30,"atMost":null,"bytes":null,"averageBits":null},"bits":[4,8],"method":"knapsack","scheme":"asymmetric","granularity":"per-tensor","calibration":"mse-optimal","activations":false,"pin":{},"exclude":[],"targetOpset":null,"sampleAxes":null,"outputs":null,"metricSpace":"linear","holdoutDatasetId":null,"storage":"container"}',
                    'running', 'h', '2026-01-01T00:00:00Z');
                INSERT INTO trials VALUES ('srch_1', 'reference', 'reference', NULL, NULL, NULL, '{}', 5, 'x');
                INSERT INTO trials VALUES ('srch_1', 'sensitivity/conv1/8b-asymmetric-pertensor-mseoptimal', 'sensitivity', 'conv1', 8, NULL, '{}', 5, 'x');
                INSERT INTO trials VALUES ('srch_1', 'sensitivity/fc/4b-asymmetric-pertensor-mseoptimal', 'sensitivity', 'fc', 4, NULL, '{}', 5, 'x');
                INSERT INTO trials VALUES ('srch_1', 'sensitivity/fc/4b-symmetric-perchannel-minmax/activations-min-max', 'sensitivity', 'fc', 4, NULL, '{}', 5, 'x');
                INSERT INTO trials VALUES ('srch_1', 'sensitivity/fc/4b-symmetric-perchannel-percentile-99.9', 'sensitivity', 'fc', 4, NULL, '{}', 5, 'x');
                INSERT INTO trials VALUES ('srch_1', 'sensitivity/block.perchannel-minmax/4b-symmetric-perchannel-analyticlaplace', 'sensitivity', 'block.perchannel-minmax', 4, NULL, '{}', 5, 'x');
                INSERT INTO trials VALUES ('srch_1', 'validation/176ff66ae9f24411c51d30859a2d63f8206d7b80f613e9bc09f22b2c73ba2004', 'validation', NULL, NULL, '176ff66ae9f24411c51d30859a2d63f8206d7b80f613e9bc09f22b2c73ba2004', '{}', 5, 'x');
                """;
            command.ExecuteNonQuery();
        }

        database.Migrate();

        var spec = new SearchStore(database).Find("srch_1")!.Spec;
        Assert.Equal("mse-optimal", spec.Clip);
        var stored = new TrialStore(database, "srch_1").LoadAll();
        var keys = stored.Keys.ToHashSet();

        // Trials stored before assignments were kept say so with null, never with an empty (reference-like) assignment.
        Assert.All(stored.Values, t => Assert.Null(t.Assignment));
        var mse = new LayerSetting(4, QuantizationScheme.Asymmetric, Granularity.PerTensor, ClipMethod.MseOptimal);
        var assignment = new Dictionary<string, LayerSetting> { ["fc"] = mse, ["conv1"] = mse with { Bits = 8 } };
        Assert.Contains(TrialKeys.Sensitivity("conv1", mse with { Bits = 8 }), keys);
        Assert.Contains(TrialKeys.Sensitivity("fc", mse), keys);
        Assert.Contains(TrialKeys.Sensitivity("fc", new LayerSetting(4), ActivationCalibration.MinMax), keys);
        Assert.Contains(TrialKeys.Sensitivity("fc", new LayerSetting(4, Clip: ClipMethod.Percentile, Percentile: 99.9)), keys);
        Assert.Contains(TrialKeys.Sensitivity("block.perchannel-minmax", new LayerSetting(4, Clip: ClipMethod.AnalyticLaplace)), keys);

        // The validation key is the SHA-256 (Python's hashlib) of "conv1=8b-asymmetric-pertensor-mseoptimal\nfc=4b-...\n",
        // the text stored validations were hashed from; the code of today must still arrive at it.
        Assert.Contains(TrialKeys.Validation(TrialKeys.AssignmentHash(assignment)), keys);
        Assert.Equal(7, keys.Count);
    }

    public void Dispose()
    {
        Microsoft.Data.Sqlite.SqliteConnection.ClearAllPools();
        if (Directory.Exists(folder))
        {
            Directory.Delete(folder, recursive: true);
        }
    }
}
