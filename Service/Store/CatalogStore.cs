using Bitbudget.Service.Engine;
using System.Data.Common;

namespace Bitbudget.Service.Store;

/// <summary>Uploaded models and datasets, one row per distinct content (SHA-256).</summary>
internal sealed class CatalogStore(Database database)
{
    /// <returns>The stored model and whether this call created it (false: the same bytes were uploaded before).</returns>
    public (ModelRecord Model, bool Created) AddModel(ModelSummary summary)
    {
        using var connection = database.Open();
        using var insert = connection.CreateCommand();
        insert.CommandText = """
            INSERT INTO models (id, sha256, name, bytes, summary_json, created_at)
            VALUES (@id, @sha, @name, @bytes, @json, @at)
            ON CONFLICT(sha256) DO NOTHING;
            """;
        insert.With("@id", Ids.New("mdl"));
        insert.With("@sha", summary.Sha256);
        insert.With("@name", summary.Name);
        insert.With("@bytes", summary.Bytes);
        insert.With("@json", StoreJson.Write(summary));
        insert.With("@at", Clock.Format(DateTimeOffset.UtcNow));
        var created = insert.ExecuteNonQuery() == 1;
        return (QueryModels(connection, "WHERE sha256 = @p", summary.Sha256).Single(), created);
    }

    public ModelRecord? FindModel(string id)
    {
        using var connection = database.Open();
        return QueryModels(connection, "WHERE id = @p", id).SingleOrDefault();
    }

    public ModelRecord? FindModelBySha(string sha256)
    {
        using var connection = database.Open();
        return QueryModels(connection, "WHERE sha256 = @p", sha256).SingleOrDefault();
    }

    /// <summary>Models, newest first; with a name, only the versions uploaded under that name (a retrain is new bytes under the same name).</summary>
    public IReadOnlyList<ModelRecord> ListModels(string? name = null)
    {
        using var connection = database.Open();
        var order = $"ORDER BY created_at DESC, {database.Dialect.InsertOrder} DESC";
        return QueryModels(connection, name is null ? order : "WHERE name = @p " + order, name);
    }

    public (DatasetRecord Dataset, bool Created) AddDataset(DatasetSummary summary, long bytes)
    {
        using var connection = database.Open();
        using var insert = connection.CreateCommand();
        insert.CommandText = """
            INSERT INTO datasets (id, sha256, bytes, summary_json, created_at)
            VALUES (@id, @sha, @bytes, @json, @at)
            ON CONFLICT(sha256) DO NOTHING;
            """;
        insert.With("@id", Ids.New("dst"));
        insert.With("@sha", summary.Sha256);
        insert.With("@bytes", bytes);
        insert.With("@json", StoreJson.Write(summary));
        insert.With("@at", Clock.Format(DateTimeOffset.UtcNow));
        var created = insert.ExecuteNonQuery() == 1;
        return (QueryDatasets(connection, "WHERE sha256 = @p", summary.Sha256).Single(), created);
    }

    public DatasetRecord? FindDataset(string id)
    {
        using var connection = database.Open();
        return QueryDatasets(connection, "WHERE id = @p", id).SingleOrDefault();
    }

    public DatasetRecord? FindDatasetBySha(string sha256)
    {
        using var connection = database.Open();
        return QueryDatasets(connection, "WHERE sha256 = @p", sha256).SingleOrDefault();
    }

    private static List<ModelRecord> QueryModels(DbConnection connection, string where, string? parameter)
    {
        using var command = connection.CreateCommand();
        command.CommandText = $"SELECT id, summary_json, created_at FROM models {where};";
        if (parameter is not null)
        {
            command.With("@p", parameter);
        }

        var list = new List<ModelRecord>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            list.Add(new ModelRecord(reader.GetString(0), StoreJson.Read<ModelSummary>(reader.GetString(1)), Clock.Parse(reader.GetString(2))));
        }

        return list;
    }

    private static List<DatasetRecord> QueryDatasets(DbConnection connection, string where, string parameter)
    {
        using var command = connection.CreateCommand();
        command.CommandText = $"SELECT id, bytes, summary_json, created_at FROM datasets {where};";
        command.With("@p", parameter);
        var list = new List<DatasetRecord>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            list.Add(new DatasetRecord(reader.GetString(0), reader.Long(1), StoreJson.Read<DatasetSummary>(reader.GetString(2)), Clock.Parse(reader.GetString(3))));
        }

        return list;
    }
}
