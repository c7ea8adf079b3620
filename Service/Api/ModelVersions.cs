using Bitbudget.Service.Store;

namespace Bitbudget.Service.Api;

/// <summary>
/// A model's version within its name: 1 for the first upload under the name, counting by upload time. A retrain
/// is new bytes (a new id) under the same name, so the name, not the id, holds a model's history.
/// </summary>
internal static class ModelVersions
{
    /// <param name="newestFirst">Models as the catalog lists them (newest first); versions are counted within each name.</param>
    public static IReadOnlyDictionary<string, int> Of(IReadOnlyList<ModelRecord> newestFirst)
    {
        var versions = new Dictionary<string, int>(StringComparer.Ordinal);
        foreach (var sameName in newestFirst.GroupBy(m => m.Summary.Name, StringComparer.Ordinal))
        {
            var list = sameName.ToList();
            for (var i = 0; i < list.Count; i++)
            {
                versions[list[i].Id] = list.Count - i;
            }
        }

        return versions;
    }

    public static int Of(ModelRecord model, CatalogStore catalog) =>
        Of(catalog.ListModels(model.Summary.Name)).GetValueOrDefault(model.Id, 1);
}
